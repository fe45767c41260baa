"""How large the input tables are, and a refusal before reading what memory cannot hold.

A fit keeps, per position row, the table itself, the model's arrays and the
grouped finite differences (13 float64 derivative rows for the Keplerian model,
:mod:`deepwell.fit.jacobian`); its peak memory grows linearly with the rows.
:data:`BYTES_PER_ROW` is that slope as measured by
``tests/benchmarks/bench_scale.py`` (peak resident memory of reading and
fitting 10^6 rows, with headroom).  :func:`check_memory` refuses, in one line
naming the file and its size, input whose estimate exceeds the memory the
system reports as available, instead of starting a run that would swap or be
killed.
"""

import os
from pathlib import Path

from deepwell.core.errors import InputError

__all__ = ["BYTES_PER_ROW", "check_memory", "count_lines", "input_size", "memory_available"]

#: Peak memory per data row of reading and fitting (bytes); measured about 1.5 kB.
BYTES_PER_ROW = 2000


def count_lines(path, block=1 << 22):
    """Number of lines of a text file (newline characters, plus an unterminated last line)."""
    n, last = 0, b"\n"
    with open(path, "rb") as fh:
        while chunk := fh.read(block):
            n += chunk.count(b"\n")
            last = chunk[-1:]
    return n + (last != b"\n")


def memory_available():
    """Memory the system can give this process without swapping, in bytes (None if unknown).

    ``MemAvailable`` of ``/proc/meminfo`` (Linux), else the physical memory.
    """
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return None


def _size_text(n_bytes):
    """A byte count as kB, MB or GB (decimal units, 3 significant digits)."""
    for unit, scale in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n_bytes >= scale:
            return f"{n_bytes / scale:.3g} {unit}"
    return f"{n_bytes} bytes"


def input_size(folder):
    """Total size of the table files of a scenario folder, as text (e.g. ``"52.1 MB"``)."""
    files = [p for p in Path(folder).glob("*") if p.is_file()
             and p.stem in ("positions", "velocities")]
    return _size_text(sum(p.stat().st_size for p in files))


def check_memory(paths, available=None):
    """Refuse tables whose fit would need more memory than is available.

    Parameters
    ----------
    paths : sequence of pathlib.Path
        The observation tables (None entries are skipped).
    available : int, optional
        Bytes available (default :func:`memory_available`; no check if unknown).

    Raises
    ------
    InputError
        Naming the largest file, its size and row count, the estimate and the
        memory available.
    """
    paths = [Path(p) for p in paths if p is not None]
    available = memory_available() if available is None else available
    if available is None or not paths:
        return
    rows = {p: count_lines(p) for p in paths}
    need = BYTES_PER_ROW * sum(rows.values())
    if need <= available:
        return
    big = max(paths, key=lambda p: rows[p])
    raise InputError(f"{_size_text(big.stat().st_size)} ({rows[big]} lines): fitting it needs "
                     f"about {_size_text(need)} of memory, more than the "
                     f"{_size_text(available)} available; fit a subset of the rows (or bin "
                     "them into normal points) or use a machine with more memory",
                     file=str(big))
