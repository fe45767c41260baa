"""Figures of a joint fit: all orbits on the sky, and one panel set per star.

Figures are built with the style kit of :mod:`deepwell.report.figures.style`.

Frame-relative positions (rows measured against the astrometric frame) are
shown *mass-relative*: the fitted reference point x0 + vx0 (t - t_ref),
y0 + vy0 (t - t_ref) is subtracted, so that all data sets share one picture
centred on the mass. Residuals (data - model) do not depend on this choice.
The sky axes follow the sky: east to the left, north up, equal scales.
"""

import matplotlib
import numpy as np

from deepwell.core.text import plural
from deepwell.model.epochs import model_at_epochs, star_vector
from deepwell.model.kernels.orbit import keplerian_track
from deepwell.model.quality import POOR_COVERAGE

from .posterior import sky_draw_tracks, velocity_band
from .style import (
    MASS_MARKER,
    MODEL_COLOUR,
    PALETTE,
    STYLE,
    file_stem,
    new_figure,
    style_of,
    unique_names,
)

__all__ = ["mass_relative_positions", "sky_figure", "star_figure", "figure_name"]


def figure_name(star):
    """File stem of a star's figure: ``star_<name>``, made safe by :func:`.style.file_stem`."""
    return file_stem("star", star)


def mass_relative_positions(result):
    """Observed positions relative to the mass (mas): frame terms of the fit removed.

    Returns
    -------
    ra, dec : ndarray
        One entry per position row of ``result.model.pos``.
    """
    m, vec = result.model, result.internal
    dt = m.pos.t - m.reference_epoch
    sh = m.layout.shared
    ra = m.pos.ra - m.pos.frame * (sh(vec, "x0") + sh(vec, "vx0") * dt)
    dec = m.pos.dec - m.pos.frame * (sh(vec, "y0") + sh(vec, "vy0") * dt)
    return ra, dec


def _elements(result, k):
    el = result.model.layout.elements(result.internal)
    e = {name: float(v[k]) for name, v in el.items()}
    e["distance"] = float(result.model.layout.shared(result.internal, "distance"))
    return e


def _track(e, t):
    return keplerian_track(t, e["a"], e["e"], e["inc"], e["node"], e["peri_arg"], e["t_peri"],
                           e["period"], e["distance"])


def _orbit_times(e, n=720):
    """One full orbit sampled evenly in eccentric anomaly (smooth at pericentre)."""
    ecc_anom = np.linspace(0.0, 2.0 * np.pi, n)
    return e["t_peri"] + e["period"] * (ecc_anom - e["e"] * np.sin(ecc_anom)) / (2.0 * np.pi)


def _time_grid(e, t0, t1, n=1500):
    """Dense epochs in [t0, t1], with extra points around every pericentre passage."""
    grid = [np.linspace(t0, t1, n)]
    first = np.floor((t0 - e["t_peri"]) / e["period"])
    for j in np.arange(first, np.ceil((t1 - e["t_peri"]) / e["period"]) + 1):
        orbit = _orbit_times(e, 400) + j * e["period"]
        grid.append(orbit[(orbit >= t0) & (orbit <= t1)])
    return np.unique(np.concatenate(grid))


def _sky_axes(ax):
    """Mas axes, north up and east to the LEFT (x axis inverted), mass at the origin."""
    ax.set_xlabel(r"$\Delta\alpha\cos\delta$ (mas, east $\leftarrow$)")
    ax.set_ylabel(r"$\Delta\delta$ (mas, north $\uparrow$)")
    ax.scatter([0.0], [0.0], **MASS_MARKER, label="central mass")


def _square_limits(ax, x, y, pad=0.04):
    """Equal, square data limits around x, y (east to the left)."""
    cx, cy = 0.5 * (np.max(x) + np.min(x)), 0.5 * (np.max(y) + np.min(y))
    half = 0.5 * max(np.ptp(x), np.ptp(y)) * (1.0 + 2.0 * pad)
    ax.set_xlim(cx + half, cx - half)
    ax.set_ylim(cy - half, cy + half)
    ax.set_aspect("equal", adjustable="box")


def _draw_tracks(ax, result, star, draws, colour):
    """Thin orbits of posterior draws (posterior-predictive spread on the sky)."""
    if draws is None:
        return
    east, north = sky_draw_tracks(result, star, draws)
    for j in range(east.shape[0]):
        ax.plot(east[j], north[j], color=colour, lw=0.4, alpha=0.08, zorder=1)


def sky_figure(result, draws=None):
    """All stars' orbits and mass-relative positions on the sky.

    When the orbits span very different sizes a second panel zooms on the
    inner half of them.  ``draws`` (internal vectors from the posterior, see
    :func:`deepwell.report.figures.posterior.predictive_draws`) adds their orbits as
    thin lines.

    Returns
    -------
    matplotlib.figure.Figure
    """
    m = result.model
    ra, dec = mass_relative_positions(result)
    tracks = []
    for k in range(len(m.stars)):
        e = _elements(result, k)
        tracks.append(_track(e, _orbit_times(e)))
    extent = np.array([np.hypot(tr.east, tr.north).max() for tr in tracks])
    zoom = 1.1 * float(np.percentile(extent, 35.0))
    panels = [None, zoom] if extent.max() > 2.0 * zoom else [None]
    xs = np.concatenate([ra, [0.0], *[tr.east for tr in tracks]])
    ys = np.concatenate([dec, [0.0], *[tr.north for tr in tracks]])
    with matplotlib.rc_context(STYLE):
        width = 6.2 * len(panels) + 1.0
        fig = new_figure((width, 6.0))
        for j, half in enumerate(panels):
            ax = fig.add_axes((0.9 / width + j * 6.2 / width, 0.09, 5.2 / width, 0.82))
            _sky_axes(ax)
            for k, star in enumerate(m.stars):
                colour, marker = style_of(k)
                _draw_tracks(ax, result, star, draws, colour)
                ax.plot(tracks[k].east, tracks[k].north, color=colour, lw=0.9, zorder=2)
                sel = m.pos.star == k
                ax.errorbar(ra[sel], dec[sel], xerr=m.pos.ra_err[sel], yerr=m.pos.dec_err[sel],
                            fmt=marker, color=colour, ms=4.2, mew=0.4, mec="black",
                            elinewidth=0.5, zorder=3, label=star)
            if half is None:
                _square_limits(ax, xs, ys)
                ax.set_title("all orbits", fontweight="normal")
            else:
                _square_limits(ax, [-half, half], [-half, half], pad=0.0)
                ax.set_title(f"zoom: central ±{half:.0f} mas", fontweight="normal")
        ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0,
                  markerscale=1.3, ncols=1 if len(m.stars) <= 24 else 2)
        fig.suptitle(f"{'Orbit' if len(m.stars) == 1 else 'Orbits'} of "
                     f"{plural(len(m.stars), 'star')} around the central mass",
                     fontsize=11, fontweight="bold")
    return fig


def _sky_panel(ax, result, k, ra, dec, draws=None):
    m = result.model
    e = _elements(result, k)
    tr = _track(e, _orbit_times(e))
    _sky_axes(ax)
    ax.set_aspect("equal", adjustable="datalim")
    ax.invert_xaxis()  # east to the left, as on the sky
    _draw_tracks(ax, result, m.stars[k], draws, PALETTE[1])
    ax.plot(tr.east, tr.north, color=MODEL_COLOUR, lw=0.9, label="model orbit", zorder=2)
    peri = _track(e, np.array([e["t_peri"]]))
    ax.plot(peri.east, peri.north, "o", color=MODEL_COLOUR, mfc="none", ms=7, mew=1.0,
            label="pericentre", zorder=4)
    sel = m.pos.star == k
    for j, ds in enumerate(unique_names(m.pos.dataset[sel])):
        colour, marker = style_of(j)
        s = sel & (m.pos.dataset == ds)
        ax.errorbar(ra[s], dec[s], xerr=m.pos.ra_err[s], yerr=m.pos.dec_err[s], fmt=marker,
                    color=colour, mec="black", mew=0.3, elinewidth=0.6, zorder=3, label=ds)
    ax.legend(loc="best")
    ax.set_title("sky track (mass-relative)", fontweight="normal")


def _residual_panel(ax, t, resid, err, datasets, label):
    ax.axhline(0.0, color=MODEL_COLOUR, lw=0.8)
    for j, ds in enumerate(unique_names(datasets)):
        colour, marker = style_of(j)
        s = datasets == ds
        ax.errorbar(t[s], resid[s], yerr=err[s], fmt=marker, color=colour, mec="black",
                    mew=0.3, elinewidth=0.6, label=ds)
    ax.set_ylabel(label)


def star_figure(result, star, draws=None):
    """Panels of one star: sky track, position residuals and radial velocities.

    ``draws`` (posterior internal vectors) adds their orbits on the sky and a
    68% posterior-predictive band on the radial velocities.

    Returns
    -------
    matplotlib.figure.Figure
    """
    m, vec = result.model, result.internal
    k = m.stars.index(star)
    ra, dec = mass_relative_positions(result)
    pred = m.predict(vec)
    sel = m.pos.star == k
    vsel = (m.vel.star == k) if m.vel is not None else None
    has_rv = vsel is not None and bool(vsel.any())
    with matplotlib.rc_context(STYLE):
        fig = new_figure((9.0, 5.6))
        grid = fig.add_gridspec(4, 2, width_ratios=(1.05, 1.0), left=0.08, right=0.985,
                                bottom=0.08, top=0.9, wspace=0.2, hspace=0.12)
        ax_sky = fig.add_subplot(grid[:, 0])
        _sky_panel(ax_sky, result, k, ra, dec, draws)
        ax_ra = fig.add_subplot(grid[0, 1])
        ax_dec = fig.add_subplot(grid[1, 1], sharex=ax_ra)
        t, ds = m.pos.t[sel], m.pos.dataset[sel]
        _residual_panel(ax_ra, t, (m.pos.ra - pred.ra)[sel], m.pos.ra_err[sel], ds,
                        r"$\Delta\alpha\cos\delta$ res. (mas)")
        _residual_panel(ax_dec, t, (m.pos.dec - pred.dec)[sel], m.pos.dec_err[sel], ds,
                        r"$\Delta\delta$ res. (mas)")
        ax_ra.set_title("position residuals (data $-$ model)", fontweight="normal")
        ax_vr = fig.add_subplot(grid[2, 1], sharex=ax_ra)
        ax_vres = fig.add_subplot(grid[3, 1], sharex=ax_ra)
        if has_rv:
            _velocity_panels(ax_vr, ax_vres, result, k, vsel, pred, draws)
        else:
            for ax in (ax_vr, ax_vres):
                ax.set_axis_off()
            ax_vr.text(0.5, 0.0, "no radial velocities:\nnode and argument of pericentre\n"
                       "are ambiguous by 180 deg", ha="center", va="center",
                       transform=ax_vr.transAxes, fontsize=8)
        for ax in (ax_ra, ax_dec, ax_vr):
            ax.tick_params(labelbottom=False)
        (ax_vres if has_rv else ax_dec).tick_params(labelbottom=True)
        (ax_vres if has_rv else ax_dec).set_xlabel("epoch (Julian yr)")
        title = f"Star {star}"
        coverage = result.star_summary(star)["coverage"]
        if coverage < POOR_COVERAGE:
            title += f"  (data cover {coverage:.0%} of the orbit: poorly constrained)"
        fig.suptitle(title, fontsize=11, fontweight="bold")
    return fig


def _velocity_panels(ax_vr, ax_vres, result, k, vsel, pred, draws=None):
    m = result.model
    v = m.vel
    e = _elements(result, k)
    t_all = np.concatenate([m.pos.t[m.pos.star == k], v.t[vsel]])
    pad = 0.03 * max(np.ptp(t_all), 1.0)
    tt = _time_grid(e, t_all.min() - pad, t_all.max() + pad)
    if draws is not None:
        lo, hi = velocity_band(result, m.stars[k], draws, tt)
        ax_vr.fill_between(tt, lo, hi, color=PALETTE[1], alpha=0.45, lw=0, zorder=1,
                           label="posterior 68% band")
    model_vr = _full_velocity(result, k, tt)
    ax_vr.plot(tt, model_vr, color=MODEL_COLOUR, lw=0.9, label="model")
    for j, ds in enumerate(unique_names(v.dataset[vsel])):
        colour, marker = style_of(j + 3)  # velocity data sets: other colours than positions
        s = vsel & (v.dataset == ds)
        ax_vr.errorbar(v.t[s], v.vr[s], yerr=v.vr_err[s], fmt=marker, color=colour, mec="black",
                       mew=0.3, elinewidth=0.6, label=ds)
    ax_vr.set_ylabel(r"$v_r$ (km/s)")
    ax_vr.legend(loc="best")
    ds = v.dataset[vsel]
    res = (v.vr - pred.vr)[vsel]
    ax_vres.axhline(0.0, color=MODEL_COLOUR, lw=0.8)
    for j, name in enumerate(unique_names(ds)):
        colour, marker = style_of(j + 3)
        s = ds == name
        ax_vres.errorbar(v.t[vsel][s], res[s], yerr=v.vr_err[vsel][s], fmt=marker,
                         color=colour, mec="black", mew=0.3, elinewidth=0.6)
    ax_vres.set_ylabel(r"$v_r$ res. (km/s)")


def _full_velocity(result, k, tt):
    """The fitted model's radial velocity of star k at epochs ``tt`` (all its effects)."""
    m = result.model
    star = m.stars[k]
    return model_at_epochs(m, star, t_vel=tt).predict(star_vector(m, result.internal, star)).vr


