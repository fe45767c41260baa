"""``deepwell compare``: the model ladder on one data set, with calibrated significance."""

import logging
import os

from deepwell.tables import Settings, load_settings
from deepwell.tools.compare import compare

from .options import common, count, dask_group, output_group, positive

__all__ = ["add_compare_parser", "run_compare"]

log = logging.getLogger("deepwell")


def add_compare_parser(sub):
    """Define the ``compare`` sub-command on an argparse ``subparsers`` object."""
    p = sub.add_parser(
        "compare", parents=[common()],
        help="fit Newtonian, relativistic and extended-mass models to the same data and say "
             "which the data demand")
    p.add_argument("scenario", help="folder with positions.csv (and velocities.csv)")
    output_group(p, "comparison")
    mod = p.add_argument_group("models")
    mod.add_argument("--settings", help="TOML settings file (priors, bounds, data-set terms; "
                                        "its [effects] are set per model)")
    mod.add_argument("--extended-mass", nargs="+", type=positive, metavar="B_AU", default=(),
                     help="add a Plummer-mass model for each of these scale radii (au)")
    boot = p.add_argument_group("calibrated significance (parametric bootstrap)")
    boot.add_argument("--bootstrap", type=count(0), default=0, metavar="N",
                      help="simulated data sets per tested step (default 0: none)")
    boot.add_argument("--test", action="append", metavar="MODEL",
                      help="bootstrap only this model's step (repeatable; default: precession, "
                           "no-romer, no-redshift and every extended-mass model)")
    boot.add_argument("--fitted-errors", action="store_true",
                      help="simulate with the stated errors times sqrt(chi2/dof) of the "
                           "simpler model")
    boot.add_argument("--seed", type=int, default=0, help="root seed (default 0)")
    boot.add_argument("--resume", action="store_true",
                      help="continue an interrupted bootstrap from its journal OUT.trials.jsonl")
    dask_group(p)
    ev = p.add_argument_group("Bayesian evidence")
    ev.add_argument("--evidence", choices=("laplace", "nested", "none"), default="laplace",
                    help="log-evidence of each model: Laplace approximation at the best fit "
                         "(default), nested sampling with dynesty (hours for tens of "
                         "parameters), or none")
    ev.add_argument("--evidence-budget", type=positive, metavar="SECONDS",
                    help="time budget of each nested-sampling run (default: none)")
    p.set_defaults(func=run_compare)
    return p


def run_compare(args):
    """Run ``deepwell compare`` (one call of :func:`deepwell.tools.compare.compare`)."""
    settings = load_settings(args.settings) if args.settings else Settings()
    result = compare(args.scenario, args.out, settings, tuple(args.extended_mass),
                     args.bootstrap, args.test, args.seed, args.fitted_errors,
                     figures=not args.no_figures, replace=args.replace, resume=args.resume,
                     scheduler=args.scheduler, workers=args.workers,
                     in_process=args.in_process, progress=log.info, bar=not args.quiet,
                     evidence=args.evidence, evidence_seconds=args.evidence_budget)
    for verdict in result.verdicts:
        log.info("%s", verdict)
    log.info("comparison: %s", os.path.join(args.out, "comparison.md"))
    return 0
