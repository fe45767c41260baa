"""Benchmark: how the joint fit's time and memory grow with the rows and with the stars.

Run from the repository root::

    python tests/benchmarks/bench_scale.py            # 10, 30, 100 stars; 1e3 .. 1e6 rows
    python tests/benchmarks/bench_scale.py --quick    # without the 1e6-row case
    python tests/benchmarks/bench_scale.py --baseline-tree /path/to/older/checkout

Data are invented with deepwell's own simulator (``deepwell.tools.simulate``,
Newtonian, 0.8 mas and 10 km/s errors).  Each case runs in a fresh Python
process: it reads the tables, then times ``fit_joint`` (wall and CPU seconds)
and reports the process's peak resident memory (reading included).

Baseline, measured in the same run: the same cases fitted with the dense
Jacobian handed to scipy's trust-region solver (``DENSE_CELLS`` raised so
that every fit takes that path), or with ``--baseline-tree`` the code of
another checkout (e.g. the commit before this branch).  Baseline cases are
run up to ``--baseline-max`` rows (the dense path needs ~7 GB at 1e6 rows).
The script prints the time and memory ratios against the baseline and the
fitted exponents b of time ~ rows^b (3 stars) and time ~ stars^b (40
position epochs per star).
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from deepwell.tools.simulate import write_scenario  # noqa: E402

CASE = r"""
import json, resource, sys, time, warnings
warnings.simplefilter("ignore")
import deepwell.fit.least_squares as ls
from deepwell.tables.effects import effects_from_args
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import Settings
from deepwell.fit.joint import fit_joint
if sys.argv[2] == "dense":
    ls.DENSE_CELLS = 10**18
obs = read_observations(sys.argv[1])
settings = effects_from_args(Settings(), newtonian=True)
t0, c0 = time.perf_counter(), time.process_time()
res = fit_joint(obs, settings)
wall, cpu = time.perf_counter() - t0, time.process_time() - c0
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
truth = json.load(open(sys.argv[1] + "/truth.json"))
import deepwell
print(json.dumps({"tree": deepwell.__file__, "wall": wall, "cpu": cpu, "peak": peak,
                  "n_data": res.n_data,
                  "mass": res.value("mass"), "mass_sigma": res.sigma("mass"),
                  "distance": res.value("distance"), "chi2": res.chi2,
                  "converged": res.converged}))
"""


def scenario(folder, n_stars, n_rows, seed=3):
    """Write an invented nucleus of ``n_stars`` stars with about ``n_rows`` position rows."""
    rng = np.random.default_rng(seed)
    text = ('name = "scale"\nstory = "an invented nucleus for the scale benchmark"\n'
            f"seed = {seed}\n[truth]\nmass = 4.0e6\ndistance = 8000.0\nx0 = 0.5\ny0 = -0.4\n"
            "vx0 = 0.05\nvy0 = 0.03\nvz0 = 5.0\n"
            "[effects]\nromer = false\nredshift = 0.0\nprecession = 0.0\n")
    for k in range(n_stars):
        text += (f"[stars.sc-{k:03d}]\na = {rng.uniform(60, 200):.2f}\n"
                 f"e = {rng.uniform(0.1, 0.8):.3f}\ninc = {rng.uniform(10, 170):.1f}\n"
                 f"node = {rng.uniform(0, 360):.1f}\nperi_arg = {rng.uniform(0, 360):.1f}\n"
                 f"t_peri = {rng.uniform(1995, 2025):.2f}\n")
    text += ('[[campaigns]]\ndataset = "img"\nkind = "positions"\nstart = 1995.0\n'
             f"end = 2025.0\ncadence = {n_rows / n_stars / 30.0:.6g}\nerror = 0.8\n"
             '[[campaigns]]\ndataset = "spec"\nkind = "velocities"\nstart = 2000.0\n'
             "end = 2025.0\ncadence = 1.0\nerror = 10.0\n")
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "description.in.toml").write_text(text)
    return write_scenario(folder / "description.in.toml", folder / "data")


def run_case(data, mode, tree):
    """One fit in a fresh process; its measurements as a dict (None if it failed)."""
    env = dict(os.environ, PYTHONPATH=str(tree))
    # run inside the tree: "python -c" puts the working folder first on sys.path
    out = subprocess.run([sys.executable, "-c", CASE, str(data), mode], env=env, cwd=tree,
                         capture_output=True, text=True)
    if out.returncode:
        print(f"    failed: {out.stderr.strip().splitlines()[-1]}", flush=True)
        return None
    return json.loads(out.stdout.strip().splitlines()[-1])


def exponent(x, y):
    """Least-squares slope of log y against log x."""
    return float(np.polyfit(np.log(x), np.log(y), 1)[0])


def line(label, new, base):
    text = (f"{label:>18} {new['n_data']:>9} {new['wall']:8.1f} {new['cpu']:8.1f} "
            f"{new['peak'] / 1e9:8.2f}")
    if base:
        text += (f" {base['wall']:8.1f} {base['peak'] / 1e9:8.2f} "
                 f"{new['wall'] / base['wall']:7.2f} {new['peak'] / base['peak']:7.2f}")
    return text


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="skip the 1e6-row case")
    ap.add_argument("--baseline-tree", type=Path, default=None,
                    help="checkout whose code is the baseline (default: this tree, dense path)")
    ap.add_argument("--baseline-max", type=float, default=1e5,
                    help="largest row count also run with the baseline")
    args = ap.parse_args()
    base_tree = args.baseline_tree or ROOT
    base_mode = "default" if args.baseline_tree else "dense"
    rows = [1e3, 1e4, 1e5] + ([] if args.quick else [1e6])
    stars = [10, 30, 100]
    head = (f"{'case':>18} {'data':>9} {'wall s':>8} {'cpu s':>8} {'peak GB':>8} "
            f"{'base s':>8} {'base GB':>8} {'t/base':>7} {'mem/base':>7}")
    print(f"baseline: {'dense Jacobian, scipy TRF' if base_mode == 'dense' else base_tree}")
    print(head, flush=True)
    results = {"rows": [], "stars": []}
    with tempfile.TemporaryDirectory() as tmp:
        for n in rows:
            data = scenario(Path(tmp) / f"r{int(n)}", 3, int(n))
            new = run_case(data, "default", ROOT)
            base = run_case(data, base_mode, base_tree) if n <= args.baseline_max else None
            if new:
                results["rows"].append((n, new))
                print(line(f"3 stars, {n:.0e} rows", new, base), flush=True)
        for k in stars:
            data = scenario(Path(tmp) / f"s{k}", k, 40 * k)
            new = run_case(data, "default", ROOT)
            base = run_case(data, base_mode, base_tree)
            if new:
                results["stars"].append((k, new))
                print(line(f"{k} stars, 40 each", new, base), flush=True)
    for key, label in (("rows", "position rows (3 stars)"), ("stars", "stars (40 epochs each)")):
        pts = results[key]
        if len(pts) >= 2:
            x = [p[0] for p in pts]
            print(f"time ~ {label}^b: b = {exponent(x, [p[1]['wall'] for p in pts]):.2f} "
                  f"(wall), {exponent(x, [p[1]['cpu'] for p in pts]):.2f} (cpu); "
                  f"memory b = {exponent(x, [p[1]['peak'] for p in pts]):.2f}")


if __name__ == "__main__":
    main()
