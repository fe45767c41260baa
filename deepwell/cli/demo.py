"""``deepwell demo``: refresh the demo figure set from the bundled rich scenario."""

import logging

from deepwell.tools.demo import refresh_figures

from .options import common

__all__ = ["add_demo_parser", "run_demo"]

log = logging.getLogger("deepwell")


def add_demo_parser(subparsers):
    """Define the ``demo`` sub-command."""
    p = subparsers.add_parser("demo", parents=[common()],
                              help="fit the bundled demo scenario and refresh figures/")
    p.add_argument("--scenario", default="scenarios/rich", help="scenario folder")
    p.add_argument("--out", default="figures", help="folder for the figure files")
    p.add_argument("--sample", action="store_true",
                   help="sample the posterior too (about 8 min on 2 cores) and add its figures")
    p.set_defaults(func=run_demo)
    return p


def run_demo(args):
    """Run ``deepwell demo``."""
    files = refresh_figures(args.scenario, args.out, sample=args.sample, progress=log.info)
    log.info("%d figure files written to %s/", len(files), args.out)
    return 0
