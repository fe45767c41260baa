"""Foundations every other folder may use: constants, errors, parameter declarations, units.

Nothing here imports another deepwell folder.
"""

from . import constants
from .errors import DeepwellError, InputError, OptionError, OutputError, SettingsError
from .parameters import EXTRA, MAX_ECC, SHARED, STAR_ELEMENTS, STAR_INTERNAL, ParameterSpec
from .version import __version__

__all__ = ["constants", "DeepwellError", "InputError", "OptionError", "OutputError",
           "SettingsError", "ParameterSpec", "SHARED", "EXTRA", "STAR_ELEMENTS",
           "STAR_INTERNAL", "MAX_ECC", "__version__"]
