"""Writing a model comparison: the table (markdown, ECSV, LaTeX), the verdicts, a figure.

:func:`write_comparison` puts into a folder

* ``comparison.md``: the models table, one verdict per tested step, warnings;
* ``models.ecsv`` and ``models.tex``: one row per model (chi-square, dof,
  Delta chi-square against the simpler model and against the lowest, AIC,
  BIC, f, f_sp, extended-mass fraction, mass and distance with errors; a
  strength held fixed is marked, an effect off is NaN / "---");
* ``tests.ecsv``: one row per tested step (observed Delta chi-square, extra
  free parameters, asymptotic and bootstrap p, Gaussian equivalent, verdict);
* ``bootstrap.ecsv`` (with a bootstrap): every simulated Delta chi-square;
* ``comparison.pdf``/``.png`` (:mod:`deepwell.report.figures.comparison`).

Log-evidence columns appear only when a comparison carries evidences
(:func:`deepwell.results.comparison.with_evidence`).
"""

import math
from pathlib import Path

import matplotlib
from astropy.table import Table

from deepwell.core.parameters import EXTRA, SHARED
from deepwell.core.version import __version__
from deepwell.report.figures.comparison import comparison_caption, comparison_figure
from deepwell.report.figures.style import STYLE, save_figure

from .tables import _tex_escape, _tex_unit, format_value_error

__all__ = ["comparison_markdown", "models_table", "tests_table", "latex_models",
           "write_comparison"]

_NAN = float("nan")


def _cell(value, style):
    """A strength (value, sigma | None) or None as a table cell."""
    if value is None:
        return "---" if style == "latex" else "off"
    v, s = value
    if s is None:
        return f"${v:.4g}$ (fixed)" if style == "latex" else f"{v:.4g} (fixed)"
    text = format_value_error(v, s, style)
    return f"${text}$" if style == "latex" else text


def _num(x, fmt=".2f"):
    return "" if x is None or not math.isfinite(x) else f"{x:{fmt}}"


def _ln_bayes(comparison, row):
    if row.parent is None or row.log_evidence is None:
        return None
    parent = comparison.row(row.parent)
    return None if parent.log_evidence is None else row.log_evidence - parent.log_evidence


def _markdown_table(comparison):
    ev = comparison.has_evidence
    head = ["model", "chi2", "dof", "Δchi2 of its step", "chi2 − min", "AIC", "BIC", "f",
            "f_sp", "M_ext(<r_ref)/M", "mass (solMass)", "distance (pc)"]
    if ev:
        head += ["ln Z", "ln Z error", "ln B vs simpler", "evidence method"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for r in comparison.rows:
        cells = [r.label, _num(r.chi2), str(r.dof), _num(r.delta_parent), _num(r.delta_best),
                 _num(r.aic), _num(r.bic), _cell(r.f, "text"), _cell(r.f_sp, "text"),
                 _cell(r.ext, "text"), format_value_error(*r.mass, "text"),
                 format_value_error(*r.distance, "text")]
        if ev:
            cells += [_num(r.log_evidence), _num(r.log_evidence_err),
                      _num(_ln_bayes(comparison, r)), r.evidence_method or ""]
        lines.append("| " + " | ".join(c.replace("|", "\\|") for c in cells) + " |")
    return lines


def comparison_markdown(comparison, figure=None):
    """The text of ``comparison.md``."""
    boot = comparison.bootstrap
    lines = ["# Which physics do the data demand?", "",
             f"Every model is fitted to the same {comparison.n_data} data; each starts from "
             "the solution of the model it is compared with; its step's Delta chi2 is "
             "chi2(simpler) - chi2(richer) of that pair. chi2 excludes priors; "
             "AIC = chi2 + 2k and BIC = chi2 + k ln n (k free parameters, n data), up to a "
             "constant common to all rows; lower is better. A strength marked (fixed) is "
             "held, not fitted.", "", *_markdown_table(comparison), "", "## Verdicts", ""]
    lines += [f"- {t.verdict}" for t in comparison.tests]
    lines += ["", "## How significant is each step?", "",
              "A Delta chi-square between nested models follows chi-square(k) under the "
              "simpler model only when k free parameters are added and the errors are right "
              "(Wilks' theorem); a step that switches an effect on with its strength held "
              "adds none, so its Delta chi-square has no tabulated law."]
    if boot:
        lines += ["", f"Bootstrap: {boot['trials_per_test']} data sets per step, simulated "
                  f"from the simpler model's best fit at the observed epochs with "
                  f"{boot['errors']}; both models refitted to each; p = fraction with a Delta "
                  f"chi-square at least the observed one, with its exact 95% Clopper-Pearson "
                  f"interval (seed {boot['seed']}, {boot['elapsed_s']:.0f} s). With n data "
                  f"sets, p cannot be shown below about 3/n."]
        if boot.get("not_converged"):
            lines.append(f"{boot['not_converged']} refits stopped without convergence "
                         "(counted).")
    else:
        lines += ["", "**No bootstrap was run**: the p-values above are asymptotic at best, "
                  "and the steps without a free parameter have none (`--bootstrap N`)."]
    if comparison.has_evidence:
        lines += ["", "ln Z is the natural log of the evidence (the likelihood, normalised "
                  "as a density of the data, averaged over the prior); ln B vs simpler is "
                  "ln Z of the model minus ln Z of the model of its step (positive favours "
                  "the model). A Laplace evidence has no statistical error (its "
                  "approximation error is not estimated); a nested-sampling error is 1 sigma. "
                  "Evidences depend on the priors of every parameter, so they are stated "
                  "here:", ""]
        lines += [f"- {p}" for p in comparison.evidence_prior]
    if comparison.notes:
        lines += ["", "## Notes", ""] + [f"- {n}" for n in comparison.notes]
    if figure:
        lines += ["", f"![Delta chi-square per step against its bootstrap null]({figure})",
                  "", f"*Figure.* {comparison_caption(comparison)}"]
    return "\n".join(lines) + "\n"


def _split(value):
    if value is None:
        return _NAN, _NAN, False
    v, s = value
    return v, _NAN if s is None else s, s is None


def models_table(comparison):
    """One row per model as an astropy Table with units."""
    cols = {k: [] for k in ("key", "label", "parent", "chi2", "dof", "n_free", "delta_parent",
                            "delta_best", "aic", "bic")}
    extra = {}
    for r in comparison.rows:
        for k in cols:
            v = getattr(r, k)
            cols[k].append("" if v is None and k == "parent" else (_NAN if v is None else v))
        for name, val in (("f", r.f), ("f_sp", r.f_sp), ("ext_fraction", r.ext)):
            v, s, fixed = _split(val)
            extra.setdefault(name, []).append(v)
            extra.setdefault(f"{name}_err", []).append(s)
            extra.setdefault(f"{name}_fixed", []).append(fixed)
        for name, val in (("mass", r.mass), ("distance", r.distance)):
            extra.setdefault(name, []).append(val[0])
            extra.setdefault(f"{name}_err", []).append(val[1])
        extra.setdefault("converged", []).append(r.converged)
        if comparison.has_evidence:
            extra.setdefault("log_evidence", []).append(
                _NAN if r.log_evidence is None else r.log_evidence)
            extra.setdefault("log_evidence_err", []).append(
                _NAN if r.log_evidence_err is None else r.log_evidence_err)
            extra.setdefault("evidence_method", []).append(r.evidence_method or "")
    t = Table({**cols, **extra})
    for name in ("mass", "mass_err", "distance", "distance_err"):
        t[name].unit = SHARED[name.removesuffix("_err")].unit
    for name in ("f", "f_sp", "ext_fraction"):
        t[name].description = EXTRA[name].description + "; NaN: effect off"
        t[f"{name}_fixed"].description = "true: held at the value given, not fitted"
    t["delta_parent"].description = "chi2(simpler) - chi2(richer) of the model's step"
    t["delta_best"].description = "this chi2 minus the lowest chi2 of the table"
    t.meta.update({"n_data": comparison.n_data, "reference_radius_au": comparison.reference_radius,
                   "aic": "chi2 + 2 n_free", "bic": "chi2 + n_free ln n_data"})
    return t


def tests_table(comparison):
    """One row per tested step as an astropy Table."""
    rows = []
    for t in comparison.tests:
        lo, hi = t.p_interval or (_NAN, _NAN)
        rows.append({"model": t.key, "simpler": t.parent, "tests": t.tests, "delta": t.delta,
                     "extra_free": t.extra_free,
                     "asymptotic_p": _NAN if t.asymptotic_p is None else t.asymptotic_p,
                     "bootstrap_n": 0 if t.null_deltas is None else int(t.null_deltas.size),
                     "bootstrap_failed": t.n_failed,
                     "p": _NAN if t.p is None else t.p, "p_lo95": lo, "p_hi95": hi,
                     "z": _NAN if t.z is None else t.z,
                     "z_lower": _NAN if t.z_lower is None else t.z_lower,
                     "verdict": t.verdict})
    out = Table(rows=rows) if rows else Table()
    if rows:
        out["z"].description = "one-sided Gaussian equivalent of p"
        out["z_lower"].description = "lower bound on z when no simulated value reached delta"
    return out


def latex_models(comparison):
    """The models table as booktabs LaTeX (needs \\usepackage{booktabs})."""
    rows = []
    for r in comparison.rows:
        rows.append(" & ".join([
            _tex_escape(r.label), f"{r.chi2:.2f}", str(r.dof),
            "---" if r.delta_parent is None else f"{r.delta_parent:.2f}",
            f"{r.aic:.2f}", f"{r.bic:.2f}", _cell(r.f, "latex"), _cell(r.f_sp, "latex"),
            _cell(r.ext, "latex"), f"${format_value_error(*r.mass, 'latex')}$",
            f"${format_value_error(*r.distance, 'latex')}$"]) + r" \\")
    m, d = SHARED["mass"], SHARED["distance"]
    return "\n".join([
        "% deepwell " + __version__ + ": model comparison; requires \\usepackage{booktabs}",
        r"\begin{table*}", r"\centering", r"\small",
        r"\caption{Nested models fitted to the same data. $\Delta\chi^2$ is against the "
        r"simpler model of each step; AIC $= \chi^2 + 2k$, BIC $= \chi^2 + k\ln n$ up to a "
        r"common constant. Values marked (fixed) are held, not fitted; --- means the effect "
        r"is off.}",
        r"\label{tab:deepwell-models}", r"\begin{tabular}{lcccccccccc}", r"\toprule",
        r"Model & $\chi^2$ & $\nu$ & $\Delta\chi^2$ & AIC & BIC & $f$ & $f_\mathrm{SP}$ & "
        rf"${EXTRA['ext_fraction'].latex}$ & ${m.latex}$ & ${d.latex}$ \\",
        rf" & & & & & & & & & ({_tex_unit(m.unit)}) & ({_tex_unit(d.unit)}) \\",
        r"\midrule", *rows, r"\bottomrule", r"\end{tabular}", r"\end{table*}", ""])


def write_comparison(comparison, folder, figures=True):
    """Write the comparison files (module docstring) into ``folder``; return their paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = [folder / "models.ecsv", folder / "tests.ecsv", folder / "models.tex"]
    models_table(comparison).write(paths[0], format="ascii.ecsv", overwrite=True)
    tests_table(comparison).write(paths[1], format="ascii.ecsv", overwrite=True)
    paths[2].write_text(latex_models(comparison), encoding="utf-8")
    boot = [(t.key, d) for t in comparison.tests if t.null_deltas is not None
            for d in t.null_deltas]
    if boot:
        table = Table(rows=boot, names=("model", "delta"))
        table["delta"].description = "chi2(simpler) - chi2(model) of one simulated data set"
        table.meta.update(comparison.bootstrap or {})
        paths.append(folder / "bootstrap.ecsv")
        table.write(paths[-1], format="ascii.ecsv", overwrite=True)
    figure = None
    if figures and comparison.tests:
        with matplotlib.rc_context(STYLE):
            saved = save_figure(comparison_figure(comparison), folder, "comparison")
        paths += saved
        figure = next((p.name for p in map(Path, saved) if p.suffix == ".png"), None)
    paths.append(folder / "comparison.md")
    paths[-1].write_text(comparison_markdown(comparison, figure), encoding="utf-8")
    return paths

