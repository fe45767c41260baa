"""Outliers: the mixture likelihood, outlier probabilities and the list of far points.

Mixture model (after Hogg, Bovy & Lang 2010, arXiv:1008.4686, from memory):
each point (a position row with its two numbers, or one velocity) comes with
probability 1 - q from the Gaussian of its (fitted) errors and with
probability q from a Gaussian W times wider (W = ``[fit] outlier_width``).
In whitened units, with rho^2 the point's squared whitened residual and d its
dimension (2 or 1)::

    -2 ln L_i = l(rho^2) = -2 ln[(1 - q) exp(-rho^2/2) + q W^-d exp(-rho^2/(2 W^2))]

(up to a constant; the ln sigma normalisation is in :mod:`deepwell.datasets`).
Least squares minimises it exactly through a residual transform: every
whitened number z of point i becomes z * sqrt((l(rho^2) - l(0)) / rho^2)
(real because the density falls with rho; smooth at rho = 0, where the factor
tends to l'(0)), and one extra row sqrt(sum_i l_i(0) + 1) carries the part
that depends on q alone.  So the sum of squared residuals is -2 ln L up to a
constant, as for the Gaussian.  Outlier probability of point i:
q N_broad / [(1 - q) N + q N_broad].
"""

import numpy as np

__all__ = ["mixture_parts", "mixture_rows", "point_sq", "outlier_probabilities",
           "outlier_table", "FAR_SIGMA"]

#: Points farther than this many (fitted) sigma from the model are listed.
FAR_SIGMA = 4.0


def point_sq(n_pos, z):
    """Per point: squared whitened residual and dimension, from data residuals ``z``."""
    rho2 = np.concatenate([z[..., :n_pos] ** 2 + z[..., n_pos:2 * n_pos] ** 2,
                           z[..., 2 * n_pos:] ** 2], axis=-1)
    dim = np.concatenate([np.full(n_pos, 2.0), np.ones(z.shape[-1] - 2 * n_pos)])
    return rho2, dim


def mixture_parts(rho2, dim, q, width):
    """Log-weights of the core and broad components, l(rho^2) and l(0)."""
    q = np.clip(q, 0.0, 1.0 - 1e-12)
    with np.errstate(divide="ignore"):
        lq = np.log(q)
    core0 = np.log1p(-q)
    broad0 = lq - dim * np.log(width)
    a1 = core0 - 0.5 * rho2
    a2 = broad0 - 0.5 * rho2 / width**2
    ell = -2.0 * np.logaddexp(a1, a2)
    ell0 = -2.0 * np.logaddexp(core0, broad0)
    return a1, a2, ell, ell0


def mixture_rows(n_pos, z, q, width):
    """Transformed data rows and the q row (see module docstring).

    ``z`` has shape (..., n_data); ``q`` shape (..., 1).
    """
    rho2, dim = point_sq(n_pos, z)
    _, _, ell, ell0 = mixture_parts(rho2, dim, q, width)
    qc = np.clip(q, 0.0, 1.0 - 1e-12)
    kappa = ((1 - qc) + qc * width ** (-dim - 2)) / ((1 - qc) + qc * width ** (-dim))
    small = rho2 < 1e-10
    f = np.where(small, kappa, np.maximum(ell - ell0, 0.0) / np.where(small, 1.0, rho2))
    root = np.sqrt(f)
    factor = np.concatenate([root[..., :n_pos], root[..., :n_pos], root[..., n_pos:]], axis=-1)
    extra = np.sqrt(np.sum(np.broadcast_to(ell0, rho2.shape), axis=-1) + 1.0)
    return z * factor, extra[..., None]


def outlier_probabilities(model, vec):
    """Per point (position rows, then velocity rows): probability of being an outlier.

    None when the model does not use the mixture likelihood.
    """
    terms = getattr(model, "datasets", None)
    if terms is None or not terms.mixture:
        return None
    z = model.data_residuals(vec)
    rho2, dim = point_sq(model.pos.n, z)
    q = model.layout.shared(vec, "outlier_frac")
    a1, a2, _, _ = mixture_parts(rho2, dim, q, terms.config.outlier_width)
    return np.exp(a2 - np.logaddexp(a1, a2))


def outlier_table(result, all_points=False):
    """Points far from the model (and, under the mixture, likely outliers).

    Lists every point with a residual beyond :data:`FAR_SIGMA` times its
    fitted error (ra, dec or vr, each against its own error) and, under the
    mixture likelihood, every point with outlier probability above 0.5;
    ``all_points=True`` lists all points.

    Returns
    -------
    list of dict
        ``kind``, ``star``, ``dataset``, ``file``, ``line``, ``epoch``,
        ``sigma_ra``, ``sigma_dec`` (positions) or ``sigma_vr`` (velocities):
        residual (data - model) in units of the fitted error; ``max_sigma``;
        ``p_outlier`` (None without the mixture), sorted by max_sigma.
    """
    model, vec = result.model, result.internal
    pred = model.predict(vec)
    terms = getattr(model, "datasets", None)
    if terms is not None:
        sa, sd, _, sv, _ = terms.errors(model, vec)
    else:
        sa, sd = model.pos.ra_err, model.pos.dec_err
        sv = model.vel.vr_err if model.vel is not None else np.zeros(0)
    p_out = outlier_probabilities(model, vec)
    pos, vel = model.pos, model.vel
    files = _files(model)
    out = []
    z_ra, z_dec = (pos.ra - pred.ra) / sa, (pos.dec - pred.dec) / sd
    for i in range(pos.n):
        far = max(abs(z_ra[i]), abs(z_dec[i]))
        p = None if p_out is None else float(p_out[i])
        if all_points or far > FAR_SIGMA or (p is not None and p > 0.5):
            out.append({"kind": "position", "star": model.stars[pos.star[i]],
                        "dataset": str(pos.dataset[i]), "file": files[0][i],
                        "line": int(pos.line[i]), "epoch": float(pos.t[i]),
                        "sigma_ra": float(z_ra[i]), "sigma_dec": float(z_dec[i]),
                        "max_sigma": float(far), "p_outlier": p})
    if vel is not None:
        z_v = (vel.vr - pred.vr) / sv
        for i in range(vel.n):
            p = None if p_out is None else float(p_out[pos.n + i])
            if all_points or abs(z_v[i]) > FAR_SIGMA or (p is not None and p > 0.5):
                out.append({"kind": "velocity", "star": model.stars[vel.star[i]],
                            "dataset": str(vel.dataset[i]), "file": files[1][i],
                            "line": int(vel.line[i]), "epoch": float(vel.t[i]),
                            "sigma_vr": float(z_v[i]), "max_sigma": float(abs(z_v[i])),
                            "p_outlier": p})
    out.sort(key=lambda r: -r["max_sigma"])
    return out


def _files(model):
    """File name of every modelled position and velocity row."""
    from pathlib import Path

    obs = model.observations
    out = []
    for frame, rows in ((obs.positions, model.pos), (obs.velocities, model.vel)):
        if rows is None:
            out.append([])
            continue
        lookup = {}
        if len(frame) and "file" in frame:
            for f, n in zip(frame["file"], frame["line"], strict=True):
                lookup[int(n)] = Path(str(f)).name
        out.append([lookup.get(int(n), "") for n in rows.line])
    return out


def restart_without_outliers(model, vec, sol, settings, free, lo, hi):
    """Second start search without the likely outliers; keep the better mixture fit.

    The automatic start search (:mod:`deepwell.start`) sees every point alike,
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
    import dataclasses

    from .datasets import DatasetConfig
    from .fit import minimise
    from .model import JointModel
    from .parameters import SHARED
    from .start import find_start

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
    cfg = model.dataset_config
    keep = [q for q in model.priors if q.star is not None or q.name in SHARED]
    kep = JointModel(clean, model.reference_epoch, stars=model.stars, priors=keep,
                     datasets=DatasetConfig(exclude_rows=cfg.exclude_rows))
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
