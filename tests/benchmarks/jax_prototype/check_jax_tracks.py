"""Checks of the JAX prototype against deepwell's numba/numpy kernels on the rich demo.

Run from the repository root (in a venv with jax):

    python tests/benchmarks/jax_prototype/check_jax_tracks.py [--fit-cache FILE]

1. Kepler solver against deepwell.model.kernels.kepler.solve_kepler on a grid up to e = 0.9999.
2. Per integrated star: JAX 1PN track (with Romer delay) against
   deepwell.model.kernels.post_newtonian.pn_track at the star's data epochs
   (positions in mas, radial velocity in km/s) at the fitted elements.
3. Residual rows against JointModel.data_residuals (relativistic and Keplerian).
4. jax.grad (reverse) and the forward-mode gradient of the chi-square against
   central finite differences of the same JAX chi-square (relative 1e-6), and
   the custom Kepler derivative against finite differences of the solver.
"""
import argparse
import pickle
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import jax_kernels as K  # noqa: E402

K.enable_x64()

import jax  # noqa: E402
import jax.numpy as jnp  # noqa: E402
import numpy as np  # noqa: E402
from jax_model import JaxJointModel, _elements  # noqa: E402

import deepwell  # noqa: E402
from deepwell.model.kernels.kepler import solve_kepler  # noqa: E402
from deepwell.model.kernels.post_newtonian import pn_track  # noqa: E402

ROOT = HERE.parent


def load_fit(cache):
    if cache and Path(cache).exists():
        with open(cache, "rb") as fh:
            return pickle.load(fh)
    res = deepwell.fit_joint(deepwell.read_observations(ROOT / "scenarios" / "rich"),
                             deepwell.Settings())
    if cache:
        with open(cache, "wb") as fh:
            pickle.dump(res, fh)
    return res


def check_kepler():
    m = np.linspace(-7.0, 7.0, 2001)
    e = np.concatenate([np.linspace(0.0, 0.99, 100), [0.995, 0.999, 0.9995, 0.9999]])
    mm, ee = np.meshgrid(m, e)
    ej = np.asarray(jax.jit(K.kepler_ecc_anom)(jnp.asarray(mm), jnp.asarray(ee)))
    resid = np.abs(ej - ee * np.sin(ej) - mm)
    e_ref, _, _ = solve_kepler(mm, ee)
    diff = np.abs(ej - e_ref)
    print(f"Kepler: max |E - e sin E - M| = {resid.max():.2e} rad, max |E_jax - E_deepwell| = "
          f"{diff.max():.2e} rad over e in [0, 0.9999]")
    # custom derivative against central differences of the solver itself
    mt, et = jnp.asarray([0.01, 1.0, 3.0, -2.5]), jnp.asarray([0.9999, 0.5, 0.97, 0.2])
    dm = jax.vmap(jax.grad(K.kepler_ecc_anom, argnums=0))(mt, et)
    de = jax.vmap(jax.grad(K.kepler_ecc_anom, argnums=1))(mt, et)
    h = 1e-7
    fdm = (K._kepler_solve(mt + h, et) - K._kepler_solve(mt - h, et)) / (2 * h)
    fde = (K._kepler_solve(mt, et + h * (1 - et)) - K._kepler_solve(mt, et - h * (1 - et))) \
        / (2 * h * (1 - et))
    print(f"  custom_jvp dE/dM vs central differences: max rel {np.max(np.abs(dm / fdm - 1)):.1e};"
          f" dE/de: max rel {np.max(np.abs(de / fde - 1)):.1e}")
    return resid.max() < 1e-12


def check_tracks(res, jm):
    model = res.model
    vec = np.asarray(res.internal, float)
    lay = model.layout
    el = lay.elements(vec)
    mass = lay.shared(vec, "mass")
    dist = lay.shared(vec, "distance")
    f_sp = lay.shared(vec, "f_sp")
    worst_p, worst_v = 0.0, 0.0
    shared = jnp.asarray(vec[: lay.n_shared])
    import jax_model as JM
    for g in jm.groups:
        if not g.integrated:
            continue
        for k in g.stars:
            rows = model._star_rows[k]
            t = model._t_all[rows]
            a_au = el["a"][k] * 1e-3 * dist
            tr = pn_track(t, a_au, el["e"][k], el["inc"][k], el["node"][k], el["peri_arg"][k],
                          el["t_peri"][k], mass, el["t_peri"][k] + 0.5 * el["period"][k],
                          f_sp=f_sp, light_time=model.effects.romer,
                          steps_per_orbit=model.effects.steps_per_orbit)
            blk = jnp.asarray(vec[lay.n_shared + 6 * k: lay.n_shared + 6 * k + 6])
            elj = _elements(shared, blk, jm.idx)
            east, north, v_z, _, _, cov = jax.jit(
                lambda s, b, tt, g=g: JM._pn_track(s, _elements(s, b, jm.idx), tt, jm.idx, g,
                                                   jm.fx))(shared, blk, jnp.asarray(t))
            assert bool(np.all(np.asarray(cov)))
            mas = 1e3 / dist
            dp = max(np.max(np.abs(np.asarray(east) - tr.east * mas)),
                     np.max(np.abs(np.asarray(north) - tr.north * mas)))
            dv = np.max(np.abs(np.asarray(v_z) - tr.v_z))
            worst_p, worst_v = max(worst_p, dp), max(worst_v, dv)
            print(f"  {model.stars[k]}: {t.size} epochs, max |JAX - numba| position "
                  f"{dp:.1e} mas, v_z {dv:.1e} km/s")
            del elj
    print(f"1PN tracks: worst {worst_p:.1e} mas, {worst_v:.1e} km/s (target <= 1e-6 each)")
    return worst_p <= 1e-6 and worst_v <= 1e-6


def check_residuals(jm, model, vec, label):
    r_dw = model.data_residuals(vec)
    r_j = np.asarray(jm.residuals(vec))
    d = np.max(np.abs(r_j - r_dw))
    chi_dw = float(np.sum(model.residuals(vec) ** 2))
    chi_j = float(jm.chi2(jnp.asarray(vec)))
    print(f"{label}: max |residual JAX - deepwell| = {d:.1e} (whitened units); chi-square "
          f"{chi_j:.6f} vs {chi_dw:.6f} (rel {abs(chi_j / chi_dw - 1):.1e})")
    return d


def check_gradients(jm, vec, free, label, rng):
    x = jnp.asarray(vec)
    lp, g_rev = jm.grad_reverse(x)
    lp2, g_fwd = jm.grad_forward(x) if jm.grad_forward is not None else (lp, g_rev)
    worst = 0.0
    # central differences on a random subset of free entries, at a perturbed point
    for i in free:
        h = 1e-5 * max(abs(vec[i]), 1e-2) if i < jm.n_shared else 1e-6 * max(abs(vec[i]), 1.0)
        if jm.model.layout.names()[i].endswith("t_peri"):
            h = 1e-5
        if jm.model.layout.names()[i] == "distance" or jm.model.layout.names()[i] == "mass":
            h = 1e-6 * vec[i]
        xp, xm = vec.copy(), vec.copy()
        xp[i] += h
        xm[i] -= h
        fd = (float(jm.chi2(jnp.asarray(xp))) - float(jm.chi2(jnp.asarray(xm)))) / (2 * h)
        scale = max(abs(fd), 1e-3 * float(np.max(np.abs(g_rev))))
        worst = max(worst, abs(float(g_rev[i]) - fd) / scale)
    rf = float(np.max(np.abs(np.asarray(g_rev) - np.asarray(g_fwd))) / np.max(np.abs(g_rev)))
    print(f"{label}: grad(chi2) reverse vs central differences over {len(free)} entries: worst "
          f"rel {worst:.1e}; forward vs reverse: max diff / max |grad| {rf:.1e}; chi2 "
          f"{float(lp):.4f} / {float(lp2):.4f}")
    return worst, rf


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--fit-cache", default="")
    args = ap.parse_args(argv)
    ok = check_kepler()
    res = load_fit(args.fit_cache)
    model = res.model
    vec = np.asarray(res.internal, float)
    jm = JaxJointModel(model, vec)
    print("relativistic JAX model:", jm.describe())
    ok &= check_tracks(res, jm)
    check_residuals(jm, model, vec, "relativistic residuals")
    jp = JaxJointModel(model, vec, planar=True)
    print("planar JAX model:", jp.describe())
    check_residuals(jp, model, vec, "relativistic residuals, scaled planar sweeps")
    rp = np.asarray(jp.residuals(vec)) - model.data_residuals(vec)
    npos = model.pos.n
    dpos = max(np.max(np.abs(rp[:npos] * model.pos.ra_err)),
               np.max(np.abs(rp[npos:2 * npos] / model._w_dec)))
    dvel = np.max(np.abs(rp[2 * npos:] * model.vel.vr_err))
    print(f"  planar vs numba at the data rows: positions {dpos:.1e} mas (whitened back, "
          f"approx.), velocities {dvel:.1e} km/s")
    ok &= dpos <= 1e-6 and dvel <= 1e-6
    kep = model.keplerian()
    drop = [model.layout.index(n) for n in ("f", "f_sp")]
    kvec = np.delete(vec, drop)
    jk = JaxJointModel(kep, kvec, keplerian=True)
    check_residuals(jk, kep, kvec, "Keplerian residuals")
    rng = np.random.default_rng(11)
    names = model.layout.names()
    free = [i for i, n in enumerate(names) if n not in ("f", "f_sp")]
    # a point off the optimum so that the gradient is not ~0
    cov = np.asarray(res.internal_cov) if getattr(res, "internal_cov", None) is not None else None
    pt = vec.copy()
    if cov is not None:
        sd = np.sqrt(np.clip(np.diag(cov), 0, None))
        pt = vec + rng.normal(size=vec.size) * sd * 0.5
    check_gradients(jm, pt, free, "relativistic", rng)
    check_gradients(jp, pt, free, "relativistic planar (scan in forward mode inside grad)", rng)
    kfree = list(range(kvec.size))
    kpt = np.delete(pt, drop)
    check_gradients(jk, kpt, kfree, "Keplerian", rng)
    print("OK" if ok else "CHECK FAILED")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
