"""Analyses of a finished fit, each returning a result object; :func:`analyse` runs them all.

(Names of modules here, such as ``compactness`` and ``jackknife``, are not
re-exported as functions, so the modules stay reachable by attribute.)
"""

from .analysis import Analyses, analyse
from .effect_sizes import extended_mass_limits, star_effect_sizes
from .enclosed import EnclosedMassProfile, enclosed_mass_profile
from .jackknife import JackknifeResult
from .saved_fit import load_fit, write_state

__all__ = ["Analyses", "analyse", "star_effect_sizes", "extended_mass_limits",
           "EnclosedMassProfile", "enclosed_mass_profile", "JackknifeResult",
           "load_fit", "write_state"]
