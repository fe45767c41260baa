"""Cost of the relativistic log-posterior and its gradient: deepwell today against a JAX prototype.

Plain script (prints numbers and ratios, asserts nothing about time).  Run from
the repository root in a venv that has jax (e.g. /work/venv-jax):

    python tests/benchmarks/jax_prototype/bench_jax_relativistic.py \
        [--repeat N] [--rounds R] [--fit-cache FILE]

One run measures, on the rich demo fitted once with the default settings
(Romer delay, exact redshift, 1PN for the stars whose precession matters):

1. deepwell now (numba/numpy, finite differences), the baseline:
   * ``LogPosterior`` at the fitted point (one log-posterior call) and
     ``WhitenedTarget`` (log-posterior + grouped forward-difference gradient),
     exactly as tests/benchmarks/bench_sampling.py measures them;
   * the model calls inside them: ``JointModel.residuals`` for one vector and
     for the 1 + n_groups stack of one finite-difference gradient;
   * the same two model calls for the Keplerian twin (``model.keplerian()``)
     and for the model with all 12 stars integrated.
2. JAX prototype (tests/benchmarks/jax_prototype/jax_model.py), float64: chi-square alone and
   chi-square + gradient for
   * the 3-d mirror of pn_track (state in sky axes, 2 sweeps per star padded to
     one step count): reverse mode (``jax.grad`` through ``lax.scan``) and
     forward mode (per-star ``jvp`` over 6 + n_shared tangents, ``vmap``-ed over
     stars, then J^T r);
   * scaled planar sweeps (jax_kernels.planar_sweep: the same orbits in the
     orbital plane in units of a and sqrt(a^3/GM), which depend on e and
     kappa = f_sp GM/(c^2 a) only): ``jax.grad`` of the whole chi-square, the
     scan differentiated in forward mode with two tangents inside a custom VJP;
     both directions from every apocentre epoch (robust) or only the directions
     some row needs at the fitted point (fragile away from it); default stars and
     all 12 stars integrated;
   * the Keplerian twin (reverse and forward).
   Compile time (lower + compile, cold, no persistent cache) is reported apart
   from run time.
3. Ratios against the deepwell numbers of this same run.

Timings: each figure is the median over ``--rounds`` rounds of the median of
``--repeat`` calls (wall clock, perf_counter; CPU time in brackets, which
counts every thread).  The JAX chi-square is the sum of squares of the data and
eccentricity-penalty rows; the sampler's per-star coordinates, whitening and
frame-term projection are not included (affine maps, cheap next to the model;
deepwell's WhitenedTarget includes them, its bare model calls do not).
"""

import argparse
import pickle
import statistics
import sys
import time
import warnings
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
import jax_kernels as K  # noqa: E402

K.enable_x64()

import jax  # noqa: E402
import jax.numpy as jnp  # noqa: E402
import numpy as np  # noqa: E402
from jax_model import JaxJointModel  # noqa: E402

import deepwell  # noqa: E402
from deepwell.fit.sampling import LogPosterior  # noqa: E402
from deepwell.fit.sampling.gradient import WhitenedTarget  # noqa: E402


def timed(fn, repeat, rounds):
    """(median wall s, median CPU s) of fn() over rounds x repeat calls."""
    walls, cpus = [], []
    fn()  # warm (numba compile/cache load, first JAX dispatch)
    for _ in range(rounds):
        w, c = [], []
        for _ in range(repeat):
            t0, c0 = time.perf_counter(), time.process_time()
            fn()
            w.append(time.perf_counter() - t0)
            c.append(time.process_time() - c0)
        walls.append(statistics.median(w))
        cpus.append(statistics.median(c))
    return statistics.median(walls), statistics.median(cpus)


def ms(x):
    return f"{x[0] * 1e3:8.2f} ms [cpu {x[1] * 1e3:7.2f}]"


def fd_stack(model, vec, n_groups):
    """A (1 + n_groups, n) stack like one grouped finite-difference gradient."""
    stack = np.repeat(vec[None], 1 + n_groups, axis=0)
    for g in range(n_groups):
        stack[1 + g, g % vec.size] *= 1.0 + 1e-8
    return stack


def deepwell_model_costs(model, vec, n_groups, repeat, rounds):
    one = timed(lambda: model.residuals(vec), repeat, rounds)
    stack = fd_stack(model, vec, n_groups)
    many = timed(lambda: model.residuals(stack), repeat, rounds)
    return one, many


def jax_costs(jm, vec, repeat, rounds):
    """Compile and run times of chi2, reverse and forward gradients."""
    x = jnp.asarray(vec)
    out = {}
    for name, fn in (("chi2", jm.chi2), ("reverse", jm.grad_reverse),
                     ("forward", jm.grad_forward)):
        if fn is None:
            continue
        t0 = time.perf_counter()
        compiled = fn.lower(x).compile()
        comp = time.perf_counter() - t0
        run = timed(lambda c=compiled: jax.block_until_ready(c(x)), repeat, rounds)
        out[name] = (comp, run)
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=15, help="calls per round")
    ap.add_argument("--rounds", type=int, default=3, help="rounds (median of medians)")
    ap.add_argument("--fit-cache", default="", help="pickle of the fit (made if missing)")
    args = ap.parse_args(argv)
    rep, rnd = args.repeat, args.rounds

    print(f"jax {jax.__version__} on {jax.devices()[0].platform}, float64: "
          f"{jnp.zeros(1).dtype == jnp.float64}")
    t0 = time.perf_counter()
    cache = Path(args.fit_cache) if args.fit_cache else None
    if cache and cache.exists():
        with open(cache, "rb") as fh:
            result = pickle.load(fh)
        print("fit loaded from", cache)
    else:
        result = deepwell.fit_joint(deepwell.read_observations(ROOT / "scenarios" / "rich"),
                                    deepwell.Settings())
        print(f"least-squares fit of the rich demo: {time.perf_counter() - t0:.1f} s")
        if cache:
            with open(cache, "wb") as fh:
                pickle.dump(result, fh)
    model = result.model
    vec = np.asarray(result.internal, float)
    n_int = int(model.integrated.sum())
    print(f"model: {len(model.stars)} stars, {n_int} integrated (steps_per_orbit "
          f"{model.effects.steps_per_orbit}), {model.n_data} data, {result.n_free} free")

    # ---------------------------------------------------------- deepwell now
    target = LogPosterior(result)
    theta = target.base[target.sampled]
    wt = WhitenedTarget(target, theta, target.start_cov(result.internal_cov))
    z = np.zeros(wt.n)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        dw_lp = timed(lambda: target(theta[None]), rep, rnd)
        dw_grad = timed(lambda: wt(z), rep, rnd)
    n_groups = wt.n_rows - 1
    print("\n1. deepwell now (numba/numpy; gradient = grouped forward differences, "
          f"{wt.n_rows} model rows)")
    print(f"   relativistic log-posterior (LogPosterior)           {ms(dw_lp)}")
    print(f"   relativistic log-posterior + gradient (WhitenedTarget) {ms(dw_grad)}"
          f"  = {dw_grad[0] / dw_lp[0]:.1f} x log-posterior")
    kep = model.keplerian()
    drop = [model.layout.index(n) for n in ("f", "f_sp")]
    kvec = np.delete(vec, drop)
    all_int = model.replace(integrated=np.ones(len(model.stars), bool))
    dw = {}
    for label, m, v, ng in (("relativistic (default)", model, vec, n_groups),
                            ("all 12 integrated", all_int, vec, n_groups),
                            ("Keplerian twin", kep, kvec, n_groups - 2)):
        dw[label] = deepwell_model_costs(m, v, ng, rep, rnd)
        print(f"   {label:24s} residuals x1 {ms(dw[label][0])};  x{1 + ng} (one FD "
              f"gradient) {ms(dw[label][1])}")

    # ------------------------------------------------------------------ JAX
    print("\n2. JAX prototype (float64; compile = lower + compile, cold)")
    jres = {}
    all12 = np.ones(len(model.stars), bool)
    variants = (
        ("3-d mirror of pn_track, default stars", {}, vec, model),
        ("planar sweeps, both directions, default stars", {"planar": True}, vec, model),
        ("planar sweeps, needed directions only", {"planar": True, "directions": "needed"},
         vec, model),
        ("planar sweeps, all 12 integrated", {"planar": True, "integrated": all12}, vec, model),
        ("Keplerian twin", {"keplerian": True}, kvec, kep))
    for label, kwargs, v, m in variants:
        t0 = time.perf_counter()
        jm = JaxJointModel(m, v, **kwargs)
        setup = time.perf_counter() - t0
        res = jax_costs(jm, v, rep, rnd)
        chi_j = float(jm.chi2(jnp.asarray(v)))
        chi_d = float(np.sum(m.residuals(v) ** 2))
        jres[label] = res
        print(f"   {label}: {jm.describe()}; set-up {setup:.1f} s; chi2 {chi_j:.6f} "
              f"(deepwell {chi_d:.6f})")
        for name in ("chi2", "reverse", "forward"):
            if name not in res:
                continue
            comp, run = res[name]
            extra = "" if name == "chi2" else f"  = {run[0] / res['chi2'][1][0]:.1f} x chi2"
            print(f"      {name:8s} compile {comp:6.1f} s   run {ms(run)}{extra}")

    # --------------------------------------------------------------- ratios
    print("\n3. Ratios (deepwell wall time / JAX wall time; > 1 means JAX is faster)")
    base_g = dw_grad[0]
    base_fd = dw["relativistic (default)"][1][0]
    print(f"   baseline gradients: WhitenedTarget {base_g * 1e3:.2f} ms, bare FD model call "
          f"{base_fd * 1e3:.2f} ms")
    for label, res in jres.items():
        if label == "Keplerian twin":
            continue
        for name in ("reverse", "forward"):
            if name in res:
                r = res[name][1][0]
                print(f"   {label:48s} {name:7s} {r * 1e3:7.2f} ms: x{base_g / r:5.2f} vs "
                      f"WhitenedTarget, x{base_fd / r:5.2f} vs FD model call")
        print(f"   {label:48s} chi2    {res['chi2'][1][0] * 1e3:7.2f} ms: x"
              f"{dw_lp[0] / res['chi2'][1][0]:5.2f} vs LogPosterior")
    both = jres["planar sweeps, both directions, default stars"]["reverse"][1][0]
    a12 = jres["planar sweeps, all 12 integrated"]["reverse"][1][0]
    print(f"   all 12 integrated / default (planar, both directions): x{a12 / both:.2f} in JAX; "
          f"deepwell FD model call x"
          f"{dw['all 12 integrated'][1][0] / dw['relativistic (default)'][1][0]:.2f}")
    kj = jres["Keplerian twin"]
    bestk = min(("reverse", "forward"), key=lambda n: kj[n][1][0])
    print(f"   Keplerian: JAX gradient ({bestk}) {kj[bestk][1][0] * 1e3:.2f} ms vs deepwell FD "
          f"model call x{dw['Keplerian twin'][1][0] / kj[bestk][1][0]:.1f}; relativistic "
          f"(planar, both) / Keplerian JAX gradient x{both / kj[bestk][1][0]:.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
