"""Figure of the enclosed-mass profile (plotting only; the physics is in deepwell.results.enclosed).

:func:`figure_data` gathers everything to draw as plain arrays (a pure function);
:func:`plot_enclosed_mass` draws it on a matplotlib Figure with the Agg canvas (no
pyplot state), saves PDF and PNG and frees the figure.
"""

import textwrap
from pathlib import Path

import matplotlib
import matplotlib.patches
import numpy as np

from deepwell.core.constants import PC_AU
from deepwell.results.compactness import GALAXY_AGE_YR, schwarzschild_radius_au
from deepwell.results.enclosed import model_curves, no_dark_cluster_radius_au

from .style import COLOUR, SOLAR_MASS, STYLE, new_figure, save_figure

__all__ = ["figure_data", "plot_enclosed_mass", "enclosed_figure", "enclosed_caption"]

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
    measured = measured_window(profile)
    curves = {k: v for k, v in model_curves(r_grid, m, model_settings).items() if k in models}
    return {
        "r_grid": r_grid, "curves": curves, "r_s": r_s, "r_no_cluster": r_nc,
        "x_range": x_range, "galaxy_age_yr": galaxy_age_yr,
        "x_measured": measured[0], "y_measured": measured[1],
        "r": np.array([x.r_mean_au for x in s]), "r_lo": np.array([x.r_peri_au for x in s]),
        "r_hi": np.array([x.r_apo_au for x in s]), "m": np.array([x.mass for x in s]),
        "m_err": np.array([x.mass_sigma for x in s]),
        "poor": np.array([x.poorly_constrained for x in s], bool),
        "names": [x.star for x in s],
    }


def measured_window(profile, pad=0.15):
    """Radii (au) and masses (Msun) that the measurements span, for the main panel.

    Radii: from half the smallest pericentre to twice the largest apocentre (and
    the external constraints' radii).  Masses: the joint point-mass band and the
    per-star masses with their 1-sigma errors (well-constrained stars only, when
    there are any), widened by ``pad`` of the span on each side.

    Returns
    -------
    x : tuple of float
        (r_min, r_max) in au.
    y : tuple of float
        (M_min, M_max) in Msun, M_min > 0.
    """
    s = profile.stars
    m, sig = profile.joint_mass, profile.joint_mass_sigma
    r_lo = [x.r_peri_au for x in s]
    r_hi = [x.r_apo_au for x in s]
    if profile.external is not None:
        r_lo += list(profile.external.radius_au)
        r_hi += list(profile.external.radius_au)
    x = (0.5 * min(r_lo), 2.0 * max(r_hi)) if r_lo else (0.5, 2.0)
    good = [t for t in s if not t.poorly_constrained] or list(s)
    lows = [m - sig] + [t.mass - t.mass_sigma for t in good]
    highs = [m + sig] + [t.mass + t.mass_sigma for t in good]
    if profile.external is not None:
        lows += list(profile.external.mass - profile.external.mass_err)
        highs += list(profile.external.mass + profile.external.mass_err)
    lo, hi = float(np.min(lows)), float(np.max(highs))
    span = max(hi - lo, 1e-3 * m)
    return x, (max(lo - pad * span, 1e-3 * m), hi + pad * span)


def _stars(ax, ax_ratio, d, joint):
    for poor, label in ((False, "per-star mass (bar: pericentre to apocentre)"),
                        (True, "poorly constrained (σ/M > 20% or coverage < 0.5)")):
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
        Age against which dark-cluster lifetimes are compared (yr).

    Returns
    -------
    list of Path
        The PDF and the PNG (200 dpi).
    """
    stem = Path(path_stem)
    fig = enclosed_figure(profile, model_settings, models, galaxy_age_yr)
    return save_figure(fig, stem.parent, stem.name)


def enclosed_figure(profile, model_settings=None, models=("point", "plummer", "cusp"),
                    galaxy_age_yr=GALAXY_AGE_YR):
    """The enclosed-mass figure (see :func:`plot_enclosed_mass`), not saved.

    Returns
    -------
    matplotlib.figure.Figure
    """
    d = figure_data(profile, model_settings, models, galaxy_age_yr)
    m, sig = profile.joint_mass, profile.joint_mass_sigma
    with matplotlib.rc_context(STYLE):
        fig = new_figure((6.4, 5.0))
        ax = fig.add_axes((0.12, 0.37, 0.50, 0.52))
        axr = fig.add_axes((0.12, 0.10, 0.50, 0.24), sharex=ax)
        ax.tick_params(labelbottom=False)
        ax.axhspan(m - sig, m + sig, color=COLOUR["sky"], alpha=0.5, lw=0,
                   label=f"joint point mass\n{_value_error(m, sig)} {SOLAR_MASS}")
        ax.axhline(m, color=COLOUR["black"], lw=0.8, zorder=2)
        for name, (label, curve) in d["curves"].items():
            if name == "point":
                continue  # drawn as the band and its centre line
            colour, ls = _MODEL_STYLE[name]
            ax.plot(d["r_grid"], curve, color=colour, ls=ls, label=label, zorder=3)
        _stars(ax, axr, d, m)
        ext = profile.external
        if ext is not None:
            ax.errorbar(ext.radius_au, ext.mass, yerr=ext.mass_err, fmt="s", ms=4,
                        color=COLOUR["orange"], label="external constraints", zorder=4)
        axr.axhline(0.0, color=COLOUR["black"], lw=0.8)
        ax.set(xscale="log", xlim=d["x_measured"], ylim=d["y_measured"],
               ylabel=f"enclosed mass ({SOLAR_MASS})")
        ax.ticklabel_format(axis="y", style="sci", scilimits=(0, 0), useMathText=True)
        axr.set(xlabel="radius (au)", ylabel=r"$M_\star/M - 1$ (dimensionless)")
        top = ax.secondary_xaxis("top", functions=(lambda r: r / PC_AU, lambda p: p * PC_AU))
        top.set_xlabel("radius (pc)")
        handles, labels = ax.get_legend_handles_labels()
        _overview(fig.add_axes((0.73, 0.58, 0.25, 0.31)), d, m)
        fig.legend(handles, [textwrap.fill(t, 40) for t in labels], loc="upper left",
                   bbox_to_anchor=(0.655, 0.47), fontsize=6.0)
    return fig


def _value_error(value, sigma):
    """``(3.205 ± 0.010) × 10^6`` in mathtext: the value rounded to two digits of its error."""
    exp = int(np.floor(np.log10(abs(value)))) if value else 0
    v, s = value / 10.0**exp, sigma / 10.0**exp
    digits = max(0, 1 - int(np.floor(np.log10(s)))) if s > 0 else 3
    return rf"$({v:.{digits}f} \pm {s:.{digits}f}) \times 10^{{{exp}}}$"


def enclosed_caption(profile):
    """Caption of the enclosed-mass figure, with the consistency test it shows.

    The text once printed on the figure (the chi-square of the per-star
    masses against one point mass, and the key to the panels) is here:
    journals set captions outside the figure.
    """
    c, g = profile.consistency, profile.consistency_good
    return ("Enclosed mass: per-star Keplerian masses (each star refitted with its own central "
            "mass; horizontal bars run from pericentre to apocentre) against the joint point "
            "mass (band: ±1σ). Per-star masses against one point mass: all stars "
            f"χ² = {c.chi2:.1f} for {c.dof} degrees of freedom (p = {c.p_value:.2g}); well "
            f"constrained stars χ² = {g.chi2:.1f} for {g.dof} (p = {g.p_value:.2g}). "
            "Left: the radii and masses the stars measure (linear mass axis); lower panel: "
            "per-star mass over the joint mass minus one. Right: the whole range from the "
            "Schwarzschild radius (purple line) outwards; yellow: no dark cluster of this mass "
            "survives the galaxy's age (Maoz 1998 criterion); grey box: the left panel. "
            "Per-star errors exclude the distance error. Curves other than the point mass are "
            "illustrative, not fitted. Open symbols: poorly constrained masses; their errors "
            "may be unreliable.")


def _overview(ins, d, m):
    """Log-log panel of the whole radius range: curves, Schwarzschild radius, excluded
    clusters, the stars, and a box around the main panel's window."""
    ins.axvspan(d["x_range"][0], d["r_no_cluster"], color=COLOUR["yellow"], alpha=0.35, lw=0,
                zorder=0)
    ins.axvline(d["r_s"], color=COLOUR["purple"], lw=1.0)
    for name, (_, curve) in d["curves"].items():
        colour, ls = _MODEL_STYLE[name]
        ins.plot(d["r_grid"], curve, color=colour, ls=ls, lw=0.8, zorder=3)
    ins.plot(d["r"], d["m"], "o", color=COLOUR["blue"], ms=2, zorder=5)
    (x0, x1), (y0, y1) = d["x_measured"], d["y_measured"]
    ins.add_patch(matplotlib.patches.Rectangle((x0, y0), x1 - x0, y1 - y0, fill=False,
                                               ec="0.35", lw=0.8, zorder=6))
    ins.set(xscale="log", yscale="log", xlim=d["x_range"], ylim=(0.5 * m, 5.0 * m),
            xlabel="radius (au)", ylabel=f"enclosed mass ({SOLAR_MASS})")
    ins.text(0.04, 0.96, "whole range", transform=ins.transAxes, ha="left", va="top",
             fontsize=6.5)
    ins.tick_params(labelsize=6)
    ins.xaxis.label.set_size(6.5)
    ins.yaxis.label.set_size(6.5)
