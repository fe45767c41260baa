"""The whole least-squares fit: model, automatic start, joint fit, retries, result.

``fit_joint`` builds the joint model with the priors of the settings, finds
starting orbits automatically (:mod:`deepwell.fit.start`), minimises the
whitened residuals with bounds, fixed parameters and Gaussian priors
(:mod:`deepwell.fit.least_squares`), retries where a local optimum is likely
(outliers, poorly constrained stars, period aliases) and returns a
:class:`~deepwell.fit.result.FitResult`.
"""

import dataclasses

import numpy as np

from deepwell.core.errors import InputError
from deepwell.core.parameters import SHARED, STAR_INTERNAL
from deepwell.core.text import plural
from deepwell.model.datasets import mark_excluded
from deepwell.model.joint import JointModel, Prior
from deepwell.model.quality import POOR_COVERAGE, POOR_REDUCED_CHI2, phase_coverage

from .least_squares import bounds, minimise
from .outliers import restart_without_outliers
from .result import assemble_result
from .start import find_start, polish_stars

__all__ = ["build_model", "fit_joint"]


def build_model(observations, settings):
    """The joint model with the priors of the settings file."""
    priors = []
    effects = settings.effect_switches()
    for name in tuple(SHARED) + effects.extra_names:
        s = settings.shared_setting(name)
        if s.prior_mean is not None:
            priors.append(Prior(name, s.prior_mean, s.prior_sigma))
    stars = list(dict.fromkeys(observations.positions["star"]))
    for star, st in settings.stars.items():
        if star in stars:
            for el, (mean, sigma) in st.priors.items():
                priors.append(Prior(el, mean, sigma, star=star))
    return JointModel(observations, reference_epoch=settings.reference_epoch, priors=priors,
                      effects=effects, datasets=settings.dataset_config())


def fit_joint(observations, settings, progress=None):
    """Fit all stars jointly around one mass.

    Parameters
    ----------
    observations : deepwell.tables.Observations
    settings : deepwell.tables.settings.Settings
    progress : callable, optional
        Called with a short text at each phase (for the command line).

    Returns
    -------
    FitResult
    """
    say = progress or (lambda text: None)
    model = build_model(observations, settings)
    say(f"searching starting orbits for {plural(len(model.stars), 'star')}")
    start = find_start(_start_model(model), settings,  # effects: see deepwell.model.effects
                       progress=say if _is_large(model) else None)
    model, start_vec = model.start_from(start.vec, settings)
    start.notes.extend(model.effect_notes())
    dropped = {star for star, _, _ in observations.dropped_stars}
    unknown = [s for s in settings.stars if s not in model.stars and s not in dropped]
    if unknown:
        start.notes.append("the settings name star(s) not in the data, whose settings were "
                           "not used: " + ", ".join(unknown) + " (a misspelt name?)")
    lo, hi, free = bounds(model, settings)
    unused = _unconstrained_shared(model)
    for name in unused:
        free[model.layout.index(name)] = False
    if unused:
        start.notes.append("held at their starting values because no data constrain them: "
                           + ", ".join(unused))
    if model.n_data < int(free.sum()):
        raise InputError(f"{model.n_data} measured numbers cannot determine {int(free.sum())} "
                         "free parameters: add data, drop poorly observed stars, or fix "
                         "parameters in the settings (e.g. the distance)",
                         file=str(observations.folder))
    vec0 = np.clip(start_vec, lo, hi)
    say(f"joint fit of {plural(int(free.sum()), 'parameter')} to {model.n_data} data")
    vec, sol = minimise(model, vec0, free, lo, hi, progress=say if _is_large(model) else None)
    notes = list(start.notes)
    if model.datasets is not None and model.datasets.mixture:  # see deepwell.model.likelihood
        vec, sol, note = restart_without_outliers(model, vec, sol, settings, free, lo, hi)
        notes += [note] if note else []
    poor = _stars_to_polish(model, vec)
    if poor:
        say(f"searching again for {plural(len(poor), 'poorly constrained star')} with the "
            "fitted frame")
        vec2, changed = polish_stars(model, vec, poor)
        if changed:
            vec2, sol2 = minimise(model, vec2, free, lo, hi)
            if np.sum(model.residuals(vec2) ** 2) < np.sum(model.residuals(vec) ** 2):
                vec, sol = vec2, sol2
                notes.append("a second search with the fitted mass, distance and frame "
                             "changed the orbit of " + ", ".join(changed))
    vec, sol, aliased = _alias_retry(model, vec, sol, free, lo, hi)
    if aliased:
        notes.append("a joint retry with the period of " + ", ".join(aliased) + " multiplied or "
                     "divided by 2 or 3 lowered the chi-square (seasonal sampling aliases "
                     "periods); that solution was kept")
    notes += _coverage_notes(model, vec)
    say("uncertainties from the Jacobian at the solution")
    if not sol.success:
        notes.append(f"the optimiser stopped without convergence: {sol.message}")
    return assemble_result(model, vec, free, settings, observations, notes,
                           converged=bool(sol.success), nfev=int(sol.nfev))


#: The start search uses at most this many position (and velocity) rows per star,
#: spread evenly over the star's epochs; the joint fit then uses every row.
START_ROWS = 400


def thinned(frame, max_rows=START_ROWS):
    """At most ``max_rows`` rows per star, evenly spread over its epochs (order kept)."""
    if len(frame) == 0 or frame.groupby("star", sort=False).size().max() <= max_rows:
        return frame
    keep = []
    for _, rows in frame.groupby("star", sort=False):
        order = np.argsort(rows["epoch"].to_numpy(float), kind="stable")
        if len(rows) > max_rows:
            order = order[np.unique(np.round(np.linspace(0, len(rows) - 1, max_rows))
                                    .astype(int))]
        keep.append(rows.index.to_numpy()[order])
    return frame.loc[np.sort(np.concatenate(keep))]


def _is_large(model):
    """Data large enough for progress lines within each phase (many rows or stars)."""
    return model.n_data > 100_000 or len(model.stars) > 20


def _start_model(model):
    """The Keplerian twin of ``model`` for the start search, on a thinned copy of large data.

    The search costs grow with the rows; a few hundred epochs per star spread over
    the arc fix a starting orbit as well as all of them do.  Small data sets are
    used whole (the same model as before).
    """
    kep = model.keplerian()
    obs = model.observations
    counts = [np.bincount(rows.star, minlength=len(model.stars)).max()
              for rows in (model.pos, model.vel) if rows is not None and rows.n]
    if not counts or max(counts) <= START_ROWS:
        return kep
    rows = model.dataset_config.exclude_rows if model.dataset_config is not None else ()
    frames = []
    for frame, kind in ((obs.positions, "positions"), (obs.velocities, "velocities")):
        frame, _ = mark_excluded(frame, rows, kind)
        if len(frame):
            frame = frame[~frame["exclude"].to_numpy(bool)]
        frames.append(thinned(frame))
    small = dataclasses.replace(obs, positions=frames[0], velocities=frames[1])
    return kep.replace(observations=small, datasets=None)


def _alias_retry(model, vec, sol, free, lo, hi, factors=(2.0, 0.5, 3.0, 1.0 / 3.0)):
    """Joint refits with a badly fitting star's period scaled by small integer ratios.

    Data taken once a year leave P and P/2, 2P, ... nearly equally good for one
    star; only a joint refit (mass, distance and frame free) tells them apart.
    Tried only for stars whose reduced chi-square exceeds 2.
    """
    chi, ndat = model.star_chi2(vec)
    red = chi / np.maximum(ndat - len(STAR_INTERNAL), 1)
    cost = float(np.sum(model.residuals(vec) ** 2))
    changed = []
    for k in np.flatnonzero(red > POOR_REDUCED_CHI2):
        i_per = model.layout.n_shared + k * len(STAR_INTERNAL)
        if not free[i_per]:
            continue
        for f in factors:
            trial = vec.copy()
            trial[i_per] *= f
            v2, s2 = minimise(model, trial, free, lo, hi, restarts=2)
            c2 = float(np.sum(model.residuals(v2) ** 2))
            if c2 < cost - 1.0:
                vec, sol, cost = v2, s2, c2
                changed.append(model.stars[k])
                break
    return vec, sol, changed


def _unconstrained_shared(model):
    """Frame terms without data: no frame-relative positions, or no velocities."""
    names = []
    if not np.any(model.pos.frame):
        names += ["x0", "y0", "vx0", "vy0"]
    if model.vel is None:
        names.append("vz0")
    return names


def _stars_to_polish(model, vec):
    """Stars worth a second search: short arcs or a poor fit."""
    chi, ndat = model.star_chi2(vec)
    red = chi / np.maximum(ndat - len(STAR_INTERNAL), 1)
    return [k for k in range(len(model.stars))
            if phase_coverage(model, vec, k) < POOR_COVERAGE or red[k] > POOR_REDUCED_CHI2]


def _coverage_notes(model, vec):
    """A plain warning when no orbit is covered well enough for linear errors."""
    cover = [phase_coverage(model, vec, k) for k in range(len(model.stars))]
    if max(cover) >= POOR_COVERAGE:
        return []
    return [f"no star covers half of its orbit (best phase coverage {max(cover):.2f}): the mass "
            "and distance rest on partial arcs, where the posterior is far from Gaussian; the "
            "least-squares errors are a linear approximation that can understate the real "
            "uncertainty several-fold. Sample the posterior (--sample) before quoting them."]
