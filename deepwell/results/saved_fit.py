"""Save a finished fit next to its report, and rebuild it later.

The report folder holds ``fit-state.json``: the internal vector, its
covariance, which entries were fitted, the effect set-up, the settings and the
scenario folder with the checksums of its tables.  :func:`load_fit` re-reads
the tables (refusing them if they changed), rebuilds the same model and
returns a :class:`~deepwell.fit.result.FitResult` equal to the saved one, so later
commands (planning, sampling) start from a finished fit without refitting.
"""

import json
from pathlib import Path

import numpy as np

from deepwell.core.errors import InputError
from deepwell.core.version import __version__
from deepwell.fit.joint import build_model
from deepwell.fit.result import assemble_result
from deepwell.tables.observations import read_observations
from deepwell.tables.settings import parse_settings

__all__ = ["STATE_FILE", "state_dict", "write_state", "load_fit"]

STATE_FILE = "fit-state.json"


def state_dict(result):
    """JSON-ready record of a fit that :func:`load_fit` can rebuild."""
    model = result.model
    obs = result.observations
    return {
        "format": "deepwell fit state 1",
        "software": {"name": "deepwell", "version": __version__},
        "scenario": str(Path(obs.folder).resolve()),
        "checksums": dict(obs.checksums),
        "dropped_stars": [list(d) for d in obs.dropped_stars],
        "settings": result.settings.to_dict(),
        "settings_file": result.settings.source,
        "stars": list(model.stars),
        "names": model.layout.names(),
        "internal": [float(v) for v in result.internal],
        "internal_cov": np.asarray(result.internal_cov).tolist(),
        "free": [bool(f) for f in result.free],
        "integrated": [bool(i) for i in model.integrated],
        "reference_radius": model.reference_radius,
        "converged": bool(result.converged),
        "nfev": int(result.nfev),
        "notes": list(result.notes),
    }


def write_state(result, folder):
    """Write ``fit-state.json`` into ``folder``; returns its path."""
    path = Path(folder) / STATE_FILE
    path.write_text(json.dumps(state_dict(result), indent=1))
    return path


def load_fit(report_dir, scenario=None):
    """Rebuild the fit saved in a report folder.

    Parameters
    ----------
    report_dir : str or Path
        A folder written by ``deepwell fit``.
    scenario : str or Path, optional
        The scenario folder, if it moved since the fit.

    Returns
    -------
    FitResult

    Raises
    ------
    InputError
        If the state file is missing or unreadable, or the tables changed.
    """
    path = Path(report_dir) / STATE_FILE
    try:
        state = json.loads(path.read_text())
    except (OSError, ValueError) as exc:
        raise InputError(f"not a deepwell report with a saved fit ({exc})",
                         file=str(path)) from None
    folder = scenario or state["scenario"]
    settings = parse_settings(state["settings"], file=state.get("settings_file"))
    obs = read_observations(folder, min_epochs=settings.min_epochs)
    for name, digest in state["checksums"].items():
        if obs.checksums.get(name) != digest:
            raise InputError("the table changed since the fit was made; fit it again",
                             file=str(Path(folder) / name))
    base = build_model(obs, settings)
    model = base.replace(stars=state["stars"], integrated=state["integrated"],
                         reference_radius=state["reference_radius"])
    if model.layout.names() != state["names"]:
        raise InputError("the saved parameters do not match the rebuilt model", file=str(path))
    vec = np.array(state["internal"])
    free = np.array(state["free"], bool)
    return assemble_result(model, vec, free, settings, obs, notes=state["notes"],
                           converged=state["converged"], nfev=state["nfev"])
