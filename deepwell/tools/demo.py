"""Regenerate the demo figure set (``figures/`` of the repository) from a bundled scenario.

The fit and the report are made exactly as ``deepwell fit`` makes them, in a
temporary folder; then the report's figure files are copied into the target
folder.  Only files with the names of report figures are replaced; nothing
else there is touched.
"""

import shutil
import tempfile
from pathlib import Path

from deepwell.fit.sampling import SamplerOptions
from deepwell.tables import Settings

from .pipeline import FitJob, fit_report

__all__ = ["refresh_figures"]


def refresh_figures(scenario="scenarios/rich", out="figures", sample=False, progress=None):
    """Fit ``scenario`` with the default settings and copy its report figures into ``out``.

    Parameters
    ----------
    scenario, out : str or Path
        Scenario folder; folder for the figure files (created if missing).
    sample : bool
        Sample the posterior too (about 8 min on 2 cores for the rich demo)
        and add its figures.
    progress : callable, optional
        Called with a short text at each phase.

    Returns
    -------
    list of Path
        The figure files written.
    """
    job = FitJob(sampling=SamplerOptions(progress=False) if sample else None)
    written = []
    with tempfile.TemporaryDirectory() as tmp:
        report = Path(tmp) / "report"
        fit_report(scenario, report, Settings(), job, progress=progress)
        out = Path(out)
        out.mkdir(parents=True, exist_ok=True)
        for path in sorted((report / "figures").iterdir()):
            shutil.copyfile(path, out / path.name)
            written.append(out / path.name)
    return written
