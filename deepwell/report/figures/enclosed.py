"""Figure of the enclosed-mass profile (plotting only; the physics is in deepwell.results.enclosed).

:func:`figure_data` gathers everything to draw as plain arrays (a pure function);
:func:`plot_enclosed_mass` draws it on a matplotlib Figure with the Agg canvas (no
pyplot state), saves PDF and PNG and frees the figure.
"""

from pathlib import Path

import matplotlib
import numpy as np

from deepwell.core.constants import PC_AU
from deepwell.results.compactness import GALAXY_AGE_YR, schwarzschild_radius_au
from deepwell.results.enclosed import model_curves, no_dark_cluster_radius_au

from .style import COLOUR, STYLE, new_figure, save_figure

__all__ = ["figure_data", "plot_enclosed_mass"]

_MODEL_STYLE = {"point": (COLOUR["black"], "-"), "plummer": (COLOUR["vermillion"], "--"),
                "cusp": (COLOUR["green"], "-.")}


def figure_data(profile, model_settings=None, models=("point", "plummer", "cusp"),
                galaxy_age_yr=GALAXY_AGE_YR, n_grid=400):
    """Everything the enclosed-mass figure shows, as plain numbers (au, Msun).

    Returns
    -------
    dict
        ``r_grid`` (au), ``curves`` (name -> (label, M(<r))), ``r_s`` (Schwarzschild
        radius, au), ``r_no_cluster`` (au; inside it no dark cluster of the joint mass
        outlives ``galaxy_age_yr``), ``x_range`` (au), and the star arrays ``r``,
        ``r_lo``, ``r_hi``, ``m``, ``m_err``, ``poor``, ``names``.
    """
    m = profile.joint_mass
    s = profile.stars
    r_s = float(schwarzschild_radius_au(m))
    r_nc = no_dark_cluster_radius_au(m, galaxy_age_yr)
    radii = [r_nc] + [x.r_apo_au for x in s]
    if profile.external is not None:
        radii += list(profile.external.radius_au)
    x_range = (0.3 * r_s, 3.0 * max(radii))
    r_grid = np.geomspace(*x_range, n_grid)
    curves = {k: v for k, v in model_curves(r_grid, m, model_settings).items() if k in models}
    return {
        "r_grid": r_grid, "curves": curves, "r_s": r_s, "r_no_cluster": r_nc,
        "x_range": x_range, "galaxy_age_yr": galaxy_age_yr,
        "r": np.array([x.r_mean_au for x in s]), "r_lo": np.array([x.r_peri_au for x in s]),
        "r_hi": np.array([x.r_apo_au for x in s]), "m": np.array([x.mass for x in s]),
        "m_err": np.array([x.mass_sigma for x in s]),
        "poor": np.array([x.poorly_constrained for x in s], bool),
        "names": [x.star for x in s],
    }


def _stars(ax, ax_ratio, d, joint):
    for poor, label in ((False, "per-star mass (bar: pericentre to apocentre)"),
                        (True, "poorly constrained (sigma/M > 20% or coverage < 0.5)")):
        sel = d["poor"] == poor
        if not sel.any():
            continue
        r = d["r"][sel]
        xerr = [r - d["r_lo"][sel], d["r_hi"][sel] - r]
        kw = dict(fmt="o", color=COLOUR["blue"], ms=4, elinewidth=0.8, zorder=5,
                  mfc="white" if poor else COLOUR["blue"], alpha=0.6 if poor else 1.0)
        ax.errorbar(r, d["m"][sel], yerr=d["m_err"][sel], xerr=xerr, label=label, **kw)
        ax_ratio.errorbar(r, d["m"][sel] / joint - 1.0, yerr=d["m_err"][sel] / joint,
                          xerr=xerr, **kw)


def plot_enclosed_mass(profile, path_stem, model_settings=None,
                       models=("point", "plummer", "cusp"), galaxy_age_yr=GALAXY_AGE_YR):
    """Draw the enclosed-mass profile and save ``path_stem``.pdf and ``path_stem``.png.

    Parameters
    ----------
    profile : deepwell.results.enclosed.EnclosedMassProfile
    path_stem : str or Path
        Output path without suffix; the folder must exist.
    model_settings : dict, optional
        Overrides of deepwell.results.enclosed.DEFAULT_MODEL_SETTINGS.
    models : tuple of str
        Model curves to draw.
    galaxy_age_yr : float
        Age against which dark-cluster lifetimes are compared.

    Returns
    -------
    list of Path
        The PDF and the PNG (200 dpi).
    """
    d = figure_data(profile, model_settings, models, galaxy_age_yr)
    m, sig = profile.joint_mass, profile.joint_mass_sigma
    with matplotlib.rc_context(STYLE):
        fig = new_figure((6.4, 5.6))
        ax, axr = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, 1]})
        fig.subplots_adjust(left=0.12, right=0.97, top=0.9, bottom=0.16, hspace=0.06)
        ax.axhspan(m - sig, m + sig, color=COLOUR["sky"], alpha=0.5, lw=0,
                   label=f"joint point mass {m:.4g} +/- {sig:.2g} Msun")
        for name, (label, curve) in d["curves"].items():
            colour, ls = _MODEL_STYLE[name]
            ax.plot(d["r_grid"], curve, color=colour, ls=ls, label=label, zorder=3)
        for a in (ax, axr):
            a.axvspan(d["x_range"][0], d["r_no_cluster"], color=COLOUR["yellow"], alpha=0.35,
                      lw=0, zorder=0)
            a.axvline(d["r_s"], color=COLOUR["purple"], lw=1.0)
        ax.fill_between([], [], color=COLOUR["yellow"], alpha=0.35,
                        label=f"no dark cluster of this mass survives {d['galaxy_age_yr']:.2g} yr "
                        "(Maoz 1998 criterion)")
        ax.plot([], [], color=COLOUR["purple"], label="Schwarzschild radius")
        _stars(ax, axr, d, m)
        ext = profile.external
        if ext is not None:
            ax.errorbar(ext.radius_au, ext.mass, yerr=ext.mass_err, fmt="s", ms=4,
                        color=COLOUR["orange"], label="external constraints", zorder=4)
        axr.axhline(0.0, color=COLOUR["black"], lw=0.8)
        ax.set(xscale="log", yscale="log", xlim=d["x_range"], ylabel="enclosed mass (Msun)")
        axr.set(xlabel="radius (au)", ylabel="M_star / M - 1")
        top = ax.secondary_xaxis("top", functions=(lambda r: r / PC_AU, lambda p: p * PC_AU))
        top.set_xlabel("radius (pc)")
        c = profile.consistency
        g = profile.consistency_good
        ax.text(0.02, 0.97, f"per-star masses against one point mass:\n"
                f"all stars chi2 = {c.chi2:.1f} for {c.dof} dof, p = {c.p_value:.2g}\n"
                f"well constrained chi2 = {g.chi2:.1f} for {g.dof} dof, p = {g.p_value:.2g}",
                transform=ax.transAxes, va="top", fontsize=7)
        ax.legend(loc="upper left", bbox_to_anchor=(0.0, 0.8))
        fig.text(0.01, 0.01, "Per-star errors exclude the distance error (all masses scale "
                 "together). Model curves other than the point mass are illustrative.\n"
                 "Open symbols: poorly constrained masses; their errors may be unreliable.",
                 fontsize=6.5, va="bottom")
        stem = Path(path_stem)
        return save_figure(fig, stem.parent, stem.name)
