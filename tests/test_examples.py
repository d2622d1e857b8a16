"""Every example script runs to completion (examples are part of the documentation)."""

import os
import subprocess
import sys
from pathlib import Path

import pytest

EXAMPLES = sorted((Path(__file__).resolve().parent.parent / "examples").rglob("*.py"))


@pytest.mark.slow
@pytest.mark.parametrize("script", EXAMPLES, ids=[p.relative_to(p.parents[1]).as_posix() for p in EXAMPLES])
def test_example_runs(script, tmp_path):
    env = {**os.environ, "MPLBACKEND": "Agg"}
    res = subprocess.run([sys.executable, str(script)], cwd=tmp_path, env=env, capture_output=True, text=True,
                         timeout=600)
    assert res.returncode == 0, f"{script.name} failed:\n{res.stdout[-2000:]}\n{res.stderr[-4000:]}"
    # the docstring is the example's title and paragraph
    head = script.read_text(encoding="utf-8").lstrip()
    assert head.startswith('"""'), f"{script.name} should open with a title and a paragraph"


def test_there_are_examples():
    assert len(EXAMPLES) >= 5
