"""Plan the next observations from a finished fit.

From a saved fit (:func:`deepwell.results.saved_fit.load_fit`) this module predicts where
every star will be, when it passes pericentre and apocentre, when two stars
are too close on the sky to be measured apart, and which candidate epochs
would shrink the errors of the mass, the distance and the effect strengths
f and f_sp the most.  :func:`make_plan` does the computation and returns a
:class:`Plan`; :func:`deepwell.report.plan.write_plan` writes it out;
:func:`add_plan_parser` / :func:`run_plan` are the ``deepwell plan`` command.

Uncertainties come from draws of the internal vector: the least-squares
Gaussian N(internal, internal_cov) over the fitted entries, or posterior
samples when the report holds them (``posterior-samples.npz`` with arrays
``internal_samples`` (..., n_internal) and ``internal_names``).

Forecast (Fisher information)
-----------------------------
The information of a candidate epoch is J^T J of the whitened residuals of
a synthetic model observing every star at that epoch with the stated errors
(central differences at the fitted vector).  It is added to the information
of the data in hand, I_0 = C^-1 (the fit's covariance, or the samples'
covariance).  When f or f_sp is in the model but was held fixed in the fit,
the forecast frees it: I_0 is then J^T J of the fit's own residuals (data
and priors) at the solution over the fitted entries plus the freed ones, so
"now" means "what the data in hand say about f with f free".  A strength not
in the model at all (its effect switched off) is reported as such and
skipped.  The forecast assumes the model is right and the stated errors are
the true ones; it is linear around the fitted solution.
"""

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from deepwell.core.constants import C_AU_PER_YR
from deepwell.core.errors import InputError
from deepwell.fit.jacobian import default_steps, numerical_jacobian
from deepwell.model.epochs import observations_at
from deepwell.results.effect_sizes import pericentre_epochs
from deepwell.tables.observations import EPOCH_RANGE

__all__ = ["PlanSettings", "Plan", "make_plan", "synthetic_model", "draw_vectors",
           "predict_grid", "position_ellipse", "next_passages", "information_gain",
           "load_samples", "close_approaches", "candidate_epochs", "fisher_forecast",
           "parse_months", "check_plan_settings", "TARGETS", "SAMPLES_FILE", "LIMITS"]

#: Quantities whose forecast errors are ranked.
TARGETS = ("mass", "distance", "f", "f_sp")
#: Optional file of posterior samples in a report folder (see module docstring).
SAMPLES_FILE = "posterior-samples.npz"
#: Bounds of what can be planned (refused beyond them, naming the option): epochs in
#: the accepted range of the tables (EPOCH_RANGE), a span of at most ``span`` years,
#: at most ``grid`` prediction epochs, ``draws`` parameter draws, ``per_season``
#: candidates per season and ``candidates`` candidate epochs in all.  Beyond them the
#: work grows without use to an observer (and a typing error would run for hours).
LIMITS = {"span": 200.0, "grid": 5000, "draws": 20000, "per_season": 12, "candidates": 2000}
#: Percentiles of the bands: 95% (2.5, 97.5) and 68% (16, 84) central intervals.
BAND_PERCENTILES = (2.5, 16.0, 50.0, 84.0, 97.5)
#: A pair counts as confused when this fraction of draws is closer than the resolution.
CONFUSION_PROBABILITY = 0.05


@dataclass(frozen=True)
class PlanSettings:
    """What to plan (epochs in Julian years TT, errors in mas and km/s).

    Attributes
    ----------
    start, end : float
        Span of the predictions and of the candidate epochs.
    step : float or None
        Spacing of the prediction grid (default: span / 250).
    n_draws : int
        Draws of the parameters for the bands.
    seed : int
    months : tuple of int or None
        Observable months (1-12), e.g. (3, 4, ..., 9); None: all year.
    per_season : int
        Candidate epochs per observing season, spread evenly in the window.
    epochs : tuple of float or None
        Candidate epochs given by the user (then ``months`` only filters them).
    astrometry_error, velocity_error : float or None
        Stated per-epoch errors of a new observation (default: the median
        stated error of the data in hand).
    relative_to : {"frame", "mass"}
        How new positions are measured.
    resolution : float
        Separation (mas) below which two stars' astrometry is confused.
    """

    start: float
    end: float
    step: float | None = None
    n_draws: int = 300
    seed: int = 0
    months: tuple | None = None
    per_season: int = 1
    epochs: tuple | None = None
    astrometry_error: float | None = None
    velocity_error: float | None = None
    relative_to: str = "frame"
    resolution: float = 60.0


@dataclass(frozen=True)
class Plan:
    """Everything :func:`make_plan` found; tables are pandas DataFrames.

    Attributes
    ----------
    settings : PlanSettings
        With the errors actually used filled in.
    predictions : DataFrame
        Per star and grid epoch: ``ra``, ``dec`` (east, north of the mass),
        ``ra_frame``, ``dec_frame`` (in the astrometric frame), ``sep`` (mas)
        and ``vr`` (km/s), each as best fit and ``_lo95``, ``_lo68``,
        ``_hi68``, ``_hi95``; ``pos95_major``, ``pos95_minor`` (mas) and
        ``pos95_pa`` (deg, east of north): the 95% error ellipse of the position.
    passages : DataFrame
        Per star: next pericentre and apocentre epoch after ``start`` and
        their sigmas (yr), period (yr), ``integrated``.
    approaches : DataFrame
        Intervals in which a pair of stars may be closer than the resolution.
    forecast : DataFrame
        Per candidate epoch (and a row ``all`` for all together): for each
        target ``sigma_now_<q>``, ``sigma_after_<q>``, ``gain_<q>`` (fractional
        shrinkage of the error) and ``rank_<q>``.
    notes : tuple of str
        Caveats and choices, in plain words, for the written plan.
    source : str
        ``"covariance"`` or ``"posterior samples"``.
    poorly_constrained : tuple of str
        Stars whose 95% separation band is wider than half their separation.
    """

    settings: PlanSettings
    predictions: pd.DataFrame
    passages: pd.DataFrame
    approaches: pd.DataFrame
    forecast: pd.DataFrame
    notes: tuple = field(default=())
    source: str = "covariance"
    poorly_constrained: tuple = ()


# ------------------------------------------------------------------ synthetic data
def synthetic_model(model, epochs, pos_err=1.0, vel_err=10.0, stars=None,
                    relative_to="frame"):
    """A model like ``model`` observing ``stars`` at every one of ``epochs``.

    Every star gets one position row (stated errors ``pos_err`` mas in each
    coordinate, no correlation) and one velocity row (``vel_err`` km/s) per
    epoch; the measured values are zeros (only predictions and Jacobians of
    this model are meaningful).  Effects, integrated flags and the reference
    radius are those of ``model``; it has no priors.
    """
    obs = observations_at(model.stars if stars is None else stars, epochs, epochs, pos_err,
                          vel_err, relative_to, dataset="planned")
    return model.replace(observations=obs, priors=(), datasets=None)


def draw_vectors(result, n_draws, rng, samples=None):
    """Internal vectors drawn from the fit's uncertainty, shape (n_draws, n_par).

    From ``samples`` (rows of internal vectors) at random without replacement
    when there are enough, else from N(internal, internal_cov) over the fitted
    entries (fixed entries stay at their value).
    """
    if samples is not None:
        samples = np.asarray(samples, float).reshape(-1, result.internal.size)
        idx = rng.choice(len(samples), n_draws, replace=len(samples) < n_draws)
        return samples[idx]
    free = np.asarray(result.free, bool)
    cov = result.internal_cov[np.ix_(free, free)]
    w, v = np.linalg.eigh(0.5 * (cov + cov.T))
    root = v * np.sqrt(np.clip(w, 0.0, None))
    out = np.repeat(result.internal[None, :], n_draws, axis=0)
    out[:, free] += rng.standard_normal((n_draws, free.sum())) @ root.T
    return out


def _mass_relative(model, vec, pred):
    """Frame terms removed from predicted frame positions."""
    sh = model.layout.shared
    dt = model.pos.t - model.reference_epoch
    x = (sh(vec, "x0")[..., None] + sh(vec, "vx0")[..., None] * dt) * model.pos.frame
    y = (sh(vec, "y0")[..., None] + sh(vec, "vy0")[..., None] * dt) * model.pos.frame
    return pred.ra - x, pred.dec - y


def _evaluate(syn, vectors, chunk=64):
    """ra, dec (mass), ra_frame, dec_frame, sep, vr for stacked vectors, in chunks."""
    parts = []
    for i in range(0, len(vectors), chunk):
        v = vectors[i:i + chunk]
        p = syn.predict(v)
        ra, dec = _mass_relative(syn, v, p)
        parts.append(np.stack([ra, dec, p.ra, p.dec, np.hypot(ra, dec), p.vr]))
    return np.concatenate(parts, axis=1)  # (6, n_vec, n_rows)


QUANTITIES = ("ra", "dec", "ra_frame", "dec_frame", "sep", "vr")


def predict_grid(result, epochs, draws):
    """Predictions with 68% and 95% bands on a grid of epochs.

    Returns
    -------
    table : DataFrame
        See :attr:`Plan.predictions`.
    values : ndarray, shape (6, n_draws, n_stars, n_epochs)
        The draws of :data:`QUANTITIES`, for close approaches and figures.
    """
    syn = synthetic_model(result.model, epochs, relative_to="frame")
    best = _evaluate(syn, result.internal[None, :])[:, 0]
    vals = _evaluate(syn, draws)
    q = np.percentile(vals, BAND_PERCENTILES, axis=1)  # (5, 6, n_rows)
    cols = {"star": np.asarray(syn.stars)[syn.pos.star], "epoch": syn.pos.t}
    for j, name in enumerate(QUANTITIES):
        cols[name] = best[j]
        for k, tag in ((0, "lo95"), (1, "lo68"), (3, "hi68"), (4, "hi95")):
            cols[f"{name}_{tag}"] = q[k, j]
    cols.update(zip(("pos95_major", "pos95_minor", "pos95_pa"),
                    position_ellipse(vals[0], vals[1]), strict=True))
    n_st, n_ep = len(syn.stars), len(epochs)
    return pd.DataFrame(cols), vals.reshape(6, len(draws), n_st, n_ep)


def position_ellipse(ra, dec, level=0.95):
    """Semi-axes (mas) and position angle (deg east of north) of a sky error ellipse.

    Parameters
    ----------
    ra, dec : ndarray, shape (n_draws, n_rows)
        Draws of the position.

    Notes
    -----
    The ellipse holds ``level`` of a bivariate Gaussian with the draws'
    covariance: semi-axes sqrt(lambda_i * q) with lambda_i the eigenvalues of
    the 2x2 covariance and q = -2 ln(1 - level) (the chi-square quantile with
    two degrees of freedom; 5.991 for 95%).
    """
    dx, dy = ra - ra.mean(axis=0), dec - dec.mean(axis=0)
    sxx, syy, sxy = (np.mean(a * b, axis=0) for a, b in ((dx, dx), (dy, dy), (dx, dy)))
    half = 0.5 * (sxx + syy)
    root = np.sqrt(0.25 * (sxx - syy) ** 2 + sxy**2)
    q = -2.0 * np.log(1.0 - level)
    major = np.sqrt(q * (half + root))
    minor = np.sqrt(q * np.clip(half - root, 0.0, None))
    pa = np.degrees(0.5 * np.arctan2(2.0 * sxy, syy - sxx)) % 180.0  # from north to east
    return major, minor, pa


# ----------------------------------------------------------------- passages
def next_passages(result, start, draws):
    """Next pericentre and apocentre epoch of every star after ``start``.

    Epochs are t_peri + n P (apocentre: + (n + 1/2) P) with n fixed at the
    best fit; the spread over ``draws`` gives the sigma (for Gaussian draws
    this is the delta method: var = var t_p + n^2 var P + 2 n cov).  For
    integrated stars the best-fit offset of the integrated pericentre
    (:func:`deepwell.results.effect_sizes.pericentre_epochs`) and period is added.
    With the Romer delay the light time z/c of the best fit is added, so the
    epochs are as observed.
    """
    model = result.model
    el_best = model.layout.elements(result.internal)
    el = model.layout.elements(draws)
    dist = float(model.layout.shared(result.internal, "distance"))
    rows = []
    for k, star in enumerate(model.stars):
        tp, per = float(el_best["t_peri"][k]), float(el_best["period"][k])
        peri0, per_obs = tp, per
        if model.integrated[k]:
            pe = pericentre_epochs(result, star)
            peri0, per_obs = pe["pericentre_emitted"], pe["integrated_period"]
        n = int(np.ceil((start - peri0) / per_obs))
        m = int(np.ceil((start - peri0) / per_obs - 0.5))
        shift_p = peri0 + n * per_obs - (tp + n * per)
        shift_a = peri0 + (m + 0.5) * per_obs - (tp + (m + 0.5) * per)
        t_p = el["t_peri"][:, k] + n * el["period"][:, k] + shift_p
        t_a = el["t_peri"][:, k] + (m + 0.5) * el["period"][:, k] + shift_a
        best_p = peri0 + n * per_obs
        best_a = peri0 + (m + 0.5) * per_obs
        if model.effects.romer:
            z = _z_mas(result, k, np.array([best_p, best_a]))
            delay = z * 1e-3 * dist / C_AU_PER_YR
            best_p, best_a, t_p, t_a = (best_p + delay[0], best_a + delay[1],
                                        t_p + delay[0], t_a + delay[1])
        rows.append({"star": star, "pericentre": best_p, "pericentre_sigma": float(np.std(t_p)),
                     "apocentre": best_a, "apocentre_sigma": float(np.std(t_a)),
                     "period": per_obs, "period_sigma": float(np.std(el["period"][:, k])),
                     "integrated": bool(model.integrated[k])})
    return pd.DataFrame(rows)


def _z_mas(result, k, t):
    """Best-fit z (mas, away from the observer) of star k at epochs t."""
    syn = synthetic_model(result.model, t)
    return syn.track(result.internal).z[: syn.pos.n][syn.pos.star == k]


# ---------------------------------------------------------- close approaches
def close_approaches(stars, epochs, ra, dec, ra_best, dec_best, resolution):
    """Intervals when two stars may be closer than ``resolution`` on the sky.

    Parameters
    ----------
    ra, dec : ndarray, shape (n_draws, n_stars, n_epochs)
        Draws of the mass-relative positions (mas).
    ra_best, dec_best : ndarray, shape (n_stars, n_epochs)

    Returns
    -------
    DataFrame
        ``star_a, star_b, start, end, closest_epoch, min_separation`` (best
        fit, mas), ``min_separation_lo95`` (2.5th percentile of the draws at
        that epoch) and ``max_probability`` (largest fraction of draws closer
        than the resolution).  An epoch is flagged when the best fit is closer
        than the resolution or at least :data:`CONFUSION_PROBABILITY` of the
        draws are.
    """
    rows = []
    for i in range(len(stars)):
        for j in range(i + 1, len(stars)):
            sep = np.hypot(ra[:, i] - ra[:, j], dec[:, i] - dec[:, j])
            best = np.hypot(ra_best[i] - ra_best[j], dec_best[i] - dec_best[j])
            prob = np.mean(sep < resolution, axis=0)
            flag = (best < resolution) | (prob >= CONFUSION_PROBABILITY)
            edges = np.flatnonzero(np.diff(np.concatenate([[0], flag.astype(int), [0]])))
            for a, b in zip(edges[0::2], edges[1::2], strict=True):
                c = a + int(np.argmin(best[a:b]))
                rows.append({"star_a": stars[i], "star_b": stars[j], "start": epochs[a],
                             "end": epochs[b - 1], "closest_epoch": epochs[c],
                             "min_separation": float(best[c]),
                             "min_separation_lo95": float(np.percentile(sep[:, c], 2.5)),
                             "max_probability": float(prob[a:b].max())})
    cols = ["star_a", "star_b", "start", "end", "closest_epoch", "min_separation",
            "min_separation_lo95", "max_probability"]
    return pd.DataFrame(rows, columns=cols)


# ---------------------------------------------------------- candidate epochs
def parse_months(text):
    """Observable months from ``"3-9"``, ``"11-2"`` (wrapping) or ``"3,4,5"``."""
    out = []
    bad = InputError(f"months must be 1 to 12, written like 3-9, 11-2 or 3,4,5; got {text!r}",
                     column="--months")
    try:
        for part in str(text).split(","):
            ends = [int(x) for x in part.split("-")]
            if len(ends) > 2 or any(not 1 <= m <= 12 for m in ends):
                raise bad
            a, b = ends[0], ends[-1]
            out += [(a - 1 + i) % 12 + 1 for i in range((b - a) % 12 + 1)]
    except ValueError:
        raise bad from None
    return tuple(dict.fromkeys(out))


def _observable(t, months):
    """Whether Julian epochs fall in the observable months (month = twelfth of a year)."""
    if months is None:
        return np.ones(np.shape(t), bool)
    month = np.floor(np.mod(t, 1.0) * 12.0).astype(int) + 1
    return np.isin(month, months)


def candidate_epochs(start, end, months=None, per_season=1, epochs=None):
    """Candidate epochs: user's list filtered by season, or ``per_season`` per season.

    A season is a run of consecutive observable months (wrapping over the new
    year); its ``per_season`` epochs sit at the centres of equal parts of it.
    Months are twelfths of the Julian year (off by at most a day from the
    calendar).  Epochs outside [start, end] are dropped.
    """
    if epochs is not None:
        t = np.sort(np.asarray(epochs, float))
        return t[(t >= start) & (t <= end) & _observable(t, months)]
    fine = np.arange(np.floor(start) - 1.0, np.ceil(end) + 1.0, 1.0 / 12.0) + 1.0 / 24.0
    ok = _observable(fine, months).astype(int)
    if ok.all():  # observable all year: every year is one season
        ok[np.round((fine - 1.0 / 24.0) * 12).astype(int) % 12 == 0] = 0
        ok = _observable(fine, months).astype(int) * (ok > 0)
    edges = np.flatnonzero(np.diff(np.concatenate([[0], ok, [0]])))
    out = []
    for a, b in zip(edges[0::2], edges[1::2], strict=True):
        lo, hi = fine[a] - 1.0 / 24.0, fine[b - 1] + 1.0 / 24.0
        out += list(lo + (np.arange(per_season) + 0.5) * (hi - lo) / per_season)
    t = np.round(np.array(out), 4)
    return t[(t >= start) & (t <= end)]


# ------------------------------------------------------------------ forecast
def _covariance_from_information(info):
    """Inverse of an information matrix after equilibration; inf where it is null."""
    d = np.sqrt(np.clip(np.diag(info), 0.0, None))
    ok = d > 0
    cov = np.full(info.shape, np.nan)
    sub = info[np.ix_(ok, ok)] / np.outer(d[ok], d[ok])
    cov[np.ix_(ok, ok)] = np.linalg.pinv(sub, rcond=1e-13, hermitian=True) / np.outer(d[ok], d[ok])
    cov[~ok, ~ok] = np.inf
    return cov


def information_gain(info0, jac, row_sets):
    """Standard errors now and after adding each set of Jacobian rows.

    Parameters
    ----------
    info0 : ndarray, shape (n, n)
        Information matrix of the data in hand (inverse covariance).
    jac : ndarray, shape (n_rows, n)
        Jacobian of the whitened residuals of the candidate data.
    row_sets : sequence of boolean masks over the rows of ``jac``

    Returns
    -------
    sigma_now : ndarray, shape (n,)
    sigma_after : ndarray, shape (len(row_sets), n)

    Notes
    -----
    Gauss-Markov: Cov_after = (I_0 + J_s^T J_s)^-1 for the rows s added
    (e.g. Press et al. 2007, Numerical Recipes, sect. 15.4, the normal
    equations of linear least squares).
    """
    now = np.sqrt(np.diag(_covariance_from_information(info0)))
    after = np.array([np.sqrt(np.diag(_covariance_from_information(
        info0 + jac[sel].T @ jac[sel]))) for sel in row_sets])
    return now, after


def _current_information(result, free, samples, notes):
    model = result.model
    if np.array_equal(free, result.free):
        if samples is not None:
            cov = np.cov(np.asarray(samples).reshape(-1, free.size)[:, free], rowvar=False)
        else:
            cov = result.internal_cov[np.ix_(free, free)]
        return np.linalg.pinv(0.5 * (cov + cov.T), hermitian=True)
    notes.append("f and/or f_sp were held fixed in the fit; the forecast frees them: the "
                 "information in hand is J^T J of the fit's residuals (data and priors) at "
                 "the solution with them free")
    jac = numerical_jacobian(model.residuals, result.internal, free,
                             _steps(model, result, free), model.layout, model.residual_owner())
    return jac.T @ jac


def _steps(model, result, free):
    steps = default_steps(model, result.internal)
    sig = np.sqrt(np.clip(np.diag(result.internal_cov), 0.0, None))
    return np.where(free & (sig > 0), 1e-3 * sig, steps)


def fisher_forecast(result, epochs, pos_err, vel_err, relative_to="frame", samples=None):
    """Errors of the targets now and after observing each candidate epoch.

    Parameters
    ----------
    result : FitResult
    epochs : array_like
        Candidate epochs (Julian yr); every star is observed at each.
    pos_err, vel_err : float
        Stated errors of the new positions (mas, per coordinate) and radial
        velocities (km/s).
    relative_to : {"frame", "mass"}
    samples : ndarray, optional
        Posterior samples of the internal vector (for the information in hand).

    Returns
    -------
    table : DataFrame
        See :attr:`Plan.forecast`; the last row (``candidate = "all"``) has
        every candidate observed.
    notes : list of str

    Notes
    -----
    I_after = I_0 + J_e^T J_e with J_e the Jacobian of the whitened residuals
    of epoch e's synthetic rows over the free internal parameters; the
    forecast sigma of a target is sqrt of its diagonal entry of I_after^-1.
    The targets are entries of the internal vector, so no transformation is
    needed.  Gain = 1 - sigma_after / sigma_now.
    """
    model = result.model
    notes = []
    names = model.layout.names()
    free = np.asarray(result.free, bool).copy()
    targets = []
    for q in TARGETS:
        if q not in names:
            notes.append(f"{q} is not in the model (its effect is switched off): no forecast")
            continue
        free[names.index(q)] = True
        targets.append(q)
    info0 = _current_information(result, free, samples, notes)
    t = np.asarray(epochs, float)
    syn = synthetic_model(model, t, pos_err, vel_err, relative_to=relative_to)
    jac = numerical_jacobian(syn.residuals, result.internal, free, _steps(model, result, free),
                             syn.layout, syn.residual_owner())[: syn.n_data]
    row_t = np.concatenate([syn.pos.t, syn.pos.t, syn.vel.t])
    col = {q: int(np.sum(free[: names.index(q)])) for q in targets}
    sets = [row_t == e for e in t] + [np.ones(row_t.size, bool)]
    sig_now, sig_after = information_gain(info0, jac, sets)
    rows = []
    for k in range(len(sets)):
        row = {"candidate": "all" if k == len(t) else f"{t[k]:.4f}",
               "epoch": np.nan if k == len(t) else t[k]}
        for q in targets:
            now, after = sig_now[col[q]], sig_after[k, col[q]]
            row[f"sigma_now_{q}"] = now
            row[f"sigma_after_{q}"] = after
            row[f"gain_{q}"] = 1.0 - after / now if np.isfinite(now) else np.nan
        rows.append(row)
    table = pd.DataFrame(rows)
    for q in targets:
        if not np.isfinite(sig_now[col[q]]):
            notes.append(f"{q} is not constrained by the data in hand; its gain is not defined")
        gain = table[f"gain_{q}"].to_numpy()[:-1]
        order = np.argsort(-np.nan_to_num(gain, nan=-np.inf), kind="stable")
        rank = np.empty(len(gain) + 1)
        rank[order] = np.arange(1, len(gain) + 1)
        rank[-1] = np.nan
        table[f"rank_{q}"] = rank
    return table, notes


# ------------------------------------------------------------------ the plan
def _default_errors(model):
    pos = float(np.median(np.minimum(model.pos.ra_err, model.pos.dec_err)))
    vel = float(np.median(model.vel.vr_err)) if model.vel is not None else 10.0
    return pos, vel


def check_plan_settings(s):
    """Refuse a :class:`PlanSettings` outside :data:`LIMITS` (one line naming the option)."""
    def refuse(option, message):
        raise InputError(message, column=option)

    lo, hi = EPOCH_RANGE
    for option, value in (("--from", s.start), ("--to", s.end)):
        if not (np.isfinite(value) and lo <= value <= hi):
            refuse(option, f"epoch {value!r} is outside the range {lo:g} to {hi:g} (Julian yr)")
    if not s.end > s.start:
        refuse("--to", f"the end epoch {s.end} must come after the start {s.start}")
    if s.end - s.start > LIMITS["span"]:
        refuse("--to", f"a plan spans at most {LIMITS['span']:g} years; {s.start:g} to "
                       f"{s.end:g} is {s.end - s.start:g}")
    if s.step is not None:
        if not (np.isfinite(s.step) and s.step > 0):
            refuse("--step", f"the step must be a positive number of years, not {s.step!r}")
        if (s.end - s.start) / s.step + 1 > LIMITS["grid"]:
            refuse("--step", f"at most {LIMITS['grid']} prediction epochs; step {s.step:g} "
                             f"over {s.end - s.start:g} years gives more")
    for option, value, top in (("--draws", s.n_draws, LIMITS["draws"]),
                               ("--per-season", s.per_season, LIMITS["per_season"])):
        if not 1 <= value <= top:
            refuse(option, f"must be 1 to {top}, not {value}")
    if s.epochs is not None:
        if len(s.epochs) > LIMITS["candidates"]:
            refuse("--epochs-file", f"at most {LIMITS['candidates']} candidate epochs, "
                                    f"not {len(s.epochs)}")
        if not np.all(np.isfinite(np.asarray(s.epochs, float))):
            refuse("--epochs-file", "every candidate epoch must be a finite number")
    for option, value in (("--astrometry-error", s.astrometry_error),
                          ("--velocity-error", s.velocity_error),
                          ("--resolution", s.resolution)):
        if value is not None and not (np.isfinite(value) and value > 0):
            refuse(option, f"must be a positive number, not {value!r}")


def make_plan(result, settings, samples=None):
    """Predictions, passages, close approaches and the forecast of a fit.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
    settings : PlanSettings
    samples : ndarray, optional
        Posterior samples of the internal vector, shape (..., n_internal).

    Returns
    -------
    Plan
    """
    s = settings
    check_plan_settings(s)
    pos_err, vel_err = _default_errors(result.model)
    notes = []
    if s.astrometry_error is None or s.velocity_error is None:
        notes.append("per-epoch errors not stated: the median stated errors of the data in "
                     "hand are used")
    pos_err = pos_err if s.astrometry_error is None else s.astrometry_error
    vel_err = vel_err if s.velocity_error is None else s.velocity_error
    s = dataclasses.replace(s, astrometry_error=pos_err, velocity_error=vel_err)
    rng = np.random.default_rng(s.seed)
    draws = draw_vectors(result, s.n_draws, rng, samples)
    step = s.step or (s.end - s.start) / 250.0
    grid = np.arange(s.start, s.end + 0.5 * step, step)
    table, vals = predict_grid(result, grid, draws)
    best = table[["ra", "dec"]].to_numpy().T.reshape(2, len(result.model.stars), grid.size)
    approaches = close_approaches(list(result.model.stars), grid, vals[0], vals[1], best[0],
                                  best[1], s.resolution)
    passages = next_passages(result, s.start, draws)
    cand = candidate_epochs(s.start, s.end, s.months, s.per_season, s.epochs)
    if cand.size == 0:
        raise InputError("no candidate epoch is left in the span and the observable months")
    forecast, fnotes = fisher_forecast(result, cand, pos_err, vel_err, s.relative_to, samples)
    notes += fnotes
    width = (table["sep_hi95"] - table["sep_lo95"]).to_numpy()
    poor = tuple(st for st in result.model.stars
                 if np.median(width[table["star"] == st]
                              / np.maximum(table["sep"][table["star"] == st], 1e-9)) > 0.5)
    if poor:
        notes.append("poorly constrained stars (95% band of the separation wider than half "
                      "the separation): " + ", ".join(poor) + "; their predictions are "
                      "uncertain and should not be used to point without care")
    return Plan(s, table, passages, approaches, forecast, tuple(notes),
                "covariance" if samples is None else "posterior samples", poor)


def load_samples(path, result):
    """Internal posterior samples from an .npz file, checked against the fit's names."""
    try:
        with np.load(path) as data:
            samples = np.asarray(data["internal_samples"], float)
            names = [str(n) for n in data["internal_names"]]
    except (OSError, KeyError, ValueError) as exc:
        raise InputError(f"not a file of posterior samples ({exc})", file=str(path)) from None
    if names != result.model.layout.names():
        raise InputError("the samples' parameters do not match the fit", file=str(path))
    if samples.size == 0 or samples.size % len(names):
        raise InputError(f"'internal_samples' does not hold rows of {len(names)} parameters",
                         file=str(path))
    bad = ~np.isfinite(samples)
    if bad.any():
        raise InputError(f"'internal_samples' holds values that are not finite (NaN or "
                         f"infinite: {int(bad.sum())} of {bad.size}); refit or resample",
                         file=str(path))
    return samples.reshape(-1, len(names))


