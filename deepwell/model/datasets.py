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

The settings that switch them on are read by :mod:`deepwell.tables.datasets`.

Parameter names (in :meth:`Layout.names`) carry the data set's name, so they
do not depend on which other sets are present: a position set ``D`` has
``D:dx``, ``D:dy``, ``D:dvx``, ``D:dvy``, ``D:pos_scale`` or ``D:pos_jitter``;
a velocity set has ``D:dvz``, ``D:vel_scale`` or ``D:vel_jitter``; the
mixture adds ``outlier_frac``.
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
for the covariance.  The mixture likelihood is in :mod:`deepwell.model.likelihood`.
"""

from pathlib import Path

import numpy as np

from deepwell.core.errors import SettingsError
from deepwell.core.parameters import EXTRA, ParameterSpec
from deepwell.tables.datasets import SCALE_MIN

__all__ = ["DatasetTerms", "mark_excluded"]


_SPECS = {
    "dx": ("mas", "east offset of the set's frame from the reference set's"),
    "dy": ("mas", "north offset of the set's frame from the reference set's"),
    "dvx": ("mas / yr", "eastward drift of the set's frame offset"),
    "dvy": ("mas / yr", "northward drift of the set's frame offset"),
    "dvz": ("km / s", "velocity zero-point of the set (added to the model)"),
    "scale": ("", "factor on the set's stated errors"),
    "jitter": ("", "error added in quadrature to the set's stated errors (mas or km/s)"),
}


def term_spec(name, term):
    """Declaration of data-set parameter ``name`` of kind ``term`` (dx, dvz, scale ...)."""
    unit, text = _SPECS[term]
    lo, hi, default = -np.inf, np.inf, 0.0
    if term == "scale":
        lo, hi, default = SCALE_MIN, 100.0, 1.0
    elif term == "jitter":
        lo = 0.0
    return ParameterSpec(name, unit, text, lo, hi, name, default=default)


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
        for d in self.pos_sets:
            off = config.choice(d, "offset") and d not in config.reference
            if off and d not in frame_sets:
                if d in config.sets and config.sets[d].get("offset"):
                    raise SettingsError(f"data set {d!r} has no frame-relative positions, so "
                                        "it cannot have an offset", file=file,
                                        column=f"datasets.sets.{d}.offset")
                off = False
            if off:
                terms = ("dx", "dy") + (("dvx", "dvy") if config.choice(d, "drift") else ())
                self.terms += [(f"{d}:{t}", "p", d, t) for t in terms]
            em = config.choice(d, "error_model")
            if em != "none":
                self.terms.append((f"{d}:pos_{em}", "p", d, em))
        for d in self.vel_sets:
            if config.choice(d, "zero_point") and d not in config.reference:
                self.terms.append((f"{d}:dvz", "v", d, "dvz"))
            em = config.choice(d, "error_model")
            if em != "none":
                self.terms.append((f"{d}:vel_{em}", "v", d, em))
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
        self.mixture = config.likelihood == "mixture"
        self.names = tuple(n for n, *_ in self.terms) + (("outlier_frac",) if self.mixture
                                                         else ())
        #: Declarations of this model's data-set parameters, carried by the layout.
        self.specs = tuple(term_spec(name, term) for name, _, _, term in self.terms) + (
            (EXTRA["outlier_frac"],) if self.mixture else ())

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
        spec = self.specs[self.names.index(name)]
        if name == "outlier_frac":
            return spec.default
        kind, d, term = self.describe(name)
        if term == "jitter":
            if kind == "p":
                m = self.pos_index == self.pos_sets.index(d)
                return 0.5 * float(np.median(np.minimum(model.pos.ra_err[m],
                                                        model.pos.dec_err[m])))
            m = self.vel_index == self.vel_sets.index(d)
            return 0.5 * float(np.median(model.vel.vr_err[m]))
        return spec.default

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

    def fisher_information(self, model, vec):
        """Exact Fisher information of each fitted error term.

        Returns
        -------
        dict
            {parameter name: 1/2 tr(C^-1 dC C^-1 dC) summed over the term's rows}
            (in 1 / (the term's unit)^2), for every ``scale`` and ``jitter`` term.
        """
        sa, sd, rho, sv, _ = self.errors(model, vec)
        v = self._values(model, vec)
        out = {}
        for name, kind, d, term in self.terms:
            if term not in ("scale", "jitter"):
                continue
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
            out[name] = float(info)
        return out

    def norm_row_slice(self, model):
        """The residual rows of the normalisation terms (after the data and the mixture row)."""
        start = model.n_data + (1 if self.mixture else 0)
        return slice(start, start + self.n_norm_rows())

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
        jac = jac.copy()
        new_rows = []
        for name, info in self.fisher_information(model, vec).items():
            if name not in cols:
                continue
            c = cols[name]
            jac[:n_data, c] = 0.0
            row = np.zeros(jac.shape[1])
            row[c] = np.sqrt(info)
            new_rows.append(row)
        keep = np.ones(len(jac), bool)
        keep[self.norm_row_slice(model)] = False
        return np.vstack([jac[keep]] + new_rows) if new_rows else jac[keep]
