"""Timing of the Kepler kernel; plain script, prints times and ratios.

Run from the repository root:

    python tests/benchmarks/bench_kepler.py [--size N] [--repeat R]

Every ratio is measured in the same run, against one numpy.sin + numpy.cos
pass over the same array (the budget of the issue: at most 2x that).
"""

import argparse
import sys
import time
from pathlib import Path

import numpy as np

# Use the working tree this script sits in, also when run from elsewhere.
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))


def best_time(func, repeat):
    """Smallest wall time of ``repeat`` calls (s)."""
    best = np.inf
    for _ in range(repeat):
        start = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - start)
    return best


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=10**6, help="number of anomalies")
    parser.add_argument("--repeat", type=int, default=7, help="timings per case (best kept)")
    args = parser.parse_args(argv)

    start = time.perf_counter()
    from deepwell.model.kernels.kepler import (
        compiled_kernel_available,
        solve_kepler,
        solve_kepler_numpy,
    )
    from deepwell.model.kernels.orbit import keplerian_track

    solve_kepler(np.linspace(0.0, 1.0, 8), 0.5)
    first_call = time.perf_counter() - start

    rng = np.random.default_rng(12345)
    n = args.size
    mean_anom = rng.uniform(-1e3, 1e3, n)
    # Realistic mix: most orbits moderate, a tail of very eccentric ones.
    ecc_mix = np.concatenate([
        rng.uniform(0.0, 0.7, n - n // 4),
        rng.uniform(0.7, 0.99, n // 5),
        rng.uniform(0.99, 0.9999, n // 4 - n // 5),
    ])
    rng.shuffle(ecc_mix)

    t_trig = best_time(lambda: (np.sin(mean_anom), np.cos(mean_anom)), args.repeat)
    t_mix = best_time(lambda: solve_kepler(mean_anom, ecc_mix), args.repeat)
    t_09 = best_time(lambda: solve_kepler(mean_anom, 0.9), args.repeat)
    t_np = best_time(lambda: solve_kepler_numpy(mean_anom, ecc_mix), max(1, args.repeat // 3))

    from scipy.optimize import newton

    n_sub = min(10**4, n)

    def newton_loop():
        for m, e in zip(mean_anom[:n_sub], ecc_mix[:n_sub], strict=True):
            start_value = m + 0.85 * e * np.sign(np.sin(m))
            newton(lambda x, m=m, e=e: x - e * np.sin(x) - m, start_value,
                   fprime=lambda x, e=e: 1.0 - e * np.cos(x), tol=1e-12, maxiter=200,
                   disp=False)

    t_newton = best_time(newton_loop, 1) * n / n_sub

    epochs = np.linspace(2000.0, 2030.0, n)
    args_track = dict(a=125.0, ecc=0.88, inc=2.3, node=3.9, peri_arg=1.2, t_peri=2018.4,
                      period=16.0, distance=8200.0)
    t_track = best_time(lambda: keplerian_track(epochs, **args_track), args.repeat)
    small = epochs[:: max(1, n // 200)][:200]
    t_small = best_time(lambda: keplerian_track(small, **args_track), 200 * args.repeat)

    print(f"compiled kernel: {compiled_kernel_available()}   "
          f"import + first call (compile or cache load): {first_call:.3f} s")
    print(f"anomalies: {n}, |M| <= 1e3")
    print(f"{'case':<44}{'time [ms]':>12}{'/ sin+cos':>12}")
    rows = [
        ("numpy.sin + numpy.cos", t_trig),
        ("solve_kepler, e mixed (0..0.9999)", t_mix),
        ("solve_kepler, e = 0.9", t_09),
        ("solve_kepler_numpy (reference), e mixed", t_np),
        (f"scipy.optimize.newton loop ({n_sub} scaled)", t_newton),
        ("keplerian_track, all epochs", t_track),
    ]
    for name, value in rows:
        print(f"{name:<44}{value * 1e3:>12.2f}{value / t_trig:>12.2f}")
    print(f"keplerian_track per data point: {t_track / n * 1e9:.1f} ns (large arrays), "
          f"{t_small / small.size * 1e9:.1f} ns ({small.size} epochs per call, "
          f"{t_small * 1e6:.1f} us per call)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
