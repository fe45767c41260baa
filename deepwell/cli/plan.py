"""``deepwell plan``: predictions, passages and the ranking of candidate epochs from a report."""

import logging
from pathlib import Path

from deepwell.core.errors import InputError
from deepwell.report.outdir import staged_output
from deepwell.report.plan import write_plan
from deepwell.results.saved_fit import load_fit
from deepwell.tables.observations import EPOCH_RANGE
from deepwell.tools.plan import (
    LIMITS,
    SAMPLES_FILE,
    PlanSettings,
    check_plan_settings,
    load_samples,
    make_plan,
    parse_months,
)

from .options import common

__all__ = ["add_plan_parser", "run_plan"]

log = logging.getLogger("deepwell")


# -------------------------------------------------------------- command line
def add_plan_parser(subparsers):
    """Define the ``plan`` sub-command on an argparse sub-parser collection."""
    p = subparsers.add_parser("plan", parents=[common()],
                              help="predict positions and passages and rank candidate "
                                   "observing epochs from a finished fit")
    p.add_argument("report", help="report folder written by 'deepwell fit'")
    span = p.add_argument_group("span")
    span.add_argument("--from", dest="start", type=float, required=True,
                      help="first epoch (Julian year)")
    span.add_argument("--to", dest="end", type=float, required=True,
                      help="last epoch (Julian year)")
    span.add_argument("--step", type=float, help="prediction grid step, yr (default span/250)")
    cand = p.add_argument_group("candidate epochs")
    cand.add_argument("--months", help="observable months, e.g. 3-9 (default: all year)")
    cand.add_argument("--per-season", type=int, default=1,
                      help="candidate epochs per observing season (default 1)")
    cand.add_argument("--epochs-file", help="candidate epochs, one Julian year per line")
    cand.add_argument("--astrometry-error", type=float,
                      help="stated position error of a new epoch, mas (default: the median "
                           "stated error of the data set observed most recently)")
    cand.add_argument("--velocity-error", type=float,
                      help="stated RV error of a new epoch, km/s (default: as for the "
                           "astrometry, from the latest velocity data set)")
    cand.add_argument("--relative-to", choices=("frame", "mass"), default="frame",
                      help="new positions measured in the frame (default) or from the mass")
    who = p.add_argument_group("what can be observed")
    who.add_argument("--stars", nargs="+", metavar="STAR",
                     help="plan only for these stars (default: every star of the fit)")
    who.add_argument("--astrometry-field", type=float, metavar="MAS",
                     help="field of view of the new astrometry, radius around the mass in "
                          "mas: stars outside it at an epoch are not measured then")
    who.add_argument("--velocity-field", type=float, metavar="MAS",
                     help="the same for the new spectroscopy (radius in mas)")
    unc = p.add_argument_group("uncertainty and confusion")
    unc.add_argument("--draws", type=int, default=300, help="parameter draws for the bands")
    unc.add_argument("--seed", type=int, default=0, help="random seed of the draws")
    unc.add_argument("--samples", help=f"posterior samples (.npz; default {SAMPLES_FILE} in "
                     "the report, if present)")
    unc.add_argument("--resolution", type=float, default=60.0,
                     help="separation below which two stars are confused, mas (default 60)")
    out = p.add_argument_group("output")
    out.add_argument("--scenario", help="scenario folder, if it moved since the fit")
    out.add_argument("--replace", action="store_true", help="replace an earlier plan/")
    out.add_argument("--no-figures", action="store_true", help="skip the figures")
    p.set_defaults(func=run_plan)
    return p


def _read_epochs(path):
    vals = []
    try:
        with open(path, encoding="utf-8") as fh:
            lines = fh.read().splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read: {getattr(exc, 'strerror', None) or exc}",
                         file=path) from None
    lo, hi = EPOCH_RANGE
    for i, line in enumerate(lines, 1):
        text = line.split("#")[0].strip()
        if text:
            try:
                value = float(text)
            except ValueError:
                raise InputError(f"not a Julian year: {text!r}", file=path, row=i) from None
            if not lo <= value <= hi:  # also NaN
                raise InputError(f"epoch {text} is outside the range {lo:g} to {hi:g} "
                                 "(Julian yr)", file=path, row=i)
            vals.append(value)
            if len(vals) > LIMITS["candidates"]:
                raise InputError(f"more than {LIMITS['candidates']} candidate epochs",
                                 file=path, row=i)
    return tuple(vals)


def run_plan(args):
    """Run ``deepwell plan``: load the fit, plan, write ``plan/`` inside the report."""

    settings = PlanSettings(
        start=args.start, end=args.end, step=args.step, n_draws=args.draws, seed=args.seed,
        months=parse_months(args.months) if args.months else None,
        per_season=args.per_season,
        epochs=_read_epochs(args.epochs_file) if args.epochs_file else None,
        astrometry_error=args.astrometry_error, velocity_error=args.velocity_error,
        relative_to=args.relative_to, resolution=args.resolution,
        stars=tuple(args.stars) if args.stars else None,
        astrometry_field=args.astrometry_field, velocity_field=args.velocity_field)
    check_plan_settings(settings)  # before the fit is rebuilt
    result = load_fit(args.report, scenario=args.scenario)
    sample_path = args.samples or (Path(args.report) / SAMPLES_FILE)
    samples = None
    if args.samples or Path(sample_path).is_file():
        samples = load_samples(sample_path, result)
    log.info("planning %g to %g from %s", args.start, args.end,
             "posterior samples" if samples is not None else "the fit's covariance")
    plan = make_plan(result, settings, samples)
    with staged_output(Path(args.report) / "plan", replace=args.replace) as folder:
        write_plan(plan, result, folder, figures=not args.no_figures)
    log.info("plan: %s", Path(args.report) / "plan" / "plan.md")
    return 0
