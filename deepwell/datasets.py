"""Data-set terms of the joint model: frame offsets, zero-points, error models.

Every row of the observation tables names its ``dataset``.  When asked in the
settings (or on the command line, :func:`datasets_from_args`), each data set
can carry its own small systematic terms, all fitted together with the orbits:

* imaging sets (frame-relative positions): an offset (``dx``, ``dy``, mas) and,
  if asked, an offset drift (``dvx``, ``dvy``, mas/yr, about the reference
  epoch); rows measured against the mass itself get none;
* spectroscopic sets: a velocity zero-point (``dvz``, km/s);
* any set: an error model, either a multiplicative ``scale`` s on the stated
  errors (sigma' = s sigma) or an added ``jitter`` j in quadrature
  (sigma'^2 = sigma^2 + j^2, on ra and dec alike).

One or more sets are named as the *reference*: they carry no offset or
zero-point, so x0, y0 (and drift) and vz0 keep their meaning as the frame of
the reference set(s).

Settings (TOML)::

    [datasets]
    reference = "imager-A"        # or a list, e.g. ["imager-A", "spec-1"]
    offsets = true                # offset for every other set with frame positions
    drifts = false                # offset drifts too (needs offsets)
    zero_points = true            # zero-point for every other velocity set
    error_model = "scale"         # for every set: "scale", "jitter" or "none"

    [datasets.sets.imager-B]      # per-set choices override the defaults above
    offset = true
    drift = true
    zero_point = false
    error_model = "jitter"

    [fit]
    likelihood = "mixture"        # "gaussian" (default) or "mixture" (outliers)
    outlier_width = 20.0          # broad component, in units of each point's error
    exclude_rows = [{file = "positions.csv", line = 17}]   # header is line 1

Parameter names (valid identifiers, in :meth:`Layout.names`): position set j
(sets sorted by name) has ``p{j}_dx``, ``p{j}_dy``, ``p{j}_dvx``, ``p{j}_dvy``,
``p{j}_scale`` or ``p{j}_jitter``; velocity set j has ``v{j}_dvz``,
``v{j}_scale`` or ``v{j}_jitter``; the mixture adds ``outlier_frac``.
:meth:`DatasetTerms.describe` says which set a name belongs to.

Likelihood as least squares
---------------------------
With fitted errors, -2 ln L = sum z^2 + sum ln det(C'_i / C_i) + const
(the Gaussian likelihood with its normalisation; without that term scales
would run away to infinity).  The residual vector encodes it exactly: the
whitened rows z (errors scaled), then one row per fitted error term,
sqrt(sum_i ln det(C'_i/C_i) + K) with a constant K that keeps the root real
(K = 2 m ln(1/s_min) + 1 for a scale bounded below by s_min over m measured
numbers, 1 for a jitter, which only increases det C).  So the sum of squared
residuals is -2 ln L up to a constant, which the least-squares fit minimises
and the sampler (log-posterior = -1/2 sum residuals^2) uses unchanged.
Gauss-Newton J^T J of those rows understates the information on a scale by
a factor 2, so :meth:`DatasetTerms.information_jacobian` replaces them by
the exact Fisher information of the error terms, 1/2 tr(C^-1 dC C^-1 dC),
for the covariance.  The mixture likelihood is in :mod:`deepwell.robust`.
"""

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import SettingsError
from .parameters import EXTRA, ParameterSpec

__all__ = ["DatasetConfig", "DatasetTerms", "ERROR_MODELS", "LIKELIHOODS", "parse_datasets",
           "datasets_from_args", "dataset_summary", "mark_excluded"]

ERROR_MODELS = ("none", "scale", "jitter")
LIKELIHOODS = ("gaussian", "mixture")
SCALE_MIN = 0.01
_SET_KEYS = {"offset", "drift", "zero_point", "error_model"}
_TOP = {"reference", "offsets", "drifts", "zero_points", "error_model", "sets"}
_FIT = {"likelihood", "outlier_width", "exclude_rows"}

_SPECS = {
    "dx": ("mas", "east offset of the set's frame from the reference set's"),
    "dy": ("mas", "north offset of the set's frame from the reference set's"),
    "dvx": ("mas / yr", "eastward drift of the set's frame offset"),
    "dvy": ("mas / yr", "northward drift of the set's frame offset"),
    "dvz": ("km / s", "velocity zero-point of the set (added to the model)"),
    "scale": ("", "factor on the set's stated errors"),
    "jitter": ("", "error added in quadrature to the set's stated errors (mas or km/s)"),
}


def _register(name, term):
    """Declare a data-set parameter in :data:`deepwell.parameters.EXTRA` (once)."""
    if name in EXTRA:
        return
    unit, text = _SPECS[term]
    lo, hi, default = -np.inf, np.inf, 0.0
    if term == "scale":
        lo, hi, default = SCALE_MIN, 100.0, 1.0
    elif term == "jitter":
        lo = 0.0
    EXTRA[name] = ParameterSpec(name, unit, text, lo, hi, name, default=default)


EXTRA.setdefault("outlier_frac", ParameterSpec(
    "outlier_frac", "", "fraction of points drawn from the broad outlier distribution",
    0.0, 0.5, "q_\\mathrm{out}", default=0.02))


@dataclass(frozen=True)
class DatasetConfig:
    """The validated ``[datasets]`` and ``[fit]`` choices (see module docstring)."""

    reference: tuple = ()
    offsets: bool = False
    drifts: bool = False
    zero_points: bool = False
    error_model: str = "none"
    sets: dict = field(default_factory=dict)  # name -> dict of per-set keys
    likelihood: str = "gaussian"
    outlier_width: float = 20.0
    exclude_rows: tuple = ()  # (file name, line)

    @property
    def active(self):
        """Whether the model needs data-set terms or a non-Gaussian likelihood."""
        return bool(self.offsets or self.zero_points or self.error_model != "none"
                    or self.likelihood != "gaussian" or self.reference
                    or any(v.get("offset") or v.get("zero_point")
                           or v.get("error_model", "none") != "none"
                           for v in self.sets.values()))

    def choice(self, name, key):
        """A set's choice for key (per-set value, else the default)."""
        default = {"offset": self.offsets, "drift": self.drifts,
                   "zero_point": self.zero_points, "error_model": self.error_model}[key]
        return self.sets.get(name, {}).get(key, default)


def _bool(table, key, file, where):
    v = table[key]
    if not isinstance(v, bool):
        raise SettingsError("must be true or false", file=file, column=f"{where}.{key}")
    return v


def _error_model(v, file, where):
    if v not in ERROR_MODELS:
        raise SettingsError(f"must be one of {', '.join(ERROR_MODELS)}, got {v!r}", file=file,
                            column=where)
    return v


def parse_datasets(datasets=None, fit=None, file=None):
    """Validate the ``[datasets]`` and ``[fit]`` tables into :class:`DatasetConfig`."""
    datasets, fit = datasets or {}, fit or {}
    for table, known, where in ((datasets, _TOP, "datasets"), (fit, _FIT, "fit")):
        if not isinstance(table, dict):
            raise SettingsError("expected a table", file=file, column=where)
        unknown = set(table) - known
        if unknown:
            raise SettingsError(f"unknown key (known: {', '.join(sorted(known))})", file=file,
                                column=f"{where}.{sorted(unknown)[0]}")
    kw = {}
    ref = datasets.get("reference", ())
    ref = (ref,) if isinstance(ref, str) else ref
    if not isinstance(ref, (list, tuple)) or not all(isinstance(r, str) and r for r in ref):
        raise SettingsError("reference must be a data-set name or a list of names", file=file,
                            column="datasets.reference")
    kw["reference"] = tuple(ref)
    for key in ("offsets", "drifts", "zero_points"):
        if key in datasets:
            kw[key] = _bool(datasets, key, file, "datasets")
    if "error_model" in datasets:
        kw["error_model"] = _error_model(datasets["error_model"], file, "datasets.error_model")
    sets = {}
    for name, table in datasets.get("sets", {}).items():
        where = f"datasets.sets.{name}"
        if not isinstance(table, dict):
            raise SettingsError("expected a table", file=file, column=where)
        unknown = set(table) - _SET_KEYS
        if unknown:
            raise SettingsError(f"unknown key (known: {', '.join(sorted(_SET_KEYS))})",
                                file=file, column=f"{where}.{sorted(unknown)[0]}")
        d = {k: _bool(table, k, file, where) for k in ("offset", "drift", "zero_point")
             if k in table}
        if "error_model" in table:
            d["error_model"] = _error_model(table["error_model"], file, where + ".error_model")
        if name in kw["reference"] and (d.get("offset") or d.get("zero_point")):
            raise SettingsError("a reference set has no offset or zero-point by definition",
                                file=file, column=where)
        sets[name] = d
    kw["sets"] = sets
    if "likelihood" in fit:
        if fit["likelihood"] not in LIKELIHOODS:
            raise SettingsError(f"must be one of {', '.join(LIKELIHOODS)}, got "
                                f"{fit['likelihood']!r}", file=file, column="fit.likelihood")
        kw["likelihood"] = fit["likelihood"]
    if "outlier_width" in fit:
        w = fit["outlier_width"]
        if isinstance(w, bool) or not isinstance(w, (int, float)) or not 2.0 <= w <= 1e4:
            raise SettingsError("must be a number between 2 and 10000 (units of each point's "
                                "error)", file=file, column="fit.outlier_width")
        kw["outlier_width"] = float(w)
    rows = []
    for i, item in enumerate(fit.get("exclude_rows", [])):
        if (not isinstance(item, dict) or set(item) != {"file", "line"}
                or not isinstance(item["file"], str) or isinstance(item["line"], bool)
                or not isinstance(item["line"], int) or item["line"] < 2):
            raise SettingsError("each entry is {file = \"positions.csv\", line = N} with N >= 2 "
                                "(the header is line 1)", file=file,
                                column=f"fit.exclude_rows[{i}]")
        rows.append((item["file"], item["line"]))
    kw["exclude_rows"] = tuple(rows)
    cfg = DatasetConfig(**kw)
    if (cfg.offsets or cfg.zero_points) and not cfg.reference:
        raise SettingsError("offsets or zero-points need a reference data set "
                            "(reference = \"NAME\")", file=file, column="datasets.reference")
    return cfg


def datasets_from_args(settings, reference=None, offsets=None, drifts=None, zero_points=None,
                       error_model=None, likelihood=None, outlier_width=None, exclude_rows=None):
    """Settings with the data-set choices overridden (for the command line).

    Parameters
    ----------
    settings : deepwell.settings.Settings
    reference : str or sequence of str, optional
        Reference data set(s) (no offset, no zero-point).
    offsets, drifts, zero_points : bool, optional
        Defaults for every non-reference set (None keeps the settings' choice).
    error_model : {"scale", "jitter", "none"}, optional
    likelihood : {"gaussian", "mixture"}, optional
    outlier_width : float, optional
    exclude_rows : sequence of (file, line), optional
        Added to the settings' list.

    Returns
    -------
    deepwell.settings.Settings
        A new settings object, validated (SettingsError otherwise).
    """
    ds = dict(settings.datasets)
    fit = dict(settings.fit)
    if reference is not None:
        ds["reference"] = [reference] if isinstance(reference, str) else list(reference)
    for key, value in (("offsets", offsets), ("drifts", drifts), ("zero_points", zero_points),
                       ("error_model", error_model)):
        if value is not None:
            ds[key] = value
    for key, value in (("likelihood", likelihood), ("outlier_width", outlier_width)):
        if value is not None:
            fit[key] = value
    if exclude_rows:
        fit["exclude_rows"] = list(fit.get("exclude_rows", [])) + [
            {"file": f, "line": int(n)} for f, n in exclude_rows]
    parse_datasets(ds, fit, file="command line")
    return dataclasses.replace(settings, datasets=ds, fit=fit)


def mark_excluded(frame, rows, kind, file=None):
    """``exclude`` set true on the (file, line) rows of one table; rows found.

    A file matches by its name (``positions.csv``) or its full path.
    """
    if not rows or len(frame) == 0:
        return frame, set()
    names = frame["file"].astype(str).map(lambda f: Path(f).name).to_numpy()
    paths = frame["file"].astype(str).to_numpy()
    lines = frame["line"].to_numpy(int)
    hit = np.zeros(len(frame), bool)
    found = set()
    for f, n in rows:
        m = ((names == f) | (paths == f)) & (lines == n)
        if m.any():
            found.add((f, n))
        hit |= m
    if not hit.any():
        return frame, found
    frame = frame.copy()
    frame["exclude"] = frame["exclude"].to_numpy(bool) | hit
    return frame, found


class DatasetTerms:
    """The data-set terms of one model, resolved against its rows.

    Built by :class:`deepwell.model.JointModel` when a :class:`DatasetConfig`
    is active; ``names`` are appended to the layout's extra shared names.
    """

    def __init__(self, config, pos, vel, file=None, strict=True):
        self.config = config
        self.pos_sets = sorted(set(pos.dataset))
        self.vel_sets = sorted(set(vel.dataset)) if vel is not None else []
        present = set(self.pos_sets) | set(self.vel_sets)
        known = ", ".join(sorted(present))
        for r in config.reference if strict else ():
            if r not in present:
                raise SettingsError(f"reference data set {r!r} is not in the data (data sets: "
                                    f"{known})", file=file, column="datasets.reference")
        for name in config.sets if strict else ():
            if name not in present:
                raise SettingsError(f"data set {name!r} is not in the data (data sets: {known})",
                                    file=file, column=f"datasets.sets.{name}")
        self.pos_index = np.array([self.pos_sets.index(d) for d in pos.dataset], np.intp)
        self.vel_index = (np.array([self.vel_sets.index(d) for d in vel.dataset], np.intp)
                          if vel is not None else np.zeros(0, np.intp))
        self.terms = []  # (name, kind, set, term)
        frame_sets = sorted(set(pos.dataset[pos.frame > 0]))
        for j, d in enumerate(self.pos_sets):
            off = config.choice(d, "offset") and d not in config.reference
            if off and d not in frame_sets:
                if d in config.sets and config.sets[d].get("offset"):
                    raise SettingsError(f"data set {d!r} has no frame-relative positions, so "
                                        "it cannot have an offset", file=file,
                                        column=f"datasets.sets.{d}.offset")
                off = False
            if off:
                terms = ("dx", "dy") + (("dvx", "dvy") if config.choice(d, "drift") else ())
                self.terms += [(f"p{j}_{t}", "p", d, t) for t in terms]
            em = config.choice(d, "error_model")
            if em != "none":
                self.terms.append((f"p{j}_{em}", "p", d, em))
        for j, d in enumerate(self.vel_sets):
            if config.choice(d, "zero_point") and d not in config.reference:
                self.terms.append((f"v{j}_dvz", "v", d, "dvz"))
            em = config.choice(d, "error_model")
            if em != "none":
                self.terms.append((f"v{j}_{em}", "v", d, em))
        off_frame = {d for _, k, d, t in self.terms if t == "dx"}
        if off_frame and not set(frame_sets) - off_frame:
            raise SettingsError("every set with frame positions has an offset, so x0 and y0 "
                                "are not identifiable: name one of them as reference (sets: "
                                f"{', '.join(frame_sets)})", file=file,
                                column="datasets.reference")
        zp = {d for _, k, d, t in self.terms if t == "dvz"}
        if zp and not set(self.vel_sets) - zp:
            raise SettingsError("every velocity set has a zero-point, so vz0 is not "
                                "identifiable: name one of them as reference (sets: "
                                f"{', '.join(self.vel_sets)})", file=file,
                                column="datasets.reference")
        for name, _, _, term in self.terms:
            _register(name, term)
        self.mixture = config.likelihood == "mixture"
        self.names = tuple(n for n, *_ in self.terms) + (("outlier_frac",) if self.mixture
                                                         else ())

    # ------------------------------------------------------------- describing
    def describe(self, name):
        """(kind, data set, term) of a parameter name; kind "p" or "v"."""
        for n, k, d, t in self.terms:
            if n == name:
                return k, d, t
        raise KeyError(name)

    def notes(self):
        c = self.config
        out = []
        if c.reference and any(t in ("dx", "dvz") for *_, t in self.terms):
            out.append("data-set offsets and zero-points are measured against the reference "
                       f"set(s) {', '.join(c.reference)}: x0, y0, vx0, vy0 and vz0 are those "
                       "of the reference frame")
        if any(t in ("scale", "jitter") for *_, t in self.terms):
            out.append("error scales / jitters fitted per data set with the Gaussian "
                       "normalisation (sum of ln sigma) in the likelihood; the uncertainties "
                       "use the fitted errors")
        if self.mixture:
            out.append(f"outlier-mixture likelihood: a fraction outlier_frac of points is "
                       f"drawn from a Gaussian {c.outlier_width:g} times wider than its error; "
                       "the covariance is the Gauss-Newton approximation for this "
                       "likelihood, so errors are approximate")
        return out

    def start_value(self, name, model):
        """Starting value of a term: 0 offsets, scale 1, jitter half the median error."""
        if name == "outlier_frac":
            return EXTRA[name].default
        kind, d, term = self.describe(name)
        if term == "jitter":
            if kind == "p":
                m = self.pos_index == self.pos_sets.index(d)
                return 0.5 * float(np.median(np.minimum(model.pos.ra_err[m],
                                                        model.pos.dec_err[m])))
            m = self.vel_index == self.vel_sets.index(d)
            return 0.5 * float(np.median(model.vel.vr_err[m]))
        return EXTRA[name].default

    # ------------------------------------------------------------- evaluation
    def _values(self, model, vec):
        sh = model.layout.shared
        return {n: sh(vec, n)[..., None] for n in self.names}

    def shift(self, model, vec, ra, dec, vr):
        """Add offsets, offset drifts and zero-points to the predictions."""
        v = self._values(model, vec)
        pos, dt = model.pos, model.pos.t - model.reference_epoch
        for name, kind, d, term in self.terms:
            if kind == "p" and term in ("dx", "dy", "dvx", "dvy"):
                m = (self.pos_index == self.pos_sets.index(d)) * pos.frame
                w = m * dt if term in ("dvx", "dvy") else m
                if term in ("dx", "dvx"):
                    ra = ra + v[name] * w
                else:
                    dec = dec + v[name] * w
            elif term == "dvz":
                vr = vr + v[name] * (self.vel_index == self.vel_sets.index(d))
        return ra, dec, vr

    def errors(self, model, vec):
        """Effective errors (sa, sd, rho, sv) of every row with the fitted error model.

        Returns arrays broadcastable to (..., n_rows) and the list of
        (name, ln det(C'/C) summed per row) normalisation pieces.
        """
        v = self._values(model, vec)
        pos = model.pos
        sa, sd, rho = pos.ra_err, pos.dec_err, pos.corr
        sv = model.vel.vr_err if model.vel is not None else np.zeros(0)
        norm = []
        for name, kind, d, term in self.terms:
            if term not in ("scale", "jitter"):
                continue
            if kind == "p":
                m = self.pos_index == self.pos_sets.index(d)
                if term == "scale":
                    s = np.where(m, np.maximum(v[name], 1e-6), 1.0)
                    sa, sd = sa * s, sd * s
                    norm.append((name, 4.0 * np.log(np.maximum(v[name][..., 0], 1e-6))
                                 * m.sum(), 2 * m.sum()))
                else:
                    jj = np.where(m, v[name] ** 2, 0.0)
                    na, nd = np.sqrt(sa**2 + jj), np.sqrt(sd**2 + jj)
                    c12 = rho * sa * sd  # the covariance itself is unchanged
                    det_new, det_old = (na * nd) ** 2 - c12**2, (sa * sd) ** 2 - c12**2
                    norm.append((name, np.sum(np.log(det_new / det_old), axis=-1), 0))
                    sa, sd, rho = na, nd, c12 / (na * nd)
            else:
                m = self.vel_index == self.vel_sets.index(d)
                if term == "scale":
                    sv = sv * np.where(m, np.maximum(v[name], 1e-6), 1.0)
                    norm.append((name, 2.0 * np.log(np.maximum(v[name][..., 0], 1e-6))
                                 * m.sum(), m.sum()))
                else:
                    new = np.sqrt(sv**2 + np.where(m, v[name] ** 2, 0.0))
                    norm.append((name, np.sum(2.0 * np.log(new / sv), axis=-1), 0))
                    sv = new
        return sa, sd, rho, sv, norm

    def whitened(self, model, vec, pred):
        """Whitened residuals (data - model)/sigma' of all data, shape (..., n_data)."""
        sa, sd, rho, sv, _ = self.errors(model, vec)
        root = np.sqrt(1.0 - rho**2)
        d_ra = model.pos.ra - pred.ra
        d_dec = model.pos.dec - pred.dec
        parts = [d_ra / sa, (d_dec / sd - rho * d_ra / sa) / root]
        if model.vel is not None:
            parts.append((model.vel.vr - pred.vr) / sv)
        lead = np.broadcast_shapes(*(p.shape[:-1] for p in parts))
        return np.concatenate([np.broadcast_to(p, lead + p.shape[-1:]) for p in parts], axis=-1)

    def norm_rows(self, model, vec):
        """One row per fitted error term: sqrt(sum ln det(C'/C) + K) (see module docs)."""
        _, _, _, _, norm = self.errors(model, vec)
        if not norm:
            return np.zeros(np.shape(vec)[:-1] + (0,))
        rows = []
        for _, value, m in norm:
            k = 2.0 * m * np.log(1.0 / SCALE_MIN) + 1.0  # m = 0 for a jitter
            rows.append(np.sqrt(np.maximum(value + k, 0.0)))
        return np.stack(np.broadcast_arrays(*rows), axis=-1)

    def n_norm_rows(self):
        return sum(1 for *_, t in self.terms if t in ("scale", "jitter"))

    def information_jacobian(self, model, jac, vec, free):
        """Jacobian rows for the covariance: exact Fisher information of the error terms.

        ``jac`` is the numerical Jacobian of ``model.residuals`` over the free
        entries.  The columns of error terms are zeroed on the data rows, the
        normalisation rows are replaced by rows whose J^T J is the Fisher
        information 1/2 tr(C^-1 dC C^-1 dC) of each error term (terms of
        different sets touch different rows, so the block is diagonal).
        """
        names = model.layout.names()
        cols = {names[i]: c for c, i in enumerate(np.flatnonzero(free))}
        n_data = model.n_data
        n_norm = self.n_norm_rows()
        start = n_data + (1 if self.mixture else 0)
        jac = jac.copy()
        sa, sd, rho, sv, _ = self.errors(model, vec)
        v = self._values(model, vec)
        new_rows = []
        for name, kind, d, term in self.terms:
            if term not in ("scale", "jitter") or name not in cols:
                continue
            c = cols[name]
            jac[:n_data, c] = 0.0
            val = float(np.ravel(v[name])[0])
            if kind == "p":
                m = self.pos_index == self.pos_sets.index(d)
                if term == "scale":
                    info = 2.0 * (2 * m.sum()) / val**2
                else:  # 2 j^2 tr(C^-2) of each 2x2 covariance
                    det = (sa * sd) ** 2 * (1 - rho**2)
                    c11, c22, c12 = sd**2 / det, sa**2 / det, -rho * sa * sd / det
                    info = 2.0 * val**2 * np.sum((c11**2 + c22**2 + 2 * c12**2)[m])
            else:
                m = self.vel_index == self.vel_sets.index(d)
                if term == "scale":
                    info = 2.0 * m.sum() / val**2
                else:
                    info = 2.0 * val**2 * np.sum(1.0 / sv[m] ** 4)
            row = np.zeros(jac.shape[1])
            row[c] = np.sqrt(info)
            new_rows.append(row)
        keep = np.ones(len(jac), bool)
        keep[start:start + n_norm] = False
        return np.vstack([jac[keep]] + new_rows) if new_rows else jac[keep]


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
