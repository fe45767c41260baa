"""Per-star coordinates in which the Hamiltonian sampler moves.

The sampled entries theta of the internal vector (per star: period,
sqrt(e) cos w, sqrt(e) sin w, cos i, node, t_peri) are a poor place for a
Hamiltonian sampler when an orbit is only partly covered: the posterior
there is long, thin and curved, and a linear metric cannot straighten it.
Each star is therefore moved in one of three ways:

state
    A star whose data (positions and velocities) span less than
    ``STATE_ARC`` of its period is sampled by its Keplerian position and
    velocity relative to the mass at the mean epoch t_k of its positions:
    east, north, z (mas) and their rates (mas/yr).  Over a short arc the
    data are close to linear in that state (position, proper motion,
    radial velocity and acceleration at t_k), so its posterior is close to
    Gaussian even where the elements are degenerate (nearly face-on or
    nearly circular orbits, where node, w and t_peri trade off).  The map to
    the elements depends on the mass and distance through GM (angular
    units, :func:`deepwell.model.kernels.orbit.gm_angular`).  Position and velocity are
    canonical coordinates and so are the Delaunay variables L = sqrt(GM a),
    G = L sqrt(1 - e^2), H = G cos i, l = mean anomaly, g = w, h = node
    (e.g. Murray & Dermott 1999, Solar System Dynamics, section 2.10, from
    memory), so d^3r d^3v = dL dG dH dl dg dh.  Changing variables to the
    sampled (P, sqrt(e) cos w, sqrt(e) sin w, cos i, node, t_peri)::

        |d(state) / d(theta_k)| = (2/3) GM^2 e / P,

    and the density in the state carries its inverse.  (Checked against a
    finite-difference determinant in the tests.)  The factor 1/e is the
    statement, in phase space, that a prior uniform in e puts more weight
    on nearly circular orbits than a prior uniform in position and velocity
    does; it is integrable, but a star whose posterior reaches e = 0 gives
    the sampler a cusp there, which shows as divergent transitions.
phase
    Any other star with all six elements sampled has t_peri replaced by its
    mean argument of latitude at t_k, lambda = 2 pi (t_k - t_peri) / P + w
    (w = atan2(sqrt(e) sin w, sqrt(e) cos w)); |dt_peri/dlambda| = P / 2 pi.
plain
    Stars with fixed elements (nothing to map).

mass and distance
    When both are sampled they move as log GM (angular units, mas^3/yr^2)
    and log distance: the astrometry fixes GM/R0^3 far better than either,
    and a sparse data set leaves a curved (power-law) mass-distance ridge
    that logarithms straighten.  With M proportional to GM R0^3,
    |d(M, R0) / d(log GM, log R0)| = M R0.

Either way the density in the new coordinates is the posterior of theta
times |d theta / d u|, so the sampled posterior of every reported quantity,
and the priors stated for theta, are unchanged.  Other shared entries
(effect factors) are the same in u and theta.
"""

import numpy as np

from deepwell.core.parameters import MAX_ECC, STAR_INTERNAL
from deepwell.model.kernels.orbit import (
    a_from_period,
    elements_from_state,
    gm_angular,
    kepler_state,
)

__all__ = ["STATE_ARC", "COORDS_VERSION", "SamplingCoordinates"]

#: Stars whose data span less than this fraction of their period are sampled by
#: their position and velocity at the mean epoch of their data.
STATE_ARC = 0.5

#: Changes whenever the meaning of the coordinates changes (checkpoints refuse others).
COORDS_VERSION = 3


class SamplingCoordinates:
    """Map between the sampled vector theta and the sampler's coordinates u.

    Parameters
    ----------
    target : deepwell.fit.sampling.target.LogPosterior
    centre : ndarray, shape (n,)
        A point of theta (the least-squares values): picks each star's kind,
        the branch of the node and of t_peri, and the difference steps.
    cov : ndarray, shape (n, n)
        Covariance of theta, sets the difference steps.
    rel_step : float
        Central-difference step in standard deviations.
    state_arc : float
        Data span, as a fraction of the period, below which a star is sampled
        by its state.

    Attributes
    ----------
    kinds : list of str
        ``"state"``, ``"phase"`` or ``"plain"`` per star.
    """

    def __init__(self, target, centre, cov, rel_step=1e-5, state_arc=STATE_ARC):
        model = target.model
        lay = model.layout
        n_sh, n_el = lay.n_shared, len(STAR_INTERNAL)
        centre = np.asarray(centre, float)
        self.n = len(centre)
        self.target = target
        col = {i: c for c, i in enumerate(target.sampled)}
        names = lay.names()
        self._mcol = col.get(names.index("mass"))
        self._dcol = col.get(names.index("distance"))
        self._mass = float(target.base[names.index("mass")])
        self._dist = float(target.base[names.index("distance")])
        self.log_scale = self._mcol is not None and self._dcol is not None
        self._gm_unit = float(gm_angular(1.0, 1.0))
        full = target.full_vectors(centre)
        el = lay.elements(full)
        self.kinds, phase, state = [], [], []
        for k in range(len(model.stars)):
            cols = [col.get(n_sh + k * n_el + j) for j in range(n_el)]
            t_pos = model.pos.t[model.pos.star == k]
            if any(c is None for c in cols) or not t_pos.size:
                self.kinds.append("plain")
                continue
            t_all = t_pos if model.vel is None else np.concatenate(
                [t_pos, model.vel.t[model.vel.star == k]])
            arc = (t_all.max() - t_all.min()) / el["period"][k]
            kind = "state" if arc < state_arc else "phase"
            self.kinds.append(kind)
            (state if kind == "state" else phase).append((k, cols, float(np.mean(t_pos))))
        self._phase_star = np.array([p[0] for p in phase], np.intp)
        self._pc = np.array([p[1] for p in phase], np.intp).reshape(-1, n_el)
        self._ptref = np.array([p[2] for p in phase], float)
        self._state_star = np.array([s[0] for s in state], np.intp)
        self._sc = np.array([s[1] for s in state], np.intp).reshape(-1, n_el)
        self._stref = np.array([s[2] for s in state], float)
        self._node_ref = centre[self._sc[:, 4]] if len(state) else np.zeros(0)
        self._tp_ref = centre[self._sc[:, 5]] if len(state) else np.zeros(0)
        self.n_stars = len(model.stars)
        # Column groups for grouped differences: each shared column alone, then
        # element slot j of every mapped star at once (stars do not interact).
        star_cols = np.concatenate([self._pc, self._sc]) if self.n_stars else np.zeros((0, 6))
        star_of = np.concatenate([self._phase_star, self._state_star])
        mapped = set(star_cols.ravel().tolist())
        self.groups = [(np.array([c]), np.array([-1])) for c in range(self.n)
                       if c not in mapped and target.sampled[c] < n_sh]
        if len(star_cols):
            for j in range(n_el):
                self.groups.append((star_cols[:, j].astype(np.intp), star_of))
        self._star_cols = {int(k): star_cols[i].astype(np.intp) for i, k in enumerate(star_of)}
        grouped = {int(c) for cols, _ in self.groups for c in cols}
        self._passthrough = np.array([c for c in range(self.n) if c not in grouped], np.intp)
        sd_theta = np.sqrt(np.diag(np.asarray(cov, float)))
        self._theta_steps = rel_step * sd_theta
        ju = self.jacobian_to_u(centre)
        self.u_steps = rel_step * np.sqrt(np.diag(ju @ cov @ ju.T))

    # ------------------------------------------------------------------ maps
    def _shared(self, x):
        """Mass and distance of points of theta."""
        m = x[..., self._mcol] if self._mcol is not None else np.full(x.shape[:-1], self._mass)
        d = x[..., self._dcol] if self._dcol is not None else np.full(x.shape[:-1], self._dist)
        return m, d

    def to_u(self, theta):
        """Sampler coordinates of points of theta, shape (..., n)."""
        theta = np.asarray(theta, float)
        u = theta.copy()
        m, d = self._shared(theta)
        if len(self._pc):
            p = theta[..., self._pc]  # (..., n_phase, 6)
            omega = np.arctan2(p[..., 2], p[..., 1])
            u[..., self._pc[:, 5]] = 2.0 * np.pi * (self._ptref - p[..., 5]) / p[..., 0] + omega
        if len(self._sc):
            s = theta[..., self._sc]
            ecc = np.minimum(s[..., 1] ** 2 + s[..., 2] ** 2, MAX_ECC)
            a = a_from_period(s[..., 0], m[..., None], d[..., None])
            st = kepler_state(self._stref, s[..., 0], ecc, np.arccos(np.clip(s[..., 3], -1, 1)),
                              s[..., 4], np.arctan2(s[..., 2], s[..., 1]), s[..., 5], a)
            u[..., self._sc] = st
        if self.log_scale:
            u[..., self._mcol] = np.log(gm_angular(m, d))
            u[..., self._dcol] = np.log(d)
        return u

    def theta_and_terms(self, u):
        """theta of u and the per-star terms of log|d theta / d u|, shape (..., n_stars)."""
        u = np.asarray(u, float)
        th = u.copy()
        terms = np.zeros(u.shape[:-1] + (self.n_stars + 1,))  # last: mass and distance
        if self.log_scale:
            d = np.exp(u[..., self._dcol])
            m = np.exp(u[..., self._mcol]) * d**3 / self._gm_unit
            th[..., self._mcol], th[..., self._dcol] = m, d
            terms[..., -1] = np.log(m) + np.log(d)
        if len(self._pc):
            p = u[..., self._pc]
            omega = np.arctan2(p[..., 2], p[..., 1])
            th[..., self._pc[:, 5]] = self._ptref - p[..., 0] * (p[..., 5] - omega) / (2 * np.pi)
            terms[..., self._phase_star] = np.log(np.abs(p[..., 0]) / (2.0 * np.pi))
        if len(self._sc):
            m, d = self._shared(th)
            gm = gm_angular(m, d)[..., None]
            el = elements_from_state(u[..., self._sc], gm, self._stref)
            root = np.sqrt(el["ecc"])
            node = el["node"] + 2 * np.pi * np.round((self._node_ref - el["node"]) / (2 * np.pi))
            per = el["period"]
            tp = el["t_peri"] + per * np.round((self._tp_ref - el["t_peri"]) / per)
            with np.errstate(invalid="ignore", divide="ignore"):
                th[..., self._sc] = np.stack(
                    [per, el["e_cos"] / root, el["e_sin"] / root, el["cos_inc"], node, tp],
                    axis=-1)
                terms[..., self._state_star] = (np.log(per) - np.log(el["ecc"])
                                                - 2.0 * np.log(gm) - np.log(2.0 / 3.0))
        return th, terms

    def to_theta(self, u):
        """theta of points of u (NaN where the state is unbound)."""
        return self.theta_and_terms(u)[0]

    def log_det(self, u):
        """log |d theta / d u|, shape (...)."""
        return np.sum(self.theta_and_terms(u)[1], axis=-1)

    def window_use(self, theta):
        """How far draws reach into the node and t_peri windows of the state map.

        The state map returns the node within half a turn, and t_peri within
        half a period, of their least-squares values.  For a Keplerian star
        that is only a choice of representative; for an integrated orbit or a
        prior on node or t_peri, posterior mass beyond the window would be
        cut.

        Returns
        -------
        dict
            star index -> largest |node - node_ls| / 2 pi or
            |t_peri - t_peri_ls| / P over the draws (0.5 = the window edge).
        """
        th = np.asarray(theta, float).reshape(-1, self.n)
        out = {}
        for i, k in enumerate(self._state_star):
            cols = self._sc[i]
            dn = np.abs(th[:, cols[4]] - self._node_ref[i]) / (2.0 * np.pi)
            dt = np.abs(th[:, cols[5]] - self._tp_ref[i]) / th[:, cols[0]]
            out[int(k)] = float(np.max(np.maximum(dn, dt))) if len(th) else 0.0
        return out

    # ------------------------------------------------------------ derivatives
    def _grouped(self, func, x, steps):
        """Central-difference Jacobian of func (rows -> (values, per-star terms)) at x."""
        g = len(self.groups)
        rows = np.repeat(np.asarray(x, float)[None], 2 * g, axis=0)
        for i, (cols, _) in enumerate(self.groups):
            rows[2 * i, cols] += steps[cols]
            rows[2 * i + 1, cols] -= steps[cols]
        val, terms = func(rows)
        jac = np.zeros((self.n, self.n))
        dterm = np.zeros(self.n)
        for i, (cols, stars) in enumerate(self.groups):
            dv = val[2 * i] - val[2 * i + 1]
            dt = terms[2 * i] - terms[2 * i + 1]
            for c, k in zip(cols, stars, strict=True):
                h2 = 2.0 * steps[c]
                if k < 0:
                    jac[:, c] = dv / h2
                    dterm[c] = np.sum(dt) / h2
                else:
                    own = self._star_cols[int(k)]
                    jac[own, c] = dv[own] / h2
                    dterm[c] = dt[k] / h2
        jac[self._passthrough, self._passthrough] = 1.0
        return jac, dterm

    def jacobian_to_u(self, theta):
        """d u / d theta at one point (central differences)."""
        return self._grouped(lambda r: (self.to_u(r), np.zeros((len(r), self.n_stars + 1))),
                             theta, self._theta_steps)[0]

    def jacobian(self, u):
        """(d theta / d u, gradient of log|d theta / d u|) at one point."""
        return self._grouped(self.theta_and_terms, u, self.u_steps)
