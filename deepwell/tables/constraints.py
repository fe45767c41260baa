"""External constraints: enclosed masses from other tracers, read from a CSV table."""

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from deepwell.core.constants import PC_AU
from deepwell.core.errors import InputError

__all__ = ["EXTERNAL_COLUMNS", "ExternalConstraints", "read_external_constraints"]


# ------------------------------------------------------------------- external constraints
#: Columns of an external-constraints CSV: name -> unit (Msun for masses).
EXTERNAL_COLUMNS = {"radius_pc": "pc", "mass": "solMass", "mass_err": "solMass"}


@dataclass(frozen=True)
class ExternalConstraints:
    """Enclosed masses from other tracers: radius (pc), mass and 1-sigma error (Msun)."""

    radius_pc: np.ndarray
    mass: np.ndarray
    mass_err: np.ndarray
    labels: tuple
    file: str

    @property
    def radius_au(self):
        return self.radius_pc * PC_AU


def read_external_constraints(path):
    """Read a CSV of enclosed masses from other tracers.

    The header (first non-comment line) must hold ``radius_pc`` (pc), ``mass`` and
    ``mass_err`` (Msun), in any order, and may hold ``label``.  Lines starting with
    ``#`` and blank lines are skipped.  Radius and mass must be positive, the error
    non-negative.

    Raises
    ------
    InputError
        Naming the file, the line (the first line is 1) and the column.
    """
    file = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read file: {exc}", file=file) from None
    rows = [(n, r) for n, r in enumerate(csv.reader(text.splitlines()), start=1)
            if any(c.strip() for c in r) and not r[0].lstrip().startswith("#")]
    if not rows:
        raise InputError("no header and no data", file=file)
    head_line, head = rows[0][0], [c.strip() for c in rows[0][1]]
    for name in EXTERNAL_COLUMNS:
        if name not in head:
            raise InputError(f"missing column '{name}' (need radius_pc [pc], mass and mass_err "
                             "[Msun])", file=file, row=head_line)
    extra = set(head) - set(EXTERNAL_COLUMNS) - {"label"}
    if extra:
        raise InputError(f"unknown column '{sorted(extra)[0]}'", file=file, row=head_line)
    if len(rows) == 1:
        raise InputError("no data rows", file=file, row=head_line)
    out = {name: [] for name in EXTERNAL_COLUMNS}
    labels = []
    for line, cells in rows[1:]:
        if len(cells) != len(head):
            raise InputError(f"{len(cells)} cells but the header has {len(head)}", file=file,
                             row=line)
        cell = dict(zip(head, (c.strip() for c in cells), strict=True))
        for name in EXTERNAL_COLUMNS:
            out[name].append(_number(cell[name], name, file, line))
        labels.append(cell.get("label", ""))
    return ExternalConstraints(*(np.array(out[n]) for n in EXTERNAL_COLUMNS),
                               labels=tuple(labels), file=file)


def _number(text, name, file, line):
    if text == "":
        raise InputError("empty cell", file=file, row=line, column=name)
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"not a number: {text!r}", file=file, row=line, column=name) from None
    if not math.isfinite(value):
        raise InputError(f"not a finite number: {text!r}", file=file, row=line, column=name)
    if name == "mass_err" and value < 0:
        raise InputError(f"error must not be negative: {value:g}", file=file, row=line,
                         column=name)
    if name != "mass_err" and value <= 0:
        raise InputError(f"must be positive: {value:g}", file=file, row=line, column=name)
    return value
