"""Cost of the joint fit with the default relativistic effects against a Keplerian fit.

Run: ``python tests/benchmarks/bench_fit_effects.py``.  Uses the bundled
"rich" demo scenario (Newtonian data) for the Keplerian fit, and the same
scenario simulated with general-relativistic effects (temporary folder) for the
fit with the default effects (Romer, exact redshift, 1PN precession for the
stars where it matters), so that each model fits data it describes.  Times in
the same run (best of ``--repeat``, no assertions):

* the whole ``fit_joint`` (start search + fit + covariance);
* the least-squares minimisation alone, from the start the fit would use.

The issue's budget is a ratio of at most ~10 for the default effects.
"""

import argparse
import re
import tempfile
import time
from pathlib import Path

import numpy as np

from deepwell.fit.joint import build_model, fit_joint
from deepwell.fit.least_squares import bounds, minimise
from deepwell.fit.start import find_start
from deepwell.tables.effects import effects_from_args
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import parse_settings
from deepwell.tools.simulate import write_scenario

RICH = Path(__file__).resolve().parents[2] / "scenarios" / "rich" / "description.toml"


def _best(func, repeat):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - t0)
    return best


def _minimise_time(obs, settings, repeat):
    model = build_model(obs, settings)
    start = find_start(model.keplerian(), settings)
    model, vec = model.start_from(start.vec, settings)
    lo, hi, free = bounds(model, settings)
    vec0 = np.clip(vec, lo, hi)
    return _best(lambda: minimise(model, vec0, free, lo, hi), repeat), model


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--repeat", type=int, default=3)
    args = p.parse_args(argv)
    text = re.sub(r"\[effects\][^\[]*", "[effects]\nromer = true\nredshift = 1.0\n"
                  "precession = 1.0\n\n", RICH.read_text(encoding="utf-8"), count=1)
    with tempfile.TemporaryDirectory() as tmp:
        desc = Path(tmp) / "description.toml"
        desc.write_text(text, encoding="utf-8")
        obs = read_observations(write_scenario(desc, Path(tmp) / "data"))
    newton_obs = read_observations(RICH.parent)
    kepler = effects_from_args(parse_settings({}), newtonian=True)
    default = parse_settings({})
    fit_joint(obs, default)  # compile / warm caches
    t_kep = _best(lambda: fit_joint(newton_obs, kepler), args.repeat)
    t_def = _best(lambda: fit_joint(obs, default), args.repeat)
    m_kep, _ = _minimise_time(newton_obs, kepler, args.repeat)
    m_def, model = _minimise_time(obs, default, args.repeat)
    names = [s for s, i in zip(model.stars, model.integrated, strict=True) if i]
    print(f"{len(model.stars)} stars, {model.n_data} data; default effects integrate "
          f"{len(names)} star(s): {', '.join(names)}")
    print(f"fit_joint  Keplerian: {t_kep:.2f} s   default effects: {t_def:.2f} s   "
          f"ratio {t_def / t_kep:.1f}")
    print(f"minimise   Keplerian: {m_kep:.2f} s   default effects: {m_def:.2f} s   "
          f"ratio {m_def / m_kep:.1f}")


if __name__ == "__main__":
    main()
