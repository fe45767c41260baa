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
from matplotlib.collections import LineCollection
from matplotlib.colors import LogNorm

from deepwell.model.epochs import model_at_epochs, star_vector
from deepwell.model.kernels.orbit import keplerian_track

from .marks import (
    arrow_phases,
    draw_direction_arrows,
    draw_epoch_marks,
    epoch_marks,
    error_classes,
)
from .posterior import sky_draw_tracks, velocity_band
from .style import (
    MASS_MARKER,
    MODEL_COLOUR,
    PALETTE,
    RASTER_POINTS,
    STYLE,
    file_stem,
    new_figure,
    style_of,
    unique_names,
)

__all__ = ["mass_relative_positions", "sky_figure", "sky_zoom", "star_inputs", "star_figure",
           "figure_name", "position_classes", "velocity_classes", "LEGEND_STARS",
           "DENSITY_CELLS"]


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


def _draw_tracks(ax, result, star, draws, colour, rasterized=False):
    """Thin orbits of posterior draws (posterior-predictive spread on the sky).

    One collection of all the draws' lines: each is stroked on its own, as
    separate lines would be (so their transparencies add up the same), at a
    fraction of the drawing cost of one artist per draw.
    """
    if draws is None:
        return
    east, north = sky_draw_tracks(result, star, draws)
    ax.add_collection(LineCollection(np.stack([east, north], axis=-1), colors=colour,
                                     linewidths=0.4, alpha=0.08, zorder=1,
                                     rasterized=rasterized))


def _arrow_positions(e, n):
    """Pairs of close sky positions (mas) at :func:`.marks.arrow_phases` for motion arrows."""
    t = e["t_peri"] + e["period"] * arrow_phases(n)
    tr = _track(e, np.stack([t, t + 0.004 * e["period"]], axis=1).ravel())
    return tr.east, tr.north


def _orbit_samples(n_stars):
    """Points per drawn orbit: fewer for many stars (a survey-scale sky stays small)."""
    return 720 if n_stars <= 50 else 240


def sky_zoom(result):
    """Half-width (mas) of the sky figure's zoom panel, or None without one.

    A zoom on the central 1.1 x the 35th percentile of the orbit extents is
    added when the largest orbit reaches beyond twice that.
    """
    n = _orbit_samples(len(result.model.stars))
    extent = []
    for k in range(len(result.model.stars)):
        e = _elements(result, k)
        tr = _track(e, _orbit_times(e, n))
        extent.append(np.hypot(tr.east, tr.north).max())
    extent = np.array(extent)
    zoom = 1.1 * float(np.percentile(extent, 35.0))
    return zoom if extent.max() > 2.0 * zoom else None


#: Largest number of stars named in the sky figure's legend; beyond it the legend
#: would be longer than the figure.
LEGEND_STARS = 48


def sky_figure(result, draws=None):
    """All stars' orbits and mass-relative positions on the sky.

    When the orbits span very different sizes a second panel zooms on the
    inner part of them (:func:`sky_zoom`).  ``draws`` (internal vectors from
    the posterior, see :func:`deepwell.report.figures.posterior.predictive_draws`)
    adds their orbits as thin lines.  Every orbit carries arrows in the
    direction of motion.  Above :data:`.style.RASTER_POINTS` positions the
    points are drawn without error bars and rasterised, and the orbit lines
    too above that many orbit vertices; above :data:`LEGEND_STARS` stars the
    legend is left out.  The figure has no title (the caption says what it shows).

    Returns
    -------
    matplotlib.figure.Figure
    """
    m = result.model
    ra, dec = mass_relative_positions(result)
    n_orbit = _orbit_samples(len(m.stars))
    elements = [_elements(result, k) for k in range(len(m.stars))]
    tracks = [_track(e, _orbit_times(e, n_orbit)) for e in elements]
    zoom = sky_zoom(result)
    panels = [None, zoom] if zoom is not None else [None]
    xs = np.concatenate([ra, [0.0], *[tr.east for tr in tracks]])
    ys = np.concatenate([dec, [0.0], *[tr.north for tr in tracks]])
    many_points = ra.size > RASTER_POINTS
    many_lines = len(m.stars) * n_orbit > 20 * RASTER_POINTS
    crowded = len(m.stars) > LEGEND_STARS
    norm = LogNorm(1.0, 2.0)  # one colour scale for the densities of every panel
    n_arrows = 3 if len(m.stars) <= 12 else 1
    with matplotlib.rc_context(STYLE):
        width = 6.2 * len(panels) + 1.0
        fig = new_figure((width, 5.6))
        for j, half in enumerate(panels):
            ax = fig.add_axes((0.9 / width + j * 6.2 / width, 0.1, 5.2 / width, 0.86))
            _sky_axes(ax)
            if half is None:
                _square_limits(ax, xs, ys)
            else:
                _square_limits(ax, [-half, half], [-half, half], pad=0.0)
            if crowded:
                mesh = _crowded_sky(ax, tracks, ra, dec, many_points, many_lines, norm)
            else:
                for k, star in enumerate(m.stars):
                    colour, marker = style_of(k)
                    _draw_tracks(ax, result, star, draws, colour, rasterized=many_lines)
                    ax.plot(tracks[k].east, tracks[k].north, color=colour, lw=0.9, zorder=2,
                            rasterized=many_lines)
                    draw_direction_arrows(ax, *_arrow_positions(elements[k], n_arrows), colour)
                    sel = m.pos.star == k
                    if many_points:
                        ax.scatter(ra[sel], dec[sel], s=1.0, marker=marker, color=colour, lw=0,
                                   zorder=3, rasterized=True, label=star)
                    else:
                        ax.errorbar(ra[sel], dec[sel], xerr=m.pos.ra_err[sel],
                                    yerr=m.pos.dec_err[sel], fmt=marker, color=colour, ms=4.2,
                                    mew=0.4, mec="black", elinewidth=0.5, zorder=3, label=star)
            if len(panels) > 1:
                ax.text(0.02, 0.98, "(a)" if half is None else "(b)", transform=ax.transAxes,
                        ha="left", va="top", fontsize=9, fontweight="bold")
        if not crowded:
            ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0,
                      markerscale=1.3 if not many_points else 6.0,
                      ncols=1 if len(m.stars) <= 24 else 2)
        elif mesh is not None:
            bar = fig.colorbar(mesh, cax=fig.add_axes((1.0 - 0.75 / width, 0.1, 0.12 / width,
                                                       0.86)))
            bar.set_label("positions per cell (count)")
    return fig


#: Cells per side of the density drawn for survey-scale sky figures.
DENSITY_CELLS = 300


def _crowded_sky(ax, tracks, ra, dec, many_points, many_lines, norm):
    """Sky panel of more stars than a legend can name: grey orbits, positions as a density.

    Above :data:`.style.RASTER_POINTS` positions they are counted in
    :data:`DENSITY_CELLS` x :data:`DENSITY_CELLS` cells over the panel
    (logarithmic colour scale ``norm``, shared by the panels and widened here to
    the largest count, rasterised); fewer are drawn as small black dots.
    Returns the density mesh (for the colour bar) or None.
    """
    lines = LineCollection([np.column_stack([tr.east, tr.north]) for tr in tracks],
                           colors="0.45", linewidths=0.35, alpha=0.35, zorder=2,
                           rasterized=many_lines)
    ax.add_collection(lines)
    if not many_points:
        ax.plot(ra, dec, ".", color="black", ms=1.5, zorder=3)
        return None
    (x0, x1), (y0, y1) = sorted(ax.get_xlim()), sorted(ax.get_ylim())
    counts, xe, ye = np.histogram2d(ra, dec, bins=DENSITY_CELLS, range=[[x0, x1], [y0, y1]])
    counts = np.where(counts > 0, counts, np.nan)
    if np.isfinite(counts).any():
        norm.vmax = max(norm.vmax, float(np.nanmax(counts)))
    return ax.pcolormesh(xe, ye, counts.T, cmap="viridis", norm=norm, zorder=3,
                         rasterized=True)


def _sky_panel(ax, result, k, ra, dec, styles, draws=None):
    m = result.model
    e = _elements(result, k)
    tr = _track(e, _orbit_times(e))
    _sky_axes(ax)
    ax.set_aspect("equal", adjustable="datalim")
    ax.invert_xaxis()  # east to the left, as on the sky
    sel = m.pos.star == k
    many = int(sel.sum()) > RASTER_POINTS
    _draw_tracks(ax, result, m.stars[k], draws, PALETTE[1])
    ax.plot(tr.east, tr.north, color=MODEL_COLOUR, lw=0.9, label="model (best fit)", zorder=2)
    peri = _track(e, np.array([e["t_peri"]]))
    ax.plot(peri.east, peri.north, "o", color=MODEL_COLOUR, mfc="none", ms=7, mew=1.0,
            label="pericentre", zorder=4)
    draw_direction_arrows(ax, *_arrow_positions(e, 3), MODEL_COLOUR)
    t = m.pos.t[sel]
    if t.size:
        marks = epoch_marks(t.min(), t.max(), e["period"])
        at = _track(e, marks)
        later = _track(e, marks + 0.002 * e["period"])
        draw_epoch_marks(ax, at.east, at.north, marks,
                         (0.5 * (tr.east.max() + tr.east.min()),
                          0.5 * (tr.north.max() + tr.north.min())),
                         later=(later.east, later.north))
    for ds in unique_names(m.pos.dataset[sel]):
        colour, marker = styles[ds]
        s = sel & (m.pos.dataset == ds)
        ax.errorbar(ra[s], dec[s], xerr=m.pos.ra_err[s], yerr=m.pos.dec_err[s], fmt=marker,
                    color=colour, mec="black", mew=0.3, elinewidth=0.6, zorder=3, label=ds,
                    rasterized=many)


def _residual_panel(ax, t, resid, err, datasets, label, styles, tag=None):
    ax.axhline(0.0, color=MODEL_COLOUR, lw=0.8)
    many = t.size > RASTER_POINTS
    for ds in unique_names(datasets):
        colour, marker = styles[ds]
        s = datasets == ds
        ax.errorbar(t[s], resid[s], yerr=err[s], fmt=marker, color=colour, mec="black",
                    mew=0.3, elinewidth=0.6, label=ds, rasterized=many)
    ax.set_ylabel(label)
    if tag:
        ax.text(0.01, 0.95, tag, transform=ax.transAxes, ha="left", va="top", fontsize=6.0,
                bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.7))


def position_classes(result, star):
    """Error classes (:func:`.marks.error_classes`) of a star's position data sets."""
    m = result.model
    sel = m.pos.star == m.stars.index(star)
    return error_classes(m.pos.dataset[sel], np.minimum(m.pos.ra_err, m.pos.dec_err)[sel])


def velocity_classes(result, star):
    """Error classes (:func:`.marks.error_classes`) of a star's velocity data sets."""
    m = result.model
    if m.vel is None:
        return []
    sel = m.vel.star == m.stars.index(star)
    return error_classes(m.vel.dataset[sel], m.vel.vr_err[sel]) if sel.any() else []


def _data_styles(result):
    """(colour, marker) of every data set, the same in every star's figure.

    Position data sets first, then velocity data sets, in order of first appearance.
    """
    m = result.model
    names = unique_names(m.pos.dataset)
    if m.vel is not None:
        names = unique_names(names + unique_names(m.vel.dataset))
    return {ds: style_of(j) for j, ds in enumerate(names)}


def star_inputs(result):
    """What every star's figure takes from the whole fit, computed once for all of them.

    Returns
    -------
    dict
        ``ra``, ``dec`` (:func:`mass_relative_positions`, mas), ``pred`` (the
        model's predictions of every row at the fit) and ``styles`` (the
        data-set styles, the same in every star's figure).
    """
    ra, dec = mass_relative_positions(result)
    return {"ra": ra, "dec": dec, "pred": result.model.predict(result.internal),
            "styles": _data_styles(result)}


def star_figure(result, star, draws=None, inputs=None):
    """Panels of one star: sky track, position residuals and radial velocities.

    The sky track carries a few epoch labels and arrows in the direction of
    motion.  Residuals get one pair of panels (east, north) per error class of
    data sets (:func:`position_classes`: median errors within a factor
    :data:`.marks.ERROR_RATIO`), and velocity residuals one panel per class.
    ``draws`` (posterior internal vectors) adds their orbits on the sky and a
    68% posterior-predictive band on the radial velocities.  One legend below
    the panels, clear of every curve; no title (the caption says what it shows).
    ``inputs`` (:func:`star_inputs` of the same result) saves recomputing the
    whole model for every star.

    Returns
    -------
    matplotlib.figure.Figure
    """
    m = result.model
    k = m.stars.index(star)
    inputs = star_inputs(result) if inputs is None else inputs
    ra, dec, pred = inputs["ra"], inputs["dec"], inputs["pred"]
    sel = m.pos.star == k
    vsel = (m.vel.star == k) if m.vel is not None else None
    has_rv = vsel is not None and bool(vsel.any())
    pos_classes = position_classes(result, star)
    vel_classes = velocity_classes(result, star) if has_rv else []
    styles = inputs["styles"]
    n_rows = 2 * max(len(pos_classes), 1) + (1 + len(vel_classes) if has_rv else 2)
    n_entries = len(set(m.pos.dataset[sel]) | (set(m.vel.dataset[vsel]) if has_rv else set())) \
        + 3 + (draws is not None and has_rv)
    legend_rows = int(np.ceil(n_entries / 4))
    height = max(5.6, 0.95 * n_rows + 1.0) + 0.16 * legend_rows
    bottom = (0.5 + 0.16 * legend_rows + 0.1) / height
    with matplotlib.rc_context(STYLE):
        fig = new_figure((9.0, height))
        grid = fig.add_gridspec(n_rows, 2, width_ratios=(1.05, 1.0), left=0.08, right=0.985,
                                bottom=bottom, top=1.0 - 0.15 / height, wspace=0.22,
                                hspace=0.14)
        ax_sky = fig.add_subplot(grid[:, 0])
        _sky_panel(ax_sky, result, k, ra, dec, styles, draws)
        axes = []
        t, ds = m.pos.t[sel], m.pos.dataset[sel]
        for group in pos_classes:
            g = np.isin(ds, group)
            tag = ", ".join(group) if len(pos_classes) > 1 else None
            for label, resid, err in (
                    (r"$\Delta\alpha\cos\delta$ res. (mas)", (m.pos.ra - pred.ra)[sel],
                     m.pos.ra_err[sel]),
                    (r"$\Delta\delta$ res. (mas)", (m.pos.dec - pred.dec)[sel],
                     m.pos.dec_err[sel])):
                ax = fig.add_subplot(grid[len(axes), 1], sharex=axes[0] if axes else None)
                _residual_panel(ax, t[g], resid[g], err[g], ds[g], label, styles, tag)
                axes.append(ax)
        if has_rv:
            ax_vr = fig.add_subplot(grid[len(axes), 1], sharex=axes[0])
            axes.append(ax_vr)
            res_axes = []
            for _ in vel_classes:
                res_axes.append(fig.add_subplot(grid[len(axes), 1], sharex=axes[0]))
                axes.append(res_axes[-1])
            _velocity_panels(ax_vr, res_axes, vel_classes, result, k, vsel, pred, styles,
                             draws)
        else:
            ax_note = fig.add_subplot(grid[len(axes):, 1])
            ax_note.set_axis_off()
            ax_note.text(0.5, 0.5, "no radial velocities:\nnode and argument of pericentre\n"
                         "are ambiguous by 180 deg", ha="center", va="center",
                         transform=ax_note.transAxes, fontsize=8)
        for ax in axes[:-1]:
            ax.tick_params(labelbottom=False)
        axes[-1].set_xlabel("epoch (Julian yr)")
        handles, labels = _gather_legend(fig.axes)
        fig.legend(handles, labels, loc="lower center", ncols=4, bbox_to_anchor=(0.5, 0.005),
                   markerscale=1.2)
    return fig


def _gather_legend(axes):
    """Legend entries of all panels, each label once, in the order first drawn."""
    out = {}
    for ax in axes:
        for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            if not lab.startswith("_"):
                out.setdefault(lab, h)
    return list(out.values()), list(out.keys())


def _velocity_panels(ax_vr, res_axes, classes, result, k, vsel, pred, styles, draws=None):
    m = result.model
    v = m.vel
    e = _elements(result, k)
    t_all = np.concatenate([m.pos.t[m.pos.star == k], v.t[vsel]])
    pad = 0.03 * max(np.ptp(t_all), 1.0)
    tt = _time_grid(e, t_all.min() - pad, t_all.max() + pad)
    many = int(vsel.sum()) > RASTER_POINTS
    if draws is not None:
        lo, hi = velocity_band(result, m.stars[k], draws, tt)
        ax_vr.fill_between(tt, lo, hi, color=PALETTE[1], alpha=0.45, lw=0, zorder=1,
                           label="posterior 68% band")
    model_vr = _full_velocity(result, k, tt)
    ax_vr.plot(tt, model_vr, color=MODEL_COLOUR, lw=0.9, label="model (best fit)")
    for ds in unique_names(v.dataset[vsel]):
        colour, marker = styles[ds]
        s = vsel & (v.dataset == ds)
        ax_vr.errorbar(v.t[s], v.vr[s], yerr=v.vr_err[s], fmt=marker, color=colour, mec="black",
                       mew=0.3, elinewidth=0.6, label=ds, rasterized=many)
    ax_vr.set_ylabel(r"$v_r$ (km/s)")
    ds = v.dataset[vsel]
    res = (v.vr - pred.vr)[vsel]
    for ax, group in zip(res_axes, classes, strict=True):
        g = np.isin(ds, group)
        _residual_panel(ax, v.t[vsel][g], res[g], v.vr_err[vsel][g], ds[g],
                        r"$v_r$ res. (km/s)", styles,
                        ", ".join(group) if len(classes) > 1 else None)


def _full_velocity(result, k, tt):
    """The fitted model's radial velocity of star k at epochs ``tt`` (all its effects)."""
    m = result.model
    star = m.stars[k]
    return model_at_epochs(m, star, t_vel=tt).predict(star_vector(m, result.internal, star)).vr


