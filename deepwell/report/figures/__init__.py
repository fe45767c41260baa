"""Figures: one style kit (:mod:`.style`), then one module per figure family."""

from .gallery import write_figures
from .style import PALETTE, STYLE, save_figure

__all__ = ["write_figures", "save_figure", "PALETTE", "STYLE"]
