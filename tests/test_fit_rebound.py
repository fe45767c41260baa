"""Injection-recovery with data made by REBOUND and an independent projection.

The data of this test do not pass through deepwell's orbit kernel or simulator:
orbits are integrated by REBOUND (general-purpose N-body library, IAS15) and
projected on the sky here, so a convention error shared by deepwell's own
simulator and fitter cannot hide.
"""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

rebound = pytest.importorskip("rebound")

from deepwell.fit.joint import fit_joint  # noqa: E402
from deepwell.tables.observations import read_observations  # noqa: E402
from deepwell.tables.settings import Settings  # noqa: E402

# GM_sun in au^3/yr^2 from the IAU 2015 nominal value (astropy), Julian year.
AU_M = 149_597_870_700.0  # IAU 2012 B2
YEAR_S = 365.25 * 86400.0  # Julian year (IAU)
GM_SUN = 1.3271244e20 * YEAR_S**2 / AU_M**3  # IAU 2015 B3
KMS_PER_AU_YR = AU_M / YEAR_S / 1e3

TRUTH = dict(mass=3.3e6, distance=7400.0, x0=-0.5, y0=0.3, vx0=-0.02, vy0=0.05, vz0=-9.0)
STARS = {  # a (au), e, inc, node, peri_arg (deg), t_peri (yr)
    "rb-1": (1100.0, 0.84, 70.0, 35.0, 250.0, 2011.0),
    "rb-2": (1500.0, 0.45, 150.0, 300.0, 100.0, 2004.0),
    "rb-3": (2500.0, 0.65, 30.0, 170.0, 20.0, 2015.5),
}


def _sky_states(epochs, a, e, inc, node, peri, t_peri, mass):
    """(north, east, away) in au and the away-velocity in au/yr, from REBOUND.

    REBOUND's (x, y, z) frame, with x = north, y = east and z = away from the
    observer, makes its (Omega, omega, inc) the position angle of the ascending
    node, the argument of pericentre from it and the inclination of the
    visual-binary convention (Heintz 1978, Double Stars, from memory).
    """
    sim = rebound.Simulation()
    sim.G = GM_SUN
    sim.integrator = "ias15"
    sim.add(m=mass)
    n = np.sqrt(GM_SUN * mass / a**3)
    t0 = epochs.min()
    sim.add(m=0.0, a=a, e=e, inc=np.radians(inc), Omega=np.radians(node),
            omega=np.radians(peri), M=n * (t0 - t_peri))
    sim.move_to_com()
    out = np.empty((len(epochs), 4))
    for j, t in enumerate(epochs):
        sim.integrate(t - t0, exact_finish_time=1)
        star, bh = sim.particles[1], sim.particles[0]
        out[j] = (star.x - bh.x, star.y - bh.y, star.z - bh.z, star.vz - bh.vz)
    return out


@pytest.fixture(scope="module")
def rebound_scenario(tmp_path_factory):
    rng = np.random.default_rng(2718)
    folder = tmp_path_factory.mktemp("rebound")
    pos, vel = [], []
    for name, (a, e, inc, node, peri, tp) in STARS.items():
        t = np.sort(rng.uniform(1998.0, 2023.0, 30))
        st = _sky_states(t, a, e, inc, node, peri, tp, TRUTH["mass"])
        mas = 1e3 / TRUTH["distance"]  # au -> mas (small-angle identity)
        dt = t - 2000.0
        ra = TRUTH["x0"] + TRUTH["vx0"] * dt + st[:, 1] * mas
        dec = TRUTH["y0"] + TRUTH["vy0"] * dt + st[:, 0] * mas
        err = 0.7
        pos.append(pd.DataFrame(dict(star=name, epoch=t, ra=ra + rng.normal(0, err, t.size),
                                     dec=dec + rng.normal(0, err, t.size),
                                     ra_err=err, dec_err=err)))
        tv = np.sort(rng.uniform(2005.0, 2023.0, 12))
        sv = _sky_states(tv, a, e, inc, node, peri, tp, TRUTH["mass"])
        vr = TRUTH["vz0"] + sv[:, 3] * KMS_PER_AU_YR
        vel.append(pd.DataFrame(dict(star=name, epoch=tv, vr=vr + rng.normal(0, 15.0, tv.size),
                                     vr_err=15.0)))
    pd.concat(pos).to_csv(folder / "positions.csv", index=False, float_format="%.6f")
    pd.concat(vel).to_csv(folder / "velocities.csv", index=False, float_format="%.6f")
    return folder


def test_fit_recovers_rebound_truth_within_joint_997_region(rebound_scenario):
    res = fit_joint(read_observations(rebound_scenario), Settings())
    names = list(TRUTH)
    idx = [res.labels.index(n) for n in names]
    diff = res.values[idx] - np.array([TRUTH[n] for n in names])
    maha = diff @ np.linalg.solve(res.cov[np.ix_(idx, idx)], diff)
    assert maha < stats.chi2.ppf(0.997, len(names))
    # and each star's elements: eccentricity and inclination within 4 sigma
    for name, (_a, e, inc, node, _peri, _tp) in STARS.items():
        assert abs(res.value(f"{name}:e") - e) < 4 * res.sigma(f"{name}:e")
        assert abs(res.value(f"{name}:inc") - inc) < 4 * res.sigma(f"{name}:inc")
        dn = (res.value(f"{name}:node") - node + 180) % 360 - 180
        assert abs(dn) < 4 * res.sigma(f"{name}:node")
