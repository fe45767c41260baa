"""Speed of posterior sampling on the rich demo; plain script, prints numbers and ratios.

Run from the repository root:

    python tests/benchmarks/bench_sampling.py [--steps N] [--newtonian] [--until-converged]

For each sampler variant (differential evolution + snooker with the frame terms
integrated out, the same without integrating them out, and emcee's stretch
move with them integrated out) one ensemble runs ``--steps`` steps from the
same least-squares start, in the same process, one after the other.  Printed
(times are CPU times of this process, robust when the machine is shared):
seconds per step, integrated autocorrelation time of the slowest sampled
shared parameter, its effective samples per second, the estimated wall time
until the convergence rule (55 tau per ensemble, two ensembles on two cores)
and ratios against the default variant.  tau from a run shorter than 50 tau
is a lower bound, so the estimates are optimistic; the flag says so.
``--until-converged`` then runs :func:`sample_posterior` with its real rule
(two ensembles in parallel) under ``--max-time`` and prints the outcome.
"""

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
ROOT = Path(__file__).resolve().parents[2]


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--steps", type=int, default=1500, help="steps per variant")
    parser.add_argument("--newtonian", action="store_true",
                        help="plain Keplerian model (all relativistic effects off)")
    parser.add_argument("--until-converged", action="store_true",
                        help="also run sample_posterior until its convergence rule holds")
    parser.add_argument("--max-time", type=float, default=1800.0,
                        help="wall-time budget of --until-converged (s)")
    args = parser.parse_args(argv)

    import emcee

    from deepwell.fit import fit_joint
    from deepwell.sampling import LogPosterior, run_ensemble, sample_posterior
    from deepwell.sampling.convergence import RUN_TAUS, autocorr_times, burn_in
    from deepwell.sampling.core import default_moves
    from deepwell.sampling.posterior import start_positions
    from deepwell.settings import parse_settings
    from deepwell.tables import read_observations

    effects = {"romer": False, "redshift": "off", "precession": False} if args.newtonian else {}
    settings = parse_settings({"effects": effects})
    t0 = time.perf_counter()
    result = fit_joint(read_observations(ROOT / "scenarios" / "rich"), settings)
    print(f"least-squares fit: {time.perf_counter() - t0:.1f} s, "
          f"{result.n_free} free parameters, effects: {'off' if args.newtonian else 'default'}")

    variants = {
        "DE+snooker, marginalised": (True, default_moves()),
        "DE+snooker, sampled frame": (False, default_moves()),
        "stretch, marginalised": (True, [(emcee.moves.StretchMove(), 1.0)]),
    }
    rows = {}
    for name, (marg, moves) in variants.items():
        target = LogPosterior(result, marginalise=marg)
        ndim = len(target.sampled)
        nw = 2 * ndim + 2
        rng = np.random.default_rng(2024)
        p0 = start_positions(target, result, nw, rng)
        start, cpu0 = time.perf_counter(), time.process_time()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            run = run_ensemble(target, p0, rng, n_steps=args.steps, moves=moves, thin=2)
        real = time.perf_counter() - start
        wall = time.process_time() - cpu0  # CPU time: robust on a shared, busy machine
        burn = burn_in(run.chain, 2)
        tau = autocorr_times(run.chain[burn:], 2)
        burn *= 2
        shared = [i for i, n in enumerate(target.names) if not n.startswith("s")]
        k = shared[int(np.argmax(tau[shared]))]
        kept = run.n_steps - burn
        ess = kept * nw / tau[k]
        per_step = wall / run.n_steps
        t_conv = (RUN_TAUS + 5) * np.max(tau) * per_step
        rows[name] = dict(per_step=per_step, ess_s=ess / wall, t_conv=t_conv,
                          tau_all=np.max(tau), worst=target.names[int(np.argmax(tau))])
        short = kept < RUN_TAUS * np.max(tau)
        print(f"\n{name}: {ndim} sampled, {nw} walkers, {args.steps} steps in {wall:.1f} s "
              f"CPU ({real:.1f} s wall) "
              f"({per_step * 1e3:.1f} ms/step, acceptance {run.acceptance.mean():.2f})")
        print(f"  slowest shared parameter {target.names[k]}: tau = {tau[k]:.0f} steps, "
              f"ESS = {ess:.0f}, {ess / wall:.2f} effective samples/s")
        print(f"  largest tau {np.max(tau):.0f} steps ({target.names[int(np.argmax(tau))]}); "
              f"estimated time to the rule (55 tau): {t_conv / 60:.1f} min"
              + ("  [run < 50 tau: tau is a lower bound, estimate optimistic]" if short else ""))

    # Cost of one log-posterior call, both target forms interleaved (fair under load).
    forms = {m: LogPosterior(result, marginalise=m) for m in (True, False)}
    jitter = np.random.default_rng(1)
    thetas = {m: t.base[t.sampled] * (1 + 1e-7 * jitter.standard_normal((75, len(t.sampled))))
              for m, t in forms.items()}
    cost = {True: [], False: []}
    for _ in range(20):
        for m, t in forms.items():
            c = time.process_time()
            t(thetas[m])
            cost[m].append(time.process_time() - c)
    c_m, c_s = np.median(cost[True]), np.median(cost[False])
    print(f"\nlog-posterior call, 75 walkers (interleaved, median CPU): marginalised "
          f"{c_m * 1e3:.1f} ms, sampled frame {c_s * 1e3:.1f} ms (ratio {c_s / c_m:.2f})")

    ref = rows["DE+snooker, marginalised"]
    print("\nratios (default variant / other), same run:")
    for name, row in rows.items():
        print(f"  vs {name:28s}: ESS/s x{ref['ess_s'] / row['ess_s']:.2f}, "
              f"time per step x{row['per_step'] / ref['per_step']:.2f}, "
              f"time to rule x{row['t_conv'] / ref['t_conv']:.2f}")

    if args.until_converged:
        start = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            post = sample_posterior(result, progress=False, max_time=args.max_time,
                                    processes=2)
        print(f"\nsample_posterior until the rule: {time.perf_counter() - start:.0f} s, "
              f"steps {post.n_steps}")
        print(post.statement)
        m = post.quantity("mass")
        print(f"mass {m.value:.4g} +{m.upper - m.value:.3g} -{m.value - m.lower:.3g} solMass")
    return 0


if __name__ == "__main__":
    sys.exit(main())
