"""Writing a calibration: tables, a plain-language statement and one figure.

:func:`write_calibration` puts into a folder

* ``calibration.ecsv``: one row per calibrated shared parameter: usable
  trials, coverage of the 68% and 95% intervals with the 99.7% acceptance
  band of an honest interval and the 99.7% Clopper-Pearson interval of the
  measured coverage, the verdict, the mean bias (in the parameter's unit and
  in sigma, each with its standard error) and the scatter of the pulls;
* ``trials.ecsv``: one row per trial (status, message, chi-square, and per
  parameter the value, sigma and interval ends);
* ``calibration.md``: whether each parameter's intervals are honest, in words;
* ``calibration.png``: coverage against the bands per parameter (top) and
  the pull histograms against N(0, 1) (bottom; pulls beyond +-4.5 are drawn
  in the outermost bins).

The figure is drawn on a plain Agg :class:`~matplotlib.figure.Figure` inside
``rc_context(deepwell.report.figures.STYLE)``.
"""

import math
from pathlib import Path

import matplotlib
import numpy as np
from astropy.table import Table

from deepwell.report.figures.style import PALETTE, STYLE, new_figure, save_figure

__all__ = ["write_calibration", "calibration_figure", "calibration_markdown"]

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


def calibration_markdown(result):
    """The plain-language statement of ``calibration.md``."""
    t = result.table
    lines = [f"# Calibration of {result.scenario}", "",
             f"{result.n_trials} simulated data sets (seed {result.seed}); "
             f"{result.mode} intervals; {result.elapsed:.0f} s.", ""]
    for row in t.itertuples():
        unit = result.units[row.parameter]
        lines.append(f"- **{row.parameter}**: {row.statement}. Coverage "
                     f"{row.coverage68:.3f} (band {row.band68_lo:.3f}-{row.band68_hi:.3f}) "
                     f"and {row.coverage95:.3f} (band {row.band95_lo:.3f}-"
                     f"{row.band95_hi:.3f}) over {row.trials} trials; mean bias "
                     f"{row.bias_sigma:+.3f} +- {row.bias_sigma_err:.3f} sigma "
                     f"({_fmt(row.bias, unit)}); pull scatter {row.pull_scatter:.3f}.")
    lines += ["", "A coverage is honest when its count lies inside the central 99.7% range "
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
    return "\n".join(lines) + "\n"


def calibration_figure(result):
    """Coverage per parameter with bands (top) and pull histograms (bottom)."""
    t = result.table
    n_par = len(t)
    fig = new_figure((max(6.5, 1.3 * n_par), 5.2))
    grid = fig.add_gridspec(2, n_par, height_ratios=(1.3, 1.0), hspace=0.45, wspace=0.35)
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
    ax.set_xticks(x, list(t.parameter))
    ax.set_ylabel("fraction containing the truth")
    ax.set_xlim(-0.6, n_par - 0.4)
    ax.set_title(f"{result.scenario}: coverage of {result.mode} intervals "
                 f"({result.n_trials} trials; bars: 99.7% Clopper-Pearson)")
    ax.legend(loc="lower right", ncol=2)
    grid_z = np.linspace(-4, 4, 161)
    for i, row in enumerate(t.itertuples()):
        axh = fig.add_subplot(grid[1, i])
        v = result.trials[f"{row.parameter}_value"].to_numpy(float)
        s = result.trials[f"{row.parameter}_sigma"].to_numpy(float)
        ok = np.isfinite(v) & np.isfinite(s) & (s > 0)
        pull = np.clip((v[ok] - row.truth) / s[ok], -4.5, 4.5)
        axh.hist(pull, bins=np.linspace(-4.5, 4.5, 19), density=True, color=PALETTE[1],
                 alpha=0.8)
        axh.plot(grid_z, np.exp(-0.5 * grid_z**2) / math.sqrt(2 * math.pi), color="k")
        axh.set_title(row.parameter)
        axh.set_xlabel("pull")
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
    paths[2].write_text(calibration_markdown(result), encoding="utf-8")
    if figures:
        with matplotlib.rc_context(STYLE):
            paths += save_figure(calibration_figure(result), folder, "calibration")
    return paths
