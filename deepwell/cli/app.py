"""The ``deepwell`` command line: a thin layer over the library.

Each sub-command (one module of this folder) parses its options and calls one
library function; :func:`main` turns a user error into one line on stderr with
exit status 2 (never a traceback).
"""

import argparse
import difflib
import logging
import os
import re
import signal
import sys
import warnings
from contextlib import contextmanager

from threadpoolctl import threadpool_limits

from deepwell.core.errors import DeepwellError
from deepwell.core.version import __version__

from .calibrate import add_calibrate_parser
from .compare import add_compare_parser
from .demo import add_demo_parser
from .fit import add_fit_parser
from .plan import add_plan_parser
from .simulate import add_simulate_parser

__all__ = ["main"]

log = logging.getLogger("deepwell")


class _Parser(argparse.ArgumentParser):
    """The top-level parser: a mistyped option gets the closest real one as a hint."""

    def error(self, message):
        words = re.findall(r"(--?[\w-]+)", message) if "unrecognized arguments" in message else []
        known = sorted({o for sub in self._subparsers._group_actions[0].choices.values()
                        for a in sub._actions for o in a.option_strings}) if self._subparsers \
            else []
        hints = [f"{w} (did you mean {m[0]}?)" for w in words
                 if (m := difflib.get_close_matches(w, known, n=1, cutoff=0.6))]
        super().error(message + ("; " + "; ".join(hints) if hints else ""))


class Terminated(BaseException):
    """Raised in the main process by SIGTERM, so that temporary folders are cleaned up."""


@contextmanager
def sigterm_cleans_up():
    """While active, SIGTERM raises :class:`Terminated` in this process (forked workers,
    which inherit the handler, still die at once)."""
    main_pid = os.getpid()

    def handler(signum, frame):
        if os.getpid() != main_pid:
            signal.signal(signal.SIGTERM, signal.SIG_DFL)
            os.kill(os.getpid(), signal.SIGTERM)
            return
        raise Terminated

    try:
        old = signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread: leave the signal alone
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


def _parser():
    parser = _Parser(
        prog="deepwell",
        description="Weigh the dark mass at a galaxy's centre from the orbits of its stars.",
    )
    parser.add_argument("--version", action="version", version=f"deepwell {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    add_fit_parser(sub)
    add_simulate_parser(sub)
    add_plan_parser(sub)
    add_calibrate_parser(sub)
    add_compare_parser(sub)
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
        with warnings.catch_warnings(), threadpool_limits(limits=1, user_api="blas"), \
                sigterm_cleans_up():
            warnings.simplefilter("default")
            return args.func(args)
    except DeepwellError as exc:
        print(f"deepwell: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("deepwell: interrupted; nothing was written", file=sys.stderr)
        return 130
    except Terminated:
        print("deepwell: terminated (SIGTERM); temporary folders removed",
              file=sys.stderr)
        return 143
    finally:
        log.setLevel(level_before)
        logging.captureWarnings(False)
        warnings.formatwarning = shown


if __name__ == "__main__":
    sys.exit(main())
