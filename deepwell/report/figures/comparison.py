"""The model-comparison figure: Delta chi-square per step beside its bootstrap null.

Top: the observed Delta chi-square of every tested step (symmetric-log axis,
since steps range from below 1 to thousands), with the 95th and 99.73th
percentiles of its bootstrap null marked where a bootstrap was run.
Bottom: one panel per bootstrapped step, the histogram of the simulated
Delta chi-square under the simpler model, the chi-square(k) density where the
step adds k >= 1 free parameters (Wilks), and the observed value as a vertical
line (an arrow at the edge when it lies far beyond the null).

The numbers are those of :class:`deepwell.results.comparison.ModelComparison`;
nothing is computed here beyond percentiles and the reference density.
"""

import numpy as np
from scipy import stats

from .style import COLOUR, MODEL_COLOUR, PALETTE, new_figure

__all__ = ["comparison_figure", "comparison_caption", "null_percentiles"]

#: Axis label of every Delta chi-square axis (a ratio of squares: no unit).
DCHI2_LABEL = r"$\Delta\chi^2$ (dimensionless)"


def null_percentiles(deltas, levels=(95.0, 99.73)):
    """Percentiles (of ``levels``, per cent) of simulated Delta chi-square, NaN ones left out."""
    d = np.asarray(deltas, float)
    d = d[np.isfinite(d)]
    return tuple(float(np.percentile(d, q)) for q in levels) if d.size else (np.nan,) * 2


def _null_panel(ax, test):
    d = test.null_deltas[np.isfinite(test.null_deltas)]
    lo = min(float(d.min()), 0.0) if d.size else 0.0
    hi = float(d.max()) if d.size else 1.0
    spread = max(hi - lo, 1e-3)
    inside = test.delta <= hi + 4.0 * spread
    if inside:
        lo, hi = min(lo, test.delta), max(hi, test.delta)
    span = (lo - 0.05 * (hi - lo), hi + 0.08 * (hi - lo) + 1e-3)
    ax.hist(d, bins=np.linspace(span[0], span[1], 30), density=True, color=PALETTE[1],
            alpha=0.8, label=f"bootstrap null ({d.size})")
    if test.extra_free >= 1:
        x = np.linspace(max(span[0], 1e-3), span[1], 200)
        ax.plot(x, stats.chi2.pdf(x, test.extra_free), color=MODEL_COLOUR, lw=1.0,
                label=f"chi-square({test.extra_free})")
    if inside:
        ax.axvline(test.delta, color=COLOUR["vermillion"], lw=1.6, label="observed")
    else:
        ax.annotate("", xy=(1.0, 0.45), xycoords="axes fraction", xytext=(0.7, 0.45),
                    arrowprops=dict(arrowstyle="->", color=COLOUR["vermillion"], lw=1.4))
        ax.text(0.98, 0.5, f"observed\n{test.delta:.3g}", transform=ax.transAxes, ha="right",
                va="bottom", color=COLOUR["vermillion"])
    ax.set_xlim(*span)
    ax.text(0.97, 0.95, test.key, transform=ax.transAxes, ha="right", va="top",
            fontweight="bold")  # the panel's name inside it: figures carry no titles
    ax.set_xlabel(DCHI2_LABEL)
    ax.set_yticks([])
    ax.legend(loc="upper left", fontsize=6.5)


def comparison_caption(comparison):
    """Caption of the figure (it carries no title: journals set captions outside it)."""
    booted = [t.key for t in comparison.tests
              if t.null_deltas is not None and t.null_deltas.size]
    text = ("Delta chi-square of each step of the model ladder (simpler model minus the "
            "model, symmetric-log axis).")
    if booted:
        text += (" Solid and dashed marks: the 95th and 99.73th percentiles of its bootstrap "
                 "null (data simulated from the simpler model and refitted with both). "
                 "Lower panels, one per bootstrapped step (" + ", ".join(booted) + "): the "
                 "histogram of that null, the chi-square density of Wilks' theorem where the "
                 "step adds free parameters, and the observed value (an arrow at the edge "
                 "when it lies far beyond the null).")
    else:
        text += " No bootstrap was run: the significance rests on Wilks' theorem alone."
    return text


def comparison_figure(comparison):
    """The figure (module docstring) of a :class:`ModelComparison`."""
    tests = list(comparison.tests)
    booted = [t for t in tests if t.null_deltas is not None and t.null_deltas.size]
    n_low = max(len(booted), 1)
    fig = new_figure((max(6.5, 2.0 * n_low), 5.4 if booted else 3.0))
    grid = fig.add_gridspec(2 if booted else 1, n_low, height_ratios=(1.2, 1.0) if booted
                            else None, hspace=0.55, wspace=0.3, left=0.09, right=0.98,
                            top=0.92, bottom=0.12)
    ax = fig.add_subplot(grid[0, :])
    x = np.arange(len(tests))
    ax.bar(x, [t.delta for t in tests], color=PALETTE[3], width=0.55, label="observed")
    for i, t in enumerate(tests):
        if t.null_deltas is not None and t.null_deltas.size:
            p95, p997 = null_percentiles(t.null_deltas)
            ax.plot([i - 0.35, i + 0.35], [p95, p95], color=PALETTE[0], lw=1.4,
                    label="null 95th percentile" if i == tests.index(booted[0]) else None)
            ax.plot([i - 0.35, i + 0.35], [p997, p997], color=COLOUR["vermillion"], lw=1.4,
                    ls="--", label="null 99.73th percentile"
                    if i == tests.index(booted[0]) else None)
    ax.set_yscale("symlog", linthresh=1.0)
    ax.axhline(0.0, color=MODEL_COLOUR, lw=0.6)
    ax.set_xticks(x, [t.key for t in tests])
    ax.set_ylabel(r"$\chi^2_\mathrm{simpler} - \chi^2_\mathrm{model}$ (dimensionless)")
    ax.legend(loc="upper right", fontsize=7)
    for j, t in enumerate(booted):
        _null_panel(fig.add_subplot(grid[1, j]), t)
    return fig
