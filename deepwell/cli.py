"""The ``deepwell`` command line: a thin layer over the library.

Each sub-command parses its options, calls one library function and turns a
user error into one line on stderr with exit status 2 (never a traceback).
"""

import argparse
import logging
import sys
import time
import warnings
from pathlib import Path

from . import __version__
from .errors import DeepwellError

__all__ = ["main"]

log = logging.getLogger("deepwell")


def _common():
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("-q", "--quiet", action="store_true", help="print only warnings")
    return common


def _add_fit(sub):
    p = sub.add_parser("fit", parents=[_common()],
                       help="fit all stars around one central mass and write a report")
    p.add_argument("scenario", help="folder with positions.csv (and velocities.csv)")
    io = p.add_argument_group("output")
    io.add_argument("--out", required=True, help="report folder to create")
    io.add_argument("--replace", action="store_true",
                    help="replace an earlier deepwell report in --out (foreign files are kept)")
    io.add_argument("--no-figures", action="store_true", help="skip the figures (faster)")
    mod = p.add_argument_group("model and data")
    mod.add_argument("--settings", help="TOML settings file (fixed values, bounds, priors)")
    mod.add_argument("--strict", action="store_true",
                     help="stop on a star with too few epochs instead of setting it aside")
    p.set_defaults(func=_run_fit)


def _add_simulate(sub):
    p = sub.add_parser("simulate", parents=[_common()],
                       help="make invented data from a scenario description")
    p.add_argument("description", help="scenario description (TOML)")
    p.add_argument("--out", required=True, help="scenario folder to create")
    p.add_argument("--replace", action="store_true", help="replace an earlier simulation")
    p.set_defaults(func=_run_simulate)


def _parser():
    parser = argparse.ArgumentParser(
        prog="deepwell",
        description="Weigh the dark mass at a galaxy's centre from the orbits of its stars.",
    )
    parser.add_argument("--version", action="version", version=f"deepwell {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    _add_fit(sub)
    _add_simulate(sub)
    return parser


def _run_fit(args):
    from .fit import fit_joint
    from .outdir import discard_output, install_output, prepare_output
    from .report import write_report
    from .settings import Settings, load_settings
    from .tables import read_observations

    t0 = time.perf_counter()
    settings = load_settings(args.settings) if args.settings else Settings()
    obs = read_observations(args.scenario, min_epochs=settings.min_epochs, strict=args.strict)
    tmp = prepare_output(args.out, replace=args.replace)
    try:
        result = fit_joint(obs, settings, progress=log.info)
        log.info("writing the report")
        write_report(result, tmp, figures=not args.no_figures)
        install_output(tmp, args.out, replace=args.replace)
    except BaseException:
        discard_output(tmp)
        raise
    m, sm, _ = result.quantity("mass")
    d, sd, _ = result.quantity("distance")
    log.info("mass %.4g +- %.2g solMass, distance %.5g +- %.2g pc, chi2/dof %.1f/%d (%.1f s)",
             m, sm, d, sd, result.chi2, result.dof, time.perf_counter() - t0)
    log.info("report: %s", Path(args.out) / "report.md")
    return 0


def _run_simulate(args):
    from .simulate import write_scenario

    out = write_scenario(args.description, args.out, replace=args.replace)
    log.info("scenario written to %s", out)
    return 0


def main(argv=None):
    """Entry point of the ``deepwell`` command; returns the exit status."""
    parser = _parser()
    args = parser.parse_args(argv)
    logging.basicConfig(format="deepwell: %(message)s", stream=sys.stderr, force=True,
                        level=logging.WARNING if args.quiet else logging.INFO)
    logging.captureWarnings(True)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default")
            return args.func(args)
    except DeepwellError as exc:
        print(f"deepwell: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("deepwell: interrupted; nothing was written", file=sys.stderr)
        return 130
    finally:
        logging.captureWarnings(False)


if __name__ == "__main__":
    sys.exit(main())
