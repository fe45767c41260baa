"""Enclosed-mass profile: how much mass lies inside each star's orbit.

Each star is refitted alone with its *own* central mass, the distance and the
drifting frame (x0 ... vz0) held at the joint fit: :func:`star_masses`.  A
Keplerian orbit measures the mass inside it, so the per-star masses, placed at
the radii the stars sample, trace M(<r).  :func:`consistency_chi2` asks whether
they agree with one point mass.  Pure model curves (point mass, + Plummer
sphere, + broken power-law cusp), a reader of external mass constraints and an
astropy Table of the profile complete the physics; the figure lives in
:mod:`deepwell.report.figures.enclosed`.

Internal units: radii in au (pc only where named ``_pc``), masses in Msun.

Caveats stated in every output (:attr:`EnclosedMassProfile.notes`):

* the per-star errors are conditional on the joint distance and frame: the
  distance error moves all per-star masses together and is not in them;
* a Keplerian mass is an orbit-weighted average of M(<r) over the radii the
  star visits, not M(<r) at one radius;
* short arcs give per-star masses whose linearised errors may be unreliable.
"""

import math
import time
from dataclasses import dataclass, field

import numpy as np
from astropy import units as u
from astropy.table import Table
from scipy import optimize, stats

from deepwell.core.constants import PC_AU
from deepwell.fit.least_squares import bounds, covariance, minimise
from deepwell.fit.result import phase_coverage
from deepwell.model.kernels.relativity import plummer_enclosed_mass
from deepwell.model.quality import POOR_COVERAGE, POOR_REL_SIGMA

from .compactness import GALAXY_AGE_YR, cluster_lifetimes, schwarzschild_radius_au

__all__ = [
    "StarMass", "star_masses", "Consistency",
    "consistency_chi2", "point_mass_enclosed", "point_plus_plummer_enclosed",
    "broken_power_law_enclosed_mass", "point_plus_cusp_enclosed", "DEFAULT_MODEL_SETTINGS",
    "model_curves",
    "no_dark_cluster_radius_au", "EnclosedMassProfile", "enclosed_mass_profile",
    "profile_table",
]


# ----------------------------------------------------------------------------- per-star masses
#: Seconds after which the per-star refits report each finished star.
PROGRESS_AFTER = 3.0


@dataclass(frozen=True)
class StarMass:
    """Mass enclosed by one star's orbit, from a refit with its own central mass.

    Attributes
    ----------
    star : str
    mass, mass_sigma : float
        Keplerian mass (Msun) and its 1-sigma error at fixed distance and frame.
    r_peri_au, r_apo_au : float
        Pericentre a(1 - e) and apocentre a(1 + e) of the refitted orbit (au).
    r_mean_au : float
        Time-averaged radius <r>_t = a (1 + e^2 / 2) (au): the representative radius.
    a_au, e : float
        Semi-major axis (au) and eccentricity of the refit.
    coverage : float
        Fraction of the orbit spanned by position epochs (see results.phase_coverage).
    reduced_chi2 : float
        Chi-square of the star's data over (data - 7).
    converged : bool
    poorly_constrained : bool
        sigma/mass > POOR_REL_SIGMA, coverage < POOR_COVERAGE, no convergence or a
        singular covariance.
    reason : str
        Why the star is flagged ("" if it is not).
    """

    star: str
    mass: float
    mass_sigma: float
    r_peri_au: float
    r_apo_au: float
    r_mean_au: float
    a_au: float
    e: float
    coverage: float
    reduced_chi2: float
    converged: bool
    poorly_constrained: bool
    reason: str = ""

    @property
    def rel_sigma(self):
        return self.mass_sigma / self.mass if self.mass > 0 else math.inf


def _flag(mass, sigma, coverage, converged, rank_deficient):
    why = []
    if not np.isfinite(sigma) or sigma / mass > POOR_REL_SIGMA:
        why.append(f"sigma/mass = {sigma / mass:.2g} > {POOR_REL_SIGMA:g}")
    if coverage < POOR_COVERAGE:
        why.append(f"orbit coverage {coverage:.2f} < {POOR_COVERAGE:g}")
    if not converged:
        why.append("refit did not converge")
    if rank_deficient:
        why.append("singular covariance")
    return "; ".join(why)


def _refit_star(result, k):
    """Refit star ``k`` alone with mass and its six elements free."""
    jm = result.model
    star = jm.stars[k]
    model = jm.for_stars([star])  # same effects and priors, this star only
    if any(p.star is None and p.name == "mass" for p in model.priors):
        # A prior on the joint mass must not pull the per-star mass: drop its row.
        model = model.replace(priors=[p for p in model.priors
                                      if p.star is not None or p.name != "mass"])
    ns = model.layout.n_shared
    # By name, not by slicing: the one-star model has only the data-set terms of the
    # sets this star is in, so its shared block can be shorter than the joint one.
    vec0 = model.layout.carry(jm.layout, result.internal)
    lo, hi, _ = bounds(model, result.settings)
    free = np.zeros(vec0.size, bool)
    free[0] = True          # mass
    free[ns:] = True        # the star's six internal elements
    vec0 = np.clip(vec0, lo, hi)
    vec, sol = minimise(model, vec0, free, lo, hi)
    cov, rank_def = covariance(model, vec, free)
    mass, sigma = float(vec[0]), float(np.sqrt(max(cov[0, 0], 0.0)))
    el = model.layout.elements(vec)
    dist = float(vec[1])
    a_au, e = float(el["a"][0]) * 1e-3 * dist, float(el["e"][0])
    cover = phase_coverage(model, vec, 0)
    chi, ndat = model.star_chi2(vec)
    reason = _flag(mass, sigma, cover, bool(sol.success), rank_def)
    return StarMass(
        star=star, mass=mass, mass_sigma=sigma, r_peri_au=a_au * (1 - e),
        r_apo_au=a_au * (1 + e), r_mean_au=a_au * (1 + 0.5 * e * e), a_au=a_au, e=e,
        coverage=cover, reduced_chi2=float(chi[0] / max(ndat[0] - 7, 1)),
        converged=bool(sol.success), poorly_constrained=bool(reason), reason=reason)


def star_masses(result, progress=None):
    """Mass enclosed by each star's orbit, each star refitted with its own mass.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
        A joint fit; its distance and frame (x0, y0, vx0, vy0, vz0) are held fixed,
        its star elements are the starting point of each refit (taken by
        parameter name, :meth:`deepwell.model.layout.Layout.carry`).
    progress : callable, optional
        Called with a short text after each refit once the refits have taken
        longer than :data:`PROGRESS_AFTER` seconds (quiet when they are fast).

    Returns
    -------
    list of StarMass
        In the order of ``result.stars``.

    Notes
    -----
    For a star on a Keplerian orbit P^2 = k a^3 / M, so with a (from the angular
    size and the fixed distance) and P measured, M is the mass that the orbit
    encloses.  The representative radius is the time average over one orbit,
    <r>_t = a (1 + e^2/2) (exact for a Keplerian ellipse); the radius range is
    pericentre to apocentre.  The errors do not include the distance error, which
    scales every per-star mass by the same factor.
    """
    say = progress or (lambda text: None)
    t0 = time.monotonic()
    out = []
    n = len(result.stars)
    for k, star in enumerate(result.stars):
        t = time.monotonic()
        out.append(_refit_star(result, k))
        if time.monotonic() - t0 > PROGRESS_AFTER:
            say(f"enclosed mass: {star} refitted ({k + 1}/{n}, {time.monotonic() - t:.1f} s)")
    return out


@dataclass(frozen=True)
class Consistency:
    """Chi-square of per-star masses against one point mass (``chi2``, ``dof``, ``p_value``)."""

    chi2: float
    dof: int
    p_value: float
    stars: tuple
    joint_mass: float

    @property
    def reduced_chi2(self):
        return self.chi2 / self.dof if self.dof > 0 else math.nan


def consistency_chi2(star_masses, joint_mass, include_poor=True):
    """Do the per-star masses agree with one point mass?

    Parameters
    ----------
    star_masses : sequence of StarMass
    joint_mass : float
        The joint point mass (Msun).
    include_poor : bool, optional
        Also use stars flagged as poorly constrained (their linearised errors may
        be unreliable).

    Returns
    -------
    Consistency

    Notes
    -----
    chi2 = sum_i (M_i - M)^2 / sigma_i^2 with dof = N - 1: the joint mass is in
    effect the weighted mean of the per-star masses (same data, same distance), so
    one degree of freedom is used by it and its own error is not added.
    p = P(chi2_dof > chi2) from scipy.stats.chi2.
    """
    use = [s for s in star_masses if include_poor or not s.poorly_constrained]
    use = [s for s in use if np.isfinite(s.mass_sigma) and s.mass_sigma > 0]
    m = np.array([s.mass for s in use])
    sig = np.array([s.mass_sigma for s in use])
    chi2 = float(np.sum(((m - joint_mass) / sig) ** 2))
    dof = len(use) - 1
    p = float(stats.chi2.sf(chi2, dof)) if dof > 0 else math.nan
    return Consistency(chi2=chi2, dof=dof, p_value=p, stars=tuple(s.star for s in use),
                       joint_mass=float(joint_mass))


# ------------------------------------------------------------------------------ model curves
def point_mass_enclosed(r_au, mass):
    """M(<r) = M of a point mass (Msun), broadcast to the shape of ``r_au``."""
    return np.broadcast_to(np.asarray(mass, float), np.shape(r_au)).astype(float)


def point_plus_plummer_enclosed(r_au, mass, m_ext, b_au):
    """Point mass plus a Plummer sphere: M + M_ext r^3 / (r^2 + b^2)^(3/2) (physics.md sect. 7)."""
    return mass + plummer_enclosed_mass(m_ext, b_au, r_au)


def broken_power_law_enclosed_mass(r, m_break, r_break, gamma_in, gamma_out):
    """Mass inside r of a broken power-law density, normalised by the mass inside the break.

    Parameters
    ----------
    r, r_break : array_like
        Radius and break radius (same unit).
    m_break : array_like
        Mass inside ``r_break``.
    gamma_in, gamma_out : float
        Density slopes inside and outside the break (gamma_in < 3).

    Notes
    -----
    rho = rho_b (r/r_b)^-gamma_in (r < r_b), rho_b (r/r_b)^-gamma_out (r > r_b), with
    rho_b = (3 - gamma_in) m_b / (4 pi r_b^3). Then M(<r) = m_b x^(3 - gamma_in) inside
    and m_b [1 + (3 - gamma_in) (x^(3 - gamma_out) - 1) / (3 - gamma_out)] outside,
    x = r / r_b; for gamma_out = 3 the bracket's last term is (3 - gamma_in) ln x.
    """
    if not gamma_in < 3:
        raise ValueError(f"gamma_in must be below 3 (finite central mass), got {gamma_in}")
    x = np.asarray(r, float) / np.asarray(r_break, float)
    lx = np.log(np.where(x > 0, x, 1.0))
    inner = np.exp((3.0 - gamma_in) * lx)
    s = 3.0 - gamma_out
    outer_term = lx if s == 0 else np.expm1(s * lx) / s
    outer = 1.0 + (3.0 - gamma_in) * outer_term
    return np.asarray(m_break, float) * np.where(x <= 1.0, np.where(x > 0, inner, 0.0), outer)


def point_plus_cusp_enclosed(r_au, mass, m_break, r_break_au, gamma_in, gamma_out):
    """Point mass plus a broken power-law stellar cusp (Msun)."""
    return mass + broken_power_law_enclosed_mass(r_au, m_break, r_break_au, gamma_in, gamma_out)


#: Illustrative defaults of the model curves (not fits).  Cusp slopes and break from
#: physics.md sect. 9 [memory]: gamma ~ 1.2-1.4 inside a break of a few tenths of a pc,
#: ~1.75-2 outside.  Cusp mass inside the break and the Plummer mass/scale are
#: illustrative choices in units of the joint mass; the Plummer fraction 1e-3 is the
#: published order of an upper limit (physics.md sect. 7).
DEFAULT_MODEL_SETTINGS = {
    "plummer": {"mass_fraction": 1e-3, "scale_au": 1000.0},
    "cusp": {"gamma_in": 1.3, "gamma_out": 1.8, "r_break_pc": 0.3, "mass_fraction_at_break": 0.5},
}


def _merged(settings):
    out = {k: dict(v) for k, v in DEFAULT_MODEL_SETTINGS.items()}
    for key, sub in (settings or {}).items():
        if key not in out:
            raise ValueError(f"unknown model '{key}' (known: {', '.join(out)})")
        unknown = set(sub) - set(out[key])
        if unknown:
            raise ValueError(f"unknown setting '{key}.{sorted(unknown)[0]}'")
        out[key].update(sub)
    return out


def model_curves(r_au, mass, settings=None):
    """Enclosed-mass model curves on radii ``r_au`` around a point mass ``mass`` (Msun).

    Parameters
    ----------
    settings : dict, optional
        Overrides of DEFAULT_MODEL_SETTINGS, e.g. ``{"cusp": {"gamma_in": 1.2}}``.

    Returns
    -------
    dict
        Name ("point", "plummer", "cusp") -> (legend label, M(<r) in Msun).
    """
    s = _merged(settings)
    pl, cu = s["plummer"], s["cusp"]
    m_ext = pl["mass_fraction"] * mass
    m_b = cu["mass_fraction_at_break"] * mass
    return {
        "point": ("point mass", point_mass_enclosed(r_au, mass)),
        "plummer": (f"+ Plummer sphere ({pl['mass_fraction']:.1e} M, b = {pl['scale_au']:.3g} au;"
                    " illustrative)",
                    point_plus_plummer_enclosed(r_au, mass, m_ext, pl["scale_au"])),
        "cusp": (f"+ stellar cusp (slopes {cu['gamma_in']:g}/{cu['gamma_out']:g}, break "
                 f"{cu['r_break_pc']:g} pc; illustrative)",
                 point_plus_cusp_enclosed(r_au, mass, m_b, cu["r_break_pc"] * PC_AU,
                                          cu["gamma_in"], cu["gamma_out"])),
    }


def no_dark_cluster_radius_au(mass, galaxy_age_yr=GALAXY_AGE_YR):
    """Radius (au) inside which no dark cluster of ``mass`` (Msun) outlives ``galaxy_age_yr``.

    Every constituent of deepwell.results.compactness.CONSTITUENTS has a maximum lifetime
    below the age there; the lifetime grows with radius, so this is one radius.
    """
    def log_excess(log_r):
        lt = cluster_lifetimes(mass, 10.0**log_r, galaxy_age_yr=galaxy_age_yr)
        return math.log10(max(float(v["t_max_yr"]) for v in lt.values()) / galaxy_age_yr)

    lo = math.log10(float(schwarzschild_radius_au(mass)))
    hi = lo + 15.0
    if log_excess(lo) >= 0:
        return float(10.0**lo)
    return float(10.0 ** optimize.brentq(log_excess, lo, hi, xtol=1e-10))


# ------------------------------------------------------------------------------ the profile
@dataclass(frozen=True)
class EnclosedMassProfile:
    """Per-star enclosed masses with the joint point mass and what limits them.

    ``stars`` (tuple of StarMass), ``joint_mass``/``joint_mass_sigma`` (Msun),
    ``distance_pc``, ``consistency`` (all stars), ``consistency_good`` (well-constrained
    stars only), ``external`` (ExternalConstraints or None), ``notes`` (caveats, plain text).
    """

    stars: tuple
    joint_mass: float
    joint_mass_sigma: float
    distance_pc: float
    consistency: Consistency
    consistency_good: Consistency
    external: object = None  # deepwell.tables.constraints.ExternalConstraints
    notes: tuple = field(default_factory=tuple)


def enclosed_mass_profile(result, external=None, progress=None):
    """Build the enclosed-mass profile of a joint fit.

    ``external``: optional :class:`~deepwell.tables.constraints.ExternalConstraints`
    (enclosed masses from other tracers), carried to the table and figure;
    ``progress``: as in :func:`star_masses`.
    """
    sm = tuple(star_masses(result, progress))
    joint = result.value("mass")
    notes = [
        "Per-star mass errors are conditional on the joint distance and frame; the distance "
        "error scales all per-star masses together and is not included. If the mass is not "
        "a point mass, the joint distance is biased and the per-star masses inherit that "
        "bias unevenly; with an independently known distance, fix it in the settings.",
        "Each per-star mass is a Keplerian average of the mass inside the radii that star "
        "visits (pericentre to apocentre), not the mass inside one radius.",
    ]
    poor = [s for s in sm if s.poorly_constrained]
    if poor:
        notes.append("Poorly constrained per-star masses (linearised errors may be unreliable): "
                     + "; ".join(f"{s.star} ({s.reason})" for s in poor) + ".")
    notes.append("Model curves other than the point mass are illustrative, not fitted.")
    return EnclosedMassProfile(
        stars=sm, joint_mass=joint, joint_mass_sigma=result.sigma("mass"),
        distance_pc=result.value("distance"), consistency=consistency_chi2(sm, joint),
        consistency_good=consistency_chi2(sm, joint, include_poor=False),
        external=external, notes=tuple(notes))


def profile_table(profile):
    """The per-star profile as an astropy Table with units (ECSV-ready).

    Columns: star, r_peri, r_apo, r_mean (au), r_mean_pc (pc), mass, mass_err (Msun),
    rel_err, coverage, reduced_chi2, poorly_constrained, reason; the joint mass, the
    consistency tests and the caveats are in ``meta``.
    """
    s = profile.stars
    col = lambda f: [getattr(x, f) for x in s]  # noqa: E731
    t = Table()
    t["star"] = col("star")
    for name, f in (("r_peri", "r_peri_au"), ("r_apo", "r_apo_au"), ("r_mean", "r_mean_au")):
        t[name] = np.array(col(f), float) * u.au
    t["r_mean_pc"] = (np.array(col("r_mean_au"), float) / PC_AU) * u.pc
    t["mass"] = np.array(col("mass"), float) * u.solMass
    t["mass_err"] = np.array(col("mass_sigma"), float) * u.solMass
    t["rel_err"] = np.array([x.rel_sigma for x in s], float)
    t["coverage"] = np.array(col("coverage"), float)
    t["reduced_chi2"] = np.array(col("reduced_chi2"), float)
    t["poorly_constrained"] = np.array(col("poorly_constrained"), bool)
    t["reason"] = col("reason")
    c, g = profile.consistency, profile.consistency_good
    t.meta.update({
        "joint_mass": {"value": profile.joint_mass, "error": profile.joint_mass_sigma,
                       "unit": "solMass"},
        "distance": {"value": profile.distance_pc, "unit": "pc"},
        "r_mean_definition": "time-averaged radius a (1 + e^2 / 2)",
        "consistency_all": {"chi2": c.chi2, "dof": c.dof, "p_value": c.p_value},
        "consistency_well_constrained": {"chi2": g.chi2, "dof": g.dof, "p_value": g.p_value},
        "notes": list(profile.notes),
    })
    return t
