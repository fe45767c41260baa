"""The one unit table: every quantity deepwell reads or writes, by name, as astropy unit strings.

Internal units (mas, Julian yr in TT, au, pc, Msun, km/s) are the units of
this table; readers convert to them and writers attach them.  ``""`` is
dimensionless.  :func:`unit_of` also resolves the derived column names the
writers use (``<name>_err``, ``<name>_sigma``, ``<name>_lo68`` ...).
"""

from .parameters import EXTRA, SHARED, STAR_ELEMENTS

__all__ = ["UNITS", "STAR_REPORTED", "unit_of"]

#: Per-star reported quantities, in order, with their units.
STAR_REPORTED = {"a": "mas", "e": "", "inc": "deg", "node": "deg", "peri_arg": "deg",
                 "t_peri": "yr", "period": "yr", "r_peri": "AU"}

#: Unit of every named quantity (astropy unit strings).
UNITS = {
    **{n: p.unit for n, p in SHARED.items()},
    **{n: p.unit for n, p in EXTRA.items()},
    **{n: p.unit for n, p in STAR_ELEMENTS.items()},
    **STAR_REPORTED,
    # observation tables
    "epoch": "yr", "ra": "mas", "dec": "mas", "ra_err": "mas", "dec_err": "mas", "corr": "",
    "vr": "km / s", "vr_err": "km / s", "reference_epoch": "yr",
    # data-set terms
    "dx": "mas", "dy": "mas", "dvx": "mas / yr", "dvy": "mas / yr", "dvz": "km / s",
    "scale": "",
    # derived per-star numbers
    "r_peri_au": "AU", "r_peri_rs": "", "v_peri_kms": "km / s", "pericentre": "yr",
    "apocentre": "yr",
    # effect sizes (results.effect_sizes)
    "redshift_excess_kms": "km / s", "redshift_first_order_kms": "km / s",
    "precession_arcmin": "arcmin", "precession_mas": "mas", "romer_range_days": "d",
    "romer_rv_kms": "km / s", "romer_sky_mas": "mas", "min_position_error_mas": "mas",
    "median_velocity_error_kms": "km / s", "osculating_epoch": "yr", "integrated_period": "yr",
    "pericentre_emitted": "yr", "pericentre_observed": "yr",
    "dchi2_romer": "", "dchi2_redshift": "", "dchi2_precession": "",
    # planning
    "ra_frame": "mas", "dec_frame": "mas", "sep": "mas", "pa": "deg", "start": "yr", "end": "yr",
    "closest_epoch": "yr", "min_separation": "mas",
}

_SUFFIXES = ("_err", "_sigma", "_lo95", "_lo68", "_hi68", "_hi95")
_PREFIXES = ("sigma_now_", "sigma_after_")


def unit_of(name):
    """Astropy unit string of a quantity or derived column name; None if unknown.

    ``mass_err``, ``mass_sigma``, ``mass_lo68`` ... take the unit of ``mass``;
    ``sigma_now_mass`` and ``sigma_after_mass`` too; ``pos95_*`` columns of
    the planner are mas (``..._pa``: deg).
    """
    if name in UNITS:
        return UNITS[name]
    for prefix in _PREFIXES:
        if name.startswith(prefix):
            return unit_of(name[len(prefix):])
    if name.startswith("pos95_"):
        return "deg" if name.endswith("pa") else "mas"
    for suffix in _SUFFIXES:
        if name.endswith(suffix):
            return unit_of(name[: -len(suffix)])
    return None
