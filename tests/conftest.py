import os
from pathlib import Path

from hypothesis import settings

os.environ.setdefault("MPLBACKEND", "Agg")

# numba's kernel cache for the test session (and the subprocesses it starts) lives in the
# checkout, so a clean clone starts cold and never loads a cache an earlier run left in a shared
# folder: a stale cached orix gufunc loaded that way segfaulted CI. numba reads the variable on
# every compile, so setting it here, before any test compiles, is in time. A set value is kept.
os.environ.setdefault("NUMBA_CACHE_DIR", str(Path(__file__).resolve().parents[1] / ".numba-cache"))

# Property tests are derandomised by default: every run (CI or local) tries the same examples, so
# a failure is reproducible and a green run is not luck. HYPOTHESIS_PROFILE=dev gives random
# examples (and the example database) for a deliberate wider search.
settings.register_profile("ci", derandomize=True, max_examples=100, deadline=None, database=None,
                          print_blob=True)
settings.register_profile("dev", deadline=None)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))
