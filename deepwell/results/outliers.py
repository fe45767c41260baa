"""Which points a fit calls outliers: probabilities under the mixture, points beyond 4 sigma."""

from pathlib import Path

import numpy as np

from deepwell.model.likelihood import outlier_probabilities

__all__ = ["FAR_SIGMA", "outlier_table"]


#: Points farther than this many (fitted) sigma from the model are listed.
FAR_SIGMA = 4.0


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
