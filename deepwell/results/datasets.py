"""Per-data-set summaries of a fit: chi-square with stated and fitted errors, fitted terms."""

import numpy as np

__all__ = ["dataset_summary"]


def dataset_summary(result):
    """Per data set and kind: n, chi-square (stated and fitted errors), error term, offsets.

    Returns
    -------
    list of dict
        Keys: ``dataset``, ``kind`` ("positions"/"velocities"), ``n_points``,
        ``n_numbers``, ``chi2_stated`` (stated errors), ``chi2`` (fitted error
        model), ``reference`` (bool), ``error_model``, ``scale``/``jitter``
        with ``_err``, and per fitted term ``dx``, ``dy``, ``dvx``, ``dvy``,
        ``dvz`` each with ``_err`` (mas, mas/yr, km/s).
    """
    model, vec = result.model, result.internal
    terms = getattr(model, "datasets", None)
    pred = model.predict(vec)
    pos, vel = model.pos, model.vel
    root = np.sqrt(1.0 - pos.corr**2)
    d_ra, d_dec = pos.ra - pred.ra, pos.dec - pred.dec
    z_stated = np.concatenate([(d_ra / pos.ra_err) ** 2 + ((d_dec / pos.dec_err
                               - pos.corr * d_ra / pos.ra_err) / root) ** 2,
                               ((vel.vr - pred.vr) / vel.vr_err) ** 2 if vel else []])
    z = model.data_residuals(vec)
    npos = pos.n
    z_fit = np.concatenate([z[:npos] ** 2 + z[npos:2 * npos] ** 2, z[2 * npos:] ** 2])
    kinds = np.concatenate([np.zeros(npos, int), np.ones(vel.n if vel else 0, int)])
    sets = np.concatenate([pos.dataset, vel.dataset if vel else np.zeros(0, str)])
    names = model.layout.names()
    sig = np.sqrt(np.clip(np.diag(result.internal_cov), 0, None))
    out = []
    for kind, label in ((0, "positions"), (1, "velocities")):
        for d in sorted(set(sets[kinds == kind])):
            m = (kinds == kind) & (sets == d)
            row = {"dataset": d, "kind": label, "n_points": int(m.sum()),
                   "n_numbers": int(m.sum() * (2 if kind == 0 else 1)),
                   "chi2_stated": float(z_stated[m].sum()), "chi2": float(z_fit[m].sum()),
                   "reference": bool(terms is not None and d in terms.config.reference),
                   "error_model": "none"}
            if terms is not None:
                row["error_model"] = terms.config.choice(d, "error_model")
                for name, k, dd, t in terms.terms:
                    if dd == d and k == "pv"[kind]:
                        i = names.index(name)
                        row[t] = float(vec[i])
                        row[t + "_err"] = float(sig[i])
            out.append(row)
    return out
