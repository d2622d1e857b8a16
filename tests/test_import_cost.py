"""Start-up cost: importing the grain step must not pull in the heavy table, graph and filter libraries.

pandas, networkx and scipy.ndimage together cost about 1.5 s of start-up; slipnet imports them
inside the functions that make a table, a graph or a filtered field, so that ``import
slipnet.grains`` (and the containers in ``slipnet.maps``, the crystal maths) stays cheap
(issue 17; ``benchmarks/bench_import.py`` measures the time). Each check runs in a fresh
interpreter, because this test session has long since imported everything.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

HEAVY = ("pandas", "networkx", "scipy.ndimage")


def _loaded_after(statement: str) -> list[str]:
    """Which of HEAVY a fresh interpreter has in ``sys.modules`` after running ``statement``."""
    code = f"import json, sys\n{statement}\nprint(json.dumps([m for m in {HEAVY!r} if m in sys.modules]))"
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("statement", [
    "import slipnet.grains",
    "from slipnet.grains import build_grain_graph",
    "from slipnet.maps import GrainGraph, OrientationMap, StrainSeries",
    "import slipnet.crystal",
    # every command's parser is built before any argument is read (``slipnet --help`` included)
    "import slipnet.cli",
])
def test_import_leaves_heavy_libraries_out(statement):
    assert _loaded_after(statement) == []


def test_heavy_libraries_arrive_when_used():
    # the guard above must be able to fail: building a graph does load pandas and networkx
    statement = ("import numpy as np\nfrom slipnet.grains import build_grain_graph\n"
                 "from slipnet.maps import OrientationMap\n"
                 "q = np.zeros((3, 4, 4)); q[..., 0] = 1.0\n"
                 "build_grain_graph(OrientationMap(q, np.zeros((3, 4), np.int32), np.ones((3, 4)),"
                 " np.ones((3, 4), bool), 1.0))")
    assert _loaded_after(statement) == ["pandas", "networkx"]


def test_cli_demo_folder_is_the_demo_default():
    # the demo command names its default folder itself so as not to import the whole study at start-up
    from slipnet.cli.demo import DEFAULT_FOLDER
    from slipnet.demo import DEMO_FOLDER

    assert DEFAULT_FOLDER == DEMO_FOLDER
