"""Declarations of the model parameters: name, unit, bounds, description.

Parameters are declared once here.  The fitter works on an internal,
well-conditioned vector (period instead of ``a``, sqrt(e) cos w and
sqrt(e) sin w, cos i); :class:`Layout` maps it to the physical elements that
are reported, in vectorised form so that it can run on many trial vectors at
once (walkers, finite differences).
"""

from dataclasses import dataclass

import numpy as np

__all__ = [
    "ParameterSpec",
    "SHARED",
    "EXTRA",
    "STAR_ELEMENTS",
    "STAR_INTERNAL",
    "MAX_ECC",
]

#: Largest eccentricity the model evaluates; beyond it a penalty applies.
MAX_ECC = 0.9999


@dataclass(frozen=True)
class ParameterSpec:
    """One model parameter as the user sees it."""

    name: str
    unit: str  # astropy unit string ("" for dimensionless)
    description: str
    lower: float = -np.inf
    upper: float = np.inf
    latex: str = ""
    default: float | None = None  # value used when the settings give none (EXTRA only)
    fixed_by_default: bool = False  # held at ``default`` unless the settings free it


SHARED = {
    p.name: p
    for p in (
        ParameterSpec("mass", "solMass", "central point mass", 1.0, 1e12, r"M_\bullet"),
        ParameterSpec("distance", "pc", "distance to the central mass", 1.0, 1e9, r"R_0"),
        ParameterSpec("x0", "mas", "east offset of the mass at the reference epoch", latex="x_0"),
        ParameterSpec("y0", "mas", "north offset of the mass at the reference epoch", latex="y_0"),
        ParameterSpec("vx0", "mas / yr", "eastward drift of the mass in the frame",
                      latex=r"v_{x,0}"),
        ParameterSpec("vy0", "mas / yr", "northward drift of the mass in the frame",
                      latex=r"v_{y,0}"),
        ParameterSpec("vz0", "km / s", "line-of-sight velocity of the mass", latex=r"v_{z,0}"),
    )
}

#: Optional shared parameters that switchable model pieces add (effect strengths,
#: data-set terms).  A piece registers its ParameterSpec here; the fitter takes
#: bounds from it and the settings file may fix or bound it like a shared one.
EXTRA = {
    p.name: p
    for p in (
        ParameterSpec("f", "", "factor on the relativistic redshift (0 Newtonian, 1 general "
                      "relativity)", -10.0, 10.0, "f", default=1.0, fixed_by_default=True),
        ParameterSpec("f_sp", "", "factor on the 1PN (Schwarzschild) terms of the equation of "
                      "motion (0 Newtonian, 1 general relativity)", -10.0, 10.0, r"f_\mathrm{SP}",
                      default=1.0, fixed_by_default=True),
        ParameterSpec("ext_fraction", "", "extended (Plummer) mass inside the reference radius, "
                      "as a fraction of the central point mass", -1.0, 1.0,
                      r"M_\mathrm{ext}(<r_\mathrm{ref})/M_\bullet", default=0.0),
        ParameterSpec("outlier_frac", "", "fraction of points drawn from the broad outlier "
                      "distribution", 0.0, 0.5, r"q_\mathrm{out}", default=0.02),
    )
}

STAR_ELEMENTS = {
    p.name: p
    for p in (
        ParameterSpec("a", "mas", "angular semi-major axis", 0.0, np.inf, "a"),
        ParameterSpec("e", "", "eccentricity", 0.0, 1.0, "e"),
        ParameterSpec("inc", "deg", "inclination", 0.0, 180.0, "i"),
        ParameterSpec("node", "deg", "position angle of the ascending node", latex=r"\Omega"),
        ParameterSpec("peri_arg", "deg", "argument of pericentre", latex=r"\omega"),
        ParameterSpec("t_peri", "yr", "epoch of pericentre (Julian year, TT)",
                      latex=r"t_\mathrm{p}"),
    )
}

#: Internal per-star parameters, in the order of the internal vector.
STAR_INTERNAL = ("period", "sqe_cos", "sqe_sin", "cos_inc", "node", "t_peri")


