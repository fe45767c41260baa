"""Prototype: deepwell's joint-model residuals as a JAX function of the internal vector.

Built from a finished deepwell ``JointModel`` (its data, whitening weights,
layout and effect switches) so that the same numbers can be compared row by
row.  Covered: the default relativistic model (Romer delay, exact or
first-order redshift with f, 1PN + f_sp integration of the chosen stars from
osculating elements at each star's apocentre epoch t_peri + P/2, Keplerian
stars with the Romer Newton steps) and the plain Keplerian model.  Not
covered (prototype): data-set terms, the outlier mixture, Gaussian priors,
the Plummer sphere's mass parameter.

Stars are processed in groups that share one code path (integrated /
Keplerian); inside a group every star's rows are padded to one length and the
per-star function is ``vmap``-ed over stars, so each star's rows depend only
on its six internal entries and the shared vector.  That structure gives the
forward-mode gradient: ``jacfwd`` per star over 6 + n_shared tangents,
``vmap``-ed over stars, then J^T r.
"""

from dataclasses import dataclass
from functools import partial

import jax
import jax.numpy as jnp
import jax_kernels as K
import numpy as np

from deepwell.core.constants import C_AU_PER_YR, GM_SUN_AU3_PER_YR2, KEPLER_K, KMS_PER_AU_PER_YR
from deepwell.core.parameters import MAX_ECC

#: Extra steps beyond the largest need found at set-up, per sweep.
STEP_MARGIN = 4


@dataclass(frozen=True)
class GroupConfig:
    """Static set-up of one group of stars."""

    stars: tuple          # star indices in the deepwell model
    integrated: bool
    n_steps: int = 0      # steps per sweep (integrated groups)
    directions: tuple = (1.0, -1.0)  # sweeps run from the apocentre epoch
    planar: bool = False  # scaled planar sweeps (jax_kernels.planar_sweep)
    fwd: tuple = ()       # planar: local indices of the stars swept forward / backward
    bwd: tuple = ()
    n_fwd: int = 0
    n_bwd: int = 0


def _elements(shared, blk, idx):
    """Physical elements of one star from its internal block (deepwell Layout.elements)."""
    mass, dist = shared[idx["mass"]], shared[idx["distance"]]
    period = blk[0]
    h, k = blk[1], blk[2]
    ecc = jnp.minimum(h * h + k * k, MAX_ECC)
    a_mas = K.a_au_from_period(period, mass) / dist * 1e3
    return dict(period=period, a=a_mas, e=ecc, inc=jnp.arccos(jnp.clip(blk[3], -1.0, 1.0)),
                node=blk[4], peri_arg=jnp.arctan2(k, h), t_peri=blk[5])


def _kepler_track(el, t, dist, romer, n_newton=2):
    """Keplerian track at the emission epochs (relativity.keplerian_emission_track)."""
    consts = K.thiele_innes(el["a"], el["inc"], el["node"], el["peri_arg"])
    C, H = consts[4], consts[5]
    t_em = t
    if romer:
        to_au = dist * 1e-3 / C_AU_PER_YR
        for _ in range(n_newton):
            X, Y, dX, dY = K.kepler_xy(t_em, el["period"], el["e"], el["t_peri"])
            z = (C * X + H * Y) * to_au
            vz = (C * dX + H * dY) * to_au
            t_em = t_em - (t_em + z - t) / (1.0 + vz)
    X, Y, dX, dY = K.kepler_xy(t_em, el["period"], el["e"], el["t_peri"])
    east, north, z = K.to_sky(consts, X, Y)
    ve, vn, vz = K.to_sky(consts, dX, dY)
    mas_to_au = dist * 1e-3
    r_au = jnp.sqrt(east**2 + north**2 + z**2) * mas_to_au
    v_kms = mas_to_au * KMS_PER_AU_PER_YR
    v_sq = (ve**2 + vn**2 + vz**2) * v_kms**2
    return east, north, vz * v_kms, v_sq, r_au, jnp.ones(t.shape, bool)


def _pn_setup(shared, el, idx, steps_per_orbit, precession):
    """Start state, step and force parameters of one integrated star."""
    mass, dist = shared[idx["mass"]], shared[idx["distance"]]
    f_sp = shared[idx["f_sp"]] if precession else 0.0
    a_au = el["a"] * 1e-3 * dist
    t_ref = el["t_peri"] + 0.5 * el["period"]
    period = jnp.sqrt(KEPLER_K * a_au**3 / mass)  # osculating_state's own period
    X, Y, dX, dY = K.kepler_xy(t_ref, period, el["e"], el["t_peri"])
    consts = K.thiele_innes(a_au, el["inc"], el["node"], el["peri_arg"])
    r0 = jnp.stack(K.to_sky(consts, X, Y))
    v0 = jnp.stack(K.to_sky(consts, dX, dY))
    gm = mass * GM_SUN_AU3_PER_YR2
    pars = (gm, f_sp / C_AU_PER_YR**2, 0.0, 1.0)
    y0 = jnp.concatenate([r0, v0, jnp.zeros(1)])
    h = K.s_step(r0, v0, gm, steps_per_orbit)
    return y0, h, pars, t_ref


def _pn_track(shared, el, t, idx, cfg, fx):
    """1PN track of one star at observed epochs t (post_newtonian.pn_track, light time)."""
    dist = shared[idx["distance"]]
    y0, h, pars, t_ref = _pn_setup(shared, el, idx, fx["steps_per_orbit"], fx["precession"])
    tau = t - t_ref
    start = y0[2] * K.INV_C if fx["romer"] else 0.0
    pos = vel = None
    covered = jnp.zeros(t.shape, bool)
    for sign in cfg.directions:
        ys, fs = K.pn_sweep(y0, sign * h, pars, cfg.n_steps)
        p, v, _, cov = K.pn_dense(ys, fs, sign, tau, light_time=fx["romer"])
        mine = (tau >= start) if sign > 0 else (tau < start)
        if pos is None:
            pos, vel = p, v
        else:
            pos = jnp.where(mine[:, None], p, pos)
            vel = jnp.where(mine[:, None], v, vel)
        covered = covered | (mine & cov)
    mas_per_au = 1e3 / dist
    v = vel * KMS_PER_AU_PER_YR
    r_au = jnp.sqrt(jnp.sum(pos * pos, axis=-1))
    return (pos[:, 0] * mas_per_au, pos[:, 1] * mas_per_au, v[:, 2], jnp.sum(v * v, axis=-1),
            r_au, covered)


def star_rows(shared, blk, data, idx, cfg, fx):
    """Whitened residual pairs of one star, shape (R, 2) (zeros on padding rows).

    Position rows: (ra, dec) whitened as deepwell (r1 = dra/sa, r2 = ddec/sd' + mix dra);
    velocity rows: ((vr - model)/err, 0).  NaN where an epoch is not covered by the sweeps.
    """
    el = _elements(shared, blk, idx)
    dist = shared[idx["distance"]]
    t = data["t"]
    if cfg.integrated:
        track = _pn_track(shared, el, t, idx, cfg, fx)
    else:
        track = _kepler_track(el, t, dist, fx["romer"])
    return _residual_tail(shared, data, idx, fx, *track)


def _residual_tail(shared, data, idx, fx, east, north, v_z, v_sq, r_au, covered):
    """Whitened residual pairs from a star's track at its rows (see :func:`star_rows`)."""
    t = data["t"]
    dt = t - fx["reference_epoch"]
    ra = east + (shared[idx["x0"]] + shared[idx["vx0"]] * dt) * data["frame"]
    dec = north + (shared[idx["y0"]] + shared[idx["vy0"]] * dt) * data["frame"]
    vz0 = shared[idx["vz0"]]
    if fx["redshift"] == "off":
        vr = vz0 + v_z
    else:
        vr = K.redshift_velocity(v_z, v_sq, r_au, shared[idx["mass"]], shared[idx["f"]], vz0,
                                 exact=fx["redshift"] == "exact")
    d_ra = data["ra"] - ra
    r1 = d_ra * data["w_ra"]
    r2 = (data["dec"] - dec) * data["w_dec"] + d_ra * data["w_mix"]
    rv = (data["vr"] - vr) * data["w_vr"]
    is_pos = data["is_pos"]
    out = jnp.stack([jnp.where(is_pos, r1, rv), jnp.where(is_pos, r2, 0.0)], axis=-1)
    out = out * data["valid"][:, None]
    return jnp.where(covered[:, None] | ~data["valid"][:, None], out, jnp.nan)


def planar_star_rows(shared, blk, data, sweeps, idx, fx):
    """:func:`star_rows` for an integrated star from its scaled planar sweeps.

    ``sweeps`` holds, per direction (+1, -1), the star's step ends ``ys``, ``fs``
    (n + 1, 5) of :func:`jax_kernels.planar_sweep` and a flag ``has`` (False:
    no sweep that way; rows there are uncovered).
    """
    el = _elements(shared, blk, idx)
    mass, dist = shared[idx["mass"]], shared[idx["distance"]]
    a_au = el["a"] * 1e-3 * dist
    gm = mass * GM_SUN_AU3_PER_YR2
    t_unit = jnp.sqrt(a_au**3 / gm)
    A, B, F, G, C, H = K.thiele_innes(1.0, el["inc"], el["node"], el["peri_arg"])
    p_hat, q_hat = jnp.stack([B, A, C]), jnp.stack([G, F, H])
    t_ref = el["t_peri"] + 0.5 * el["period"]
    tau = data["t"] - t_ref
    romer = fx["romer"]
    inv_c = K.INV_C if romer else 0.0

    def physical(y, f):
        """Scaled planar rows (., 5) -> 7-vectors (position au, velocity au/yr, t yr) and f."""
        pos = a_au * (y[:, 0:1] * p_hat + y[:, 1:2] * q_hat)
        vel = a_au / t_unit * (y[:, 2:3] * p_hat + y[:, 3:4] * q_hat)
        acc = a_au / t_unit**2 * ((f[:, 2:3] / f[:, 4:5]) * p_hat + (f[:, 3:4] / f[:, 4:5]) * q_hat)
        y7 = jnp.concatenate([pos, vel, t_unit * y[:, 4:5]], axis=1)
        f7 = jnp.concatenate([jnp.zeros_like(pos), acc, jnp.ones_like(y[:, 4:5])], axis=1)
        return y7, f7

    ys0 = sweeps[0]["ys"]
    start = a_au * (ys0[0, 0] * C + ys0[0, 1] * H) * inv_c
    pos = vel = None
    covered = jnp.zeros(tau.shape, bool)
    for sign, sw in zip((1.0, -1.0), sweeps, strict=True):
        ys, fs = sw["ys"], sw["fs"]
        obs = t_unit * ys[:, 4] + a_au * (ys[:, 0] * C + ys[:, 1] * H) * inv_c
        k, cov = K.locate(obs, sign, tau)
        ya, fa = physical(ys[k - 1], fs[k - 1])
        yb, fb = physical(ys[k], fs[k])
        p, v, _ = K.dense_rows(ya, fa, yb, fb, obs[k - 1], obs[k], tau, light_time=romer)
        mine = (tau >= start) if sign > 0 else (tau < start)
        if pos is None:
            pos, vel = p, v
        else:
            pos = jnp.where(mine[:, None], p, pos)
            vel = jnp.where(mine[:, None], v, vel)
        covered = covered | (mine & cov & sw["has"])
    mas_per_au = 1e3 / dist
    vk = vel * KMS_PER_AU_PER_YR
    r_au = jnp.sqrt(jnp.sum(pos * pos, axis=-1))
    return _residual_tail(shared, data, idx, fx, pos[:, 0] * mas_per_au, pos[:, 1] * mas_per_au,
                          vk[:, 2], jnp.sum(vk * vk, axis=-1), r_au, covered)


class JaxJointModel:
    """JAX residuals, chi-square and gradients of a deepwell JointModel.

    Parameters
    ----------
    model : deepwell.model.JointModel
        Source of data, weights, layout and switches.
    vec : ndarray
        Internal vector used to size the integrations (steps per sweep).
    integrated : sequence of bool, optional
        Which stars to integrate (default: the model's own choice).
    keplerian : bool
        Plain Keplerian model (every effect off), as ``model.keplerian()``.
    """

    def __init__(self, model, vec, integrated=None, keplerian=False, directions="both",
                 planar=False):
        if model.datasets is not None or model.priors or model.effects.extended_mass:
            raise NotImplementedError("prototype: no data-set terms, priors or extended mass")
        lay = model.layout
        fx = model.effects
        self.keplerian = keplerian
        if keplerian:
            self.fx = dict(romer=False, redshift="off", precession=False, steps_per_orbit=0,
                           reference_epoch=model.reference_epoch)
            integ = np.zeros(len(model.stars), bool)
        else:
            self.fx = dict(romer=fx.romer, redshift=fx.redshift, precession=fx.precession,
                           steps_per_orbit=fx.steps_per_orbit,
                           reference_epoch=model.reference_epoch)
            integ = model.integrated if integrated is None else np.asarray(integrated, bool)
        self.model = model
        self.n_shared = lay.n_shared
        names = lay.shared_names
        self.idx = {n: names.index(n) for n in names}
        for n in ("f", "f_sp"):
            self.idx.setdefault(n, 0)  # unused when the effect is off
        self.n_stars = len(model.stars)
        self._build_rows(model)
        self.groups = []
        for flag in (True, False):
            members = tuple(int(k) for k in np.flatnonzero(integ == flag))
            if members:
                self.groups.append(GroupConfig(members, flag))
        if planar:
            self._size_planar(np.asarray(vec, float), directions)
        else:
            self._size_steps(np.asarray(vec, float), directions)
        self.residual_pairs = jax.jit(self._pairs)
        self.chi2 = jax.jit(self._chi2)
        self.grad_reverse = jax.jit(jax.value_and_grad(self._chi2))
        # planar sweeps carry a custom VJP (forward inside): no whole-model forward mode there
        self.grad_forward = None if planar else jax.jit(self._chi2_and_grad_forward)

    # ------------------------------------------------------------ set-up
    def _build_rows(self, model):
        pos, vel = model.pos, model.vel
        rows = []  # per star: list of (kind, deepwell row)
        for k in range(self.n_stars):
            rows.append([("p", i) for i in np.flatnonzero(pos.star == k)]
                        + ([("v", i) for i in np.flatnonzero(vel.star == k)] if vel else []))
        self.rows = rows
        self.row_max = max(len(r) for r in rows)
        n = self.row_max
        cols = ("t", "frame", "ra", "dec", "w_ra", "w_dec", "w_mix", "vr", "w_vr")
        d = {c: np.zeros((self.n_stars, n)) for c in cols}
        d["is_pos"] = np.zeros((self.n_stars, n), bool)
        d["valid"] = np.zeros((self.n_stars, n), bool)
        for k, rr in enumerate(rows):
            for j, (kind, i) in enumerate(rr):
                d["valid"][k, j] = True
                if kind == "p":
                    d["t"][k, j] = pos.t[i]
                    d["frame"][k, j] = pos.frame[i]
                    d["ra"][k, j], d["dec"][k, j] = pos.ra[i], pos.dec[i]
                    d["w_ra"][k, j] = model._w_ra[i]
                    d["w_dec"][k, j] = model._w_dec[i]
                    d["w_mix"][k, j] = model._w_mix[i]
                    d["is_pos"][k, j] = True
                else:
                    d["t"][k, j] = vel.t[i]
                    d["vr"][k, j] = vel.vr[i]
                    d["w_vr"][k, j] = 1.0 / vel.vr_err[i]
            if rr:  # padding rows repeat a real epoch (finite, covered)
                d["t"][k, len(rr):] = d["t"][k, 0]
        self.data = d
        # map to deepwell's data_residuals order: r1 of pos rows, r2 of pos rows, rv of vel rows
        npos = pos.n
        nvel = vel.n if vel else 0
        self.order = np.zeros((2 * npos + nvel, 3), int)  # (star, slot, column)
        for k, rr in enumerate(rows):
            for j, (kind, i) in enumerate(rr):
                if kind == "p":
                    self.order[i] = (k, j, 0)
                    self.order[npos + i] = (k, j, 1)
                else:
                    self.order[2 * npos + i] = (k, j, 0)

    def _group_data(self, g):
        sel = np.asarray(g.stars)
        return {c: jnp.asarray(v[sel]) for c, v in self.data.items()}

    def _size_steps(self, vec, directions):
        """Steps per sweep: the largest need at ``vec`` plus STEP_MARGIN."""
        out = []
        for g in self.groups:
            if not g.integrated:
                out.append(g)
                continue
            need = {1.0: 0, -1.0: 0}
            shared = jnp.asarray(vec[: self.n_shared])
            for k in g.stars:
                blk = jnp.asarray(vec[self.n_shared + 6 * k: self.n_shared + 6 * k + 6])
                el = _elements(shared, blk, self.idx)
                y0, h, pars, t_ref = _pn_setup(shared, el, self.idx, self.fx["steps_per_orbit"],
                                               self.fx["precession"])
                t = self.data["t"][k][self.data["valid"][k]]
                tau = t - float(t_ref)
                start = float(y0[2]) * K.INV_C if self.fx["romer"] else 0.0
                n_try = 64
                for sign in (1.0, -1.0):
                    mine = tau[tau >= start] if sign > 0 else tau[tau < start]
                    if mine.size == 0:
                        continue
                    while True:
                        ys, _ = K.pn_sweep(y0, sign * h, pars, n_try)
                        key = np.asarray(sign * (ys[:, 6] + ys[:, 2] * (K.INV_C if self.fx[
                            "romer"] else 0.0)))
                        if key[-1] >= np.max(sign * mine):
                            break
                        n_try *= 2
                    need[sign] = max(need[sign], int(np.searchsorted(key, np.max(sign * mine))))
            if directions == "both":
                dirs = (1.0, -1.0)
            else:  # only the directions some star needs at vec (fragile off that point)
                dirs = tuple(s for s in (1.0, -1.0) if need[s] > 0)
            n = max(need.values()) + STEP_MARGIN
            out.append(GroupConfig(g.stars, True, n, dirs))
        self.groups = out

    def _size_planar(self, vec, directions, n_try=512):
        """Planar sweeps: which stars go which way, and steps per direction (+ margin)."""
        lay = self.model.layout
        el = lay.elements(vec)
        mass, dist = lay.shared(vec, "mass"), lay.shared(vec, "distance")
        f_sp = lay.shared(vec, "f_sp") if self.fx["precession"] else 0.0
        sweep = jax.jit(K._planar_sweep_primal, static_argnums=(2, 3, 4))
        inv_c = K.INV_C if self.fx["romer"] else 0.0
        out = []
        for g in self.groups:
            if not g.integrated:
                out.append(g)
                continue
            need = {1.0: [], -1.0: []}
            for j, k in enumerate(g.stars):
                a_au = el["a"][k] * 1e-3 * dist
                gm = mass * GM_SUN_AU3_PER_YR2
                t_unit = np.sqrt(a_au**3 / gm)
                kappa = f_sp * gm / (C_AU_PER_YR**2 * a_au)
                consts = np.asarray(K.thiele_innes(1.0, el["inc"][k], el["node"][k],
                                                   el["peri_arg"][k]))
                t = self.data["t"][k][self.data["valid"][k]]
                tau = t - (el["t_peri"][k] + 0.5 * el["period"][k])
                start = a_au * (-(1.0 + el["e"][k])) * consts[4] * inv_c
                for sign in (1.0, -1.0):
                    mine = tau[tau >= start] if sign > 0 else tau[tau < start]
                    if directions == "both" or mine.size:
                        n = 0
                        if mine.size:
                            ys, _ = sweep(el["e"][k], kappa, sign, n_try,
                                          self.fx["steps_per_orbit"])
                            ys = np.asarray(ys)
                            obs = t_unit * ys[:, 4] + a_au * (ys[:, 0] * consts[4]
                                                              + ys[:, 1] * consts[5]) * inv_c
                            if sign * obs[-1] < np.max(sign * mine):
                                raise RuntimeError("planar sizing: increase n_try")
                            n = int(np.searchsorted(sign * obs, np.max(sign * mine)))
                        need[sign].append((j, n))
            fwd = tuple(j for j, _ in need[1.0])
            bwd = tuple(j for j, _ in need[-1.0])
            n_f = max([n for _, n in need[1.0]], default=-STEP_MARGIN) + STEP_MARGIN
            n_b = max([n for _, n in need[-1.0]], default=-STEP_MARGIN) + STEP_MARGIN
            out.append(GroupConfig(g.stars, True, max(n_f, n_b), planar=True, fwd=fwd, bwd=bwd,
                                   n_fwd=n_f, n_bwd=n_b))
        self.groups = out

    def _planar_group_pairs(self, shared, blocks, g):
        sel = np.asarray(g.stars)
        blk = blocks[sel]
        el = jax.vmap(lambda b: _elements(shared, b, self.idx))(blk)
        mass, dist = shared[self.idx["mass"]], shared[self.idx["distance"]]
        f_sp = shared[self.idx["f_sp"]] if self.fx["precession"] else 0.0
        a_au = el["a"] * 1e-3 * dist
        gm = mass * GM_SUN_AU3_PER_YR2
        kappa = f_sp * gm / (C_AU_PER_YR**2 * a_au)
        ns = len(sel)
        sweeps = []
        for sign, members, n in ((1.0, g.fwd, g.n_fwd), (-1.0, g.bwd, g.n_bwd)):
            has = jnp.asarray([j in members for j in range(ns)])
            if members:
                m = np.asarray(members)
                ys, fs = jax.vmap(lambda e, k, sign=sign, n=n: K.planar_sweep(
                    e, k, sign, n, self.fx["steps_per_orbit"]))(el["e"][m], kappa[m])
                slot = np.array([members.index(j) if j in members else 0 for j in range(ns)])
                sweeps.append(dict(ys=ys[slot], fs=fs[slot], has=has))
            else:  # no star goes this way: a dummy two-point sweep, never covering a row
                dummy = jnp.broadcast_to(jnp.array([[1.0, 0.0, 0.0, 1.0, 0.0],
                                                    [1.0, 0.0, 0.0, 1.0, 1.0]]), (ns, 2, 5))
                sweeps.append(dict(ys=dummy, fs=jnp.ones((ns, 2, 5)), has=has))
        f = jax.vmap(partial(planar_star_rows, idx=self.idx, fx=self.fx), in_axes=(None, 0, 0, 0))
        return f(shared, blk, self._group_data(g), sweeps)

    # --------------------------------------------------------- functions
    def _split(self, vec):
        shared = vec[: self.n_shared]
        blocks = vec[self.n_shared:].reshape(self.n_stars, 6)
        return shared, blocks

    def _group_pairs(self, shared, blocks, g):
        if g.planar:
            return self._planar_group_pairs(shared, blocks, g)
        f = jax.vmap(partial(star_rows, idx=self.idx, cfg=g, fx=self.fx), in_axes=(None, 0, 0))
        return f(shared, blocks[np.asarray(g.stars)], self._group_data(g))

    def _pairs(self, vec):
        """Residual pairs of all stars, shape (n_stars, R, 2), in deepwell's star order."""
        shared, blocks = self._split(vec)
        out = jnp.zeros((self.n_stars, self.row_max, 2))
        for g in self.groups:
            out = out.at[np.asarray(g.stars)].set(self._group_pairs(shared, blocks, g))
        return out

    def residuals(self, vec):
        """Data residuals in the order of deepwell's ``JointModel.data_residuals``."""
        p = self.residual_pairs(jnp.asarray(vec))
        o = self.order
        return p[o[:, 0], o[:, 1], o[:, 2]]

    def _penalty(self, blocks):
        return 1e3 * jnp.maximum(blocks[:, 1] ** 2 + blocks[:, 2] ** 2 - MAX_ECC, 0.0)

    def _chi2(self, vec):
        """Sum of squares of all residual rows (data + eccentricity penalty)."""
        shared, blocks = self._split(vec)
        total = jnp.sum(self._penalty(blocks) ** 2)
        for g in self.groups:
            total = total + jnp.sum(self._group_pairs(shared, blocks, g) ** 2)
        return total

    def _chi2_and_grad_forward(self, vec):
        """Chi-square and gradient by forward mode: per-star Jacobians (jacfwd), J^T r."""
        shared, blocks = self._split(vec)
        pen, pen_vjp = jax.vjp(self._penalty, blocks)
        total = jnp.sum(pen**2)
        g_blocks = pen_vjp(2.0 * pen)[0]
        g_shared = jnp.zeros_like(shared)
        for g in self.groups:
            sel = np.asarray(g.stars)

            def one(sh, blk, data, g=g):
                f = partial(star_rows, data=data, idx=self.idx, cfg=g, fx=self.fx)
                n_sh = sh.shape[0]
                t_sh = jnp.concatenate([jnp.eye(n_sh), jnp.zeros((6, n_sh))])
                t_blk = jnp.concatenate([jnp.zeros((n_sh, 6)), jnp.eye(6)])
                r, jt = jax.vmap(lambda a, b: jax.jvp(f, (sh, blk), (a, b)),
                                 out_axes=(None, 0))(t_sh, t_blk)
                return r, jt  # jt: (n_sh + 6, R, 2), one tangent per parameter

            r, jt = jax.vmap(one, in_axes=(None, 0, 0))(shared, blocks[sel], self._group_data(g))
            total = total + jnp.sum(r * r)
            gp = 2.0 * jnp.einsum("src,sprc->sp", r, jt)  # (stars, n_sh + 6)
            g_shared = g_shared + jnp.sum(gp[:, : self.n_shared], axis=0)
            g_blocks = g_blocks.at[sel].add(gp[:, self.n_shared:])
        return total, jnp.concatenate([g_shared, g_blocks.ravel()])

    def describe(self):
        parts = []
        for g in self.groups:
            if g.planar:
                kind = (f"integrated planar ({len(g.fwd)} forward sweeps x {g.n_fwd} steps, "
                        f"{len(g.bwd)} backward x {g.n_bwd})")
            else:
                kind = (f"integrated ({g.n_steps} steps x {len(g.directions)} sweeps)"
                        if g.integrated else "Keplerian")
            parts.append(f"{len(g.stars)} stars {kind}")
        return ", ".join(parts) + f"; {self.row_max} padded rows per star"
