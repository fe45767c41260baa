"""Declarations of the model parameters: name, unit, bounds, description.

Parameters are declared once here.  The fitter works on an internal,
well-conditioned vector (period instead of ``a``, sqrt(e) cos w and
sqrt(e) sin w, cos i); :class:`Layout` maps it to the physical elements that
are reported, in vectorised form so that it can run on many trial vectors at
once (walkers, finite differences).
"""

from dataclasses import dataclass

import numpy as np

from .orbit import a_from_period

__all__ = [
    "ParameterSpec",
    "SHARED",
    "EXTRA",
    "STAR_ELEMENTS",
    "STAR_INTERNAL",
    "Layout",
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


@dataclass(frozen=True)
class Layout:
    """Positions of the shared and per-star parameters in the internal vector.

    The internal vector is ``[mass, distance, x0, y0, vx0, vy0, vz0, extra...,
    star0(period, sqrt(e) cos w, sqrt(e) sin w, cos i, node[rad], t_peri), star1...]``.
    """

    stars: tuple
    extra: tuple = ()  # names of optional shared parameters (effects, data-set terms)

    @property
    def shared_names(self):
        return tuple(SHARED) + tuple(self.extra)

    @property
    def n_shared(self):
        return len(self.shared_names)

    @property
    def size(self):
        return self.n_shared + len(STAR_INTERNAL) * len(self.stars)

    def names(self):
        """Internal parameter names (valid Python identifiers)."""
        out = list(self.shared_names)
        for k in range(len(self.stars)):
            out += [f"s{k}_{p}" for p in STAR_INTERNAL]
        return out

    def index(self, name):
        return self.names().index(name)

    def star_block(self, vec):
        """Per-star internal parameters as an array of shape (..., n_stars, 6)."""
        vec = np.asarray(vec, dtype=float)
        tail = vec[..., self.n_shared:]
        return tail.reshape(vec.shape[:-1] + (len(self.stars), len(STAR_INTERNAL)))

    def shared(self, vec, name):
        return np.asarray(vec, dtype=float)[..., self.shared_names.index(name)]

    def elements(self, vec):
        """Physical elements of every star from an internal vector.

        Returns
        -------
        dict of ndarray, each of shape (..., n_stars)
            ``a`` (mas), ``e``, ``inc``, ``node``, ``peri_arg`` (rad),
            ``t_peri`` (yr), ``period`` (yr); eccentricity clipped to MAX_ECC.
        """
        blk = self.star_block(vec)
        mass = self.shared(vec, "mass")[..., None]
        dist = self.shared(vec, "distance")[..., None]
        period = blk[..., 0]
        h, k = blk[..., 1], blk[..., 2]
        ecc = np.minimum(h * h + k * k, MAX_ECC)
        return {
            "period": period,
            "a": a_from_period(period, mass, dist),
            "e": ecc,
            "inc": np.arccos(np.clip(blk[..., 3], -1.0, 1.0)),
            "node": blk[..., 4],
            "peri_arg": np.arctan2(k, h),
            "t_peri": blk[..., 5],
        }

    def ecc_excess(self, vec):
        """How far sqrt(e) parameters push e beyond MAX_ECC (0 inside)."""
        blk = self.star_block(vec)
        return np.maximum(blk[..., 1] ** 2 + blk[..., 2] ** 2 - MAX_ECC, 0.0)


def internal_star_values(period, ecc, inc, node, peri_arg, t_peri):
    """Internal per-star block from physical elements (angles in radians)."""
    sq = np.sqrt(ecc)
    return np.array(
        [period, sq * np.cos(peri_arg), sq * np.sin(peri_arg), np.cos(inc), node, t_peri],
        dtype=float,
    )


def wrap_degrees(angle_deg):
    """Wrap an angle to [0, 360) degrees."""
    return np.mod(angle_deg, 360.0)
