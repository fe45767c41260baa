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


def journal_path(out):
    """``OUT.trials.jsonl``: the journal beside output folder ``out``."""
    return Path(str(Path(out)).rstrip("/") + ".trials.jsonl")


def _restore(record):
    return {k: (math.nan if v is None else v) for k, v in record.items()}


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
        lines = self.path.read_text().splitlines()
        try:
            first = json.loads(lines[0]) if lines else {}
        except json.JSONDecodeError:
            first = {}
        if first.get(_KEY) != 1:
            raise DeepwellError(f"{self.path}: line 1: not a deepwell calibration journal")
        for key, value in self.header.items():
            if first.get(key) != value:
                raise DeepwellError(f"{self.path}: line 1: the journal is for {key} = "
                                    f"{first.get(key)!r}, this run has {value!r}; use another "
                                    "--out or delete the journal")
        for line in lines[1:]:
            try:
                rec = json.loads(line)
            except json.JSONDecodeError:  # the line being written when a run was killed
                continue
            self.done[int(rec["trial"])] = _restore(rec)

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
