"""deepwell: weigh the dark mass at a galaxy's centre from the orbits of its stars."""

__version__ = "0.1.0"
