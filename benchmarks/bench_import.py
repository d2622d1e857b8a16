"""Start-up cost: the warm import time of slipnet's packages against numpy and numba in the same run.

Runnable as a plain script::

    python benchmarks/bench_import.py [--repeat 5]

Every import is timed in a fresh interpreter (``python -c "import X"``, the wall time of the whole
process, so the interpreter's own start-up is included in every figure alike). One untimed round
first warms the file-system cache and numba's kernel cache; then the modules are timed in turns,
``--repeat`` rounds, and the median of each is printed in seconds and as a ratio against the
references measured in the same rounds: ``python -c "pass"`` (the interpreter alone),
``import numpy`` and ``import numba``. Ratios are what to compare between machines and runs; the
target of ``import slipnet.grains`` is under 1.5 s on a warm machine.

The script also says whether pandas, networkx, scipy and numba end up in ``sys.modules`` after
each slipnet import, since those four are the heavy parts an import can pull in.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time

REFERENCES = {"python (no import)": "pass", "numpy": "import numpy", "numba": "import numba"}
SUBJECTS = {name: f"import {name}" for name in ("slipnet", "slipnet.grains", "slipnet.cli")}
HEAVY = ("pandas", "networkx", "scipy", "numba")


def wall_time(code: str) -> float:
    """Wall time of a fresh interpreter that runs ``code``, seconds."""
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", code], check=True)
    return time.perf_counter() - t0


def heavy_modules(module: str) -> list[str]:
    """The heavy libraries that ``import module`` leaves in ``sys.modules`` (fresh interpreter)."""
    code = f"import sys, {module}; print(' '.join(m for m in {HEAVY!r} if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True)
    return out.stdout.split()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5, help="timed rounds (default 5; the median is printed)")
    args = parser.parse_args()
    cases = {**REFERENCES, **SUBJECTS}
    for code in cases.values():  # warm-up round: file cache, .pyc files, numba's index files
        wall_time(code)
    times: dict[str, list[float]] = {name: [] for name in cases}
    for _ in range(args.repeat):  # interleaved, so a busy spell on a shared machine hits every case
        for name, code in cases.items():
            times[name].append(wall_time(code))
    med = {name: statistics.median(t) for name, t in times.items()}
    print(f"warm import wall time, median of {args.repeat} fresh processes (s, and ratios in the same run)")
    for name in cases:
        line = f"  {name:22s} {med[name]:6.3f} s"
        if name in SUBJECTS:
            line += (f"  = {med[name] / med['numpy']:4.2f}x numpy, {med[name] / med['numba']:4.2f}x numba"
                     f"; pulls in: {', '.join(heavy_modules(name)) or 'none of ' + '/'.join(HEAVY)}")
        print(line)
    print(f"  target: import slipnet.grains < 1.5 s (now {med['slipnet.grains']:.2f} s)")


if __name__ == "__main__":
    main()
