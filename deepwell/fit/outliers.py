"""Outlier handling that wraps the fitter: a second start search without the likely outliers."""

import dataclasses

import numpy as np

from deepwell.model.likelihood import outlier_probabilities

from .least_squares import minimise
from .start import find_start

__all__ = ["restart_without_outliers"]


def restart_without_outliers(model, vec, sol, settings, free, lo, hi):
    """Second start search without the likely outliers; keep the better mixture fit.

    The automatic start search (:mod:`deepwell.fit.start`) sees every point alike,
    so blunders can put one star's starting orbit in the wrong place, and the
    mixture then calls that star's good points outliers (a local optimum).
    Points with outlier probability above 0.5 are left out of a second start
    search only; the mixture fit from that start replaces the first when its
    -2 ln L (sum of squared residuals) is lower.

    Returns
    -------
    vec, sol, note
        The better solution, its optimiser result and a note (None if unchanged).
    """
    p = outlier_probabilities(model, vec)
    flagged = p > 0.5
    if not flagged.any():
        return vec, sol, None
    obs = model.observations
    n_pos = model.pos.n
    frames = []
    for frame, rows, mask in ((obs.positions, model.pos, flagged[:n_pos]),
                              (obs.velocities, model.vel, flagged[n_pos:])):
        if rows is None or not mask.any():
            frames.append(frame)
            continue
        frame = frame.copy()
        frame["exclude"] = frame["exclude"].to_numpy(bool) | frame["line"].isin(
            rows.line[mask]).to_numpy()
        frames.append(frame)
    clean = dataclasses.replace(obs, positions=frames[0], velocities=frames[1])
    kep = model.replace(observations=clean).keplerian()
    try:
        start = find_start(kep, settings)
    except Exception:  # noqa: BLE001 - a failed second search leaves the first fit
        return vec, sol, None
    _, vec0 = model.start_from(start.vec, settings)
    vec2, sol2 = minimise(model, np.clip(vec0, lo, hi), free, lo, hi)
    obj = lambda v: float(np.sum(model.residuals(v) ** 2))  # noqa: E731
    if obj(vec2) < obj(vec) - 1e-6:
        return vec2, sol2, (f"a second start search without the {int(flagged.sum())} likely "
                            "outliers led to a better mixture fit")
    return vec, sol, None
