"""Writing what the analyses found: summary.json, tables, figures, report.md, the output folder.

The report computes nothing of its own: it writes the fit result and the
:class:`~deepwell.results.Analyses` it is handed.
"""

from .figures.gallery import STAR_FIGURE_LIMIT, FigureOptions
from .outdir import discard_output, install_output, prepare_output, staged_output
from .writer import save_report, summary_dict, write_report

__all__ = ["write_report", "save_report", "summary_dict", "prepare_output", "install_output",
           "discard_output", "staged_output", "FigureOptions", "STAR_FIGURE_LIMIT"]
