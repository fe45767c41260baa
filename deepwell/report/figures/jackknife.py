"""Jackknife figure: shifts of mass and distance when one star or data set is left out."""

from pathlib import Path

import matplotlib
import numpy as np

from .style import PALETTE, STYLE, new_figure, save_figure

__all__ = ["plot_jackknife", "jackknife_figure", "jackknife_caption"]


def jackknife_caption(jk):
    """Caption of the jackknife figure, with the jackknife and statistical errors it compares."""
    parts = [f"{q}: jackknife error {jk.jackknife_sigma[q]:.3g}, statistical "
             f"{jk.full[q + '_sigma']:.3g}" for q in ("mass", "distance")]
    return (f"Leave-one-{jk.by}-out refits: the shift of the mass (left) and the distance "
            f"(right) when one {jk.by} at a time is left out, in units of the statistical "
            f"1-sigma error of the full fit ({'; '.join(parts)}). Grey band: ±1 statistical "
            "error; bars: the shift expected from losing those data alone; filled markers "
            "stand out.")


def plot_jackknife(jk, path_stem):
    """Draw :func:`jackknife_figure` and save ``path_stem``.pdf and .png; returns the paths."""
    stem = Path(path_stem)
    return save_figure(jackknife_figure(jk), stem.parent, stem.name)


def jackknife_figure(jk):
    """Shifts of mass and distance per left-out unit (a Figure, not saved).

    Each point is the leave-one-out value minus the full fit's, in units of
    the full fit's statistical error, with the bar +-sqrt(C_out - C_full) /
    sigma_full (the shift expected from losing those data alone); filled
    markers stand out (nested p < 0.0027).
    """
    rows = [r for r in jk.rows if "mass" in r]
    names = [str(r["left_out"]) for r in rows]
    y = np.arange(len(rows))
    with matplotlib.rc_context(STYLE):
        fig = new_figure((6.4, 1.6 + 0.28 * max(len(rows), 3)))
        axes = fig.subplots(1, 2, sharey=True)
        fig.subplots_adjust(left=0.2, right=0.97, top=0.95, bottom=0.2, wspace=0.08)
        for ax, q, colour in zip(axes, ("mass", "distance"), (PALETTE[3], PALETTE[4]), strict=True):
            s = jk.full[q + "_sigma"]
            x = np.array([r[f"d_{q}_over_sigma"] for r in rows])
            bar = np.array([np.sqrt(max(r[q + "_sigma"] ** 2 - s**2, 0.0)) / s for r in rows])
            ax.axvspan(-1, 1, color="0.88", lw=0, zorder=0)
            ax.axvline(0, color="k", lw=0.7)
            ax.errorbar(x, y, xerr=bar, fmt="none", ecolor=colour, lw=0.9)
            out = np.array([r["stands_out"] for r in rows], bool)
            ax.plot(x[~out], y[~out], "o", mfc="white", mec=colour, ms=5)
            ax.plot(x[out], y[out], "o", color=colour, ms=5)
            ax.set_xlabel(f"shift of {q} / statistical error (dimensionless)")
        axes[0].set_yticks(y, names)
        axes[0].invert_yaxis()
    return fig
