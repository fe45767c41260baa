"""The optional TOML settings file: fixed parameters, starts, bounds, priors.

Example::

    reference_epoch = 2000.0      # Julian year (TT) of x0, y0 and the drift
    min_epochs = 3                # stars with fewer position epochs are set aside

    [shared.distance]             # any of mass, distance, x0, y0, vx0, vy0, vz0
    value = 7100.0                # starting value (pc)
    fixed = false
    min = 5000.0                  # hard bounds (a uniform prior)
    max = 9000.0
    prior = { mean = 7100.0, sigma = 150.0 }   # Gaussian prior

    [stars.cv-03]                 # starting elements for one star
    a = 210.0                     # mas
    e = 0.62
    inc = 120.0                   # deg
    node = 40.0
    peri_arg = 300.0
    t_peri = 2011.4               # Julian year
    fixed = false                 # true holds the whole orbit fixed (needs all six)
    prior = { e = { mean = 0.6, sigma = 0.05 } }

    [effects]                     # relativistic pieces; these are the defaults
    romer = true                  # light-travel (Romer) delay
    redshift = "exact"            # "exact", "first-order" or "off"
    precession = true             # 1PN orbits for stars where precession matters
    precession_stars = "auto"     # or "all"
    extended_mass = false         # Plummer sphere; needs extended_scale = b (au)
    # extended_scale = 1000.0     # au
    # reference_radius = 2000.0   # au (default: apocentre of the tightest star)

    [shared.f]                    # effect strengths are shared parameters too:
    fixed = false                 # f (redshift) and f_sp (precession) are held at
                                  # 1 unless freed like this; ext_fraction (extended
                                  # mass inside reference_radius / point mass) is
                                  # fitted whenever the extended mass is on

    [datasets]                    # per-data-set terms (deepwell.model.datasets); all off
    reference = "imager-A"        # set(s) without offset / zero-point (a name or list)
    offsets = false               # frame offset dx, dy for every other imaging set
    drifts = false                # and an offset drift dvx, dvy (mas/yr)
    zero_points = false           # velocity zero-point dvz for every other spectrograph
    error_model = "none"          # "scale" (s * sigma), "jitter" (sqrt(sigma^2 + j^2))
    [datasets.sets.imager-B]      # per-set overrides of the four choices above
    offset = true
    error_model = "jitter"

    [fit]
    likelihood = "gaussian"       # or "mixture": outlier-mixture likelihood (robust)
    outlier_width = 20.0          # width of the outlier Gaussian, in units of the error
    exclude_rows = [{file = "positions.csv", line = 17}]   # left out, not deleted

    [columns.positions]           # a table with its own column names (e.g. a published
    star = "Name"                 # MRT/CDS file positions.mrt): our column = theirs;
    ra = "dRA"                    # units come from the table (arcsec, mas, deg ...)
    ra_err = "e_dRA"
    [columns.velocities]
    vr = "RV"

See :mod:`deepwell.model.effects` for the model behind each switch, and
:mod:`deepwell.model.datasets` / :mod:`deepwell.model.likelihood` for the data-set terms,
the likelihoods and the names of their parameters.  For the effect
strengths (``f``, ``f_sp``, ``ext_fraction``) the keys of a ``[shared.NAME]``
table that are left out keep the parameter's defaults (``f`` and ``f_sp``:
value 1, fixed), so ``value = 0.9`` alone holds f at 0.9.
"""

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from deepwell.core.errors import SettingsError
from deepwell.core.parameters import EXTRA, SHARED, STAR_ELEMENTS
from deepwell.tables.datasets import parse_datasets
from deepwell.tables.effects import Effects, parse_effects
from deepwell.tables.observations import check_column_map

__all__ = ["SharedSetting", "StarSetting", "Settings", "load_settings", "Effects"]

_TOP_KEYS = {"reference_epoch", "min_epochs", "shared", "stars", "effects", "datasets", "fit",
             "columns"}
_SHARED_KEYS = {"value", "fixed", "min", "max", "prior"}


@dataclass(frozen=True)
class SharedSetting:
    """User settings for one shared parameter (units as in parameters.SHARED)."""

    value: float | None = None
    fixed: bool = False
    min: float | None = None
    max: float | None = None
    prior_mean: float | None = None
    prior_sigma: float | None = None


@dataclass(frozen=True)
class StarSetting:
    """User settings for one star: starting elements, a fixed flag, priors."""

    start: dict = field(default_factory=dict)  # element -> value (mas, deg, yr)
    fixed: bool = False
    priors: dict = field(default_factory=dict)  # element -> (mean, sigma)


@dataclass(frozen=True)
class Settings:
    """All settings of one fit; defaults apply when no file is given."""

    reference_epoch: float = 2000.0
    min_epochs: int = 3
    shared: dict = field(default_factory=dict)
    stars: dict = field(default_factory=dict)
    effects: dict = field(default_factory=dict)  # [effects] as written, validated
    datasets: dict = field(default_factory=dict)  # [datasets] as written, validated
    fit: dict = field(default_factory=dict)  # [fit] as written, validated
    columns: dict = field(default_factory=dict)  # [columns]: kind -> {ours: theirs}
    source: str | None = None
    raw: dict = field(default_factory=dict)

    def shared_setting(self, name):
        if name in self.shared:
            return self.shared[name]
        spec = EXTRA.get(name)
        if spec is not None:
            return SharedSetting(value=spec.default, fixed=spec.fixed_by_default)
        return SharedSetting()

    def to_dict(self):
        """The settings in force (including command-line overrides) as a TOML-like dict.

        :func:`parse_settings` of the result gives back equal settings.
        """
        shared = {}
        for name, st in self.shared.items():
            d = {k: getattr(st, k) for k in ("value", "min", "max") if getattr(st, k) is not None}
            if st.fixed:
                d["fixed"] = True
            if st.prior_mean is not None:
                d["prior"] = {"mean": st.prior_mean, "sigma": st.prior_sigma}
            shared[name] = d
        stars = {}
        for name, st in self.stars.items():
            d = dict(st.start)
            if st.fixed:
                d["fixed"] = True
            if st.priors:
                d["prior"] = {el: {"mean": m, "sigma": sg} for el, (m, sg) in st.priors.items()}
            stars[name] = d
        return {"reference_epoch": self.reference_epoch, "min_epochs": self.min_epochs,
                "shared": shared, "stars": stars, "effects": dict(self.effects),
                "datasets": dict(self.datasets), "fit": dict(self.fit),
                **({"columns": {k: dict(v) for k, v in self.columns.items()}}
                   if self.columns else {})}

    def effect_switches(self):
        """The validated :class:`deepwell.tables.effects` (defaults fill the gaps)."""
        return parse_effects(self.effects, file=self.source)

    def dataset_config(self):
        """The validated :class:`deepwell.tables.datasets` of [datasets] and [fit]."""
        return parse_datasets(self.datasets, self.fit, file=self.source)


#: Julian years (TT) a reference epoch may take: the era of telescopic astrometry,
#: widened on both sides (common practice: no orbit data predate 1000 or follow 3000).
REFERENCE_EPOCH_RANGE = (1000.0, 3000.0)


def _number(value, file, key):
    """A finite number of the settings file (int or float; not a bool, nan or inf)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise SettingsError(f"expected a number, got {value!r}", file=file, column=key)
    value = float(value)
    if not math.isfinite(value):
        raise SettingsError(f"must be a finite number, got {value!r}", file=file, column=key)
    return value


#: Elements whose physical range is open at an end: a > 0 and 0 <= e < 1.
_OPEN = {"a": (True, False), "e": (False, True)}


def _in_domain(value, spec, file, key, what="value"):
    """Refuse a number outside the parameter's physical range [spec.lower, spec.upper].

    The range of mass and distance is positive (the model's [1, 1e12] solMass and
    [1, 1e9] pc); ``a`` is positive and ``e`` in [0, 1) (see :mod:`deepwell.core.parameters`).
    """
    lo, hi = spec.lower, spec.upper
    open_lo, open_hi = _OPEN.get(spec.name, (False, False))
    if (lo < value if open_lo else lo <= value) and (value < hi if open_hi else value <= hi):
        return value
    unit = f" {spec.unit}" if spec.unit else ""
    if math.isinf(hi):
        rng = f"{'>' if open_lo else '>='} {lo:g}{unit}"
    elif math.isinf(lo):
        rng = f"<= {hi:g}{unit}"
    else:
        rng = f"in {'(' if open_lo else '['}{lo:g}, {hi:g}{')' if open_hi else ']'}{unit}"
    raise SettingsError(f"{what} {value:g} is outside the range of {spec.name}: it must be "
                        f"{rng}", file=file, column=key)


def _prior(spec, file, key, param=None):
    if not isinstance(spec, dict) or set(spec) != {"mean", "sigma"}:
        raise SettingsError("a prior is { mean = ..., sigma = ... }", file=file, column=key)
    mean = _number(spec["mean"], file, key + ".mean")
    sigma = _number(spec["sigma"], file, key + ".sigma")
    if not sigma > 0:
        raise SettingsError("prior sigma must be positive", file=file, column=key + ".sigma")
    if param is not None:
        _in_domain(mean, param, file, key + ".mean", "prior mean")
    return mean, sigma


def _shared(name, spec, file):
    key = f"shared.{name}"
    if name not in SHARED and name not in EXTRA:
        raise SettingsError(f"unknown shared parameter (known: {', '.join(SHARED)}, "
                            f"{', '.join(EXTRA)})", file=file, column=key)
    if not isinstance(spec, dict):
        raise SettingsError("expected a table", file=file, column=key)
    unknown = set(spec) - _SHARED_KEYS
    if unknown:
        raise SettingsError(f"unknown key '{sorted(unknown)[0]}'", file=file, column=key)
    param = SHARED.get(name) or EXTRA[name]
    kw = {}
    for k in ("value", "min", "max"):
        if k in spec:
            kw[k] = _in_domain(_number(spec[k], file, f"{key}.{k}"), param, file, f"{key}.{k}", k)
    if "fixed" in spec:
        if not isinstance(spec["fixed"], bool):
            raise SettingsError("fixed must be true or false", file=file, column=key + ".fixed")
        kw["fixed"] = spec["fixed"]
        if spec["fixed"] and "value" not in spec and name not in EXTRA:
            raise SettingsError("a fixed parameter needs a value", file=file, column=key)
    if "prior" in spec:
        kw["prior_mean"], kw["prior_sigma"] = _prior(spec["prior"], file, key + ".prior", param)
    lo, hi = kw.get("min", param.lower), kw.get("max", param.upper)
    if not lo < hi:
        raise SettingsError(f"min must be below max (here {lo:g} and {hi:g})", file=file,
                            column=key)
    if "value" in kw and not lo <= kw["value"] <= hi:
        raise SettingsError(f"value {kw['value']:g} is outside the bounds [{lo:g}, {hi:g}]",
                            file=file, column=f"{key}.value")
    spec = EXTRA.get(name)
    if spec is not None:  # effect strengths keep their defaults for keys left out
        kw.setdefault("value", spec.default)
        kw.setdefault("fixed", spec.fixed_by_default)
    return SharedSetting(**kw)


def _star(name, spec, file):
    key = f"stars.{name}"
    if not isinstance(spec, dict):
        raise SettingsError("expected a table", file=file, column=key)
    start, priors, fixed = {}, {}, False
    for k, v in spec.items():
        if k in STAR_ELEMENTS:
            start[k] = _in_domain(_number(v, file, f"{key}.{k}"), STAR_ELEMENTS[k], file,
                                  f"{key}.{k}")
        elif k == "fixed":
            if not isinstance(v, bool):
                raise SettingsError("fixed must be true or false", file=file, column=f"{key}.fixed")
            fixed = v
        elif k == "prior":
            if not isinstance(v, dict):
                raise SettingsError("expected a table of priors", file=file, column=f"{key}.prior")
            for el, p in v.items():
                if el not in STAR_ELEMENTS:
                    raise SettingsError(f"unknown element '{el}'", file=file, column=f"{key}.prior")
                priors[el] = _prior(p, file, f"{key}.prior.{el}", STAR_ELEMENTS[el])
        else:
            raise SettingsError(f"unknown key '{k}' (elements: {', '.join(STAR_ELEMENTS)})",
                                file=file, column=key)
    if fixed and set(start) != set(STAR_ELEMENTS):
        raise SettingsError("a fixed star needs all six elements", file=file, column=key)
    return StarSetting(start=start, fixed=fixed, priors=priors)


def parse_settings(data, file=None):
    """Validate a settings mapping (as read from TOML) into :class:`Settings`."""
    unknown = set(data) - _TOP_KEYS
    if unknown:
        raise SettingsError(f"unknown key '{sorted(unknown)[0]}'", file=file)
    ref = _number(data.get("reference_epoch", 2000.0), file, "reference_epoch")
    if not REFERENCE_EPOCH_RANGE[0] <= ref <= REFERENCE_EPOCH_RANGE[1]:
        raise SettingsError(f"must be a Julian year between {REFERENCE_EPOCH_RANGE[0]:g} and "
                            f"{REFERENCE_EPOCH_RANGE[1]:g}, got {ref:g}", file=file,
                            column="reference_epoch")
    min_epochs = data.get("min_epochs", 3)
    if isinstance(min_epochs, bool) or not isinstance(min_epochs, int) or min_epochs < 3:
        raise SettingsError("min_epochs must be an integer >= 3", file=file, column="min_epochs")
    shared = {n: _shared(n, s, file) for n, s in data.get("shared", {}).items()}
    stars = {n: _star(n, s, file) for n, s in data.get("stars", {}).items()}
    effects = data.get("effects", {})
    parse_effects(effects, file=file)  # validate; kept as written (see effect_switches)
    datasets, fit = data.get("datasets", {}), data.get("fit", {})
    parse_datasets(datasets, fit, file=file)  # validate; kept as written (dataset_config)
    columns = check_column_map(data.get("columns", {}), file=file)
    return Settings(reference_epoch=ref, min_epochs=min_epochs, shared=shared, stars=stars,
                    effects=dict(effects), datasets=dict(datasets), fit=dict(fit),
                    columns=columns, source=file, raw=data)


def load_settings(path):
    """Read and validate a TOML settings file.

    Raises
    ------
    SettingsError
        For a file that is not valid TOML (with its line) or holds unknown keys,
        wrong types or inconsistent values.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise SettingsError(f"cannot read settings file: {exc}", file=str(path)) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SettingsError(f"not valid TOML: {exc}", file=str(path)) from None
    return parse_settings(data, file=str(path))
