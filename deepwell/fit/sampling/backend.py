"""Checkpoint files: the whole sampler state in one HDF5 file, replaced atomically.

Every save writes a complete new file next to the target and renames it into
place with :func:`os.replace`, which is atomic on POSIX file systems: a run
killed at any moment (even ``kill -9`` during a write) leaves either the
previous complete checkpoint or the new one, never a torn file.

File layout (HDF5, all datasets at the root)::

    chain          (n_stored, n_walkers, n_dim) float64
    log_prob       (n_stored, n_walkers)        float64
    coords         (n_walkers, n_dim)           float64   last positions
    last_log_prob  (n_walkers,)                 float64
    accepted       (n_walkers,)                 int64
    attrs: step, elapsed (s), fingerprint (str), rng_state (JSON of the
           numpy bit-generator state), format = "deepwell-checkpoint-1"
"""

import hashlib
import json
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from deepwell.core.errors import DeepwellError

__all__ = ["Checkpoint", "CheckpointError", "CheckpointMismatch", "save_checkpoint",
           "load_checkpoint", "save_state", "load_state", "check_state", "restore_rng",
           "fingerprint"]

_FORMAT = "deepwell-checkpoint-1"


class CheckpointError(DeepwellError, ValueError):
    """A checkpoint file that cannot be used."""


class CheckpointMismatch(CheckpointError):
    """The checkpoint belongs to other data, settings or sampler options."""


@dataclass(frozen=True)
class Checkpoint:
    """The complete state of one ensemble after ``step`` steps."""

    chain: np.ndarray
    log_prob: np.ndarray
    coords: np.ndarray
    last_log_prob: np.ndarray
    accepted: np.ndarray
    step: int
    rng_state: dict
    fingerprint: str
    elapsed: float


def fingerprint(*parts):
    """SHA-256 hex digest of the text of ``parts`` (JSON, sorted keys)."""
    text = json.dumps(parts, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def save_checkpoint(path, ck):
    """Write ``ck`` to ``path`` atomically (new file, fsync, rename)."""
    save_state(path, {k: getattr(ck, k) for k in ("chain", "log_prob", "coords",
                                                   "last_log_prob", "accepted")},
               {"step": int(ck.step), "elapsed": float(ck.elapsed),
                "fingerprint": ck.fingerprint, "rng_state": ck.rng_state})


def save_state(path, arrays, attrs, kind=_FORMAT):
    """Write named arrays and JSON-able attributes to ``path`` atomically.

    A complete new file is written beside ``path``, synced to disk and renamed
    into place, so a reader only ever sees a whole file.
    """
    import h5py

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    with h5py.File(tmp, "w") as f:
        for name, value in arrays.items():
            f.create_dataset(name, data=np.asarray(value))
        f.attrs["format"] = kind
        for name, value in attrs.items():
            f.attrs[name] = value if isinstance(value, (int, float, str)) else \
                json.dumps(value, default=_json_default)
    with open(tmp, "rb") as fh:
        os.fsync(fh.fileno())
    os.replace(tmp, path)


def load_state(path, expected_fingerprint=None, kind=_FORMAT, json_attrs=("rng_state",)):
    """Read a file written by :func:`save_state`: (arrays dict, attrs dict).

    Raises
    ------
    CheckpointError
        Missing or unreadable file, or another kind of file.
    CheckpointMismatch
        Its ``fingerprint`` attribute differs from ``expected_fingerprint``.
    """
    import h5py

    path = Path(path)
    if not path.is_file():
        raise CheckpointError(f"no checkpoint to resume from: {path}")
    try:
        with h5py.File(path, "r") as f:
            if f.attrs.get("format") != kind:
                raise CheckpointError(f"{path}: not a deepwell checkpoint of this sampler")
            fp = str(f.attrs.get("fingerprint", ""))
            if expected_fingerprint is not None and fp != expected_fingerprint:
                raise CheckpointMismatch(
                    f"{path}: the checkpoint was written for different data, settings or "
                    "sampler options (hash mismatch); refusing to resume. Start a new run "
                    "or point to the matching checkpoint.")
            arrays = {name: f[name][...] for name in f}
            attrs = {}
            for name, value in f.attrs.items():
                value = value.item() if hasattr(value, "item") else value
                attrs[name] = (json.loads(value, object_hook=_json_hook)
                               if name in json_attrs else value)
            return arrays, attrs
    except CheckpointError:
        raise
    except OSError as exc:
        raise CheckpointError(f"{path}: cannot read checkpoint ({exc})") from None
    except (KeyError, ValueError, TypeError, AttributeError) as exc:  # altered by hand
        raise CheckpointError(f"{path}: damaged checkpoint ({type(exc).__name__}: {exc}); "
                              "refusing to resume. Start a new run without --resume.") from None


def check_state(path, arrays, attrs, shapes, attr_kinds, dims=None):
    """Refuse a damaged or altered checkpoint: every array and attribute present and sane.

    Parameters
    ----------
    path : path
        The file (named in the error).
    arrays, attrs : dict
        As returned by :func:`load_state`.
    shapes : dict
        Array name -> expected shape; each entry is an int or a letter that must
        stand for the same length wherever it appears (e.g. ``("S", "W", "D")``).
    attr_kinds : dict
        Attribute name -> ``"int"`` (integer >= 0), ``"float"`` (finite),
        ``"positive"`` (finite, > 0), ``"str"`` or ``"state"`` (a dict).
    dims : dict, optional
        Lengths already known (e.g. ``{"D": 12}`` from the sampled parameters).

    Returns
    -------
    dict
        Letter -> length, as found.

    Raises
    ------
    CheckpointError
        Naming the file and the first missing or inconsistent entry.
    """
    dims = dict(dims or {})

    def fail(what):
        raise CheckpointError(f"{path}: damaged checkpoint ({what}); refusing to resume. "
                              "Start a new run without --resume (the old checkpoint is "
                              "replaced).")

    for name, shape in shapes.items():
        if name not in arrays:
            fail(f"array '{name}' is missing")
        a = np.asarray(arrays[name])
        if a.dtype.kind not in "iuf" or a.ndim != len(shape):
            fail(f"array '{name}' has shape {a.shape}, expected {len(shape)} dimension(s)")
        for n, want in zip(a.shape, shape, strict=True):
            want = dims.setdefault(want, n) if isinstance(want, str) else want
            if n != want:
                fail(f"array '{name}' has shape {a.shape}, which does not fit the others "
                     "or the sampled parameters")
        if not np.all(np.isfinite(a)):
            fail(f"array '{name}' holds values that are not finite")
    for name, kind in attr_kinds.items():
        v = attrs.get(name)
        ok = {"int": lambda x: isinstance(x, (int, np.integer)) and not isinstance(x, bool)
              and x >= 0,
              "float": lambda x: isinstance(x, (int, float, np.number)) and np.isfinite(x),
              "positive": lambda x: isinstance(x, (int, float, np.number)) and np.isfinite(x)
              and x > 0,
              "str": lambda x: isinstance(x, str),
              "state": lambda x: isinstance(x, dict)}[kind](v)
        if not ok:
            fail(f"attribute '{name}' is missing or not a valid {kind}")
    return dims


def restore_rng(path, rng, state):
    """Set ``rng``'s bit-generator state from a checkpoint; refuse a state that does not fit."""
    try:
        rng.bit_generator.state = state
    except (TypeError, ValueError, KeyError) as exc:
        raise CheckpointError(f"{path}: damaged checkpoint (random-generator state: {exc}); "
                              "refusing to resume. Start a new run without --resume.") from None


def _json_default(obj):
    if isinstance(obj, np.ndarray):
        return {"__ndarray__": obj.tolist(), "dtype": str(obj.dtype)}
    if isinstance(obj, np.integer):
        return int(obj)
    raise TypeError(f"cannot store {type(obj).__name__} in a checkpoint")


def _json_hook(obj):
    if "__ndarray__" in obj:
        return np.array(obj["__ndarray__"], dtype=obj["dtype"])
    return obj


def load_checkpoint(path, expected_fingerprint=None, dims=None):
    """Read a checkpoint; refuse it if its fingerprint differs or its contents do not fit.

    ``dims`` may give the known number of walkers ``W`` and parameters ``D``.

    Raises
    ------
    CheckpointError
        Missing, unreadable or damaged file (a missing array, shapes that do not fit).
    CheckpointMismatch
        The file was written for other data, settings or sampler options.
    """
    arrays, attrs = load_state(path, expected_fingerprint)
    check_state(path, arrays, attrs,
                {"chain": ("S", "W", "D"), "log_prob": ("S", "W"), "coords": ("W", "D"),
                 "last_log_prob": ("W",), "accepted": ("W",)},
                {"step": "int", "elapsed": "float", "fingerprint": "str", "rng_state": "state"},
                dims)
    return Checkpoint(step=int(attrs["step"]), fingerprint=str(attrs["fingerprint"]),
                      elapsed=float(attrs["elapsed"]), rng_state=attrs["rng_state"],
                      **{k: arrays[k] for k in ("chain", "log_prob", "coords",
                                                "last_log_prob", "accepted")})
