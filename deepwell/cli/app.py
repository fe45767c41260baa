"""The ``deepwell`` command line: a thin layer over the library.

Each sub-command (one module of this folder) parses its options and calls one
library function; :func:`main` turns a user error into one line on stderr with
exit status 2 (never a traceback).
"""

import argparse
import logging
import os
import sys
import warnings

from threadpoolctl import threadpool_limits

from deepwell.core.errors import DeepwellError
from deepwell.core.version import __version__

from .calibrate import add_calibrate_parser
from .demo import add_demo_parser
from .fit import add_fit_parser
from .plan import add_plan_parser
from .simulate import add_simulate_parser

__all__ = ["main"]

log = logging.getLogger("deepwell")


def _parser():
    parser = argparse.ArgumentParser(
        prog="deepwell",
        description="Weigh the dark mass at a galaxy's centre from the orbits of its stars.",
    )
    parser.add_argument("--version", action="version", version=f"deepwell {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    add_fit_parser(sub)
    add_simulate_parser(sub)
    add_plan_parser(sub)
    add_calibrate_parser(sub)
    add_demo_parser(sub)
    return parser


def main(argv=None):
    """Entry point of the ``deepwell`` command; returns the exit status."""
    # One BLAS thread: the matrices are small and the cores are better used by
    # the model and the sampler's processes.  The environment reaches the
    # worker processes started later; threadpoolctl limits this process, whose
    # numpy is already loaded.
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    parser = _parser()
    args = parser.parse_args(argv)
    args.argv = list(sys.argv[1:] if argv is None else argv)
    # Our own messages at INFO (WARNING with -q); other libraries' chatter (such as
    # matplotlib's "generated new fontManager" on a first run) only from WARNING up.
    logging.basicConfig(format="deepwell: %(message)s", stream=sys.stderr, force=True,
                        level=logging.WARNING)
    level_before = log.level
    log.setLevel(logging.WARNING if getattr(args, "quiet", False) else logging.INFO)
    logging.captureWarnings(True)
    shown = warnings.formatwarning
    warnings.formatwarning = lambda message, category, *rest, **kw: \
        f"{category.__name__}: {message}"  # one line, no source line
    try:
        with warnings.catch_warnings(), threadpool_limits(limits=1, user_api="blas"):
            warnings.simplefilter("default")
            return args.func(args)
    except DeepwellError as exc:
        print(f"deepwell: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("deepwell: interrupted; nothing was written", file=sys.stderr)
        return 130
    finally:
        log.setLevel(level_before)
        logging.captureWarnings(False)
        warnings.formatwarning = shown


if __name__ == "__main__":
    sys.exit(main())
