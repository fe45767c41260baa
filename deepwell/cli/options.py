"""Options shared by every sub-command."""

import argparse
import math

__all__ = ["common", "count", "positive", "output_group", "dask_group"]


def common():
    """Parent parser with the options every sub-command takes (``-q``)."""
    parser = argparse.ArgumentParser(add_help=False)
    parser.add_argument("-q", "--quiet", action="store_true", help="print only warnings")
    return parser


def count(minimum=1):
    """argparse type: an integer >= ``minimum`` (refused by argparse otherwise, status 2)."""

    def parse(text):
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected an integer, got {text!r}") from None
        if value < minimum:
            raise argparse.ArgumentTypeError(f"must be at least {minimum}, got {value}")
        return value

    parse.__name__ = "count"
    return parse


def positive(text):
    """argparse type: a finite number > 0 (``nan``, ``inf`` and ``-1`` are refused)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"must be a finite positive number, got {text!r}")
    return value


def output_group(parser, what, figures="skip the figure"):
    """The output options (``--out``, ``--replace``, ``--no-figures``); returns the group."""
    io = parser.add_argument_group("output")
    io.add_argument("--out", required=True, help=f"folder to create for the {what}")
    io.add_argument("--replace", action="store_true",
                    help="replace an earlier deepwell output in --out (foreign files are kept)")
    io.add_argument("--no-figures", action="store_true", help=figures)
    return io


def dask_group(parser):
    """The Dask options (``--scheduler``, ``--workers``, ``--in-process``); returns the group."""
    run = parser.add_argument_group("computing (Dask)")
    run.add_argument("--scheduler", metavar="ADDRESS",
                     help="address of a running Dask scheduler (default: a local cluster)")
    run.add_argument("--workers", type=count(1), help="local cluster size (default: CPU count)")
    run.add_argument("--in-process", action="store_true",
                     help="run the local workers as threads of this process (quick to "
                          "start; for small runs)")
    return run
