"""Save a finished fit next to its report, and rebuild it later.

The report folder holds ``fit-state.json``: the internal vector, its
covariance, which entries were fitted, the effect set-up, the settings and the
scenario folder with the checksums of its tables.  :func:`load_fit` re-reads
the tables (refusing them if they changed), rebuilds the same model and
returns a :class:`~deepwell.fit.result.FitResult` equal to the saved one, so later
commands (planning, sampling) start from a finished fit without refitting.
"""

import json
import math
import os
import stat
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
STATE_FORMAT = "deepwell fit state 1"
#: Largest fit-state.json read back (a fit of a few hundred parameters is ~10 MB).
MAX_STATE_BYTES = 64 * 2**20


def state_dict(result):
    """JSON-ready record of a fit that :func:`load_fit` can rebuild."""
    model = result.model
    obs = result.observations
    return {
        "format": STATE_FORMAT,
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


def _is_number(v):
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _list_of(check, n=None):
    return lambda v: isinstance(v, list) and (n is None or len(v) == n) and all(map(check, v))


def _is_str(v):
    return isinstance(v, str)


def _is_bool(v):
    return isinstance(v, bool)


def _check_state(state, path):
    """Refuse a saved state that does not follow the schema of :func:`state_dict`."""
    def bad(what):
        return InputError(f"damaged or not a deepwell fit state: {what}", file=str(path))

    if not isinstance(state, dict):
        raise bad(f"the file holds a {type(state).__name__}, not a record")
    if state.get("format") != STATE_FORMAT:
        raise bad(f"'format' is {state.get('format')!r}, expected {STATE_FORMAT!r}")
    n = len(state["internal"]) if isinstance(state.get("internal"), list) else None
    n_stars = len(state["stars"]) if isinstance(state.get("stars"), list) else None
    schema = {
        "scenario": _is_str,
        "checksums": lambda v: isinstance(v, dict) and bool(v) and all(
            _is_str(k) and _is_str(d) for k, d in v.items()),
        "settings": lambda v: isinstance(v, dict),
        "settings_file": lambda v: v is None or _is_str(v),
        "stars": _list_of(_is_str),
        "names": _list_of(_is_str, n),
        "internal": _list_of(_is_number),
        "internal_cov": _list_of(_list_of(lambda x: isinstance(x, (int, float))
                                          and not isinstance(x, bool), n), n),
        "free": _list_of(_is_bool, n),
        "integrated": _list_of(_is_bool, n_stars),
        "reference_radius": lambda v: v is None or _is_number(v),
        "converged": _is_bool,
        "nfev": lambda v: isinstance(v, int) and not isinstance(v, bool),
        "notes": _list_of(_is_str),
    }
    for key, ok in schema.items():
        if key not in state:
            raise bad(f"key '{key}' is missing")
        if not ok(state[key]):
            raise bad(f"key '{key}' has the wrong type or length")


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
        If the state file is missing, unreadable or damaged (checked against
        its schema), or the input tables changed, were added or removed.
    """
    path = Path(report_dir) / STATE_FILE
    try:
        st = os.lstat(path)
    except OSError as exc:
        raise InputError(f"not a deepwell report with a saved fit ({exc.strerror})",
                         file=str(path)) from None
    if not stat.S_ISREG(st.st_mode):
        raise InputError("not a regular file (a link or a device?); links in a report folder "
                         "are never followed", file=str(path))
    if st.st_size > MAX_STATE_BYTES:
        raise InputError(f"larger than any fit state ({st.st_size} bytes > "
                         f"{MAX_STATE_BYTES})", file=str(path))
    try:
        state = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise InputError(f"not a deepwell report with a saved fit ({exc})",
                         file=str(path)) from None
    _check_state(state, path)
    folder = scenario or state["scenario"]
    try:
        settings = parse_settings(state["settings"], file=state["settings_file"])
    except InputError as exc:
        raise InputError(f"the saved settings are invalid ({exc})", file=str(path)) from None
    obs = read_observations(folder, min_epochs=settings.min_epochs, columns=settings.columns)
    saved, now = set(state["checksums"]), set(obs.checksums)
    for name in sorted(now - saved):
        raise InputError("this table was added since the fit was made; fit it again",
                         file=str(Path(folder) / name))
    for name in sorted(saved - now):
        raise InputError("this table was removed or renamed since the fit was made; fit "
                         "it again", file=str(Path(folder) / name))
    for name, digest in state["checksums"].items():
        if obs.checksums.get(name) != digest:
            raise InputError("the table changed since the fit was made; fit it again",
                             file=str(Path(folder) / name))
    base = build_model(obs, settings)
    if not set(state["stars"]) <= set(obs.positions["star"]):
        raise InputError("the saved stars do not match the tables", file=str(path))
    model = base.replace(stars=state["stars"], integrated=state["integrated"],
                         reference_radius=state["reference_radius"])
    if model.layout.names() != state["names"]:
        raise InputError("the saved parameters do not match the rebuilt model", file=str(path))
    vec = np.array(state["internal"], float)
    free = np.array(state["free"], bool)
    return assemble_result(model, vec, free, settings, obs, notes=state["notes"],
                           converged=state["converged"], nfev=state["nfev"])
