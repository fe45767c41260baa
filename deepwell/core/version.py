"""The version of deepwell (one place; pyproject.toml carries the same number)."""

__version__ = "0.1.0"
