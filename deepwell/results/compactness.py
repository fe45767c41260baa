"""How compact is the central mass, and which dark clusters could it be?

Pure vectorised kernels (masses in Msun, radii in au, times in yr, speeds in km/s) for the
Schwarzschild radius, escape speed, mean density and 1PN parameter inside a radius, and for the
longest life of a cluster of dark objects of that mass and size (Maoz 1998, ApJ 494, L181; with
Binney & Tremaine 2008, Galactic Dynamics, 2nd ed.; Spitzer 1987, Dynamical Evolution of
Globular Clusters). :func:`compactness` gathers them into a :class:`CompactnessReport`.
"""

import math
from dataclasses import dataclass

import numpy as np
from astropy import constants as _const

from deepwell.core import constants as _c
from deepwell.model.kernels.relativity import schwarzschild_radius_au

__all__ = [
    "schwarzschild_radius_au", "escape_velocity_kms", "escape_fraction_of_c", "mean_density",
    "pn_parameter", "radius_in_schwarzschild_radii", "radius_in_ten_schwarzschild_radii",
    "maxwellian_fraction_above", "relaxation_time_yr", "evaporation_time_yr", "collision_time_yr",
    "Constituent", "CONSTITUENTS", "cluster_lifetimes", "CompactnessReport", "compactness",
    "compactness_paragraph", "compactness_from_samples",
]

#: Coulomb-logarithm coefficient gamma_c in ln(gamma_c N) (Spitzer 1987; 0.4 for a
#: cluster of unequal masses, 0.11 for strictly equal masses; from memory). 0.4 gives the
#: larger logarithm, hence the shorter t_rh only by ~10%: the choice hardly matters.
GAMMA_C = 0.4
#: 3-D mean-square speed <v^2> = VIRIAL_COEFF G M / r_h (Spitzer 1987; Binney & Tremaine
#: 2008; from memory). The 1-D dispersion used for collisions is sigma^2 = <v^2>/3.
VIRIAL_COEFF = 0.4
#: Default age of the host galaxy in yr (common practice).
GALAXY_AGE_YR = 1.0e10
_R_SUN_AU = float(_const.R_sun.si.value) / _c.AU_SI  # IAU 2015 nominal solar radius


def escape_velocity_kms(mass, r_au):
    """Escape speed v_esc = sqrt(2 G M / r) in km/s from radius ``r_au`` (au) of ``mass`` (Msun)."""
    gm = np.asarray(mass, dtype=float) * _c.GM_SUN_SI
    return np.sqrt(2.0 * gm / (np.asarray(r_au, dtype=float) * _c.AU_SI)) / 1000.0


def escape_fraction_of_c(mass, r_au):
    """Escape speed as a fraction of the speed of light, v_esc / c = sqrt(R_s / r)."""
    return np.sqrt(schwarzschild_radius_au(mass) / np.asarray(r_au, dtype=float))


def mean_density(mass, r_au):
    """Mean density 3 M / (4 pi r^3) in Msun/pc^3 inside radius ``r_au`` (au).

    Notes
    -----
    With ``r_au`` a pericentre distance this is a lower limit on the density of
    the mass enclosed by the orbit.
    """
    r_pc = np.asarray(r_au, dtype=float) / _c.PC_AU
    return 3.0 * np.asarray(mass, dtype=float) / (4.0 * np.pi * r_pc**3)


def pn_parameter(mass, r_au):
    """Post-Newtonian parameter G M / (r c^2) = R_s / (2 r); dimensionless."""
    return 0.5 * schwarzschild_radius_au(mass) / np.asarray(r_au, dtype=float)


def radius_in_schwarzschild_radii(mass, r_au):
    """Radius ``r_au`` (au) in units of the Schwarzschild radius of ``mass`` (Msun)."""
    return np.asarray(r_au, dtype=float) / schwarzschild_radius_au(mass)


def radius_in_ten_schwarzschild_radii(mass, r_au):
    """Radius in units of 10 R_s (beyond ~1 gravity looks Newtonian; common practice)."""
    return 0.1 * radius_in_schwarzschild_radii(mass, r_au)


def maxwellian_fraction_above(x):
    """Fraction of a Maxwellian population faster than ``x`` times the scale speed.

    Notes
    -----
    With scale a (1-D dispersion), speeds above x a make up
    erfc(x / sqrt 2) + sqrt(2 / pi) x exp(-x^2 / 2). Twice the rms speed is x = 2 sqrt 3,
    giving 7.383e-3.
    """
    x = float(x)  # scalar: used once, for a module constant
    return math.erfc(x / math.sqrt(2.0)) + math.sqrt(2.0 / math.pi) * x * math.exp(-0.5 * x * x)


#: t_evap / t_rh: each relaxation time refills the escaping tail above twice the rms speed
#: (the escape speed of a virialised cluster), so t_evap = t_rh / 7.383e-3 = 135.4 t_rh.
EVAPORATION_FACTOR = 1.0 / maxwellian_fraction_above(2.0 * math.sqrt(3.0))


def relaxation_time_yr(n_objects, object_mass, r_h_au, gamma_c=GAMMA_C):
    """Half-mass relaxation time in yr.

    Parameters
    ----------
    n_objects, object_mass, r_h_au : array_like
        Number of objects N, mass m of one object (Msun), half-mass radius (au).
    gamma_c : float, optional
        Coefficient of the Coulomb logarithm ln(gamma_c N).

    Notes
    -----
    t_rh = 0.138 N^(1/2) r_h^(3/2) / (m^(1/2) G^(1/2) ln(gamma_c N)), with G m in
    au^3/yr^2 from GM_sun.

    References
    ----------
    Spitzer (1987); Binney & Tremaine (2008) (as recalled in shared physics notes).
    """
    n = np.asarray(n_objects, dtype=float)
    gm = np.asarray(object_mass, dtype=float) * _c.GM_SUN_AU3_PER_YR2
    r_h = np.asarray(r_h_au, dtype=float)
    return 0.138 * np.sqrt(n) * r_h**1.5 / (np.sqrt(gm) * np.log(gamma_c * n))


def evaporation_time_yr(t_rh_yr):
    """Evaporation time t_evap = t_rh / 7.383e-3 (about 135 t_rh) in yr; see EVAPORATION_FACTOR."""
    return EVAPORATION_FACTOR * np.asarray(t_rh_yr, dtype=float)


def collision_time_yr(n_per_au3, sigma_kms, object_mass, object_radius_au):
    """Mean time between physical collisions of one object, in yr.

    Parameters
    ----------
    n_per_au3, sigma_kms : array_like
        Number density of objects (au^-3) and their 1-D velocity dispersion (km/s).
    object_mass, object_radius_au : array_like
        Mass (Msun) and radius (au) of one object.

    Notes
    -----
    1/t_coll = 16 sqrt(pi) n sigma r_*^2 (1 + Theta), Theta = G m / (2 sigma^2 r_*),
    with Theta the Safronov number (gravitational focusing).

    References
    ----------
    Binney & Tremaine (2008) (as recalled in shared physics notes).
    """
    sigma = np.asarray(sigma_kms, dtype=float) / _c.KMS_PER_AU_PER_YR  # au/yr
    r_star = np.asarray(object_radius_au, dtype=float)
    theta = np.asarray(object_mass, dtype=float) * _c.GM_SUN_AU3_PER_YR2 / (2.0 * sigma**2 * r_star)
    rate = 16.0 * np.sqrt(np.pi) * np.asarray(n_per_au3, dtype=float) * sigma * r_star**2
    return 1.0 / (rate * (1.0 + theta))


@dataclass(frozen=True)
class Constituent:
    """A kind of dark object: ``name``, ``mass`` (Msun), ``radius_au`` (au), ``note``."""

    name: str
    mass: float
    radius_au: float
    note: str


#: Adopted constituents; values are common practice unless marked otherwise.
CONSTITUENTS = (
    Constituent("brown dwarfs", 0.05, 0.1 * _R_SUN_AU, "0.05 Msun, 0.1 R_sun (common practice)"),
    Constituent("white dwarfs", 0.6, 0.01 * _R_SUN_AU,
                "0.6 Msun, 0.01 R_sun, about an Earth radius (common practice)"),
    Constituent("neutron stars", 1.4, 12.0e3 / _c.AU_SI, "1.4 Msun, 12 km (common practice)"),
    Constituent("stellar black holes", 10.0, 10.0 * _c.SCHWARZSCHILD_M_PER_MSUN / _c.AU_SI,
                "10 Msun, radius = own R_s (from memory; collisions negligible)"),
)

NOT_EXCLUDED = (
    "clusters of elementary particles (such as boson stars)",
    "clusters of very low-mass black holes (below about 0.04 Msun)",
)


def _check_positive(name, value):
    arr = np.asarray(value, dtype=float)
    if arr.size == 0 or not np.all(np.isfinite(arr)) or np.any(arr <= 0):
        raise ValueError(f"{name} must be finite and positive, got {value!r}")
    return arr


def cluster_lifetimes(mass, r_au, constituents=CONSTITUENTS, galaxy_age_yr=GALAXY_AGE_YR):
    """Longest lifetime of a dark cluster of total ``mass`` (Msun) inside ``r_au`` (au).

    Returns
    -------
    dict
        Constituent name -> {"t_evap_yr", "t_coll_yr", "t_max_yr", "excluded"}; arrays
        broadcast over ``mass`` and ``r_au``; ``excluded`` is t_max < ``galaxy_age_yr``.

    Notes
    -----
    Generous convention: half-mass radius r_h = r, so half the objects, N/2 = M/(2m),
    fill the sphere r_h (n = 3 N / (8 pi r_h^3)); 1-D dispersion
    sigma^2 = VIRIAL_COEFF G M / (3 r_h). Lifetime t_max = min(t_evap, t_coll) [1]_.

    References
    ----------
    .. [1] Maoz, E. 1998, ApJ 494, L181.
    """
    m_tot = _check_positive("mass", mass)
    r_h = _check_positive("r_au", r_au)
    sigma_kms = np.sqrt(VIRIAL_COEFF * m_tot * _c.GM_SUN_SI / (3.0 * r_h * _c.AU_SI)) / 1000.0
    out = {}
    for c in constituents:
        n_obj = m_tot / c.mass
        t_evap = evaporation_time_yr(relaxation_time_yr(n_obj, c.mass, r_h))
        density = 3.0 * n_obj / (8.0 * np.pi * r_h**3)
        t_coll = collision_time_yr(density, sigma_kms, c.mass, c.radius_au)
        t_max = np.minimum(t_evap, t_coll)
        out[c.name] = {"t_evap_yr": t_evap, "t_coll_yr": t_coll, "t_max_yr": t_max,
                       "excluded": t_max < galaxy_age_yr}
    return out


@dataclass(frozen=True)
class CompactnessReport:
    """How compact a central mass is, from its mass and the closest pericentre.

    Attributes: ``mass`` (Msun), ``r_peri_au``, ``schwarzschild_radius_au``,
    ``schwarzschild_radius_km``, ``r_peri_in_rs``, ``r_peri_in_10rs``, ``v_esc_over_c``,
    ``mean_density_lower_limit`` (Msun/pc^3), ``pn_parameter``, ``galaxy_age_yr``,
    ``lifetimes`` (name -> dict of floats and bool), ``not_excluded`` (caveat strings).
    """

    mass: float
    r_peri_au: float
    schwarzschild_radius_au: float
    schwarzschild_radius_km: float
    r_peri_in_rs: float
    r_peri_in_10rs: float
    v_esc_over_c: float
    mean_density_lower_limit: float
    pn_parameter: float
    galaxy_age_yr: float
    lifetimes: dict
    not_excluded: tuple

    @property
    def max_lifetime_yr(self):
        """Longest lifetime over all constituents (yr)."""
        return max(v["t_max_yr"] for v in self.lifetimes.values())

    @property
    def excluded(self):
        """Names of constituents whose cluster would not survive the galaxy's age."""
        return [name for name, v in self.lifetimes.items() if v["excluded"]]

    def to_dict(self):
        """JSON-ready dict; quantities as {"value", "unit"} with astropy unit strings."""
        def q(value, unit):
            return {"value": float(value), "unit": unit}

        lifetimes = {
            name: {"t_evap": q(v["t_evap_yr"], "yr"), "t_coll": q(v["t_coll_yr"], "yr"),
                   "t_max": q(v["t_max_yr"], "yr"), "excluded": bool(v["excluded"])}
            for name, v in self.lifetimes.items()
        }
        return {
            "mass": q(self.mass, "solMass"), "r_peri": q(self.r_peri_au, "AU"),
            "schwarzschild_radius": q(self.schwarzschild_radius_au, "AU"),
            "schwarzschild_radius_km": q(self.schwarzschild_radius_km, "km"),
            "r_peri_in_rs": q(self.r_peri_in_rs, ""), "r_peri_in_10rs": q(self.r_peri_in_10rs, ""),
            "v_esc_over_c": q(self.v_esc_over_c, ""),
            "mean_density_lower_limit": q(self.mean_density_lower_limit, "solMass / pc3"),
            "pn_parameter": q(self.pn_parameter, ""), "galaxy_age": q(self.galaxy_age_yr, "yr"),
            "max_lifetime": q(self.max_lifetime_yr, "yr"), "lifetimes": lifetimes,
            "not_excluded": list(self.not_excluded),
        }


def compactness(mass, r_peri_au, galaxy_age_yr=GALAXY_AGE_YR):
    """Assemble a :class:`CompactnessReport` for one mass (Msun) and pericentre (au).

    For posterior samples use :func:`compactness_from_samples`.
    """
    for name, value in (("mass", mass), ("r_peri_au", r_peri_au), ("galaxy_age_yr", galaxy_age_yr)):
        if np.ndim(value) != 0:
            raise ValueError(f"{name} must be a scalar; use compactness_from_samples for arrays")
        _check_positive(name, value)
    m, r = float(mass), float(r_peri_au)
    rs = float(schwarzschild_radius_au(m))
    lifetimes = {name: {k: (bool(v) if k == "excluded" else float(v)) for k, v in d.items()}
                 for name, d in cluster_lifetimes(m, r, galaxy_age_yr=galaxy_age_yr).items()}
    return CompactnessReport(
        mass=m, r_peri_au=r, schwarzschild_radius_au=rs,
        schwarzschild_radius_km=rs * _c.AU_SI / 1000.0, r_peri_in_rs=r / rs,
        r_peri_in_10rs=r / (10.0 * rs), v_esc_over_c=float(escape_fraction_of_c(m, r)),
        mean_density_lower_limit=float(mean_density(m, r)), pn_parameter=float(pn_parameter(m, r)),
        galaxy_age_yr=float(galaxy_age_yr), lifetimes=lifetimes, not_excluded=NOT_EXCLUDED,
    )


def _join(names):
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " or " + names[-1]


def compactness_paragraph(report):
    """A short plain-English paragraph on what the compactness excludes and what it does not."""
    r = report
    gone = r.excluded
    kept = [n for n in r.lifetimes if n not in gone]
    text = (
        f"A mass of {r.mass:.3g} Msun lies inside {r.r_peri_au:.3g} au, which is "
        f"{r.r_peri_in_rs:.3g} Schwarzschild radii (R_s = {r.schwarzschild_radius_km:.3g} km). "
        f"Its mean density there is at least {r.mean_density_lower_limit:.3g} Msun/pc^3, and the "
        f"escape speed from that radius is {r.v_esc_over_c:.3g} c. "
    )
    if gone:
        longest = max(r.lifetimes[n]["t_max_yr"] for n in gone)
        text += (
            f"A cluster of {_join(gone)} this dense would evaporate or be destroyed by collisions "
            f"within {longest:.2g} yr, less than the galaxy's age of {r.galaxy_age_yr:.2g} yr; "
            "such clusters are excluded. "
        )
    if kept:
        text += (f"A cluster of {_join(kept)} could outlive the galaxy's age of "
                 f"{r.galaxy_age_yr:.2g} yr and is not excluded. ")
    return text + "These arguments do not exclude " + " or ".join(r.not_excluded) + "."


def compactness_from_samples(mass_samples, rperi_samples, galaxy_age_yr=GALAXY_AGE_YR):
    """Median and 16th/84th percentiles of the key compactness numbers over samples.

    Parameters
    ----------
    mass_samples, rperi_samples : array_like
        Matching posterior draws of the mass (Msun) and pericentre distance (au).

    Returns
    -------
    dict
        Name -> {"median", "p16", "p84", "unit"}; units in astropy string format.
    """
    m = _check_positive("mass_samples", mass_samples).ravel()
    r = _check_positive("rperi_samples", rperi_samples).ravel()
    if m.shape != r.shape:
        raise ValueError(f"mass_samples and rperi_samples differ in length: {m.size} vs {r.size}")
    lifetimes = cluster_lifetimes(m, r, galaxy_age_yr=galaxy_age_yr)
    values = {
        "mass": (m, "solMass"), "r_peri": (r, "AU"),
        "schwarzschild_radius": (schwarzschild_radius_au(m), "AU"),
        "r_peri_in_rs": (radius_in_schwarzschild_radii(m, r), ""),
        "v_esc_over_c": (escape_fraction_of_c(m, r), ""),
        "mean_density_lower_limit": (mean_density(m, r), "solMass / pc3"),
        "pn_parameter": (pn_parameter(m, r), ""),
        "max_lifetime": (np.max([v["t_max_yr"] for v in lifetimes.values()], axis=0), "yr"),
    }
    out = {}
    for name, (x, unit) in values.items():
        p16, p50, p84 = np.percentile(x, [16.0, 50.0, 84.0])
        out[name] = {"median": float(p50), "p16": float(p16), "p84": float(p84), "unit": unit}
    return out
