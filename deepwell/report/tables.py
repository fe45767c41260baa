"""Tables of a fit (ECSV with units, LaTeX for a paper) and the value ± error formatter.

Part of the report layer (:mod:`deepwell.report`). ECSV tables are written with
astropy and carry units in their column headers; the LaTeX tables use booktabs
rules and round every value to its error's two significant digits (common
practice).
"""

import math
import re
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

from deepwell.core.units import UNITS
from deepwell.core.version import __version__

__all__ = ["format_value_error", "format_asymmetric", "star_numbers", "shared_table",
           "stars_table", "latex_shared", "latex_stars", "latex_star_numbers", "write_tables",
           "STAR_COLUMNS", "OSCULATING_STATEMENT"]

#: Per-star columns with an error, in table order: (name, unit, LaTeX symbol).
STAR_COLUMNS = (
    ("period", "yr", "P"), ("a", "mas", "a"), ("e", "", "e"), ("inc", "deg", "i"),
    ("node", "deg", r"\Omega"), ("peri_arg", "deg", r"\omega"),
    ("t_peri", "yr", r"t_\mathrm{p}"), ("r_peri", "AU", r"r_\mathrm{p}"),
)
#: LaTeX forms of the astropy unit strings used in the tables.
_TEX_UNITS = {"solMass": r"$M_\odot$", "pc": "pc", "mas": "mas", "mas / yr": r"mas\,yr$^{-1}$",
              "km / s": r"km\,s$^{-1}$", "deg": "deg", "yr": "yr", "AU": "au", "": ""}


# ------------------------------------------------------------------ formatting
def format_value_error(value, error, style="latex", digits=2):
    """Value and error rounded to the error's ``digits`` significant digits.

    Parameters
    ----------
    value, error : float
        The number and its 1-sigma error (same unit).
    style : {"latex", "text"}
        ``"latex"`` gives ``(3.215 \\pm 0.048) \\times 10^{6}`` (math mode, no
        dollars); ``"text"`` gives ``(3.215 ± 0.048) × 10^6``.
    digits : int
        Significant digits of the error (2: common practice).

    Returns
    -------
    str
        A power of ten is factored out when the larger of |value| and error is
        >= 1e5 or < 1e-3. Without a usable error (zero, negative, not finite)
        the value alone is given with 6 significant digits.
    """
    pm, times = (r" \pm ", r" \times ") if style == "latex" else (" ± ", " × ")
    if not math.isfinite(value):
        return "nan"
    if not (math.isfinite(error) and error > 0):
        text = f"{value:.6g}"
        if "e" in text:
            mant, exp = text.split("e")
            text = f"{mant}{times}" + (f"10^{{{int(exp)}}}" if style == "latex"
                                       else f"10^{int(exp)}")
        return text
    e_err = math.floor(math.log10(error))
    dec = digits - 1 - e_err
    err_r = round(error, dec)
    if err_r >= 10.0 ** (e_err + 1):  # e.g. 0.0996 -> 0.10, one digit further left
        dec -= 1
        err_r = round(error, dec)
    val_r = round(value, dec)
    mag = math.floor(math.log10(max(abs(val_r), err_r)))
    if -3 <= mag < 5:
        d = max(dec, 0)
        return f"{val_r:.{d}f}{pm}{err_r:.{d}f}"
    d = max(dec + mag, 0)
    scale = 10.0 ** mag
    exp = f"10^{{{mag}}}" if style == "latex" else f"10^{mag}"
    return f"({val_r / scale:.{d}f}{pm}{err_r / scale:.{d}f}){times}{exp}"


def format_asymmetric(value, minus, plus, style="latex", digits=2):
    """Value with separate lower and upper errors, rounded to the smaller error.

    ``"latex"`` gives ``3.215^{+0.052}_{-0.048}`` (math mode, no dollars),
    ``"text"`` gives ``3.215 +0.052/-0.048``; a power of ten is factored out
    as in :func:`format_value_error`.
    """
    small = min(e for e in (minus, plus) if math.isfinite(e) and e > 0) \
        if any(math.isfinite(e) and e > 0 for e in (minus, plus)) else float("nan")
    if not math.isfinite(small) or not math.isfinite(value):
        return format_value_error(value, float("nan"), style, digits)
    e_err = math.floor(math.log10(small))
    dec = digits - 1 - e_err
    if round(small, dec) >= 10.0 ** (e_err + 1):
        dec -= 1
    v, lo, hi = round(value, dec), round(minus, dec), round(plus, dec)
    mag = math.floor(math.log10(max(abs(v), hi, lo)))
    scale, d = 1.0, max(dec, 0)
    if not -3 <= mag < 5:
        scale, d = 10.0 ** mag, max(dec + mag, 0)
    body = (f"{v / scale:.{d}f}^{{+{hi / scale:.{d}f}}}_{{-{lo / scale:.{d}f}}}"
            if style == "latex" else f"{v / scale:.{d}f} +{hi / scale:.{d}f}/-{lo / scale:.{d}f}")
    if scale == 1.0:
        return body
    exp = f"10^{{{mag}}}" if style == "latex" else f"10^{mag}"
    return (f"{body}" + r" \times " + exp) if style == "latex" else f"({body}) × {exp}"


# -------------------------------------------------------------- derived numbers
def _delta_sigma(result, grad):
    """1-sigma of a derived number from its gradient {label: d f / d label}."""
    idx = [result.labels.index(k) for k in grad]
    g = np.array(list(grad.values()), dtype=float)
    var = g @ result.cov[np.ix_(idx, idx)] @ g
    return float(np.sqrt(max(var, 0.0)))


def star_numbers(result, star):
    """Derived numbers of one star with their errors (delta method on result.cov).

    Returns
    -------
    dict
        ``star_summary`` entries plus ``r_peri_rs_err`` and ``v_peri_kms_err``.

    Notes
    -----
    r_p / R_s with R_s = 2 G M / c^2; v_p^2 = G M (1 + e) / (a (1 - e)) with
    a[au] = a[mas] 1e-3 R0[pc], so d ln v_p = (d ln M - d ln a - d ln R0) / 2
    + d e / (1 - e^2).
    """
    out = dict(result.star_summary(star))
    mass, dist = result.value("mass"), result.value("distance")
    r_p, a, e = (result.value(f"{star}:{q}") for q in ("r_peri", "a", "e"))
    out["r_peri_rs_err"] = out["r_peri_rs"] * _delta_sigma(
        result, {f"{star}:r_peri": 1.0 / r_p, "mass": -1.0 / mass})
    v_p = out["v_peri_kms"]
    out["v_peri_kms_err"] = v_p * _delta_sigma(result, {
        "mass": 0.5 / mass, "distance": -0.5 / dist, f"{star}:a": -0.5 / a,
        f"{star}:e": 1.0 / (1.0 - e * e)})
    return out


# ------------------------------------------------------------------ tables
def _unit(name):
    return u.Unit(UNITS.get(name, ""))


def shared_table(result):
    """One-row astropy Table of the shared parameters, their errors and fit statistics."""
    t = Table()
    for name in result.model.layout.shared_names:
        t[name] = [result.value(name)] * _unit(name)
        t[f"{name}_err"] = [result.sigma(name)] * _unit(name)
    t["mass_distance_correlation"] = [result.mass_distance_correlation]
    t["mass_distance_exponent"] = [result.mass_distance_exponent]
    t["chi2"] = [result.chi2]
    t["dof"] = [result.dof]
    t["reduced_chi2"] = [result.reduced_chi2]
    t["reference_epoch"] = [result.model.reference_epoch] * u.yr
    t.meta.update(_meta(result, "Shared parameters of the joint fit"))
    return t


OSCULATING_STATEMENT = ("for integrated stars the elements are osculating Keplerian elements "
                        "at each star's apocentre epoch t_peri + P/2")
#: Marker of integrated (osculating-element) stars in the LaTeX table.
OSCULATING_MARK = r"$^\dagger$"


def stars_table(result, numbers=None, sizes=None):
    """Astropy Table, one row per star: elements ± errors and derived numbers.

    ``sizes`` (effect sizes per star, :func:`deepwell.results.effect_sizes.star_effect_sizes`)
    adds ``t_peri_observed``, the epoch of the observed pericentre passage; the
    ``integrated`` column and the metadata say whose elements are osculating.
    """
    numbers = numbers or {s: star_numbers(result, s) for s in result.stars}
    stars = list(result.stars)
    t = Table()
    t["star"] = stars
    t["integrated"] = [bool(i) for i in result.model.integrated]
    for q, unit, _ in STAR_COLUMNS:
        t[q] = [result.value(f"{s}:{q}") for s in stars] * u.Unit(unit)
        t[f"{q}_err"] = [result.sigma(f"{s}:{q}") for s in stars] * u.Unit(unit)
    col = lambda key: [numbers[s][key] for s in stars]  # noqa: E731
    t["r_peri_rs"] = col("r_peri_rs")
    t["r_peri_rs_err"] = col("r_peri_rs_err")
    t["v_peri"] = col("v_peri_kms") * (u.km / u.s)
    t["v_peri_err"] = col("v_peri_kms_err") * (u.km / u.s)
    t["coverage"] = col("coverage")
    t["n_positions"] = col("n_positions")
    t["n_velocities"] = col("n_velocities")
    t["reduced_chi2"] = col("reduced_chi2")
    if sizes is not None:
        t["t_peri_observed"] = [float(sizes[s]["pericentre_observed"]) for s in stars] * u.yr
        t["t_peri_observed"].description = (
            "epoch of the observed (light-travel-delayed) pericentre passage nearest t_peri")
    t["integrated"].description = ("orbit integrated (1PN/extended mass): its elements are "
                                   "osculating at the apocentre epoch t_peri + P/2")
    t["t_peri"].description = ("epoch of pericentre of the (osculating, where integrated) "
                               "Keplerian ellipse")
    descr = {"r_peri_rs": "pericentre distance in Schwarzschild radii of the mass",
             "v_peri": "speed at pericentre (vis-viva)",
             "coverage": "fraction of the orbit (in mean anomaly) spanned by position epochs",
             "reduced_chi2": "chi-square / (data - 6) of this star"}
    for name, text in descr.items():
        t[name].description = text
    t.meta.update(_meta(result, "Per-star orbital elements and derived numbers"))
    if result.model.integrated.any():
        t.meta["elements"] = (OSCULATING_STATEMENT + " (stars with integrated = True); their "
                              "t_peri is not the observed pericentre epoch (t_peri_observed)")
    return t


def _meta(result, title):
    return {"title": title, "software": f"deepwell {__version__}",
            "reference_epoch_jyr": float(result.model.reference_epoch),
            "errors": "1 sigma from the stated data errors, not rescaled by the reduced "
                      "chi-square",
            "angles": "node and argument of pericentre wrapped to [0, 360) deg"}


# ------------------------------------------------------------------ LaTeX
_TEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
                "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
                "^": r"\textasciicircum{}", "<": r"\textless{}", ">": r"\textgreater{}",
                "|": r"\textbar{}"}


#: Characters that would start markdown markup (or break a table) inside a name.
_MD_SPECIAL = set("\\`*_[]<>|#!~")


def md_text(text):
    """``text`` with markdown markup characters escaped (names in report.md, plan.md).

    Control characters are refused where names are read
    (:mod:`deepwell.tables.observations`); any left are shown as ``\\uXXXX`` escapes so
    that no line break can reach the markdown.
    """
    out = []
    for c in str(text):
        if c in _MD_SPECIAL:
            out.append("\\" + c)
        elif ord(c) < 32 or 127 <= ord(c) < 160 or c in "\u2028\u2029":
            out.append(f"\\u{ord(c):04x}")
        else:
            out.append(c)
    return "".join(out)


def _tex_escape(text):
    """``text`` safe inside LaTeX: specials escaped, control characters made spaces."""
    return "".join(_TEX_SPECIAL.get(c, " " if ord(c) < 32 or 127 <= ord(c) < 160 else c)
                   for c in str(text))


def _pm(value, error):
    return f"${format_value_error(value, error, 'latex')}$"


def _tex_unit(unit):
    return _TEX_UNITS.get(unit, _tex_escape(unit))


def latex_shared(result):
    """The shared parameters as a booktabs LaTeX table (needs \\usepackage{booktabs})."""
    rows = []
    lay = result.model.layout
    for name in lay.shared_names:
        spec = lay.spec(name)
        descr = spec.description or name
        sym = f"${spec.latex}$" if spec.latex else _tex_escape(name)
        if result.free[lay.index(name)]:
            value = _pm(result.value(name), result.sigma(name))
        else:
            value = f"${result.value(name):.6g}$ (fixed)"
        rows.append(f"{_tex_escape(descr[:1].upper() + descr[1:])} & {sym} & {value} & "
                    f"{_tex_unit(spec.unit)} \\\\")
    rows += [r"\midrule",
             f"Correlation of mass and distance & $\\rho$ & "
             f"${result.mass_distance_correlation:.3f}$ & \\\\",
             f"Exponent in $M \\propto R_0^{{\\alpha}}$ & $\\alpha$ & "
             f"${result.mass_distance_exponent:.2f}$ & \\\\",
             f"$\\chi^2$ / degrees of freedom & & ${result.chi2:.1f} / {result.dof}$ & \\\\"]
    return "\n".join([
        "% deepwell " + __version__ + ": shared parameters; requires \\usepackage{booktabs}",
        r"\begin{table}", r"\centering",
        r"\caption{Shared parameters of the joint orbit fit. Uncertainties are $1\sigma$ from "
        r"the stated data errors, not rescaled by the reduced $\chi^2$. Reference epoch of "
        f"$x_0, y_0$: {result.model.reference_epoch:.1f}.}}",
        r"\label{tab:deepwell-shared}",
        r"\begin{tabular}{llcl}", r"\toprule",
        r"Parameter & Symbol & Value & Unit \\", r"\midrule", *rows,
        r"\bottomrule", r"\end{tabular}", r"\end{table}", ""])


def _star_order(result):
    """Stars in natural name order (br-2 before br-10), for the tables."""
    return sorted(result.stars, key=lambda name: [int(t) if t.isdigit() else t.lower()
                                                  for t in re.split(r"(\d+)", str(name))])


def _latex_table(head, units, rows, caption, label):
    ncol = len(head)
    return [r"\begin{table*}", r"\centering", r"\small", r"\caption{" + caption + "}",
            r"\label{" + label + "}", r"\begin{tabular}{l" + "c" * (ncol - 1) + "}", r"\toprule",
            " & ".join(head) + r" \\", " & ".join(units) + r" \\", r"\midrule", *rows,
            r"\bottomrule", r"\end{tabular}", r"\end{table*}"]


def _star_name(result, s):
    k = result.stars.index(s)
    return _tex_escape(s) + (OSCULATING_MARK if result.model.integrated[k] else "")


_ERRORS_NOTE = (r"Uncertainties are $1\sigma$ from the stated data errors, not rescaled by the "
                r"reduced $\chi^2$.")


def latex_stars(result, numbers=None):
    """Per-star orbital elements as a booktabs LaTeX table (8 columns, stars by name)."""
    cols = [c for c in STAR_COLUMNS if c[0] != "r_peri"]
    head = ["Star"] + [f"${sym}$" for _, _, sym in cols]
    units = [""] + [f"({_tex_unit(unit)})" if unit else "" for _, unit, _ in cols]
    rows = [" & ".join([_star_name(result, s)]
                       + [_pm(result.value(f"{s}:{q}"), result.sigma(f"{s}:{q}"))
                          for q, _, _ in cols]) + r" \\" for s in _star_order(result)]
    caption = (r"Orbital elements of the stars around the central mass: period $P$, angular "
               r"semi-major axis $a$, eccentricity $e$, inclination $i$, position angle of the "
               r"ascending node $\Omega$, argument of pericentre $\omega$ (both in $[0, 360)$ "
               r"deg), epoch of pericentre $t_\mathrm{p}$ (Julian year, TT). " + _ERRORS_NOTE
               + (r" $^\dagger$: orbit integrated with the 1PN equation of motion; its elements "
                  r"are osculating Keplerian elements at the apocentre epoch "
                  r"$t_\mathrm{p} + P/2$, so $t_\mathrm{p}$ is not the epoch of the observed "
                  r"pericentre passage." if result.model.integrated.any() else ""))
    return "\n".join(["% deepwell " + __version__ + ": per-star orbital elements; requires "
                      "\\usepackage{booktabs}",
                      *_latex_table(head, units, rows, caption, "tab:deepwell-stars"), ""])


def latex_star_numbers(result, numbers=None):
    """Per-star derived numbers (pericentre, speed, coverage, fit) as a booktabs LaTeX table."""
    numbers = numbers or {s: star_numbers(result, s) for s in result.stars}
    head = ["Star", r"$r_\mathrm{p}$", r"$r_\mathrm{p}/R_\mathrm{s}$", r"$v_\mathrm{p}$",
            "Cov.", r"$N_\mathrm{pos}$", r"$N_{v}$", r"$\chi^2_\nu$"]
    units = ["", "(au)", "", r"(km\,s$^{-1}$)", "", "", "", ""]
    rows = []
    for s in _star_order(result):
        n = numbers[s]
        rows.append(" & ".join([
            _star_name(result, s), _pm(result.value(f"{s}:r_peri"), result.sigma(f"{s}:r_peri")),
            _pm(n["r_peri_rs"], n["r_peri_rs_err"]), _pm(n["v_peri_kms"], n["v_peri_kms_err"]),
            f"{n['coverage']:.2f}", str(n["n_positions"]), str(n["n_velocities"]),
            f"{n['reduced_chi2']:.2f}"]) + r" \\")
    caption = (r"Derived numbers of the stars: pericentre distance $r_\mathrm{p}$, in "
               r"Schwarzschild radii $R_\mathrm{s}$ of the central mass, speed at pericentre "
               r"$v_\mathrm{p}$ (vis-viva), fraction of the orbit covered by position epochs "
               r"(Cov.), numbers of position and radial-velocity epochs, and the reduced "
               r"$\chi^2$ of each star. " + _ERRORS_NOTE
               + (r" $^\dagger$: integrated orbit (see the elements table)."
                  if result.model.integrated.any() else ""))
    return "\n".join(["% deepwell " + __version__ + ": per-star derived numbers; requires "
                      "\\usepackage{booktabs}",
                      *_latex_table(head, units, rows, caption, "tab:deepwell-star-numbers"),
                      ""])


def write_tables(result, folder, numbers=None, sizes=None):
    """Write shared.ecsv/.tex and stars.ecsv/.tex into ``folder``; return the paths.

    ``sizes``: effect sizes per star, for the observed pericentre epochs.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    numbers = numbers or {s: star_numbers(result, s) for s in result.stars}
    paths = [folder / n for n in ("shared.ecsv", "shared.tex", "stars.ecsv", "stars.tex",
                                  "star_numbers.tex")]
    shared_table(result).write(paths[0], format="ascii.ecsv", overwrite=True)
    paths[1].write_text(latex_shared(result), encoding="utf-8")
    stars_table(result, numbers, sizes).write(paths[2], format="ascii.ecsv", overwrite=True)
    paths[3].write_text(latex_stars(result, numbers), encoding="utf-8")
    paths[4].write_text(latex_star_numbers(result, numbers), encoding="utf-8")
    return paths

