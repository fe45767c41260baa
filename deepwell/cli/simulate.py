"""``deepwell simulate``: invented data sets from a scenario description."""

import logging

from deepwell.tools.simulate import write_scenario

from .options import common

__all__ = ["add_simulate_parser", "run_simulate"]

log = logging.getLogger("deepwell")


def add_simulate_parser(subparsers):
    """Define the ``simulate`` sub-command."""
    p = subparsers.add_parser("simulate", parents=[common()],
                              help="make invented data from a scenario description")
    p.add_argument("description", help="scenario description (TOML)")
    p.add_argument("--out", required=True, help="scenario folder to create")
    p.add_argument("--replace", action="store_true", help="replace an earlier simulation")
    p.set_defaults(func=run_simulate)
    return p


def run_simulate(args):
    """Run ``deepwell simulate``."""
    out = write_scenario(args.description, args.out, replace=args.replace)
    log.info("scenario written to %s", out)
    return 0
