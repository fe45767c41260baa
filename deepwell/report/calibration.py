"""Writing a calibration: tables, a plain-language statement and one figure.

:func:`write_calibration` puts into a folder

* ``calibration.ecsv``: one row per calibrated parameter (column ``group``:
  shared, data set, star) and one per pooled per-star element: usable
  trials, coverage of the 68% and 95% intervals with the 99.7% acceptance
  band of an honest interval and the 99.7% Clopper-Pearson interval of the
  measured coverage, the verdict, the mean bias (in the parameter's unit and
  in sigma, each with its standard error) and the scatter of the pulls;
* ``trials.ecsv``: one row per trial (status, message, chi-square, and per
  parameter the value, sigma and interval ends);
* ``calibration.md``: whether each parameter's intervals are honest, in words,
  by group, and the figure's caption (figures carry no title);
* ``calibration.png``: coverage against the bands per parameter (top) and
  the pull histograms against N(0, 1) (below; pulls beyond +-4.5 are drawn
  in the outermost bins), for every row but the per-star ones (the pooled
  rows stand for them).

The figure is drawn on a plain Agg :class:`~matplotlib.figure.Figure` inside
``rc_context(deepwell.report.figures.STYLE)``.
"""

import math
from pathlib import Path

import matplotlib
import numpy as np
from astropy.table import Table

from deepwell.report.figures.style import PALETTE, STYLE, new_figure, save_figure

__all__ = ["write_calibration", "calibration_figure", "calibration_markdown", "figure_caption",
           "pull_values"]

_TAGS = ("68", "95")


def _meta(result):
    return {"scenario": result.scenario, "intervals": result.mode, "seed": result.seed,
            "trials_run": result.n_trials, "trials_failed": result.n_failed,
            "trials_not_converged": result.n_not_converged,
            "band": "99.7% central range of Binomial(n, nominal), exact",
            "cp": "99.7% Clopper-Pearson interval of the measured coverage"}


def _tables(result):
    summary = Table.from_pandas(result.table)
    for col in ("truth", "bias", "bias_err"):
        summary[col].unit = None
        summary[col].description = "in the parameter's unit (column unit)"
    summary.add_column([result.units[n] for n in result.table.parameter], name="unit", index=1)
    summary["bias_sigma"].description = "mean of (value - truth) / sigma"
    summary["pull_scatter"].description = "standard deviation of (value - truth) / sigma"
    summary.meta.update(_meta(result))
    trials = Table.from_pandas(result.trials)
    trials.meta.update(_meta(result))
    trials.meta["truth"] = dict(result.truth)
    trials.meta["units"] = dict(result.units)
    return summary, trials


def _fmt(x, unit):
    return f"{x:.4g} {unit}".strip()


_GROUP_TITLES = {"shared": "Shared parameters", "data set": "Data-set terms",
                 "pooled": "Per-star elements, pooled over the stars",
                 "star": "Per-star elements, star by star"}


def _line(row, unit):
    counted = "star-trials" if getattr(row, "group", "") == "pooled" else "trials"
    return (f"- **{row.parameter}**: {row.statement}. Coverage "
            f"{row.coverage68:.3f} (band {row.band68_lo:.3f}-{row.band68_hi:.3f}) "
            f"and {row.coverage95:.3f} (band {row.band95_lo:.3f}-"
            f"{row.band95_hi:.3f}) over {row.trials} {counted}; mean bias "
            f"{row.bias_sigma:+.3f} +- {row.bias_sigma_err:.3f} sigma "
            f"({_fmt(row.bias, unit)}); pull scatter {row.pull_scatter:.3f}.")


def _group_notes(result, group):
    t = result.table
    if group == "data set":
        return ["True offsets and zero-points are the injected ones minus those of the fit's "
                "reference set, whose frame the shared x0, y0 and vz0 then take (their truth "
                "includes the reference set's injected offset and zero-point); the true error "
                "scale of a set is its injected error factor."]
    if group == "pooled":
        return ["Each pooled row counts every star's hits of one element together (star-trials "
                "= stars x trials), so it reaches a verdict with fewer trials than one star "
                "alone. It treats the stars as independent trials; they share the mass and "
                "distance, so their hits can be correlated and the true spread of a pooled "
                "count is then wider than its band: confirm a pooled flag star by star."]
    if group == "star":
        notes = ["Elements are compared like with like: a fitted t_peri may be another "
                 "pericentre passage than the stated one, and each element is compared with "
                 "the true elements of that passage (osculating at the passage's t_peri + P/2 "
                 "for integrated stars); node and peri_arg modulo 360 deg."]
        skipped = result.trials.message.fillna("").astype(str).str.contains(
            "not scored", regex=False)
        if skipped.any():
            notes.append(f"In {int(skipped.sum())} trials some stars' elements were not "
                         "scored (integrated in the simulation, Keplerian in the fit: their "
                         "elements are mean, not osculating, ones); see the messages in "
                         "trials.ecsv.")
        if (t.group == "star").sum() > 24:
            notes.append("With this many rows, a flag or two at one level is expected by "
                         "chance in honest calibrations.")
        return notes
    return []


def calibration_markdown(result, figure=True):
    """The plain-language statement of ``calibration.md`` (with the figure's caption)."""
    t = result.table
    groups = t.group if "group" in t else ["shared"] * len(t)
    lines = [f"# Calibration of {result.scenario}", "",
             f"{result.n_trials} simulated data sets (seed {result.seed}); "
             f"{result.mode} intervals; {result.elapsed:.0f} s.", ""]
    for group in ("shared", "data set", "pooled", "star"):
        rows = [r for r, g in zip(t.itertuples(), groups, strict=True) if g == group]
        if not rows:
            continue
        lines += [f"## {_GROUP_TITLES[group]}", ""]
        lines += [_line(r, result.units[r.parameter]) for r in rows]
        for note in _group_notes(result, group):
            lines += ["", note]
        lines.append("")
    lines += ["A coverage is honest when its count lies inside the central 99.7% range "
              "of Binomial(trials, nominal level); 'too narrow' means the intervals are "
              "over-confident. With many parameters and two levels, a single flag can "
              "appear by chance in a few per cent of honest calibrations; a flag at both "
              "levels, or a bias of several of its standard errors, is more telling."]
    if result.n_failed:
        lines += ["", f"**{result.n_failed} of {result.n_trials} trials failed** and are left "
                  "out of the counts (their errors are in trials.ecsv). The coverage above is "
                  "then that of the fits that succeeded, which can look better than the "
                  "method really is."]
    if result.n_not_converged:
        lines += ["", f"{result.n_not_converged} trials did not converge (optimiser or "
                  "sampler); they are included in the counts."]
    if result.n_trials < 100:
        lines += ["", f"Only {result.n_trials} trials: the bands are wide, so this check "
                  "catches only gross mis-calibration."]
    if figure:
        lines += ["", "## Figure", "", figure_caption(result)]
    return "\n".join(lines) + "\n"


def figure_caption(result):
    """Caption of ``calibration.png`` (the figure itself carries no title)."""
    shown = ", ".join(_plotted(result.table).parameter)
    return (f"**calibration.png**: {result.scenario}, coverage of the {result.mode} intervals "
            f"over {result.n_trials} trials (top: the fraction of trials whose interval "
            f"contains the truth) for {shown}. Circles (68%) and squares "
            "(95%) are the measured coverage with 99.7% Clopper-Pearson bars; the shaded "
            "boxes are the 99.7% acceptance bands of honest intervals and the dashed lines "
            "the nominal levels. Per-star rows are in the text and in calibration.ecsv only; "
            "the pooled rows ('all stars:ELEMENT') stand for them. Below, one panel per "
            "parameter: histogram of the pulls (value - truth) / sigma against the standard "
            "normal density (black line); pulls beyond +-4.5 are drawn in the outermost bins.")


def _plotted(table):
    """Rows drawn in the figure: all but the per-star ones."""
    if "group" not in table:
        return table
    keep = table[table.group != "star"]
    return keep if len(keep) else table


def pull_values(result, parameter):
    """Pulls (value - truth) / sigma of ``parameter`` over its usable trials.

    A pooled row's pulls are those of all its member stars together.
    """
    pulls = []
    for name in result.pools.get(parameter, [parameter]):
        v = result.trials[f"{name}_value"].to_numpy(float)
        s = result.trials[f"{name}_sigma"].to_numpy(float)
        ok = np.isfinite(v) & np.isfinite(s) & (s > 0)
        pulls.append((v[ok] - result.truth[name]) / s[ok])
    return np.concatenate(pulls) if pulls else np.zeros(0)


#: Pull panels per row of the figure.
PULL_COLUMNS = 7


def calibration_figure(result):
    """Coverage per parameter with bands (top) and pull histograms (below); no titles."""
    t = _plotted(result.table)
    n_par = len(t)
    n_cols = min(n_par, PULL_COLUMNS)
    n_rows = math.ceil(n_par / n_cols)
    fig = new_figure((max(6.5, 0.55 * n_par + 1.5, 1.2 * n_cols), 3.0 + 1.6 * n_rows))
    grid = fig.add_gridspec(1 + n_rows, n_cols, height_ratios=(1.6,) + (1.0,) * n_rows,
                            hspace=0.6, wspace=0.3, left=0.08, right=0.98, top=0.97,
                            bottom=0.08)
    ax = fig.add_subplot(grid[0, :])
    x = np.arange(n_par)
    for j, tag in enumerate(_TAGS):
        colour, dx = PALETTE[3 * j], (j - 0.5) * 0.22
        nominal = t[f"nominal{tag}"].iloc[0]
        ax.axhline(nominal, color=colour, lw=0.8, ls="--")
        for i, row in enumerate(t.itertuples()):
            lo, hi = getattr(row, f"band{tag}_lo"), getattr(row, f"band{tag}_hi")
            ax.fill_between([i + dx - 0.1, i + dx + 0.1], lo, hi, color=colour, alpha=0.25,
                            lw=0, label=f"honest {tag}% band" if i == 0 else None)
        cov = t[f"coverage{tag}"].to_numpy(float)
        err = np.array([cov - t[f"cp{tag}_lo"], t[f"cp{tag}_hi"] - cov])
        ax.errorbar(x + dx, cov, yerr=err, fmt="os"[j], color=colour, ms=4,
                    label=f"{tag}% interval coverage")
    ax.set_xticks(x, list(t.parameter), rotation=30 if n_par > 8 else 0,
                  ha="right" if n_par > 8 else "center")
    ax.set_ylabel("coverage (dimensionless)")
    ax.set_xlim(-0.6, n_par - 0.4)
    ax.legend(loc="lower right", ncol=2)
    grid_z = np.linspace(-4, 4, 161)
    for i, row in enumerate(t.itertuples()):
        axh = fig.add_subplot(grid[1 + i // n_cols, i % n_cols])
        pull = np.clip(pull_values(result, row.parameter), -4.5, 4.5)
        axh.hist(pull, bins=np.linspace(-4.5, 4.5, 19), density=True, color=PALETTE[1],
                 alpha=0.8)
        axh.plot(grid_z, np.exp(-0.5 * grid_z**2) / math.sqrt(2 * math.pi), color="k")
        axh.text(0.03, 0.97, row.parameter, transform=axh.transAxes, ha="left", va="top",
                 fontsize=7)
        if i // n_cols == n_rows - 1 or i + n_cols >= n_par:
            axh.set_xlabel("pull (dimensionless)")
        axh.set_xticks([-3, 0, 3])
        axh.set_yticks([])
    return fig


def write_calibration(result, folder, figures=True):
    """Write the calibration files (module docstring) into ``folder``; return their paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    summary, trials = _tables(result)
    paths = [folder / "calibration.ecsv", folder / "trials.ecsv", folder / "calibration.md"]
    summary.write(paths[0], format="ascii.ecsv", overwrite=True)
    trials.write(paths[1], format="ascii.ecsv", overwrite=True)
    paths[2].write_text(calibration_markdown(result, figure=figures), encoding="utf-8")
    if figures:
        with matplotlib.rc_context(STYLE):
            paths += save_figure(calibration_figure(result), folder, "calibration")
    return paths
