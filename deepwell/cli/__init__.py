"""The command line: one module per sub-command, gathered by :mod:`.app`."""

from .app import main

__all__ = ["main"]
