"""Tables of the newer analyses: posterior summary, effect sizes, extended-mass limits.

Part of the report layer (:mod:`deepwell.report`), beside
:mod:`deepwell.report.tables` (whose formatting and conventions it uses):
ECSV with units in the column headers, booktabs LaTeX rounded to the errors.
"""

from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

from deepwell.core.parameters import SHARED
from deepwell.core.version import __version__
from deepwell.model.quality import DETECTABLE_DCHI2
from deepwell.results.effect_sizes import DETECTABLE_RULE
from deepwell.results.enclosed import profile_table

from .tables import (
    STAR_COLUMNS,
    _meta,
    _pm,
    _tex_escape,
    _tex_unit,
    format_asymmetric,
    format_value_error,
)

__all__ = ["posterior_summary", "posterior_shared_table", "posterior_stars_table",
           "latex_posterior", "EFFECT_COLUMNS", "effects_table", "latex_effects",
           "extended_table", "latex_extended", "write_extra_tables"]


# ------------------------------------------------------------------ posterior
def posterior_summary(posterior, label):
    """(value, lower, upper, sigma, unit) of ``label``: median, 16th and 84th percentiles.

    Angles (node, peri_arg) are shifted by a whole number of turns so that
    the median lies in [0, 360) deg; lower and upper move with it.
    """
    q = posterior.quantity(label)
    shift = 0.0
    if label.split(":")[-1] in ("node", "peri_arg"):
        shift = float(np.mod(q.value, 360.0) - q.value)
    return q.value + shift, q.lower + shift, q.upper + shift, q.sigma, q.unit


def posterior_shared_table(result, posterior):
    """Shared parameters, one row each: posterior median, percentiles and least squares.

    Units vary by row, so they are given in the string column ``unit``.
    """
    names = [n for n in result.model.layout.shared_names if n in posterior.labels]
    rows = [posterior_summary(posterior, n) for n in names]
    t = Table()
    t["parameter"] = names
    t["unit"] = [r[4] for r in rows]
    t["median"] = [r[0] for r in rows]
    t["p16"] = [r[1] for r in rows]
    t["p84"] = [r[2] for r in rows]
    t["err_minus"] = [r[0] - r[1] for r in rows]
    t["err_plus"] = [r[2] - r[0] for r in rows]
    t["least_squares"] = [result.value(n) for n in names]
    t["least_squares_err"] = [result.sigma(n) for n in names]
    t.meta.update(_meta(result, "Shared parameters: posterior median and 16th/84th percentiles"))
    t.meta["posterior"] = posterior.statement
    return t


def posterior_stars_table(result, posterior):
    """Per-star quantities, one row per star: posterior median with its percentile errors."""
    stars = list(result.stars)
    t = Table()
    t["star"] = stars
    for q, unit, _ in STAR_COLUMNS:
        rows = [posterior_summary(posterior, f"{s}:{q}") for s in stars]
        t[q] = [r[0] for r in rows] * u.Unit(unit)
        t[f"{q}_minus"] = [r[0] - r[1] for r in rows] * u.Unit(unit)
        t[f"{q}_plus"] = [r[2] - r[0] for r in rows] * u.Unit(unit)
    t.meta.update(_meta(result, "Per-star elements: posterior median, errors to the 16th/84th "
                                "percentiles"))
    t.meta["posterior"] = posterior.statement
    return t


def _apm(value, lower, upper):
    return f"${format_asymmetric(value, value - lower, upper - value, 'latex')}$"


def latex_posterior(result, posterior):
    """Shared and per-star posterior medians with asymmetric errors (booktabs LaTeX)."""
    shared = [n for n in result.model.layout.shared_names if n in posterior.labels]
    rows = []
    for name in shared:
        v, lo, hi, _, unit = posterior_summary(posterior, name)
        spec = SHARED.get(name)
        sym = f"${spec.latex}$" if spec and spec.latex else _tex_escape(name)
        rows.append(f"{sym} & {_apm(v, lo, hi)} & {_tex_unit(unit)} \\\\")
    for s in result.stars:
        rows.append(r"\midrule")
        for q, unit, sym in STAR_COLUMNS:
            v, lo, hi, _, _ = posterior_summary(posterior, f"{s}:{q}")
            rows.append(f"{_tex_escape(s)}: ${sym}$ & {_apm(v, lo, hi)} & {_tex_unit(unit)} \\\\")
    head = "converged" if posterior.converged else "NOT converged: see the report"
    return "\n".join([
        "% deepwell " + __version__ + ": posterior summary; requires \\usepackage{booktabs}",
        r"\begin{table}", r"\centering",
        r"\caption{Posterior medians with errors to the 16th and 84th percentiles (sampling "
        f"{_tex_escape(head)}).}}",
        r"\label{tab:deepwell-posterior}", r"\begin{tabular}{lcl}", r"\toprule",
        r"Quantity & Value & Unit \\", r"\midrule", *rows, r"\bottomrule", r"\end{tabular}",
        r"\end{table}", ""])


# ------------------------------------------------------------------ effects
#: Effect-size columns: (key of star_effect_sizes, column name, unit).
EFFECT_COLUMNS = (
    ("redshift_excess_kms", "redshift_excess", "km / s"),
    ("redshift_first_order_kms", "redshift_first_order", "km / s"),
    ("precession_arcmin", "precession", "arcmin"),
    ("precession_mas", "precession_sky", "mas"),
    ("romer_range_days", "romer_range", "d"),
    ("romer_rv_kms", "romer_rv", "km / s"),
    ("romer_sky_mas", "romer_sky", "mas"),
    ("min_position_error_mas", "min_position_error", "mas"),
    ("median_velocity_error_kms", "median_velocity_error", "km / s"),
    ("integrated_period", "integrated_period", "yr"),
    ("pericentre_observed", "pericentre_observed", "yr"),
)


def _nan(x):
    return float("nan") if x is None else float(x)


def effects_table(result, sizes):
    """Per-star effect sizes (see deepwell.results.effect_sizes.star_effect_sizes) with units."""
    stars = list(result.stars)
    t = Table()
    t["star"] = stars
    t["integrated"] = [bool(sizes[s]["integrated"]) for s in stars]
    for key, name, unit in EFFECT_COLUMNS:
        t[name] = [_nan(sizes[s][key]) for s in stars] * u.Unit(unit)
    t["osculating_epoch"] = [_nan(sizes[s]["osculating_epoch"]) for s in stars] * u.yr
    t["period_fit"] = [result.value(f"{s}:period") for s in stars] * u.yr
    t["t_peri_fit"] = [result.value(f"{s}:t_peri") for s in stars] * u.yr
    for flag in ("redshift", "precession", "romer"):
        t[f"dchi2_{flag}"] = [float(sizes[s][f"dchi2_{flag}"]) for s in stars]
        t[f"dchi2_{flag}"].description = ("expected chi-square difference with and without "
                                          "the effect, elements refitted (linearised)")
    for flag in ("redshift", "precession", "romer"):
        t[f"detectable_{flag}"] = [bool(sizes[s][f"detectable_{flag}"]) for s in stars]
    t["osculating_epoch"].description = "epoch where the fitted elements hold (nan: Keplerian)"
    t.meta.update(_meta(result, "Sizes of the relativistic effects at the fitted orbits"))

    t.meta["detectable_rule"] = DETECTABLE_RULE
    t.meta["effects_modelled"] = result.model.effects.describe()
    return t


def latex_effects(result, sizes):
    """Effect sizes per star as a booktabs LaTeX table."""
    yes = lambda b: "yes" if b else "no"  # noqa: E731
    rows = []
    for s in result.stars:
        d = sizes[s]
        rows.append(" & ".join([
            _tex_escape(s), f"{d['redshift_excess_kms']:.3g}", f"{d['precession_arcmin']:.3g}",
            f"{d['precession_mas']:.3g}", f"{d['romer_range_days']:.3g}",
            f"{d['min_position_error_mas']:.2g}", f"{d['median_velocity_error_kms']:.2g}",
            yes(d["detectable_redshift"]), yes(d["detectable_precession"]),
            yes(d["detectable_romer"])]) + r" \\")
    return "\n".join([
        "% deepwell " + __version__ + ": effect sizes; requires \\usepackage{booktabs}",
        r"\begin{table*}", r"\centering", r"\small",
        r"\caption{Relativistic effects at the fitted orbits: redshift excess at pericentre, "
        r"pericentre advance per orbit (angle and sky shift), peak-to-peak R\o mer delay, and "
        r"the star's smallest position and median velocity error. An effect counts as "
        r"detectable when the expected $\Delta\chi^2$ between the models with and without it, "
        r"at the star's epochs and errors with the fit's parameters refitted (linearised), "
        r"is at least " + f"{DETECTABLE_DCHI2:g}" + r".}",
        r"\label{tab:deepwell-effects}", r"\begin{tabular}{lccccccccc}", r"\toprule",
        r"Star & $\Delta v_\mathrm{z}$ & $\Delta\omega$ & sky shift & R\o mer & "
        r"$\sigma_\mathrm{pos}$ & $\sigma_v$ & \multicolumn{3}{c}{detectable} \\",
        r" & (km\,s$^{-1}$) & (arcmin) & (mas) & (d) & (mas) & (km\,s$^{-1}$) & z & prec. & "
        r"R\o mer \\", r"\midrule", *rows, r"\bottomrule", r"\end{tabular}",
        r"\end{table*}", ""])


# ------------------------------------------------------------------ extended mass
def extended_table(limits):
    """Plummer-mass limits (deepwell.results.effect_sizes.extended_mass_limits) with units."""
    t = Table()
    t["scale_radius"] = [r["scale_radius_au"] for r in limits] * u.au
    t["reference_radius"] = [r["reference_radius_au"] for r in limits] * u.au
    t["ext_fraction"] = [r["ext_fraction"] for r in limits]
    t["ext_fraction_err"] = [r["ext_fraction_sigma"] for r in limits]
    t["ext_mass"] = [r["ext_mass_msun"] for r in limits] * u.solMass
    t["ext_mass_err"] = [r["ext_mass_sigma_msun"] for r in limits] * u.solMass
    for lev in ("95", "997"):
        t[f"upper_{lev}"] = [r[f"upper_{lev}_msun"] for r in limits] * u.solMass
        t[f"upper_{lev}_fraction"] = [r[f"upper_{lev}_fraction"] for r in limits]
    t["detected"] = [bool(r["detected"]) for r in limits]
    t.meta.update({"title": "Upper limits on an extended mass (Plummer sphere)",
                   "software": f"deepwell {__version__}",
                   "profile": "Plummer sphere centred on the mass, scale radius held fixed; "
                              "other density profiles give other limits",
                   "method": limits[0]["method"] if limits else ""})
    return t


def latex_extended(limits):
    """Plummer-mass limits as a booktabs LaTeX table."""
    rows = [f"{r['scale_radius_au']:.4g} & {r['reference_radius_au']:.4g} & "
            f"{_pm(r['ext_mass_msun'], r['ext_mass_sigma_msun'])} & "
            f"${format_value_error(r['upper_95_msun'], float('nan'), 'latex')}$ & "
            f"${format_value_error(r['upper_997_msun'], float('nan'), 'latex')}$ & "
            f"{r['upper_95_fraction']:.3g} & {r['upper_997_fraction']:.3g} & "
            f"{'yes' if r['detected'] else 'no'} \\\\" for r in limits]
    return "\n".join([
        "% deepwell " + __version__ + ": extended-mass limits; requires \\usepackage{booktabs}",
        r"\begin{table}", r"\centering", r"\small",
        r"\caption{Extended mass inside the reference radius, assuming a Plummer sphere of "
        r"fixed scale radius $b$ centred on the mass: least-squares value and upper limits "
        r"(flat prior on $M_\mathrm{ext} \geq 0$); fractions are of the central mass.}",
        r"\label{tab:deepwell-extended}", r"\begin{tabular}{cccccccc}", r"\toprule",
        r"$b$ & $r_\mathrm{ref}$ & $M_\mathrm{ext}$ & 95\% & 99.7\% & 95\% & 99.7\% & "
        r"detected \\",
        r"(au) & (au) & ($M_\odot$) & ($M_\odot$) & ($M_\odot$) & (frac.) & (frac.) & \\",
        r"\midrule", *rows, r"\bottomrule", r"\end{tabular}", r"\end{table}", ""])


def write_extra_tables(result, folder, sizes=None, limits=None, posterior=None, profile=None):
    """Write the tables of the newer analyses that apply; return the paths.

    effects.ecsv/.tex (``sizes``), extended_mass.ecsv/.tex (``limits``),
    enclosed_mass.ecsv (``profile``), posterior_shared.ecsv, posterior_stars.ecsv and
    posterior.tex (``posterior``).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = []

    def ecsv(table, name):
        table.write(folder / name, format="ascii.ecsv", overwrite=True)
        out.append(folder / name)

    def tex(text, name):
        (folder / name).write_text(text, encoding="utf-8")
        out.append(folder / name)

    if sizes is not None:
        ecsv(effects_table(result, sizes), "effects.ecsv")
        tex(latex_effects(result, sizes), "effects.tex")
    if limits:
        ecsv(extended_table(limits), "extended_mass.ecsv")
        tex(latex_extended(limits), "extended_mass.tex")
    if profile is not None:

        ecsv(profile_table(profile), "enclosed_mass.ecsv")
    if posterior is not None:
        ecsv(posterior_shared_table(result, posterior), "posterior_shared.ecsv")
        ecsv(posterior_stars_table(result, posterior), "posterior_stars.ecsv")
        tex(latex_posterior(result, posterior), "posterior.tex")
    return out
