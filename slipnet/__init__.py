"""slipnet: forecast short fatigue crack paths, arrest barriers and strain localisation
from orientation maps of polycrystalline metals.

Submodules are imported on demand (``import slipnet.grains``), so importing the package is cheap.
numba's kernel cache goes to a user cache folder (``slipnet._cache``), not into the package,
unless ``NUMBA_CACHE_DIR`` is set.
"""

from slipnet._cache import use_user_numba_cache
from slipnet.cautions import CAUTION
from slipnet.errors import InputFileError, NumericalError, OutputError, ParameterError, SlipnetError

use_user_numba_cache()  # before any submodule imports numba

__version__ = "0.1.0"

__all__ = ["CAUTION", "InputFileError", "NumericalError", "OutputError", "ParameterError", "SlipnetError"]
