"""slipnet: forecast short fatigue crack paths, arrest barriers and strain localisation
from orientation maps of polycrystalline metals.

Submodules are imported on demand (``import slipnet.grains``), so importing the package is cheap.
"""

from slipnet.cautions import CAUTION
from slipnet.errors import InputFileError, NumericalError, OutputError, ParameterError, SlipnetError

__version__ = "0.1.0"

__all__ = ["CAUTION", "InputFileError", "NumericalError", "OutputError", "ParameterError", "SlipnetError"]
