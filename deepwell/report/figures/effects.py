"""Figures of the relativistic effects: data and models against a Newtonian orbit.

Computing and drawing are split: :func:`redshift_curves` and
:func:`precession_curves` are pure functions returning plain arrays (tested
directly), :func:`redshift_figure` and :func:`precession_figure` only draw them.

The Newtonian comparison orbit has the *same* fitted elements, distance and
frame, evaluated with every effect switched off (the model of
:meth:`deepwell.model.JointModel.keplerian`).  For integrated stars the
elements are osculating at the apocentre epoch, so the comparison orbit is the
Keplerian ellipse touching the true orbit there; near pericentre the two differ
by the relativistic terms only.
"""

import matplotlib
import numpy as np

from deepwell.model.epochs import model_at_epochs, star_vector, with_shared
from deepwell.results.effect_sizes import star_effect_sizes

from .style import MODEL_COLOUR, PALETTE, STYLE, file_stem, new_figure, style_of, unique_names

__all__ = ["redshift_curves",
           "precession_curves", "redshift_figure", "precession_figure", "effect_stem",
           "strength_text"]

#: Colours of the two effect strengths (Okabe-Ito: blue for 1, vermillion for 0).
STRENGTH_ONE, STRENGTH_ZERO = PALETTE[3], PALETTE[4]


def effect_stem(kind, star):
    """File stem ``<kind>_<star>``, made safe by :func:`.style.file_stem`."""
    return file_stem(kind, star)


def _frame(model, vec, t, frame):
    sh = model.layout.shared
    dt = np.asarray(t) - model.reference_epoch
    return ((sh(vec, "x0") + sh(vec, "vx0") * dt) * frame,
            (sh(vec, "y0") + sh(vec, "vy0") * dt) * frame)


def _passage_near(t_peri, period, t_centre):
    return t_peri + period * np.round((t_centre - t_peri) / period)


def redshift_curves(result, star, sizes=None, half_width=None, n=801):
    """Radial velocities around one pericentre, relative to the Newtonian orbit.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
        A fit whose model includes the redshift (``f`` in the layout).
    star : str
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
        ``t`` (yr), ``t_peri`` (observed pericentre epoch shown), ``f1`` and
        ``f0`` (full model with f = 1 and f = 0 minus the Newtonian orbit,
        km/s), ``t_data``, ``resid_data``, ``err_data``, ``dataset`` (velocity
        data in the window minus the Newtonian orbit at their epochs),
        ``f_fit`` (the fitted or fixed f), ``f_free`` (whether f was fitted),
        ``f_sigma`` (its error, 0 when held) and ``ffit`` (the model at the
        fitted f minus the Newtonian orbit; None when f is held).
    """
    m, vec = result.model, result.internal
    k = m.stars.index(star)
    el = {q: float(v[k]) for q, v in m.layout.elements(vec).items()}
    if sizes is None:

        sizes = star_effect_sizes(result)[star]
    period = float(sizes["integrated_period"])
    sel = m.vel.star == k if m.vel is not None else np.zeros(0, bool)
    centre = np.median(m.vel.t[sel]) if sel.any() else el["t_peri"]
    t_p = float(_passage_near(float(sizes["pericentre_observed"]), period, centre))
    hw = half_width or min(0.1 * period, 2.0)
    t = np.linspace(t_p - hw, t_p + hw, n)
    win = sel & (np.abs(m.vel.t - t_p) <= hw) if sel.any() else sel
    t_all = np.concatenate([t, m.vel.t[win] if win.any() else []])
    full = model_at_epochs(m, star, t_vel=t_all)
    newt = model_at_epochs(m, star, t_vel=t_all, newtonian=True)
    v_newt = newt.predict(star_vector(m, vec, star, newtonian=True)).vr
    v1 = full.predict(star_vector(m, with_shared(m, vec, "f", 1.0), star)).vr
    v0 = full.predict(star_vector(m, with_shared(m, vec, "f", 0.0), star)).vr
    free, f_fit, f_sig = _strength(result, "f")
    v_fit = full.predict(star_vector(m, vec, star)).vr if free else None
    nt = t.size
    return {
        "t": t, "t_peri": t_p, "f1": (v1 - v_newt)[:nt], "f0": (v0 - v_newt)[:nt],
        "t_data": m.vel.t[win] if win.any() else np.zeros(0),
        "resid_data": (m.vel.vr[win] - v_newt[nt:]) if win.any() else np.zeros(0),
        "err_data": m.vel.vr_err[win] if win.any() else np.zeros(0),
        "dataset": m.vel.dataset[win] if win.any() else np.zeros(0, str),
        "f_fit": f_fit, "f_free": free, "f_sigma": f_sig,
        "ffit": None if v_fit is None else (v_fit - v_newt)[:nt],
    }


def precession_curves(result, star, n=1500):
    """Sky positions over the data span, relative to the Newtonian orbit.

    Returns
    -------
    dict
        ``t`` (yr), ``sp1`` and ``sp0`` (arrays of shape (2, n): east and
        north offsets in mas of the full model with f_sp = 1 and f_sp = 0 from
        the Newtonian orbit), ``t_data``, ``resid_data`` (shape (2, m), data
        minus the Newtonian orbit including the fitted frame), ``err_data``
        (shape (2, m)), ``dataset``, ``f_sp_fit``, ``f_sp_free``, ``f_sp_sigma``
        and ``spfit`` (the model at the fitted f_sp; None when f_sp is held).
    """
    m, vec = result.model, result.internal
    k = m.stars.index(star)
    sel = m.pos.star == k
    t_obs = m.pos.t[sel]
    pad = 0.03 * max(np.ptp(t_obs), 1.0)
    t = np.linspace(t_obs.min() - pad, t_obs.max() + pad, n)
    t_all = np.concatenate([t, t_obs])
    full = model_at_epochs(m, star, t_pos=t_all)
    newt = model_at_epochs(m, star, t_pos=t_all, newtonian=True)
    pn = newt.predict(star_vector(m, vec, star, newtonian=True))
    p1 = full.predict(star_vector(m, with_shared(m, vec, "f_sp", 1.0), star))
    p0 = full.predict(star_vector(m, with_shared(m, vec, "f_sp", 0.0), star))
    free, f_fit, f_sig = _strength(result, "f_sp")
    pf = full.predict(star_vector(m, vec, star)) if free else None
    fx, fy = _frame(m, vec, t_obs, m.pos.frame[sel])
    model_ra = pn.ra[n:] + fx
    model_dec = pn.dec[n:] + fy
    return {
        "t": t,
        "sp1": np.stack([(p1.ra - pn.ra)[:n], (p1.dec - pn.dec)[:n]]),
        "sp0": np.stack([(p0.ra - pn.ra)[:n], (p0.dec - pn.dec)[:n]]),
        "t_data": t_obs,
        "resid_data": np.stack([m.pos.ra[sel] - model_ra, m.pos.dec[sel] - model_dec]),
        "err_data": np.stack([m.pos.ra_err[sel], m.pos.dec_err[sel]]),
        "dataset": m.pos.dataset[sel],
        "f_sp_fit": f_fit, "f_sp_free": free, "f_sp_sigma": f_sig,
        "spfit": None if pf is None else np.stack([(pf.ra - pn.ra)[:n], (pf.dec - pn.dec)[:n]]),
    }


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


# ------------------------------------------------------------------ drawing
def _data(ax, t, resid, err, datasets, offset=0):
    for j, ds in enumerate(unique_names(datasets)):
        colour, marker = style_of(j + offset)
        s = datasets == ds
        ax.errorbar(t[s], resid[s], yerr=err[s], fmt=marker, color=colour, mec="black",
                    mew=0.3, elinewidth=0.6, zorder=3, label=f"data: {ds}")


def redshift_figure(star, d):
    """Draw :func:`redshift_curves` output ``d``; returns a Figure."""
    with matplotlib.rc_context(STYLE):
        fig = new_figure((7.6, 3.8))
        ax = fig.add_axes((0.1, 0.13, 0.54, 0.82))
        ax.axhline(0.0, color=MODEL_COLOUR, lw=0.8, label="Newtonian orbit (all effects off)")
        ax.plot(d["t"], d["f1"], color=STRENGTH_ONE, lw=1.2, label="model, f = 1 (relativity)")
        ax.plot(d["t"], d["f0"], color=STRENGTH_ZERO, lw=1.2, ls="--",
                label="model, f = 0 (no redshift)")
        if d.get("ffit") is not None:
            ax.plot(d["t"], d["ffit"], color=MODEL_COLOUR, lw=1.0, ls="-.",
                    label=f"model, fitted f = {d['f_fit']:.3g}")
        ax.axvline(d["t_peri"], color=MODEL_COLOUR, lw=0.6, ls=":",
                   label="pericentre passage as seen (light-travel delayed)")
        if d["t_data"].size:
            _data(ax, d["t_data"], d["resid_data"], d["err_data"], d["dataset"], offset=2)
        ax.set_xlabel("epoch (Julian yr)")
        ax.set_ylabel(r"$v_r - v_{r,\mathrm{Newton}}$ (km/s)")
        ax.set_xlim(d["t"][0], d["t"][-1])
        ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)
    return fig


def precession_figure(star, d):
    """Draw :func:`precession_curves` output ``d``; returns a Figure."""
    labels = (r"$\Delta\alpha\cos\delta$ res. (mas)", r"$\Delta\delta$ res. (mas)")
    with matplotlib.rc_context(STYLE):
        fig = new_figure((7.8, 4.8))
        axes = [fig.add_axes((0.1, 0.555, 0.54, 0.41)), fig.add_axes((0.1, 0.11, 0.54, 0.41))]
        for j, ax in enumerate(axes):
            ax.axhline(0.0, color=MODEL_COLOUR, lw=0.8, label="Newtonian orbit (all effects off)")
            ax.plot(d["t"], d["sp1"][j], color=STRENGTH_ONE, lw=1.2,
                    label=r"model, $f_\mathrm{SP}$ = 1 (relativity)")
            ax.plot(d["t"], d["sp0"][j], color=STRENGTH_ZERO, lw=1.2, ls="--",
                    label=r"model, $f_\mathrm{SP}$ = 0 (no precession)")
            if d.get("spfit") is not None:
                ax.plot(d["t"], d["spfit"][j], color=MODEL_COLOUR, lw=1.0, ls="-.",
                        label=rf"model, fitted $f_\mathrm{{SP}}$ = {d['f_sp_fit']:.3g}")
            _data(ax, d["t_data"], d["resid_data"][j], d["err_data"][j], d["dataset"])
            ax.set_ylabel(labels[j])
            ax.set_xlim(d["t"][0], d["t"][-1])
        axes[0].tick_params(labelbottom=False)
        axes[1].set_xlabel("epoch (Julian yr)")
        axes[0].legend(loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0)
    return fig


def effect_figure_jobs(result, sizes):
    """(stem, build, caption) of every effect figure worth drawing.

    A redshift figure is made for a star whose redshift excess exceeds its
    median velocity error (and the model has the redshift); a precession
    figure when its precession sky shift exceeds its smallest position error
    and the star is integrated with the 1PN terms.
    """
    m = result.model
    jobs = []
    for k, star in enumerate(m.stars):
        s = sizes[star]
        if "f" in m.layout.extra and s["detectable_redshift"]:
            jobs.append((effect_stem("redshift", star),
                         lambda st=star: redshift_figure(st, redshift_curves(result, st,
                                                                             sizes[st])),
                         f"Star {star}: redshift at pericentre "
                         f"({strength_text(result, 'f', 'f')}). "
                         "Radial velocities around pericentre minus a Newtonian "
                         "orbit with the same fitted elements and every effect off. Solid: the "
                         "full model with redshift factor f = 1; dashed: f = 0 (what remains is "
                         "the Rømer delay and precession). The redshift excess at pericentre is "
                         f"{s['redshift_excess_kms']:.0f} km/s against a median velocity error "
                         f"of {s['median_velocity_error_kms']:.0f} km/s."))
        if "f_sp" in m.layout.extra and s["detectable_precession"] and m.integrated[k]:
            jobs.append((effect_stem("precession", star),
                         lambda st=star: precession_figure(st, precession_curves(result, st)),
                         f"Star {star}: sky positions against the Newtonian orbit "
                         f"({strength_text(result, 'f_sp', 'f_SP')}). "
                         "Sky positions minus a Newtonian orbit with the same fitted "
                         "elements and frame, every effect off. Solid: the full model with the "
                         "1PN terms (f_SP = 1); dashed: f_SP = 0. The precession moves the orbit "
                         f"by {s['precession_mas']:.2g} mas per revolution against a smallest "
                         f"position error of {s['min_position_error_mas']:.2g} mas."))
    return jobs
