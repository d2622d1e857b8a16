import os

from hypothesis import settings

os.environ.setdefault("MPLBACKEND", "Agg")

# Property tests are derandomised by default: every run (CI or local) tries the same examples, so
# a failure is reproducible and a green run is not luck. HYPOTHESIS_PROFILE=dev gives random
# examples (and the example database) for a deliberate wider search.
settings.register_profile("ci", derandomize=True, max_examples=100, deadline=None, database=None,
                          print_blob=True)
settings.register_profile("dev", deadline=None)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))
