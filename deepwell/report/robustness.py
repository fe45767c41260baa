"""The data-set, outlier and jackknife parts of the report.

Small functions over the analyses of a finished fit
(:class:`deepwell.results.analysis.Analyses`) that return JSON-ready dicts,
write ECSV tables and markdown; drawing is in :mod:`deepwell.report.figures.jackknife`.
"""

import math
from pathlib import Path

from astropy.table import Table

from deepwell.core.jsonsafe import json_safe
from deepwell.core.units import UNITS, unit_of
from deepwell.report.figures.jackknife import jackknife_caption, jackknife_figure

from .tables import md_text

__all__ = ["robustness_summary", "write_robustness_tables", "robustness_markdown",
           "robustness_figure_jobs"]



def robustness_summary(analyses):
    """Entries for summary.json: ``datasets``, ``outliers`` and ``jackknife``."""
    out = {"datasets": [{k: json_safe(v) for k, v in row.items()} for row in analyses.datasets],
           "outliers": [{k: json_safe(v) for k, v in row.items()} for row in analyses.outliers]}
    if analyses.jackknife:
        out["jackknife"] = [json_safe(jk.to_dict()) for jk in analyses.jackknife]
    return out


def _table(rows):
    keys = list(dict.fromkeys(k for r in rows for k in r))
    cols = {}
    for k in keys:
        vals = [r.get(k) for r in rows]
        if all(isinstance(v, (int, float)) or v is None for v in vals):
            vals = [float("nan") if v is None else v for v in vals]
        else:
            vals = ["" if v is None else str(v) for v in vals]
        cols[k] = vals
    t = Table(cols)
    for k in keys:
        unit = unit_of(k)
        if unit:
            t[k].unit = unit
    return t


def write_robustness_tables(analyses, folder):
    """``datasets.ecsv``, ``outliers.ecsv`` and ``jackknife_<by>.ecsv`` in ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    files = []
    rows = analyses.datasets
    if rows:
        _table(rows).write(folder / "datasets.ecsv", format="ascii.ecsv", overwrite=True)
        files.append(folder / "datasets.ecsv")
    rows = analyses.outliers
    if rows:
        _table(rows).write(folder / "outliers.ecsv", format="ascii.ecsv", overwrite=True)
        files.append(folder / "outliers.ecsv")
    for jk in analyses.jackknife:
        path = folder / f"jackknife_{jk.by}.ecsv"
        _table(jk.rows).write(path, format="ascii.ecsv", overwrite=True)
        files.append(path)
    return files


def robustness_figure_jobs(jackknife):
    """One jackknife figure job ``(stem, build, caption)`` per result, for
    :func:`deepwell.report.figures.gallery.write_figures` (``more``)."""
    return [(f"jackknife_{jk.by}", lambda jk=jk: jackknife_figure(jk), jackknife_caption(jk))
            for jk in jackknife]


def _fmt(v, err=None, digits=3):
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "–"
    if err is None:
        return f"{v:.{digits}g}"
    return f"{v:.{digits}g} ± {err:.2g}"


def robustness_markdown(analyses):
    """Markdown sections on the data sets, outlying points and the jackknife."""
    lines = ["## Data sets", ""]
    rows = analyses.datasets
    lines += ["| data set | kind | points | χ² (stated errors) | χ² (fitted errors) | reference "
              "| error term | offsets / zero-point |", "|---|---|---|---|---|---|---|---|"]
    for r in rows:
        term = "–"
        if "scale" in r:
            term = f"scale {_fmt(r['scale'], r.get('scale_err'))}"
        elif "jitter" in r:
            term = f"jitter {_fmt(r['jitter'], r.get('jitter_err'))}"
        offs = ", ".join(f"{k} = {_fmt(r[k], r.get(k + '_err'))} {UNITS[k]}"
                         for k in ("dx", "dy", "dvx", "dvy", "dvz") if k in r) or "–"
        lines.append(f"| {md_text(r['dataset'])} | {r['kind']} | {r['n_points']} | "
                     f"{r['chi2_stated']:.1f} / {r['n_numbers']} | {r['chi2']:.1f} | "
                     f"{'yes' if r['reference'] else ''} | {term} | {offs} |")
    lines.append("")
    lines.append("χ² is summed over the set's measured numbers (two per position). A set whose "
                 "χ² per number is far from 1 has errors that are mis-stated or a systematic "
                 "offset; fitting an error scale (`--error-model scale`) or offsets "
                 "(`--offsets`, `--zero-points`) addresses it.")
    small = [r for r in rows if "scale" in r and r["n_numbers"] < 200]
    if small:
        names = ", ".join(md_text(r["dataset"]) for r in small)
        lines.append("")
        lines.append(f"**Read the error scale of {names} as a lower limit.** A fitted error "
                     "scale is a maximum-likelihood value and is biased low by the share of the "
                     "set's numbers that the fitted parameters absorb; on fewer than 200 numbers "
                     "this matters (calibration with `deepwell calibrate`: 1.43 on average for "
                     "a true 1.5 on 64 numbers, with intervals that cover the truth too rarely).")
    lines += ["", "## Points far from the model", ""]
    out = analyses.outliers
    if not out:
        lines.append("No point lies more than 4σ from the model.")
    else:
        lines += ["| star | data set | file | line | epoch (yr) | largest residual (σ) "
                  "| outlier probability |", "|---|---|---|---|---|---|---|"]
        for r in out:
            p = r.get("p_outlier")
            lines.append(f"| {md_text(r['star'])} | {md_text(r['dataset'])} | "
                         f"{md_text(r['file'])} | {r['line']} | "
                         f"{r['epoch']:.4f} | {r['max_sigma']:.1f} | "
                         f"{'–' if p is None else f'{p:.2f}'} |")
        lines.append("")
        lines.append("Mark such rows `exclude = true` (or use the outlier-mixture likelihood, "
                     "`--outliers`) only with a reason; the table lists them, it does not judge.")
    for jk in analyses.jackknife:
        d = jk.to_dict()
        lines += ["", f"## Jackknife: leave one {jk.by} out", ""]
        lines.append("| left out | Δ mass (solMass) | Δ distance (pc) | note |")
        lines.append("|---|---|---|---|")
        for r in d["rows"]:
            name = r.get("left_out", r.get("unit", ""))
            lines.append(f"| {md_text(name)} | {_fmt(r.get('d_mass'))} | "
                         f"{_fmt(r.get('d_distance'))} | "
                         f"{r.get('note') or ''} |")
        js, ss = d["jackknife_sigma"], d["statistical_sigma"]
        lines.append("")
        lines.append(f"Jackknife error beside the statistical one: mass {_fmt(js.get('mass'))} "
                     f"vs {_fmt(ss.get('mass'))} solMass, distance {_fmt(js.get('distance'))} "
                     f"vs {_fmt(ss.get('distance'))} pc.")
        lines += [f"- {n}" for n in d["notes"]]
    return "\n".join(lines) + "\n"
