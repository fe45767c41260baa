"""The ``[datasets]`` and ``[fit]`` tables of a settings file: data-set terms and likelihood.

Settings (TOML)::

    [datasets]
    reference = "imager-A"        # or a list, e.g. ["imager-A", "spec-1"]
    offsets = true                # offset for every other set with frame positions
    drifts = false                # offset drifts too (needs offsets)
    zero_points = true            # zero-point for every other velocity set
    error_model = "scale"         # for every set: "scale", "jitter" or "none"

    [datasets.sets.imager-B]      # per-set choices override the defaults above
    offset = true
    drift = true
    zero_point = false
    error_model = "jitter"

    [fit]
    likelihood = "mixture"        # "gaussian" (default) or "mixture" (outliers)
    outlier_width = 20.0          # broad component, in units of each point's error
    exclude_rows = [{file = "positions.csv", line = 17}]   # header is line 1

The terms these choices add to the model are described in
:mod:`deepwell.model.datasets`.
"""

import dataclasses
from dataclasses import dataclass, field

from deepwell.core.errors import SettingsError

__all__ = ["DatasetConfig", "ERROR_MODELS", "LIKELIHOODS", "SCALE_MIN", "parse_datasets",
           "datasets_from_args"]


ERROR_MODELS = ("none", "scale", "jitter")


LIKELIHOODS = ("gaussian", "mixture")


SCALE_MIN = 0.01


_SET_KEYS = {"offset", "drift", "zero_point", "error_model"}


_TOP = {"reference", "offsets", "drifts", "zero_points", "error_model", "sets"}


_FIT = {"likelihood", "outlier_width", "exclude_rows"}


@dataclass(frozen=True)
class DatasetConfig:
    """The validated ``[datasets]`` and ``[fit]`` choices (see module docstring)."""

    reference: tuple = ()
    offsets: bool = False
    drifts: bool = False
    zero_points: bool = False
    error_model: str = "none"
    sets: dict = field(default_factory=dict)  # name -> dict of per-set keys
    likelihood: str = "gaussian"
    outlier_width: float = 20.0
    exclude_rows: tuple = ()  # (file name, line)
    source: str | None = field(default=None, compare=False)  # settings file, for messages

    @property
    def active(self):
        """Whether the model needs data-set terms or a non-Gaussian likelihood."""
        return bool(self.offsets or self.zero_points or self.error_model != "none"
                    or self.likelihood != "gaussian" or self.reference
                    or any(v.get("offset") or v.get("zero_point")
                           or v.get("error_model", "none") != "none"
                           for v in self.sets.values()))

    def choice(self, name, key):
        """A set's choice for key (per-set value, else the default)."""
        default = {"offset": self.offsets, "drift": self.drifts,
                   "zero_point": self.zero_points, "error_model": self.error_model}[key]
        return self.sets.get(name, {}).get(key, default)


def _bool(table, key, file, where):
    v = table[key]
    if not isinstance(v, bool):
        raise SettingsError("must be true or false", file=file, column=f"{where}.{key}")
    return v


def _error_model(v, file, where):
    if v not in ERROR_MODELS:
        raise SettingsError(f"must be one of {', '.join(ERROR_MODELS)}, got {v!r}", file=file,
                            column=where)
    return v


def parse_datasets(datasets=None, fit=None, file=None):
    """Validate the ``[datasets]`` and ``[fit]`` tables into :class:`DatasetConfig`."""
    datasets, fit = datasets or {}, fit or {}
    for table, known, where in ((datasets, _TOP, "datasets"), (fit, _FIT, "fit")):
        if not isinstance(table, dict):
            raise SettingsError("expected a table", file=file, column=where)
        unknown = set(table) - known
        if unknown:
            raise SettingsError(f"unknown key (known: {', '.join(sorted(known))})", file=file,
                                column=f"{where}.{sorted(unknown)[0]}")
    kw = {}
    ref = datasets.get("reference", ())
    ref = (ref,) if isinstance(ref, str) else ref
    if not isinstance(ref, (list, tuple)) or not all(isinstance(r, str) and r for r in ref):
        raise SettingsError("reference must be a data-set name or a list of names", file=file,
                            column="datasets.reference")
    kw["reference"] = tuple(ref)
    for key in ("offsets", "drifts", "zero_points"):
        if key in datasets:
            kw[key] = _bool(datasets, key, file, "datasets")
    if "error_model" in datasets:
        kw["error_model"] = _error_model(datasets["error_model"], file, "datasets.error_model")
    sets = {}
    for name, table in datasets.get("sets", {}).items():
        where = f"datasets.sets.{name}"
        if not isinstance(table, dict):
            raise SettingsError("expected a table", file=file, column=where)
        unknown = set(table) - _SET_KEYS
        if unknown:
            raise SettingsError(f"unknown key (known: {', '.join(sorted(_SET_KEYS))})",
                                file=file, column=f"{where}.{sorted(unknown)[0]}")
        d = {k: _bool(table, k, file, where) for k in ("offset", "drift", "zero_point")
             if k in table}
        if "error_model" in table:
            d["error_model"] = _error_model(table["error_model"], file, where + ".error_model")
        if name in kw["reference"] and (d.get("offset") or d.get("zero_point")):
            raise SettingsError("a reference set has no offset or zero-point by definition",
                                file=file, column=where)
        sets[name] = d
    kw["sets"] = sets
    if "likelihood" in fit:
        if fit["likelihood"] not in LIKELIHOODS:
            raise SettingsError(f"must be one of {', '.join(LIKELIHOODS)}, got "
                                f"{fit['likelihood']!r}", file=file, column="fit.likelihood")
        kw["likelihood"] = fit["likelihood"]
    if "outlier_width" in fit:
        w = fit["outlier_width"]
        if isinstance(w, bool) or not isinstance(w, (int, float)) or not 2.0 <= w <= 1e4:
            raise SettingsError("must be a number between 2 and 10000 (units of each point's "
                                "error)", file=file, column="fit.outlier_width")
        kw["outlier_width"] = float(w)
    rows = []
    for i, item in enumerate(fit.get("exclude_rows", [])):
        if (not isinstance(item, dict) or set(item) != {"file", "line"}
                or not isinstance(item["file"], str) or isinstance(item["line"], bool)
                or not isinstance(item["line"], int) or item["line"] < 2):
            raise SettingsError("each entry is {file = \"positions.csv\", line = N} with N >= 2 "
                                "(the header is line 1)", file=file,
                                column=f"fit.exclude_rows[{i}]")
        rows.append((item["file"], item["line"]))
    kw["exclude_rows"] = tuple(rows)
    cfg = DatasetConfig(**kw, source=None if file is None else str(file))
    if (cfg.offsets or cfg.zero_points) and not cfg.reference:
        raise SettingsError("offsets or zero-points need a reference data set "
                            "(reference = \"NAME\")", file=file, column="datasets.reference")
    return cfg


def datasets_from_args(settings, reference=None, offsets=None, drifts=None, zero_points=None,
                       error_model=None, likelihood=None, outlier_width=None, exclude_rows=None):
    """Settings with the data-set choices overridden (for the command line).

    Parameters
    ----------
    settings : deepwell.tables.settings.Settings
    reference : str or sequence of str, optional
        Reference data set(s) (no offset, no zero-point).
    offsets, drifts, zero_points : bool, optional
        Defaults for every non-reference set (None keeps the settings' choice).
    error_model : {"scale", "jitter", "none"}, optional
    likelihood : {"gaussian", "mixture"}, optional
    outlier_width : float, optional
    exclude_rows : sequence of (file, line), optional
        Added to the settings' list.

    Returns
    -------
    deepwell.tables.settings.Settings
        A new settings object, validated (SettingsError otherwise).
    """
    ds = dict(settings.datasets)
    fit = dict(settings.fit)
    if reference is not None:
        ds["reference"] = [reference] if isinstance(reference, str) else list(reference)
    for key, value in (("offsets", offsets), ("drifts", drifts), ("zero_points", zero_points),
                       ("error_model", error_model)):
        if value is not None:
            ds[key] = value
    for key, value in (("likelihood", likelihood), ("outlier_width", outlier_width)):
        if value is not None:
            fit[key] = value
    if exclude_rows:
        fit["exclude_rows"] = list(fit.get("exclude_rows", [])) + [
            {"file": f, "line": int(n)} for f, n in exclude_rows]
    parse_datasets(ds, fit, file="command line")
    return dataclasses.replace(settings, datasets=ds, fit=fit)
