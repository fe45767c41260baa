"""Options shared by every sub-command."""

import argparse
import math

__all__ = ["common", "count", "positive"]


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
