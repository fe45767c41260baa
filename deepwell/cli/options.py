"""Options shared by every sub-command."""

import argparse

__all__ = ["common"]


def common():
    """Parent parser with the options every sub-command takes (``-q``)."""
    parser = argparse.ArgumentParser(add_help=False)
    parser.add_argument("-q", "--quiet", action="store_true", help="print only warnings")
    return parser
