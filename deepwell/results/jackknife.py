"""Leave-one-out refits (jackknife) of the joint fit: by star or by data set.

Each star (or data set) in turn is left out and the joint model refitted from
the full fit's solution.  For mass and distance the table gives the shift
from the full fit, in units of the full fit's statistical error, and a
*nested* significance: for a subset of the same data the expected scatter of
the shift is C_out - C_full (the leave-out covariance minus the full one;
common practice for nested least-squares estimates), so the Mahalanobis
distance Delta^T (C_out - C_full)^-1 Delta with 2 degrees of freedom says
whether a shift is larger than losing those data explains.

The jackknife error is the usual delete-one estimate (Quenouille 1956; Tukey
1958; from memory): sigma_jk^2 = (n - 1)/n * sum (theta_i - mean theta)^2
over the n left-out units.  With a handful of stars it is itself uncertain
by roughly 1/sqrt(2(n-1)); treat it as a check on the statistical error, not
a replacement.
"""

import dataclasses
from dataclasses import dataclass

import numpy as np
from scipy import stats

from deepwell.core.errors import DeepwellError
from deepwell.core.text import plural
from deepwell.fit.joint import build_model, fit_joint
from deepwell.fit.least_squares import bounds, minimise
from deepwell.fit.result import assemble_result

__all__ = ["JackknifeResult", "jackknife", "STAND_OUT_P"]

#: A leave-one-out shift "stands out" when its nested p-value is below this
#: (the two-sided 3-sigma probability of a normal variable).
STAND_OUT_P = 0.0027
_Q = ("mass", "distance")


@dataclass(frozen=True)
class JackknifeResult:
    """Leave-one-out refits.

    Attributes
    ----------
    by : str
        "star" or "dataset".
    full : dict
        ``mass``, ``distance`` and their ``*_sigma`` of the full fit.
    rows : list of dict
        Per left-out unit: ``left_out``, ``n_points`` removed, ``mass``,
        ``distance`` with ``*_sigma``, ``d_mass``, ``d_distance`` (shift from
        the full fit), ``d_mass_over_sigma``, ``d_distance_over_sigma``
        (shift / full statistical error), ``nested_chi2`` and ``nested_p``
        (see module docstring; None when C_out - C_full is not positive),
        ``stands_out``, ``converged``, ``note``.
    jackknife_sigma, statistical_sigma : dict
        Per quantity (mass, distance).
    notes : tuple of str
    """

    by: str
    full: dict
    rows: list
    jackknife_sigma: dict
    statistical_sigma: dict
    notes: tuple

    def to_dict(self):
        """JSON-ready record."""
        return {"by": self.by, "full": self.full, "rows": self.rows,
                "jackknife_sigma": self.jackknife_sigma,
                "statistical_sigma": self.statistical_sigma, "notes": list(self.notes)}


def _subset(observations, by, unit):
    pos, vel = observations.positions, observations.velocities
    col = "star" if by == "star" else "dataset"
    keep_p = pos[col].to_numpy(str) != unit
    keep_v = vel[col].to_numpy(str) != unit if len(vel) else np.zeros(0, bool)
    n_removed = int((~keep_p).sum() + (~keep_v).sum())
    sub = dataclasses.replace(observations, positions=pos[keep_p].reset_index(drop=True),
                              velocities=vel[keep_v].reset_index(drop=True) if len(vel) else vel)
    return sub, n_removed


def _settings_for(settings, observations, sub, by, unit):
    """Settings without entries that name the left-out unit; notes on what changed."""
    notes = []
    stars = {k: v for k, v in settings.stars.items() if not (by == "star" and k == unit)}
    ds = dict(settings.datasets)
    fit = dict(settings.fit)
    if by == "dataset":
        ds["sets"] = {k: v for k, v in ds.get("sets", {}).items() if k != unit}
        ref = ds.get("reference", [])
        ref = [ref] if isinstance(ref, str) else list(ref)
        if unit in ref:
            ref.remove(unit)

            def frame_sets(obs):
                p = obs.positions
                return sorted(set(p.loc[p["relative_to"] == "frame", "dataset"]))

            def vel_sets(obs):
                return sorted(set(obs.velocities["dataset"])) if len(obs.velocities) else []

            for pools in (frame_sets, vel_sets):
                if unit in pools(observations) and not set(ref) & set(pools(sub)):
                    pool = pools(sub)
                    if pool:
                        ref.append(pool[0])
                        ds["sets"].pop(pool[0], None)
                        notes.append(f"without the reference set {unit}, {pool[0]} is the "
                                     "reference")
        ds["reference"] = ref
    rows = fit.get("exclude_rows", [])
    if rows:
        present = set()
        for frame in (sub.positions, sub.velocities):
            if len(frame):
                for f, n in zip(frame["file"], frame["line"], strict=True):
                    present.add((str(f), int(n)))
        names = {(f.replace("\\", "/").rsplit("/", 1)[-1], n) for f, n in present} | present
        fit["exclude_rows"] = [r for r in rows if (r["file"], r["line"]) in names]
    return dataclasses.replace(settings, stars=stars, datasets=ds, fit=fit), notes


def _start_vector(full, model):
    """The full fit's solution on a leave-one-out model's layout (names are stable).

    Parameters the full fit does not have (a data-set term that only the
    smaller data set needs) start at their usual starting values.
    """
    full_vec = dict(zip(full.model.layout.names(), full.internal, strict=True))
    terms = model.datasets
    vec = np.zeros(model.layout.size)
    for i, name in enumerate(model.layout.names()):
        if name in full_vec:
            vec[i] = full_vec[name]
        elif terms is not None and name in terms.names:
            vec[i] = terms.start_value(name, model)
    return vec


def _refit(full, sub, settings):
    base = build_model(sub, settings)
    fm = full.model
    integ = [fm.integrated[fm.stars.index(s)] for s in base.stars]
    model = base.replace(integrated=integ, reference_radius=fm.reference_radius)
    lo, hi, free = bounds(model, settings)
    vec0 = np.clip(_start_vector(full, model), lo, hi)
    vec, sol = minimise(model, vec0, free, lo, hi)
    return assemble_result(model, vec, free, settings, sub, converged=bool(sol.success),
                           nfev=int(sol.nfev))


def jackknife(observations, settings, by="star", result=None, progress=None):
    """Leave-one-star-out or leave-one-data-set-out refits.

    Parameters
    ----------
    observations : deepwell.tables.Observations
    settings : deepwell.tables.settings.Settings
    by : {"star", "dataset"}
    result : FitResult, optional
        The full fit (made here if not given); refits start from it.
    progress : callable, optional
        Called with a short text per refit.

    Returns
    -------
    JackknifeResult
    """
    if by not in ("star", "dataset"):
        raise ValueError(f"by must be 'star' or 'dataset', not {by!r}")
    say = progress or (lambda text: None)
    full = result if result is not None else fit_joint(observations, settings)
    if by == "star":
        units = list(full.stars)
    else:
        units = sorted(set(full.model.pos.dataset) | (set(full.model.vel.dataset)
                                                      if full.model.vel is not None else set()))
    idx = [full.labels.index(q) for q in _Q]
    c_full = full.cov[np.ix_(idx, idx)]
    v_full = full.values[idx]
    rows, notes = [], []
    for unit in units:
        say(f"refit without {by} {unit}")
        sub, n_removed = _subset(observations, by, unit)
        row = {"left_out": unit, "n_points": n_removed, "converged": False, "note": "",
               "stands_out": False, "nested_chi2": None, "nested_p": None}
        if len(set(sub.positions["star"])) == 0 or (by == "star" and len(full.stars) < 2):
            row["note"] = "nothing left to fit"
            rows.append(row)
            continue
        s_sub, extra = _settings_for(settings, observations, sub, by, unit)
        try:
            r = _refit(full, sub, s_sub)
        except (DeepwellError, ValueError, np.linalg.LinAlgError) as exc:
            row["note"] = f"refit failed: {exc}"
            rows.append(row)
            continue
        v = r.values[[r.labels.index(q) for q in _Q]]
        c = r.cov[np.ix_([r.labels.index(q) for q in _Q], [r.labels.index(q) for q in _Q])]
        d = v - v_full
        row.update(converged=bool(r.converged), note="; ".join(extra))
        for k, q in enumerate(_Q):
            row[q] = float(v[k])
            row[q + "_sigma"] = float(np.sqrt(max(c[k, k], 0.0)))
            row["d_" + q] = float(d[k])
            row[f"d_{q}_over_sigma"] = float(d[k] / np.sqrt(c_full[k, k]))
        dc = c - c_full
        if np.all(np.linalg.eigvalsh(dc) > 1e-12 * np.max(np.abs(c))):
            chi = float(d @ np.linalg.solve(dc, d))
            row["nested_chi2"] = chi
            row["nested_p"] = float(stats.chi2.sf(chi, 2))
            row["stands_out"] = row["nested_p"] < STAND_OUT_P
        elif not row["note"]:
            row["note"] = ("covariance did not grow on leaving these data out; nested "
                           "significance not defined")
        rows.append(row)
    good = [r for r in rows if "mass" in r]
    n = len(good)
    jk = {}
    for q in _Q:
        vals = np.array([r[q] for r in good])
        jk[q] = float(np.sqrt((n - 1) / n * np.sum((vals - vals.mean()) ** 2))) if n > 1 \
            else float("nan")
    stat = {q: float(np.sqrt(c_full[k, k])) for k, q in enumerate(_Q)}
    if n < len(units):
        notes.append(f"{len(units) - n} of {len(units)} leave-one-out refits failed or were "
                     "skipped; the jackknife error uses the others")
    if n and n < 8:
        notes.append(f"the jackknife error rests on only {plural(n, 'refit')}: it is itself "
                     f"uncertain by about {100 / np.sqrt(2 * max(n - 1, 1)):.0f}%")
    for q in _Q:
        if n > 1 and jk[q] > 2 * stat[q]:
            notes.append(f"the jackknife error of the {q} is {jk[q] / stat[q]:.1f} times the "
                         "statistical one: the units disagree more than their errors allow; "
                         "the statistical error is probably too small")
    out = [r["left_out"] for r in rows if r["stands_out"]]
    if out:
        notes.append(f"leaving out {', '.join(out)} shifts mass and distance by more than "
                     "losing those data explains (nested p < 0.0027): check them")
    full_d = {q: float(v_full[k]) for k, q in enumerate(_Q)}
    full_d.update({q + "_sigma": stat[q] for q in _Q})
    return JackknifeResult(by=by, full=full_d, rows=rows, jackknife_sigma=jk,
                           statistical_sigma=stat, notes=tuple(notes))


