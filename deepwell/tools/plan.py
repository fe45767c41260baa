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

The forecast of candidate epochs is in :mod:`deepwell.tools.forecast`, the
observing seasons in :mod:`deepwell.tools.seasons`.
"""

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from deepwell.core.constants import C_AU_PER_YR
from deepwell.core.errors import InputError
from deepwell.core.text import plural
from deepwell.model.kernels.orbit import position_angle_separation
from deepwell.results.effect_sizes import pericentre_epochs
from deepwell.tables.observations import EPOCH_RANGE

from .forecast import (
    TARGETS,
    fisher_forecast,
    information_gain,
    mass_relative,
    synthetic_model,
)
from .seasons import candidate_epochs, parse_months, season_intervals

__all__ = ["PlanSettings", "Plan", "make_plan", "synthetic_model", "draw_vectors",
           "predict_grid", "position_ellipse", "next_passages", "information_gain",
           "load_samples", "close_approaches", "candidate_epochs", "fisher_forecast",
           "parse_months", "check_plan_settings", "position_angle", "season_intervals",
           "default_errors", "TARGETS", "SAMPLES_FILE", "LIMITS", "QUANTITIES"]

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
    stars : tuple of str or None
        Stars to plan for (predictions, passages and the forecast); None: all.
        Close approaches are checked against every star of the fit.
    astrometry_field, velocity_field : float or None
        Field of view (mas, radius around the mass) of the new astrometry and
        of the new spectroscopy: at a candidate epoch a star is observed by an
        instrument only when its best-fit separation from the mass is inside
        that radius.  None: every chosen star is observed.
    error_sources : tuple of str
        Where the errors used come from, in words (filled in by :func:`make_plan`).
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
    stars: tuple | None = None
    astrometry_field: float | None = None
    velocity_field: float | None = None
    error_sources: tuple = ()


@dataclass(frozen=True)
class Plan:
    """Everything :func:`make_plan` found; tables are pandas DataFrames.

    Attributes
    ----------
    settings : PlanSettings
        With the errors actually used filled in.
    predictions : DataFrame
        Per star and grid epoch: ``ra``, ``dec`` (east, north of the mass),
        ``ra_frame``, ``dec_frame`` (in the astrometric frame), ``sep`` (mas),
        ``pa`` (position angle from the mass, deg east of north, in [0, 360))
        and ``vr`` (km/s), each as best fit and ``_lo95``, ``_lo68``,
        ``_hi68``, ``_hi95`` (the ``pa`` bands run continuously through north,
        so ``pa_lo*`` may be below 0 and ``pa_hi*`` above 360);
        ``pos95_major``, ``pos95_minor`` (mas) and ``pos95_pa`` (deg, east of
        north): the 95% error ellipse of the position.
    passages : DataFrame
        Per star: next pericentre and apocentre epoch after ``start`` and
        their sigmas (yr), period (yr), ``integrated``.
    approaches : DataFrame
        Intervals in which a pair of stars may be closer than the resolution.
    forecast : DataFrame
        Per candidate epoch (and a row ``all`` for all together): the numbers
        of stars observed in position and velocity (``n_astrometry``,
        ``n_velocity``), for each target ``sigma_now_<q>``, ``sigma_after_<q>``,
        ``gain_<q>`` (fractional shrinkage of the error) and ``rank_<q>``.
    notes : tuple of str
        Caveats and choices, in plain words, for the written plan.
    source : str
        ``"covariance"`` or ``"posterior samples"``.
    poorly_constrained : tuple of str
        Stars whose 95% separation band is wider than half their separation.
    seasons : tuple of (float, float)
        Observable intervals in the span (Julian yr, :func:`season_intervals`);
        empty when no observable months were given.
    """

    settings: PlanSettings
    predictions: pd.DataFrame
    passages: pd.DataFrame
    approaches: pd.DataFrame
    forecast: pd.DataFrame
    notes: tuple = field(default=())
    source: str = "covariance"
    poorly_constrained: tuple = ()
    seasons: tuple = ()


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


def position_angle(east, north):
    """Position angle (deg) of an offset from the mass, from north through east.

    Parameters
    ----------
    east, north : array_like
        Offsets (any one angular unit): east = Delta alpha cos delta, north = Delta delta.

    Returns
    -------
    ndarray
        atan2(east, north) in degrees, in [0, 360) (the convention of visual
        double stars and of ``astropy.coordinates.SkyCoord.position_angle``),
        from :func:`deepwell.model.kernels.orbit.position_angle_separation`.
    """
    return np.degrees(position_angle_separation(east, north)[1])


def _evaluate(syn, vectors, chunk=64):
    """ra, dec (mass), ra_frame, dec_frame, sep, pa, vr for stacked vectors, in chunks."""
    parts = []
    for i in range(0, len(vectors), chunk):
        v = vectors[i:i + chunk]
        p = syn.predict(v)
        ra, dec = mass_relative(syn, v, p)
        parts.append(np.stack([ra, dec, p.ra, p.dec, np.hypot(ra, dec),
                               position_angle(ra, dec), p.vr]))
    return np.concatenate(parts, axis=1)  # (7, n_vec, n_rows)


QUANTITIES = ("ra", "dec", "ra_frame", "dec_frame", "sep", "pa", "vr")
_PA = QUANTITIES.index("pa")


def predict_grid(result, epochs, draws):
    """Predictions with 68% and 95% bands on a grid of epochs.

    Returns
    -------
    table : DataFrame
        See :attr:`Plan.predictions`.
    values : ndarray, shape (7, n_draws, n_stars, n_epochs)
        The draws of :data:`QUANTITIES`, for close approaches and figures.

    Notes
    -----
    The position-angle bands are percentiles of the draws' angles taken
    relative to the best fit in (-180, 180] deg, so a band through north does
    not wrap to the full circle.
    """
    syn = synthetic_model(result.model, epochs, relative_to="frame")
    best = _evaluate(syn, result.internal[None, :])[:, 0]
    vals = _evaluate(syn, draws)
    rel = vals.copy()
    rel[_PA] = (vals[_PA] - best[_PA] + 180.0) % 360.0 - 180.0
    q = np.percentile(rel, BAND_PERCENTILES, axis=1)  # (5, 7, n_rows)
    q[:, _PA] += best[_PA]
    cols = {"star": np.asarray(syn.stars)[syn.pos.star], "epoch": syn.pos.t}
    for j, name in enumerate(QUANTITIES):
        cols[name] = best[j]
        for k, tag in ((0, "lo95"), (1, "lo68"), (3, "hi68"), (4, "hi95")):
            cols[f"{name}_{tag}"] = q[k, j]
    cols.update(zip(("pos95_major", "pos95_minor", "pos95_pa"),
                    position_ellipse(vals[0], vals[1]), strict=True))
    n_st, n_ep = len(syn.stars), len(epochs)
    return pd.DataFrame(cols), vals.reshape(len(QUANTITIES), len(draws), n_st, n_ep)


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


# ------------------------------------------------------------------ the plan
def _round_error(x):
    """An error rounded to two significant figures (common practice)."""
    return float(f"{x:.2g}")


def default_errors(model):
    """Errors of a new epoch when none is stated, and where each comes from.

    The median stated error of the data set observed most recently (positions:
    the smaller of the two coordinates' errors), rounded to two significant
    figures: the instrument in use now, not a median over every instrument.

    Returns
    -------
    pos_err : float
        mas per coordinate.
    vel_err : float
        km/s (10 km/s when there are no velocities).
    sources : tuple of str
        One sentence each, naming the data set.
    """
    err = np.minimum(model.pos.ra_err, model.pos.dec_err)
    latest = model.pos.dataset[int(np.argmax(model.pos.t))]
    pos = _round_error(np.median(err[model.pos.dataset == latest]))
    sources = [f"astrometry error {pos:g} mas: the median stated error of data set "
               f"'{latest}', the one observed most recently"]
    if model.vel is not None and model.vel.n:
        vlatest = model.vel.dataset[int(np.argmax(model.vel.t))]
        vel = _round_error(np.median(model.vel.vr_err[model.vel.dataset == vlatest]))
        sources.append(f"velocity error {vel:g} km/s: the median stated error of data set "
                       f"'{vlatest}', the one observed most recently")
    else:
        vel = 10.0
        sources.append("velocity error 10 km/s: there are no velocities in hand (a typical "
                       "value for bright stars)")
    return pos, vel, tuple(sources)


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
                          ("--resolution", s.resolution),
                          ("--astrometry-field", s.astrometry_field),
                          ("--velocity-field", s.velocity_field)):
        if value is not None and not (np.isfinite(value) and value > 0):
            refuse(option, f"must be a positive number, not {value!r}")


def _chosen_stars(result, stars):
    """The stars to plan for, checked against the fit (one-line error naming --stars)."""
    known = list(result.model.stars)
    if stars is None:
        return known
    unknown = [st for st in stars if st not in known]
    if unknown or not stars:
        raise InputError(f"no star {', '.join(map(repr, unknown))} in the fit; its stars are "
                         f"{', '.join(known)}" if unknown else "name at least one star",
                         column="--stars")
    return [st for st in known if st in stars]


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
    chosen = _chosen_stars(result, s.stars)
    pos_err, vel_err, sources = default_errors(result.model)
    notes = []
    used = []
    if s.astrometry_error is None:
        used.append(sources[0])
    else:
        pos_err = s.astrometry_error
        used.append(f"astrometry error {pos_err:g} mas: as stated")
    if s.velocity_error is None:
        used.append(sources[1])
    else:
        vel_err = s.velocity_error
        used.append(f"velocity error {vel_err:g} km/s: as stated")
    s = dataclasses.replace(s, astrometry_error=pos_err, velocity_error=vel_err,
                            stars=None if s.stars is None else tuple(chosen),
                            error_sources=tuple(used))
    rng = np.random.default_rng(s.seed)
    draws = draw_vectors(result, s.n_draws, rng, samples)
    step = s.step or (s.end - s.start) / 250.0
    grid = np.arange(s.start, s.end + 0.5 * step, step)
    table, vals = predict_grid(result, grid, draws)
    stars = list(result.model.stars)
    best = table[["ra", "dec"]].to_numpy().T.reshape(2, len(stars), grid.size)
    approaches = close_approaches(stars, grid, vals[0], vals[1], best[0], best[1],
                                  s.resolution)
    approaches = approaches[approaches["star_a"].isin(chosen)
                            | approaches["star_b"].isin(chosen)].reset_index(drop=True)
    passages = next_passages(result, s.start, draws)
    passages = passages[passages["star"].isin(chosen)].reset_index(drop=True)
    table = table[table["star"].isin(chosen)].reset_index(drop=True)
    cand = candidate_epochs(s.start, s.end, s.months, s.per_season, s.epochs)
    if cand.size == 0:
        raise InputError("no candidate epoch is left in the span and the observable months")
    forecast, fnotes = fisher_forecast(result, cand, pos_err, vel_err, s.relative_to, samples,
                                       stars=chosen, astrometry_field=s.astrometry_field,
                                       velocity_field=s.velocity_field)
    notes += fnotes
    if s.stars is not None:
        notes.append(f"planned for {plural(len(chosen), 'star')} of {len(stars)} "
                     f"({', '.join(chosen)}); close approaches are still checked against "
                     "every star of the fit")
    for label, field_mas, column in (("astrometry", s.astrometry_field, "n_astrometry"),
                                     ("spectroscopy", s.velocity_field, "n_velocity")):
        if field_mas is not None:
            n = forecast[column].to_numpy()[:-1]
            notes.append(f"{label} field of view {field_mas:g} mas around the mass: "
                         f"{int(n.min())} to {int(n.max())} of {len(chosen)} chosen stars "
                         "inside it at the candidate epochs (best-fit separations)")
    width = (table["sep_hi95"] - table["sep_lo95"]).to_numpy()
    poor = tuple(st for st in chosen
                 if np.median(width[table["star"] == st]
                              / np.maximum(table["sep"][table["star"] == st], 1e-9)) > 0.5)
    if poor:
        notes.append("poorly constrained stars (95% band of the separation wider than half "
                      "the separation): " + ", ".join(poor) + "; their predictions are "
                      "uncertain and should not be used to point without care")
    return Plan(s, table, passages, approaches, forecast, tuple(notes),
                "covariance" if samples is None else "posterior samples", poor,
                tuple(season_intervals(s.start, s.end, s.months)))


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


