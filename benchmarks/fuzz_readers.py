"""The long fuzz search over every reader: the CI fuzz tests with a far larger, random budget.

CI runs ``tests/test_fuzz.py`` with a small derandomised budget (10 damaged files per reader).
This script runs the same tests with ``--examples`` damaged files per reader and Hypothesis's
random search (profile ``dev``), so every run explores new files; a failure prints the file that
broke the reader and a ``@reproduce_failure`` line. It prints the examples tried per second
against a plain ``open().read()`` of the same seed files, measured in the same run, so a reader
that became slow on damaged input shows as a falling ratio.

    python3 benchmarks/fuzz_readers.py --examples 2000        # about an hour on two cores
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--examples", type=int, default=500, help="damaged files per reader (default 500)")
    ap.add_argument("-k", default="damaged or mutated or cli", help="which fuzz tests (pytest -k)")
    a = ap.parse_args()
    env = {**os.environ, "SLIPNET_FUZZ_EXAMPLES": str(a.examples), "HYPOTHESIS_PROFILE": "dev"}
    t0 = time.perf_counter()
    code = subprocess.call([sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "-k", a.k,
                            str(ROOT / "tests" / "test_fuzz.py")], env=env, cwd=ROOT)
    took = time.perf_counter() - t0
    seeds = [p for p in (ROOT / "tests").glob("*.py")]
    t1 = time.perf_counter()
    for _ in range(200):
        for p in seeds:
            p.read_bytes()
    plain = (time.perf_counter() - t1) / (200 * len(seeds))
    sys.path.insert(0, str(ROOT / "tests"))
    from test_fuzz import CASES

    n_cases = len(CASES)
    per_example = took / max(1, a.examples * n_cases)
    print(f"fuzz: {a.examples} damaged files per reader, {took:.0f} s in all; "
          f"{per_example * 1e3:.1f} ms per file = {per_example / plain:.0f}x a plain read of a file "
          f"({plain * 1e6:.0f} µs, same run); pytest exit code {code}")
    return code


if __name__ == "__main__":
    sys.exit(main())
