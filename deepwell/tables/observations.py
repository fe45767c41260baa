"""Read the observation tables of a scenario folder.

A scenario folder holds ``positions.csv`` (or ``.ecsv``, or a published
machine-readable table ``.mrt`` / ``.cds``: the AAS MRT or CDS "ReadMe + data"
format, read by :mod:`astropy.io.ascii` with the units of its byte-by-byte
description) and optionally ``velocities`` in the same forms.  A column map
(``[columns.positions]`` / ``[columns.velocities]`` of the settings: our column
name -> the table's) lets a published table keep its own column names.
Cells are read as text and validated column by column; every problem is one
InputError naming file, line (header = line 1) and column. Units: ``ra`` (east,
ΔRA·cosδ), ``dec`` (north) and their errors in mas, velocities in km/s, epochs
as Julian epochs in TT; an ISO date/time epoch is read as UTC and converted to TT
(physics.md §1).
"""

import csv
import hashlib
import io
import re
import warnings
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np
import pandas as pd
from astropy.time import Time
from astropy.utils.exceptions import AstropyWarning
from erfa import ErfaWarning

from deepwell.core.constants import C_KMS
from deepwell.core.errors import InputError, SettingsError
from deepwell.core.units import UNITS

from .size import check_memory

__all__ = ["DataWarning", "Observations", "read_positions", "read_velocities",
           "read_observations", "EPOCH_RANGE", "control_characters", "check_column_map"]

#: Accepted epochs, Julian years TT: from the first photographic plates to a few
#: centuries ahead. Wider values are typing errors (or hostile), and would make the
#: orbit integrations span absurd times.
EPOCH_RANGE = (1800.0, 2300.0)
#: Control characters (C0, DEL, C1) and the Unicode line and paragraph separators.
_CONTROL = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029]")


def control_characters(text):
    """Whether ``text`` holds a control character (newline, tab, escape, ...)."""
    return _CONTROL.search(str(text)) is not None

_REQUIRED = {"positions": ("star", "epoch", "ra", "dec", "ra_err", "dec_err"),
             "velocities": ("star", "epoch", "vr", "vr_err")}
_OPTIONAL = {"positions": ("corr", "dataset", "relative_to", "exclude"),
             "velocities": ("dataset", "exclude")}
_COLUMNS = {kind: (*_REQUIRED[kind], *_OPTIONAL[kind], "line", "file") for kind in _REQUIRED}
#: Internal units of the numeric columns (from the one unit table).
_UNITS = {k: u.Unit(UNITS[k]) for k in ("ra", "dec", "ra_err", "dec_err", "vr", "vr_err", "corr")}
_TEXT = ("star", "dataset", "relative_to", "exclude")
_TRUE, _FALSE = {"true", "yes", "1"}, {"false", "no", "0", ""}


#: One degree in mas: the largest sky offset (and position error) accepted.  The model
#: treats offsets from the mass as a flat tangent plane, good for small angles only.
_MAX_OFFSET_MAS = 3.6e6
#: Sane range of each numeric column (internal units), with the reason stated to the
#: user: offsets within one degree, velocities below the speed of light (astropy's c),
#: errors above 1e-6 mas and 1e-6 km/s (far below any instrument, common practice) so
#: that squared whitened residuals stay well inside double precision.
_RANGES = {
    "ra": (-_MAX_OFFSET_MAS, _MAX_OFFSET_MAS, "an offset within one degree (3.6e6 mas) of the "
           "centre; the fit treats the sky as a flat tangent plane"),
    "dec": (-_MAX_OFFSET_MAS, _MAX_OFFSET_MAS, "an offset within one degree (3.6e6 mas) of the "
            "centre; the fit treats the sky as a flat tangent plane"),
    "ra_err": (1e-6, _MAX_OFFSET_MAS, "an error between 1e-6 mas and one degree (3.6e6 mas)"),
    "dec_err": (1e-6, _MAX_OFFSET_MAS, "an error between 1e-6 mas and one degree (3.6e6 mas)"),
    "vr": (-C_KMS, C_KMS, f"a velocity below the speed of light ({C_KMS:.6g} km/s)"),
    "vr_err": (1e-6, C_KMS, f"an error between 1e-6 km/s and the speed of light "
               f"({C_KMS:.6g} km/s)"),
}


class DataWarning(UserWarning):
    """A star was dropped from the observations (too few epochs, no positions)."""


@dataclass(frozen=True, eq=False)
class Observations:
    """Validated observations of one scenario.

    Attributes
    ----------
    positions : pandas.DataFrame
        Columns ``star, epoch, ra, dec, ra_err, dec_err, corr, dataset,
        relative_to, exclude, line, file``; epoch in Julian years TT, offsets
        and errors in mas.
    velocities : pandas.DataFrame
        Columns ``star, epoch, vr, vr_err, dataset, exclude, line, file``
        (km/s); empty with these columns if the folder has no velocity table.
    dropped_stars : tuple of (str, str, str)
        ``(star, file, reason)`` of every star dropped with a warning.
    checksums : dict
        ``{file name: sha256 hex digest}`` of every input file read.
    folder : str
        The scenario folder as given.
    """

    positions: pd.DataFrame
    velocities: pd.DataFrame
    dropped_stars: tuple
    checksums: dict
    folder: str


@contextmanager
def _quiet():
    """Silence astropy/ERFA leap-second and dubious-year warnings."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", AstropyWarning)
        warnings.simplefilter("ignore", ErfaWarning)
        yield


def _csv_cells(text, file):
    """Split CSV text into stripped string cells; return (cells, lines, header, header line)."""
    body = text.lstrip()
    if not body:
        raise InputError("no data rows (empty file)", file=file)
    skip = text[:len(text) - len(body)].count("\n")  # blank lines above the header
    head_text = body.splitlines()[0]
    if "," not in head_text:
        for sep, name in ((";", "';'"), ("\t", "tabs"), ("|", "'|'"), (" ", "spaces")):
            if sep in head_text.strip():
                raise InputError(f"expected comma-separated columns; found {name}",
                                 file=file, row=skip + 1)
    try:
        df = pd.read_csv(io.StringIO(body), header=None, dtype=str, keep_default_na=False,
                         skip_blank_lines=False, skipinitialspace=True)
    except pd.errors.ParserError as exc:
        found = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(exc))
        if not found:
            raise InputError(f"cannot split into columns: {exc}", file=file) from None
        want, line, saw = map(int, found.groups())
        starts = _record_lines(body, line)
        raise InputError(f"{saw} cells but the header has {want}", file=file,
                         row=int(starts[line - 1]) + skip) from None
    df = df.fillna("").apply(lambda col: col.str.strip())
    used = np.flatnonzero((df.iloc[1:] != "").any(axis=1).to_numpy()) + 1  # skip blank lines
    cells = df.iloc[used].reset_index(drop=True)
    starts = _record_lines(body, len(df))
    return cells, starts[used] + skip, list(df.iloc[0]), skip + 1


def _record_lines(body, n_records):
    """Physical line (1-based) where each CSV record starts (quoted newlines counted)."""
    reader = csv.reader(io.StringIO(body), skipinitialspace=True)
    starts, prev = [], 0
    try:
        for _ in reader:
            starts.append(prev + 1)
            prev = reader.line_num
    except csv.Error:
        starts = []
    if len(starts) != n_records:  # the two readers disagree: count records instead
        return np.arange(1, n_records + 1)
    return np.array(starts, dtype=int)


#: astropy formats of the table files other than CSV, by file suffix.
_ASTROPY_FORMATS = {".ecsv": ("ascii.ecsv", "ECSV"), ".mrt": ("ascii.mrt", "MRT"),
                    ".cds": ("ascii.cds", "CDS")}


def _astropy_cells(text, file, suffix=".ecsv", rename=None):
    """Read ECSV or MRT/CDS text, converting units; return (cells, lines, header, header line).

    ``rename`` maps the table's column names to ours (the settings' column map).
    """
    from astropy.table import Table

    fmt, label = _ASTROPY_FORMATS[suffix]
    try:
        with _quiet():
            tbl = Table.read(text.splitlines() if suffix == ".ecsv" else text, format=fmt)
    except Exception as exc:  # astropy raises many kinds for a malformed file
        raise InputError(f"cannot read {label} table: {exc}", file=file) from None
    rename = rename or {}
    if suffix == ".ecsv":
        body = [i + 1 for i, s in enumerate(text.splitlines())
                if s.strip() and not s.lstrip().startswith("#")]
        head_line = body[0] if body else None
        lines = np.array(body[1:] if len(body) == len(tbl) + 1
                         else [(head_line or 0) + 1 + i for i in range(len(tbl))], dtype=int)
    else:  # the data rows are the last non-blank lines, after the byte-by-byte header
        body = [i + 1 for i, s in enumerate(text.splitlines()) if s.strip()]
        lines = np.array(body[len(body) - len(tbl):], dtype=int)
        head_line = None
    cells = {}
    for j, name in enumerate(tbl.colnames):
        key, col = rename.get(name.strip(), name.strip()).lower(), tbl[name]
        unit = getattr(col, "unit", None)
        if isinstance(col, Time):
            if key != "epoch":
                raise InputError("a time column is allowed only for 'epoch'", file=file,
                                 column=name)
            with _quiet():
                cells[j] = np.ma.filled(np.ma.asarray(col.tt.jyear, float), np.nan)
        elif key in _TEXT or col.dtype.kind not in "iuf":
            cells[j] = np.char.strip(np.ma.filled(np.ma.asarray(col).astype(str), ""))
        else:
            values = np.ma.filled(np.ma.asarray(col).astype(float), np.nan)
            if key == "epoch" and unit is not None and unit != u.yr:
                raise InputError(f"epoch unit must be yr (Julian epoch) or a time column, "
                                 f"not '{unit}'", file=file, column=name)
            if key in _UNITS and unit is not None:
                try:
                    values = (values * unit).to_value(_UNITS[key])
                except u.UnitConversionError:
                    raise InputError(f"unit '{unit}' cannot be converted to "
                                     f"'{_UNITS[key]}'", file=file, column=name) from None
            cells[j] = values
    return pd.DataFrame(cells, index=range(len(tbl))), lines, list(tbl.colnames), head_line


def _utc_to_jyear(strings):
    """ISO UTC date/time strings to TT Julian epochs (NaN where unparseable)."""
    with _quiet():
        try:
            return Time(strings, format="isot", scale="utc").tt.jyear
        except ValueError:  # some string is bad: convert one by one to find which
            out = np.full(len(strings), np.nan)
            for i, text in enumerate(strings):
                try:
                    out[i] = Time(text, format="isot", scale="utc").tt.jyear
                except ValueError:
                    pass
            return out


class _Table:
    """Raw cells of one file plus what is needed to name a bad cell."""

    def __init__(self, cells, lines, names, file):
        self.cells, self.lines, self.names, self.file = cells, lines, names, file

    def check(self, bad, key, message):
        """Raise for the first row where ``bad``; ``message(raw value)`` says what is wrong."""
        bad = np.asarray(bad, dtype=bool)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            value = self.cells[key].iloc[i] if key in self.cells else None
            raise InputError(message(value), file=self.file, row=int(self.lines[i]),
                             column=self.names.get(key, key))

    def numbers(self, key, values=None, default=None):
        """Column ``key`` as finite floats (``values``: already parsed ones)."""
        raw = self.cells[key]
        if values is None:
            values = np.array(pd.to_numeric(raw, errors="coerce"), dtype=float)
        if default is not None:
            values[raw.isna().to_numpy() | (raw == "").to_numpy()] = default

        def why(v):
            if v == "" or pd.isna(v):
                return "empty cell"
            try:
                return f"not a finite number: {float(v)!r}"
            except ValueError:
                return f"not a number: {v!r}"

        self.check(~np.isfinite(values), key, why)
        return values

    def epochs(self):
        """Epochs as TT Julian years; ISO strings are UTC dates/times."""
        raw = self.cells["epoch"]
        values = np.array(pd.to_numeric(raw, errors="coerce"), dtype=float)
        iso = np.isnan(values) & (raw != "").to_numpy() & (not pd.api.types.is_numeric_dtype(raw))
        if iso.any():
            values[iso] = _utc_to_jyear(raw[iso].str.replace(" ", "T", n=1).to_numpy(str))
            self.check(iso & np.isnan(values), "epoch",
                       lambda v: f"not a number or ISO date/time: {v!r}")
        values = self.numbers("epoch", values)
        lo, hi = EPOCH_RANGE
        self.check((values < lo) | (values > hi), "epoch",
                   lambda v: f"epoch {v!r} is outside the accepted range {lo:g} to {hi:g} "
                             "(Julian years, or an ISO date in that range)")
        return values

    def text(self, key, default):
        """Column ``key`` as stripped strings, ``default`` where absent or empty."""
        if key not in self.cells:
            return np.full(len(self.lines), default, dtype=object)
        s = self.cells[key].astype(str).str.strip()
        return s.where(s != "", default).to_numpy(object)


def _read(path, kind, columns=None):
    """Read and validate one table; return (DataFrame, sha256 hex digest).

    ``columns`` maps our column names to the table's (see :func:`check_column_map`).
    """
    file = str(path)
    rename = {theirs: ours for ours, theirs in (columns or {}).items()}
    try:
        data = Path(path).read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read file: {exc.strerror or exc}", file=file) from None
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte 0x{data[exc.start]:02x})", file=file,
                         row=data[:exc.start].count(b"\n") + 1) from None
    suffix = Path(file).suffix.lower()
    if suffix in _ASTROPY_FORMATS:
        cells, lines, header, head_line = _astropy_cells(text, file, suffix, rename)
    else:
        cells, lines, header, head_line = _csv_cells(text, file)
    names, keep = {}, {}
    for j, name in enumerate(header):
        key = rename.get(str(name).strip(), str(name).strip()).lower()
        if str(name).strip() not in rename and key in (columns or {}):
            key = f"({name})"  # our name, but the map points to another column
        if key in names and key:
            raise InputError(f"column '{key}' appears twice", file=file, row=head_line,
                             column=str(name).strip())
        names[key] = str(name).strip()
        if key in _COLUMNS[kind] and key not in ("line", "file"):
            keep[key] = cells[j]
    for key in _REQUIRED[kind]:
        if key not in names:
            found = ", ".join(n for n in names.values() if n)
            mapped = f" (mapped to '{columns[key]}')" if columns and key in columns else ""
            raise InputError(f"missing required column '{key}'{mapped} (found: {found})",
                             file=file, column=key)
    if len(lines) == 0:
        raise InputError("no data rows (header only)", file=file)
    table = _validate(_Table(pd.DataFrame(keep), lines, names, file), kind)
    return table, hashlib.sha256(data).hexdigest()


def _validate(t, kind):
    """Check every column of ``t`` and build the result frame."""
    out = {"star": t.text("star", "")}
    t.check(out["star"] == "", "star", lambda v: "empty star name")
    for key in ("star", "dataset"):
        if key in t.cells:
            t.check([control_characters(v) for v in t.text(key, "")], key,
                    lambda v: f"the name holds a control character (newline, tab...): {v!r}")
    out["epoch"] = t.epochs()
    for key in _REQUIRED[kind][2:]:
        out[key] = t.numbers(key)
        if key.endswith("_err"):
            t.check(out[key] <= 0, key, lambda v: f"error must be positive: {v!r}")
        lo, hi, sane = _RANGES[key]
        unit = UNITS[key]
        t.check((out[key] < lo) | (out[key] > hi), key,
                lambda v, sane=sane, unit=unit: f"{v} {unit} is out of range: expected {sane}")
    if kind == "positions":
        out["corr"] = t.numbers("corr", default=0.0) if "corr" in t.cells else \
            np.zeros(len(t.lines))
        t.check(np.abs(out["corr"]) >= 1, "corr",
                lambda v: f"correlation must lie strictly between -1 and 1: {v!r}")
    out["dataset"] = t.text("dataset", "default")
    if kind == "positions":
        rel = np.char.lower(t.text("relative_to", "frame").astype(str))
        t.check(~np.isin(rel, ["frame", "mass"]), "relative_to",
                lambda v: f"relative_to must be 'frame' or 'mass', not {v!r}")
        out["relative_to"] = rel.astype(object)
    flag = np.char.lower(t.text("exclude", "").astype(str))
    t.check(~np.isin(flag, [*_TRUE, *_FALSE]), "exclude",
            lambda v: f"exclude must be true/false/yes/no/1/0, not {v!r}")
    out["exclude"] = np.isin(flag, list(_TRUE))
    out["line"], out["file"] = np.asarray(t.lines, dtype=int), t.file
    df = pd.DataFrame(out, columns=_COLUMNS[kind])
    key = ["star", "epoch", "dataset"]
    dup = df.duplicated(subset=key, keep="first").to_numpy()
    if dup.any():
        i = int(np.flatnonzero(dup)[0])
        first = df.index[(df[key] == df.loc[i, key]).all(axis=1)][0]
        raise InputError(f"duplicate row: star '{df.star[i]}', epoch {float(df.epoch[i])!r}, "
                         f"dataset '{df.dataset[i]}' already on line {df.line[first]}",
                         file=t.file, row=int(df.line[i]))
    return df


def read_positions(path):
    """Read and validate a positions table (``.csv`` or ``.ecsv``).

    Parameters
    ----------
    path : str or os.PathLike
        The file; raise InputError naming file, line and column if it is bad.

    Returns
    -------
    pandas.DataFrame
        Columns as in :attr:`Observations.positions`.
    """
    return _read(path, "positions")[0]


def read_velocities(path):
    """Read and validate a radial-velocity table (``.csv`` or ``.ecsv``).

    Parameters
    ----------
    path : str or os.PathLike
        The file; raise InputError naming file, line and column if it is bad.

    Returns
    -------
    pandas.DataFrame
        Columns as in :attr:`Observations.velocities`.
    """
    return _read(path, "velocities")[0]


_SUFFIXES = (".csv", ".ecsv", ".mrt", ".cds")


def check_column_map(table, file=None, where="columns"):
    """Validate a ``[columns]`` settings table: ``{kind: {our column: their column}}``.

    ``kind`` is ``positions`` or ``velocities``; our columns are those of the
    tables (``star``, ``epoch``, ``ra`` ...); theirs are non-empty names, each
    used once.  Returns the map as plain dicts; raises SettingsError naming the key.
    """
    if not isinstance(table, dict):
        raise SettingsError("expected a table", file=file, column=where)
    out = {}
    for kind, mapping in table.items():
        key = f"{where}.{kind}"
        if kind not in _REQUIRED:
            raise SettingsError("expected [columns.positions] or [columns.velocities]",
                                file=file, column=key)
        if not isinstance(mapping, dict):
            raise SettingsError("expected a table of our column = \"their column\"",
                                file=file, column=key)
        known = (*_REQUIRED[kind], *_OPTIONAL[kind])
        for ours, theirs in mapping.items():
            if ours not in known:
                raise SettingsError(f"unknown column (known: {', '.join(known)})", file=file,
                                    column=f"{key}.{ours}")
            if not isinstance(theirs, str) or not theirs.strip():
                raise SettingsError("expected the table's column name", file=file,
                                    column=f"{key}.{ours}")
        theirs = [v.strip() for v in mapping.values()]
        twice = next((v for v in theirs if theirs.count(v) > 1), None)
        if twice is not None:
            raise SettingsError(f"column '{twice}' is mapped twice", file=file, column=key)
        out[kind] = {k: v.strip() for k, v in mapping.items()}
    return out


def _find(folder, name):
    """Path of ``name`` with one of the table suffixes in ``folder`` (None if none)."""
    paths = [p for p in (folder / f"{name}{sfx}" for sfx in _SUFFIXES) if p.exists()]
    if len(paths) >= 2:
        raise InputError(f"both {paths[0]} and {paths[1]} exist; keep only one",
                         file=paths[0])
    return paths[0] if paths else None


def read_observations(folder, min_epochs=3, strict=False, columns=None):
    """Read the positions and (optional) velocity tables of a scenario folder.

    Parameters
    ----------
    folder : str or os.PathLike
        Folder holding ``positions.csv``/``.ecsv`` and optionally
        ``velocities.csv``/``.ecsv``.
    min_epochs : int, optional
        Stars with fewer distinct non-excluded position epochs are dropped.
    strict : bool, optional
        Raise InputError instead of dropping a star with a DataWarning.
    columns : dict, optional
        ``{"positions": {our column: their column}, "velocities": {...}}`` for
        tables with their own column names (:func:`check_column_map`).

    Returns
    -------
    Observations

    Raises
    ------
    InputError
        For a bad table, a missing positions table, a star that would be
        dropped under ``strict``, or when every star is dropped.
    """
    root = Path(folder)
    if not root.is_dir():
        raise InputError("not a folder", file=str(folder))
    pos_path, vel_path = _find(root, "positions"), _find(root, "velocities")
    if pos_path is None:
        raise InputError("no positions table (positions.csv, .ecsv, .mrt or .cds)",
                         file=str(folder))
    check_memory([pos_path, vel_path])
    columns = columns or {}
    pos, digest = _read(pos_path, "positions", columns.get("positions"))
    checksums = {pos_path.name: digest}
    if vel_path is None:
        vel = pd.DataFrame({c: [] for c in _COLUMNS["velocities"]}).astype(
            {"star": str, "epoch": float, "vr": float, "vr_err": float, "dataset": str,
             "exclude": bool, "line": int, "file": str})
    else:
        vel, checksums[vel_path.name] = _read(vel_path, "velocities", columns.get("velocities"))

    counts = pos[~pos.exclude].groupby("star").epoch.nunique()
    problems = [(s, pos, f"only {counts.get(s, 0)} usable position epochs (need {min_epochs})")
                for s in sorted(set(pos.star)) if counts.get(s, 0) < min_epochs]
    problems += [(s, vel, "velocities but no positions")
                 for s in sorted(set(vel.star) - set(pos.star))]
    dropped = []
    for star, table, reason in problems:
        file = str(table.file.iloc[0])
        if strict:
            line = int(table.line[table.star == star].iloc[0])
            raise InputError(f"star '{star}': {reason}", file=file, row=line, column="star")
        warnings.warn(DataWarning(f"{file}: star '{star}' dropped: {reason}"), stacklevel=2)
        dropped.append((star, file, reason))
    gone = [d[0] for d in dropped]
    pos = pos[~pos.star.isin(gone)].reset_index(drop=True)
    vel = vel[~vel.star.isin(gone)].reset_index(drop=True)
    if pos.empty:
        raise InputError(f"no star left: all {len(gone)} stars were dropped", file=str(pos_path))
    return Observations(pos, vel, tuple(dropped), checksums, str(folder))
