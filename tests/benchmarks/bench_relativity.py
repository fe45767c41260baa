"""Cost of a 1PN track against a Keplerian track, and accuracy against a reference.

Run: ``python tests/benchmarks/bench_relativity.py``.  Prints timings of
12 stars x 100 epochs in the same run (no assertions) and the largest position
error (micro-arcsec at 8 kpc) of each ``steps_per_orbit`` against scipy's
adaptive DOP853 at rtol 1e-13.
"""

import argparse
import timeit

import numpy as np
from scipy.integrate import solve_ivp

from deepwell.core.constants import C_AU_PER_YR, GM_SUN_AU3_PER_YR2, KEPLER_K
from deepwell.model.kernels.orbit import keplerian_track
from deepwell.model.kernels.relativity import integrate_orbits, osculating_state, pn_track

MASS, DIST = 4e6, 8000.0


def _stars(n_stars, n_epochs, seed=1):
    rng = np.random.default_rng(seed)
    period = rng.uniform(10.0, 60.0, n_stars)
    a_au = np.cbrt(period**2 * MASS / KEPLER_K)
    e = rng.uniform(0.3, 0.97, n_stars)
    inc, node, peri_arg = rng.uniform(0.0, 3.0, (3, n_stars))
    t_peri = rng.uniform(1995.0, 2025.0, n_stars)
    t = np.sort(rng.uniform(1995.0, 2025.0, (n_stars, n_epochs)), axis=-1)
    return t, period, a_au, e, inc, node, peri_arg, t_peri


def _best(func, number=20, repeat=7):
    func()
    return min(timeit.repeat(func, number=number, repeat=repeat)) / number


def time_tracks(n_stars=12, n_epochs=100):
    t, period, a_au, e, inc, node, w, tp = _stars(n_stars, n_epochs)
    col = [x[:, None] for x in (a_au / DIST * 1e3, e, inc, node, w, tp, period)]
    t_kep = _best(lambda: keplerian_track(t, *col[:6], col[6], DIST))
    print(f"Keplerian track, {n_stars} stars x {n_epochs} epochs: {t_kep * 1e3:.3f} ms")
    for steps in (48, 64, 96):
        for light in (False, True):
            t_pn = _best(lambda s=steps, lt=light: pn_track(t, a_au, e, inc, node, w, tp, MASS,
                                                            2010.0, steps_per_orbit=s,
                                                            light_time=lt))
            print(f"1PN track steps_per_orbit={steps:3d} light_time={light!s:5}: "
                  f"{t_pn * 1e3:.3f} ms, ratio {t_pn / t_kep:.1f}")


def _reference(r0, v0, t, gm):
    k = 1.0 / C_AU_PER_YR**2

    def rhs(_, y):
        r, v = y[:3], y[3:]
        rr = np.sqrt(r @ r)
        acc = -gm * r / rr**3 + k * gm / rr**3 * ((4 * gm / rr - v @ v) * r + 4 * (r @ v) * v)
        return np.concatenate([v, acc])

    return solve_ivp(rhs, (0.0, t[-1]), np.concatenate([r0, v0]), method="DOP853",
                     rtol=1e-13, atol=1e-12, t_eval=t).y.T


def accuracy():
    uas_au = 1e-6 * DIST
    gm = MASS * GM_SUN_AU3_PER_YR2
    t = np.linspace(0.0, 30.0, 301)
    a_au = np.cbrt(16.0**2 * MASS / KEPLER_K)
    for ecc in (0.88, 0.97):
        r0, v0 = osculating_state(a_au, ecc, 0.8, 1.0, 2.0, 2.3, 0.0, MASS)
        ref = _reference(r0, v0, t, gm)
        for steps in (32, 48, 64, 96, 128):
            st = integrate_orbits(t, r0, v0, 0.0, gm, steps_per_orbit=steps)
            err = np.max(np.abs(st.position - ref[:, :3])) / uas_au
            verr = np.max(np.abs(st.velocity - ref[:, 3:])) * 4.740470463
            print(f"16-yr e={ecc} over 30 yr, steps_per_orbit={steps:3d}: "
                  f"max position error {err:.2e} uas, velocity {verr:.1e} km/s")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--stars", type=int, default=12)
    parser.add_argument("--epochs", type=int, default=100)
    args = parser.parse_args(argv)
    time_tracks(args.stars, args.epochs)
    accuracy()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
