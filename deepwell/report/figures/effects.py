"""Figures of the relativistic effects: data and models against the refitted Newtonian model.

Computing and drawing are split: :func:`redshift_curves` and
:func:`precession_curves` are pure functions returning plain arrays (tested
directly), :func:`redshift_figure` and :func:`precession_figure` only draw them.

The comparison is the Newtonian model *refitted* to the same data
(:class:`deepwell.results.newtonian.NewtonianRefit`), not a Keplerian orbit
with the fitted elements: for integrated stars those elements are osculating
at the apocentre epoch, and an ellipse touching the true orbit there would
make the drawn signal depend on that epoch.  Points are the data minus the
refitted Newtonian model (its residuals, with its own frame and data-set
terms); curves are the relativistic model minus the refitted Newtonian model
(both with their own frame and ``vz0``).  Where the two fits' data-set terms
differ, the points scatter about the curve by those differences as well as
by the relativistic fit's residuals.
"""

import matplotlib
import numpy as np

from deepwell.model.epochs import model_at_epochs, star_vector, with_shared
from deepwell.results.effect_sizes import star_effect_sizes

from .marks import error_classes
from .orbits import position_classes
from .style import MODEL_COLOUR, PALETTE, STYLE, file_stem, new_figure, style_of, unique_names

__all__ = ["redshift_curves", "precession_curves", "redshift_figure", "precession_figure",
           "effect_stem", "strength_text", "newtonian_text", "effect_figure_jobs"]

#: Colours of the two effect strengths (Okabe-Ito: blue for 1, vermillion for 0).
STRENGTH_ONE, STRENGTH_ZERO = PALETTE[3], PALETTE[4]


def effect_stem(kind, star):
    """File stem ``<kind>_<star>``, made safe by :func:`.style.file_stem`."""
    return file_stem(kind, star)


def _frame(model, vec, t):
    """Frame terms x0 + vx0 (t - t_ref), y0 + vy0 (t - t_ref) of one fit (mas)."""
    sh = model.layout.shared
    dt = np.asarray(t) - model.reference_epoch
    return np.stack([sh(vec, "x0") + sh(vec, "vx0") * dt, sh(vec, "y0") + sh(vec, "vy0") * dt])


def _passage_near(t_peri, period, t_centre):
    return t_peri + period * np.round((t_centre - t_peri) / period)


def _star_rows(model, frame, star):
    """Rows of ``star`` in ``frame`` (model.pos or model.vel) of ``model``."""
    if frame is None:
        return np.zeros(0, bool)
    return frame.star == model.stars.index(star)


def _newtonian_at(newtonian, star, t_pos=(), t_vel=()):
    """The refitted Newtonian model of ``star`` at chosen epochs (mass-relative positions)."""
    nm, nv = newtonian.result.model, newtonian.result.internal
    return model_at_epochs(nm, star, t_pos=t_pos, t_vel=t_vel).predict(star_vector(nm, nv, star))


def _full_at(result, star, vec, t_pos=(), t_vel=()):
    m = result.model
    return model_at_epochs(m, star, t_pos=t_pos, t_vel=t_vel).predict(star_vector(m, vec, star))


def _strength_vectors(result, name):
    """Vectors of the full model at strength 1, 0 and (when fitted) at the fitted value."""
    free = _strength(result, name)[0]
    m, vec = result.model, result.internal
    return (with_shared(m, vec, name, 1.0), with_shared(m, vec, name, 0.0),
            vec if free else None)


def redshift_curves(result, star, newtonian, sizes=None, half_width=None, n=801):
    """Radial velocities around one pericentre, relative to the refitted Newtonian model.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
        A fit whose model includes the redshift (``f`` in the layout).
    star : str
    newtonian : deepwell.results.newtonian.NewtonianRefit
        The Newtonian model refitted to the same data.
    sizes : dict, optional
        The star's entry of :func:`deepwell.results.effect_sizes.star_effect_sizes`
        (gives the observed pericentre epoch and integrated period).
    half_width : float, optional
        Half the time window (yr); default a tenth of the period, at most 2 yr.
    n : int
        Epochs in the window.

    Returns
    -------
    dict
        ``t`` (yr), ``t_peri`` (observed pericentre epoch shown), ``model``
        (the relativistic model as fitted minus the refitted Newtonian model,
        km/s), ``f1`` and ``f0`` (the same with f set to 1 and to 0),
        ``t_data``, ``resid_data``, ``err_data``, ``dataset`` (velocity data
        in the window minus the refitted Newtonian model at their rows),
        ``f_fit`` (the fitted or held f), ``f_free`` (whether f was fitted),
        ``f_sigma`` (its error, 0 when held) and ``ffit`` (``model`` when f is
        fitted, else None).
    """
    m, vec = result.model, result.internal
    k = m.stars.index(star)
    el = {q: float(v[k]) for q, v in m.layout.elements(vec).items()}
    if sizes is None:
        sizes = star_effect_sizes(result)[star]
    period = float(sizes["integrated_period"])
    nm = newtonian.result.model
    sel = _star_rows(nm, nm.vel, star)
    centre = np.median(nm.vel.t[sel]) if sel.any() else el["t_peri"]
    t_p = float(_passage_near(float(sizes["pericentre_observed"]), period, centre))
    hw = half_width or min(0.1 * period, 2.0)
    t = np.linspace(t_p - hw, t_p + hw, n)
    win = sel & (np.abs(nm.vel.t - t_p) <= hw) if sel.any() else sel
    v_newt = _newtonian_at(newtonian, star, t_vel=t).vr
    v1, v0, vf = (None if v is None else _full_at(result, star, v, t_vel=t).vr - v_newt
                  for v in _strength_vectors(result, "f"))
    free, f_fit, f_sig = _strength(result, "f")
    model = vf if free else {1.0: v1, 0.0: v0}.get(f_fit)
    if model is None:
        model = _full_at(result, star, vec, t_vel=t).vr - v_newt
    data = {"t_data": np.zeros(0), "resid_data": np.zeros(0), "err_data": np.zeros(0),
            "dataset": np.zeros(0, str)}
    if win.any():
        pred = nm.predict(newtonian.result.internal).vr
        data = {"t_data": nm.vel.t[win], "resid_data": (nm.vel.vr - pred)[win],
                "err_data": nm.vel.vr_err[win], "dataset": nm.vel.dataset[win]}
    return {"t": t, "t_peri": t_p, "model": model, "f1": v1, "f0": v0, **data,
            "f_fit": f_fit, "f_free": free, "f_sigma": f_sig, "ffit": vf}


def precession_curves(result, star, newtonian, n=1500):
    """Sky positions over the data span, relative to the refitted Newtonian model.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
        A fit whose model includes the 1PN precession (``f_sp`` in the layout).
    star : str
    newtonian : deepwell.results.newtonian.NewtonianRefit
    n : int
        Epochs of the curves.

    Returns
    -------
    dict
        ``t`` (yr); ``model``, ``sp1``, ``sp0`` (arrays of shape (2, n): east
        and north offsets in mas of the relativistic model as fitted, with
        f_sp = 1 and with f_sp = 0, minus the refitted Newtonian model, for
        positions measured from the mass) and ``spfit`` (``model`` when f_sp is
        fitted, else None); ``frame_shift`` (shape (2, n): the difference of
        the two fits' frame terms, added to the curves of positions measured
        in the frame); ``t_data``, ``resid_data`` (shape (2, m): data minus the
        refitted Newtonian model at their rows), ``err_data`` (shape (2, m)),
        ``dataset``, ``frame_row`` (rows measured in the frame);
        ``panels``: one dict per error class of the star's data sets
        (:func:`.marks.error_classes`, most precise first) with ``datasets``,
        ``rows`` (mask over the data), ``relative_to`` ("frame" when most of
        its rows are), its own ``model``, ``sp1``, ``sp0``, ``spfit`` and
        ``ylim`` (east and north axis limits, mas, around its data);
        ``f_sp_fit``, ``f_sp_free``, ``f_sp_sigma``.
    """
    m, vec = result.model, result.internal
    nm, nv = newtonian.result.model, newtonian.result.internal
    sel = _star_rows(nm, nm.pos, star)
    t_obs = nm.pos.t[sel]
    pad = 0.03 * max(np.ptp(t_obs), 1.0)
    t = np.linspace(t_obs.min() - pad, t_obs.max() + pad, n)
    pn = _newtonian_at(newtonian, star, t_pos=t)
    base = np.stack([pn.ra, pn.dec])

    def minus_newton(v):
        if v is None:
            return None
        p = _full_at(result, star, v, t_pos=t)
        return np.stack([p.ra, p.dec]) - base

    sp1, sp0, spfit = (minus_newton(v) for v in _strength_vectors(result, "f_sp"))
    free, f_fit, f_sig = _strength(result, "f_sp")
    model = spfit if free else {1.0: sp1, 0.0: sp0}.get(f_fit)
    if model is None:
        model = minus_newton(vec)
    shift = _frame(m, vec, t) - _frame(nm, nv, t)
    pred = nm.predict(nv)
    resid = np.stack([(nm.pos.ra - pred.ra)[sel], (nm.pos.dec - pred.dec)[sel]])
    err = np.stack([nm.pos.ra_err[sel], nm.pos.dec_err[sel]])
    ds, frame_row = nm.pos.dataset[sel], nm.pos.frame[sel] > 0.5
    panels = []
    for group in error_classes(ds, np.minimum(*err)):
        rows = np.isin(ds, group)
        in_frame = frame_row[rows].mean() > 0.5
        add = shift if in_frame else 0.0
        curves = {key: None if c is None else c + add for key, c in
                  (("model", model), ("sp1", sp1), ("sp0", sp0), ("spfit", spfit))}
        panels.append({"datasets": group, "rows": rows,
                       "relative_to": "frame" if in_frame else "mass", **curves,
                       "ylim": _panel_limits(t, curves, t_obs[rows], resid[:, rows],
                                             err[:, rows])})
    return {"t": t, "model": model, "sp1": sp1, "sp0": sp0, "spfit": spfit,
            "frame_shift": shift, "t_data": t_obs, "resid_data": resid, "err_data": err,
            "dataset": ds, "frame_row": frame_row, "panels": panels,
            "f_sp_fit": f_fit, "f_sp_free": free, "f_sp_sigma": f_sig}


def _panel_limits(t, curves, t_data, resid, err):
    """y limits (mas) of one class's east and north panels: its data with their errors and
    the curves over the span of its data (10% margin), so precise data fill their panel."""
    span = (t >= t_data.min() - 0.05 * np.ptp(t)) & (t <= t_data.max() + 0.05 * np.ptp(t))
    out = []
    for j in (0, 1):
        values = [resid[j] - err[j], resid[j] + err[j], [0.0]]
        values += [c[j][span] for c in curves.values() if c is not None]
        lo, hi = float(min(np.min(v) for v in values)), float(max(np.max(v) for v in values))
        pad = 0.1 * max(hi - lo, 1e-6)
        out.append((lo - pad, hi + pad))
    return out


def _strength(result, name):
    """(fitted?, value, 1-sigma) of an effect strength f or f_sp."""
    i = result.model.layout.shared_names.index(name)
    free = bool(result.free[i])
    return free, float(result.internal[i]), float(result.sigma(name)) if free else 0.0


def strength_text(result, name, symbol):
    """Caption words: "fitted f = 1.02 ± 0.05" or "f held at 1" (never "fitted" when held).

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
    name : {"f", "f_sp"}
        The effect strength (dimensionless).
    symbol : str
        How it is written in the caption.
    """
    free, value, sigma = _strength(result, name)
    if free:
        return f"fitted {symbol} = {value:.3g} ± {sigma:.2g}"
    return f"{symbol} held at {value:.3g}"


def newtonian_text(newtonian, star=None):
    """Caption words on the comparison model: its Δχ² and how many parameters it lacks.

    "relative to the Newtonian model refitted to the same data (Δχ² = 41.3 for
    2 fewer parameters, all data; 30.2 from this star's)"; "for the same number
    of free parameters" when the strengths are held.
    """
    k = newtonian.fewer_parameters
    dof = (f"for {k} fewer parameter{'s' if k != 1 else ''}" if k > 0 else
           "for the same number of free parameters")
    own = newtonian.star_delta_chi2.get(star)
    return ("relative to the Newtonian model refitted to the same data (Δχ² = "
            f"{newtonian.delta_chi2:.1f} {dof}"
            + ("" if own is None else f", all data; {own:.1f} from this star's")
            + ("" if newtonian.converged else "; that refit did NOT converge") + ")")


# ------------------------------------------------------------------ drawing
#: Label of the zero line (avoids the word "fitted", kept for fitted strengths).
NEWTON_LABEL = "best Newtonian model of these data"


def _data_styles(datasets):
    return {ds: style_of(j + 2) for j, ds in enumerate(unique_names(datasets))}


def _data(ax, t, resid, err, datasets, styles):
    for ds in unique_names(datasets):
        colour, marker = styles[ds]
        s = datasets == ds
        ax.errorbar(t[s], resid[s], yerr=err[s], fmt=marker, color=colour, mec="black",
                    mew=0.3, elinewidth=0.6, zorder=3, label=f"data: {ds}")


def _curves(ax, t, d, j, symbol, latex, value, free, off_word):
    """Zero line and model curves of component ``j`` (None: 1-d curves) of ``d``."""
    pick = (lambda c: c) if j is None else (lambda c: c[j])
    ax.axhline(0.0, color=MODEL_COLOUR, lw=0.8, label=NEWTON_LABEL)
    if free:
        ax.plot(t, pick(d["fit"]), color=MODEL_COLOUR, lw=1.0, ls="-.",
                label=f"model, fitted {latex} = {value:.3g}")
    elif value not in (0.0, 1.0):
        ax.plot(t, pick(d["model"]), color=MODEL_COLOUR, lw=1.0, ls="-.",
                label=f"model, {latex} held at {value:.3g}")
    ax.plot(t, pick(d["one"]), color=STRENGTH_ONE, lw=1.2,
            label=f"model, {latex} = 1 (relativity)")
    ax.plot(t, pick(d["zero"]), color=STRENGTH_ZERO, lw=1.2, ls="--",
            label=f"model, {latex} = 0 ({off_word})")


def redshift_figure(star, d):
    """Draw :func:`redshift_curves` output ``d``; returns a Figure."""
    with matplotlib.rc_context(STYLE):
        fig = new_figure((7.6, 3.8))
        ax = fig.add_axes((0.1, 0.13, 0.54, 0.82))
        _curves(ax, d["t"], {"fit": d["ffit"], "model": d["model"], "one": d["f1"],
                             "zero": d["f0"]}, None, "f", "f", d["f_fit"], d["f_free"],
                "no redshift")
        ax.axvline(d["t_peri"], color=MODEL_COLOUR, lw=0.6, ls=":",
                   label="pericentre passage as seen (light-travel delayed)")
        if d["t_data"].size:
            _data(ax, d["t_data"], d["resid_data"], d["err_data"], d["dataset"],
                  _data_styles(d["dataset"]))
        ax.set_xlabel("epoch (Julian yr)")
        ax.set_ylabel(r"$v_r - v_{r,\mathrm{Newton}}$ (km/s)")
        ax.set_xlim(d["t"][0], d["t"][-1])
        ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)
    return fig


def precession_figure(star, d):
    """Draw :func:`precession_curves` output ``d``; returns a Figure.

    One pair of panels (east, north) per error class of the star's data sets,
    so data sets whose errors differ by more than :data:`.marks.ERROR_RATIO`
    never share an axis.
    """
    labels = (r"$\Delta\alpha\cos\delta$ res. (mas)", r"$\Delta\delta$ res. (mas)")
    panels = d["panels"]
    styles = _data_styles(d["dataset"])
    rows = 2 * len(panels)
    height = max(4.8, 1.35 * rows + 0.8)
    with matplotlib.rc_context(STYLE):
        fig = new_figure((7.8, height))
        grid = fig.add_gridspec(rows, 1, left=0.1, right=0.64, bottom=0.5 / height,
                                top=1.0 - 0.15 / height, hspace=0.12)
        axes = []
        for p in panels:
            r = p["rows"]
            for j in (0, 1):
                ax = fig.add_subplot(grid[len(axes), 0], sharex=axes[0] if axes else None)
                _curves(ax, d["t"], {"fit": p["spfit"], "model": p["model"], "one": p["sp1"],
                                     "zero": p["sp0"]}, j, "f_sp", r"$f_\mathrm{SP}$",
                        d["f_sp_fit"], d["f_sp_free"], "no precession")
                _data(ax, d["t_data"][r], d["resid_data"][j][r], d["err_data"][j][r],
                      d["dataset"][r], styles)
                ax.set_ylabel(labels[j])
                ax.set_xlim(d["t"][0], d["t"][-1])
                ax.set_ylim(*p["ylim"][j])
                if len(panels) > 1:
                    ax.text(0.01, 0.95, ", ".join(p["datasets"]), transform=ax.transAxes,
                            ha="left", va="top", fontsize=6.0,
                            bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none",
                                      alpha=0.7))
                axes.append(ax)
        for ax in axes[:-1]:
            ax.tick_params(labelbottom=False)
        axes[-1].set_xlabel("epoch (Julian yr)")
        entries = {}
        for ax in axes:
            for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
                entries.setdefault(lab, h)
        axes[0].legend(list(entries.values()), list(entries.keys()), loc="upper left",
                       bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)
    return fig


def _split_text(result, star):
    classes = position_classes(result, star)
    if len(classes) < 2:
        return ""
    return ("Data sets whose typical errors differ by more than a factor 10 get their own "
            f"pair of panels ({'; '.join(', '.join(c) for c in classes)}). ")


def effect_figure_jobs(result, sizes, newtonian):
    """(stem, build, caption) of every effect figure worth drawing.

    A redshift figure is made for a star whose redshift excess exceeds its
    median velocity error (and the model has the redshift); a precession
    figure when its precession sky shift exceeds its smallest position error
    and the star is integrated with the 1PN terms.  Both compare with the
    refitted Newtonian model ``newtonian``; without it (None) no figure is made.
    """
    m = result.model
    jobs = []
    if newtonian is None:
        return jobs
    for k, star in enumerate(m.stars):
        s = sizes[star]
        against = newtonian_text(newtonian, star)
        if "f" in m.layout.extra and s["detectable_redshift"]:
            jobs.append((effect_stem("redshift", star),
                         lambda st=star: redshift_figure(st, redshift_curves(
                             result, st, newtonian, sizes[st])),
                         f"Star {star}: radial velocities around pericentre {against}; "
                         f"{strength_text(result, 'f', 'f')}. Points: the velocity data minus "
                         "that Newtonian model (its residuals). Lines: the relativistic model "
                         "minus the Newtonian model; solid: redshift factor f = 1; dashed: "
                         "f = 0 (what remains is the Rømer delay and precession)"
                         + ("; dash-dotted: the fitted f" if _strength(result, "f")[0] else "")
                         + ". The redshift excess at pericentre is "
                         f"{s['redshift_excess_kms']:.0f} km/s against a median velocity error "
                         f"of {s['median_velocity_error_kms']:.0f} km/s."))
        if "f_sp" in m.layout.extra and s["detectable_precession"] and m.integrated[k]:
            jobs.append((effect_stem("precession", star),
                         lambda st=star: precession_figure(st, precession_curves(
                             result, st, newtonian)),
                         f"Star {star}: sky positions {against}; "
                         f"{strength_text(result, 'f_sp', 'f_SP')}. Points: the position data "
                         "minus that Newtonian model (its residuals, with its own frame). "
                         "Lines: the relativistic model minus the Newtonian model; solid: the "
                         "1PN terms on (f_SP = 1); dashed: f_SP = 0"
                         + ("; dash-dotted: the fitted f_SP" if _strength(result, "f_sp")[0]
                            else "")
                         + ". " + _split_text(result, star) + "The precession moves the orbit "
                         f"by {s['precession_mas']:.2g} mas per revolution against a smallest "
                         f"position error of {s['min_position_error_mas']:.2g} mas."))
    return jobs
