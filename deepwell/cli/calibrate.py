"""``deepwell calibrate``: coverage of the intervals over simulated trials."""

import logging
import os

from deepwell.core.errors import SettingsError
from deepwell.fit.sampling import SamplerOptions
from deepwell.report.calibration import write_calibration
from deepwell.report.outdir import discard_output, install_output, prepare_output
from deepwell.tables.settings import load_settings
from deepwell.tools.calibrate import TOO_FEW, calibrate, open_client, scenario_description
from deepwell.tools.journal import journal_path

from .options import common, dask_group, output_group

__all__ = ["add_calibrate_parser", "run_calibrate"]

log = logging.getLogger("deepwell")


# ------------------------------------------------------------------ command line
def add_calibrate_parser(subparsers):
    """Define the ``calibrate`` sub-command on an argparse ``subparsers`` object."""
    p = subparsers.add_parser(
        "calibrate", parents=[common()],
        help="check on simulated data sets that the intervals contain the truth as often as "
             "they claim")
    p.add_argument("scenario", help="scenario folder holding description.toml, or a "
                                    "description file")
    p.add_argument("--trials", type=int, default=100, help="simulated data sets (default 100)")
    p.add_argument("--seed", type=int, default=0, help="root seed of the trials (default 0)")
    io = output_group(p, "calibration")
    io.add_argument("--resume", action="store_true",
                    help="continue an interrupted run from its journal OUT.trials.jsonl")
    mod = p.add_argument_group("fit model")
    mod.add_argument("--settings", help="fit settings (TOML); without an [effects] table "
                                        "the effects match how the scenario is simulated, "
                                        "without a [datasets] table the data-set terms match "
                                        "its [systematics]")
    mod.add_argument("--sample", action="store_true",
                     help="check posterior intervals (slow: minutes per trial)")
    mod.add_argument("--sampler", choices=("nuts", "ensemble"), default="nuts",
                     help="posterior sampler with --sample (default nuts)")
    mod.add_argument("--walkers", type=int, help="walkers per ensemble (--sampler ensemble)")
    mod.add_argument("--steps", type=int, help="draws per chain or steps per ensemble with "
                                               "--sample (default: until converged)")
    mod.add_argument("--warmup", type=int, help="warm-up transitions per NUTS chain")
    mod.add_argument("--chains", type=int, help="independent chains or ensembles per trial")
    mod.add_argument("--max-time", type=float, help="sampling time limit per trial, s")
    dask_group(p)
    p.set_defaults(func=run_calibrate)
    return p


def run_calibrate(args):
    """Run ``deepwell calibrate``: calibrate, write into a staged folder, install."""
    if args.trials < 1:
        raise SettingsError(f"--trials must be at least 1, got {args.trials}")
    description = scenario_description(args.scenario)
    settings = load_settings(args.settings) if args.settings else None
    sample = (SamplerOptions(sampler=args.sampler, n_chains=args.chains, n_steps=args.steps,
                             n_warmup=args.warmup, n_walkers=args.walkers,
                             max_time=args.max_time) if args.sample else None)
    tmp = prepare_output(args.out, replace=args.replace)
    try:
        with open_client(args.scheduler, args.workers, not args.in_process) as client:
            log.info("%d trials of %s on %s", args.trials, description.name,
                     args.scheduler or "a local cluster")
            result = calibrate(description, args.trials, args.seed, settings, sample, client,
                               progress=not args.quiet, journal=journal_path(args.out),
                               resume=args.resume)
        write_calibration(result, tmp, figures=not args.no_figures)
        install_output(tmp, args.out, replace=args.replace)
    except BaseException:
        discard_output(tmp)
        raise
    journal_path(args.out).unlink(missing_ok=True)
    table = result.table
    for row in table[table.group != "star"].itertuples():
        log.info("%-8s coverage 68%%: %.3f (%s), 95%%: %.3f (%s), bias %+.2f sigma",
                 row.parameter, row.coverage68, row.verdict68, row.coverage95, row.verdict95,
                 row.bias_sigma)
    stars = table[table.group == "star"]
    if len(stars):
        flagged = int((~stars.verdict68.isin(("honest", TOO_FEW))
                       | ~stars.verdict95.isin(("honest", TOO_FEW))).sum())
        log.info("per-star elements: %d rows, %d flagged (calibration.md)", len(stars), flagged)
    if result.n_failed:
        log.warning("%d of %d trials failed (see trials.ecsv)", result.n_failed, args.trials)
    log.info("calibration: %s", os.path.join(args.out, "calibration.md"))
    return 0
