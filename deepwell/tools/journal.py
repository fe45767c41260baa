"""A calibration's trial journal: finished trials saved as they arrive, for ``--resume``.

``deepwell calibrate ... --out DIR`` appends every finished trial record as one
JSON line to ``DIR.trials.jsonl`` (beside the output folder, which is only
written when all trials are done).  The first line states what is being
calibrated (scenario, seed, mode, parameters); a run started with
``--resume`` checks it against its own and skips the trials already on
record.  Each line is flushed and synced to disk before the next trial is
counted, so a killed run (even ``kill -9``) loses at most the trials that
were still running; a half-written last line is ignored.  Trial ``i`` always
has the same seed (see :mod:`deepwell.tools.calibrate`), so a resumed calibration
equals an uninterrupted one.  The journal is deleted once the output folder
is installed.
"""

import json
import math
import os
from pathlib import Path

from deepwell.core.errors import DeepwellError
from deepwell.core.jsonsafe import json_safe

__all__ = ["journal_path", "TrialJournal"]

_KEY = "deepwell_calibration_journal"
_STATUSES = ("ok", "not converged", "failed")


def journal_path(out):
    """``OUT.trials.jsonl``: the journal beside output folder ``out``."""
    return Path(str(Path(out)).rstrip("/") + ".trials.jsonl")


def _restore(record):
    return {k: (math.nan if v is None else v) for k, v in record.items()}


def _check_record(rec, path, line):
    """The trial index of a journal record; refuse a record that is not one."""
    if not isinstance(rec, dict):
        raise DeepwellError(f"{path}: line {line}: a trial record must be a JSON object, "
                            f"not a {type(rec).__name__}; the journal is damaged")
    trial = rec.get("trial")
    if not isinstance(trial, int) or isinstance(trial, bool) or trial < 0:
        raise DeepwellError(f"{path}: line {line}: the record has no trial number "
                            "(key 'trial', a whole number >= 0); the journal is damaged")
    if rec.get("status") not in _STATUSES:
        raise DeepwellError(f"{path}: line {line}: the record's 'status' is not one of "
                            f"{', '.join(_STATUSES)}; the journal is damaged")
    return trial


class TrialJournal:
    """Append-only record of finished trials.

    Parameters
    ----------
    path : Path
    header : dict
        What is calibrated; must match the journal's first line on resume.
    resume : bool
        Continue an existing journal (an absent one is started afresh).
        Without it an existing journal is an error, so no finished trial is
        ever thrown away by accident.
    """

    def __init__(self, path, header, resume=False):
        self.path = Path(path)
        self.header = {_KEY: 1, **header}
        self.done = {}
        if self.path.exists():
            if not resume:
                raise DeepwellError(f"{self.path}: an unfinished calibration journal is here; "
                                    "continue it with --resume, or delete it to start over")
            self._read()
        else:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._append(self.header)

    def _read(self):
        try:
            lines = self.path.read_text(encoding="utf-8").splitlines()
        except (OSError, UnicodeDecodeError) as exc:
            raise DeepwellError(f"{self.path}: cannot read the calibration journal "
                                f"({exc})") from None
        try:
            first = json.loads(lines[0]) if lines else {}
        except json.JSONDecodeError:
            first = {}
        if not isinstance(first, dict) or first.get(_KEY) != 1:
            raise DeepwellError(f"{self.path}: line 1: not a deepwell calibration journal")
        for key, value in self.header.items():
            if first.get(key) != value:
                raise DeepwellError(f"{self.path}: line 1: the journal is for {key} = "
                                    f"{first.get(key)!r}, this run has {value!r}; use another "
                                    "--out or delete the journal")
        for i, line in enumerate(lines[1:], 2):
            try:
                rec = json.loads(line)
            except json.JSONDecodeError:
                if i == len(lines):  # the line being written when a run was killed
                    continue
                raise DeepwellError(f"{self.path}: line {i}: not a JSON record; the journal "
                                    "is damaged (delete it to start over)") from None
            trial = _check_record(rec, self.path, i)
            self.done[trial] = _restore(rec)

    def _append(self, obj):
        with open(self.path, "a") as fh:
            fh.write(json.dumps({k: json_safe(v) for k, v in obj.items()}) + "\n")
            fh.flush()
            os.fsync(fh.fileno())

    def add(self, record):
        """Save one finished trial record."""
        self._append(record)
        self.done[int(record["trial"])] = record

    def remove(self):
        """Delete the journal (after the output folder is installed)."""
        self.path.unlink(missing_ok=True)
