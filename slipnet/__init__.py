"""slipnet: forecast short fatigue crack paths, arrest barriers and strain localisation
from orientation maps of polycrystalline metals.

Submodules are imported on demand (``import slipnet.grains``), so importing the package is cheap.
"""

from .cautions import CAUTION
from .errors import InputFileError, NumericalError, ParameterError, SlipnetError

__version__ = "0.1.0"

__all__ = ["CAUTION", "InputFileError", "NumericalError", "ParameterError", "SlipnetError"]
