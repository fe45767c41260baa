"""Benchmark: the report stage against the fit, on a nucleus with instrument systematics.

Run from the repository root::

    python tests/benchmarks/bench_report.py [--error-model scale|jitter] [--figures]

Simulates (``deepwell simulate``) an invented 7-star nucleus watched by three
imagers and three spectrographs, some of which observe only a few stars, with
offsets, zero-points and mis-stated errors injected per data set; fits it with
the data-set terms (reference sets, offsets, zero-points and the error model);
then times, in the same run, each analysis (effect sizes with their Fisher
detectability, the per-star enclosed-mass refits, the Newtonian refit the effect
figures compare with, the per-data-set summary, the outlier table) and the
report writing, and prints each as a ratio to the fit time.  The figures are
timed only with ``--figures`` (they are drawn by
matplotlib and cost the same with or without an error model): once drawn in
this process alone (``FigureOptions(processes=1)``, the way every figure was
drawn before the drawing processes) as the figures' baseline, once as
``deepwell fit`` draws them (up to ``FIGURE_PROCESSES`` forked processes), each
as the report writing with figures minus the writing without them.
"""

import argparse
import tempfile
import textwrap
import time
from pathlib import Path

from deepwell.fit import fit_joint
from deepwell.report import FigureOptions, write_report
from deepwell.report.figures.drawing import figure_processes
from deepwell.results import analyse
from deepwell.results.datasets import dataset_summary
from deepwell.results.effect_sizes import star_effect_sizes
from deepwell.results.enclosed import enclosed_mass_profile
from deepwell.results.newtonian import newtonian_refit
from deepwell.results.outliers import outlier_table
from deepwell.tables import read_observations
from deepwell.tables.datasets import datasets_from_args
from deepwell.tables.settings import Settings
from deepwell.tools.simulate import write_scenario

# Invented nucleus: no real galaxy, star or observation behind these numbers.
STARS = {  # a (mas), e, inc, node, peri_arg (deg), t_peri (yr)
    "bn-01": (141.28, 0.88, 128.0, 231.0, 64.0, 2019.3),
    "bn-02": (116.63, 0.42, 57.0, 142.0, 302.0, 2009.8),
    "bn-03": (207.22, 0.73, 94.0, 18.0, 155.0, 2016.9),
    "bn-04": (528.6, 0.97, 33.0, 300.0, 210.0, 2018.4),
    "bn-05": (163.95, 0.63, 71.0, 85.0, 20.0, 2003.2),
    "bn-06": (251.03, 0.18, 142.0, 205.0, 110.0, 1991.5),
    "bn-07": (360.68, 0.79, 12.0, 48.0, 275.0, 2010.3),
}
CAMPAIGNS = """
[[campaigns]]
dataset = "old-imager"
kind = "positions"
start = 1998.3
end = 2008.5
cadence = 1.0
error = [0.8, 1.0]
coverage = 0.9
[[campaigns]]
dataset = "ao-imager"
kind = "positions"
start = 2008.5
end = 2018.0
cadence = 1.5
error = [0.5, 0.7]
coverage = 0.9
[[campaigns]]
dataset = "new-imager"
kind = "positions"
start = 2017.0
end = 2024.0
cadence = 2.0
error = [0.3, 0.4]
stars = ["bn-01", "bn-02", "bn-03", "bn-05"]
[[campaigns]]
dataset = "slit-spec"
kind = "velocities"
start = 2000.0
end = 2012.0
cadence = 1.0
error = [15.0, 20.0]
coverage = 0.6
[[campaigns]]
dataset = "field-spec"
kind = "velocities"
start = 2010.0
end = 2024.0
cadence = 1.5
error = [10.0, 14.0]
coverage = 0.7
[[campaigns]]
dataset = "echelle"
kind = "velocities"
start = 2016.0
end = 2024.0
cadence = 2.0
error = [6.0, 8.0]
coverage = 0.8
stars = ["bn-01", "bn-05"]
[systematics.ao-imager]
offset = [0.9, -0.6]
error_factor = 1.4
[systematics.new-imager]
offset = [-0.5, 0.4]
error_factor = 0.8
[systematics.field-spec]
zero_point = 18.0
error_factor = 1.3
[systematics.echelle]
zero_point = -9.0
"""


def description():
    head = textwrap.dedent("""\
        name = "benchmark nucleus with systematics"
        story = "Invented: seven stars, three imagers, three spectrographs."
        seed = 7301
        reference_epoch = 2010.0
        [truth]
        mass = 3.2e6
        distance = 6400.0
        x0 = 0.6
        y0 = -0.35
        vx0 = 0.04
        vy0 = -0.025
        vz0 = 4.0
        """)
    stars = "".join(f"[stars.{n}]\na = {a}\ne = {e}\ninc = {i}\nnode = {o}\nperi_arg = {w}\n"
                    f"t_peri = {t}\n" for n, (a, e, i, o, w, t) in STARS.items())
    return head + stars + CAMPAIGNS


def timed(fn, *args, **kw):
    t = time.perf_counter()
    out = fn(*args, **kw)
    return out, time.perf_counter() - t


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--error-model", choices=("scale", "jitter"), default="scale")
    parser.add_argument("--figures", action="store_true", help="also time the figures")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        (tmp / "d.toml").write_text(description())
        folder = write_scenario(tmp / "d.toml", tmp / "data")
        obs = read_observations(folder)
        settings = datasets_from_args(Settings(reference_epoch=2010.0),
                                      reference=["old-imager", "slit-spec"], offsets=True,
                                      zero_points=True, error_model=args.error_model)
        result, t_fit = timed(fit_joint, obs, settings)
        steps = {}
        _, steps["effect sizes + Fisher detectability"] = timed(star_effect_sizes, result)
        _, steps["enclosed-mass refits"] = timed(enclosed_mass_profile, result)
        _, steps["Newtonian refit (effect figures)"] = timed(newtonian_refit, result)
        _, steps["per-data-set summary"] = timed(dataset_summary, result)
        _, steps["outlier table"] = timed(outlier_table, result)
        analyses, steps["analyse (all of the above)"] = timed(analyse, result)
        _, steps["write_report, no figures"] = timed(write_report, result, tmp / "r1",
                                                     analyses, figures=False)
        if args.figures:
            processes = figure_processes(len(result.model.stars) + 8)
            _, serial = timed(write_report, result, tmp / "r2", analyses,
                              figures=FigureOptions(processes=1))
            _, default = timed(write_report, result, tmp / "r3", analyses, figures=True)
            plain = steps["write_report, no figures"]
            steps["figures, one process (baseline)"] = serial - plain
            steps[f"figures, {processes} processes (default)"] = default - plain
            steps["write_report with figures"] = default
    m = result.model
    print(f"{len(m.stars)} stars, {m.n_data} data, {int(result.free.sum())} fitted parameters "
          f"(error model {args.error_model}, offsets, zero-points); effects: "
          f"{m.effects.describe()}")
    print(f"  {'joint fit (baseline)':38s} {t_fit:8.2f} s   1.00x")
    for name, t in steps.items():
        print(f"  {name:38s} {t:8.2f} s   {t / t_fit:.2f}x the fit")
    report = steps["analyse (all of the above)"] + steps["write_report, no figures"]
    print(f"report stage without figures (analyse + write): {report / t_fit:.2f}x the fit")
    if args.figures:
        one, many = (t for name, t in steps.items() if name.startswith("figures,"))
        print(f"figures: {one / t_fit:.2f}x the fit in one process, {many / t_fit:.2f}x as "
              f"drawn by default ({one / many:.2f} times faster)")


if __name__ == "__main__":
    main()
