"""Invented data sets from a scenario description.

A scenario description is a TOML file that invents a galactic nucleus: the true
parameters of the joint model (``shared/physics.md`` section 3) and the campaigns
that observe it.  :func:`write_scenario` turns it into ``positions.csv``,
``velocities.csv``, ``truth.json`` and a copy ``description.toml``.  Keys, with
units; keys marked ``opt`` may be left out, any key not listed is an error::

    name = "..."; story = "one line"; seed = 12345  # integer >= 0
    reference_epoch = 2000.0  # opt [Julian yr] epoch of x0, y0
    [truth]     mass [Msun] > 0, distance [pc] > 0, and opt (default 0):
                x0, y0 [mas] position of the mass at reference_epoch (east, north)
                in the astrometric frame, vx0, vy0 [mas/yr] its drift, vz0 [km/s]
    [effects]   opt, defaults are general relativity without an extended mass:
                romer = true        light-travel (Romer) delay across the orbit
                redshift = 1.0      f, factor on the exact relativistic redshift (0 off)
                precession = 1.0    f_sp, factor on the 1PN terms of the orbit (0 off)
                plummer_mass = 0.0  [Msun] total mass of a Plummer sphere on the mass
                plummer_scale       [au] its scale radius b (> 0, needed with a mass)
    [stars.NAME]  a [mas] > 0, 0 <= e < 1, inc [deg] in [0, 180], node and
                peri_arg [deg] in [0, 360), t_peri [Julian yr] a pericentre epoch
    [[campaigns]]  one per campaign:
        dataset = "imager"      # name written in the CSV
        kind = "positions"      # or "velocities"
        start = 1998.3; end = 2023.7    # [Julian yr]
        cadence = 1.0           # [per yr] nominal epochs every 1/cadence yr ...
        scatter_days = 20.0     # opt [d] ... each moved at random by up to this
        error = [0.5, 0.8]      # [mas or km/s] one value, or a range drawn uniformly
        relative_to = "frame"   # opt, positions only: "frame" or "mass"
        corr = 0.0              # opt, positions only: ra-dec error correlation
        stars = ["br-01"]       # opt, default all stars
        coverage = 1.0          # opt, chance that a star is observed at an epoch
        max_separation = 60.0   # opt [mas] only stars this close to the mass
    [systematics.NAME]  opt, instrument systematics of data set NAME (all its campaigns):
        offset = [0.8, -0.5]    # opt [mas] (east, north) added to its frame positions
        zero_point = 12.0       # opt [km/s] added to its velocities
        error_factor = 1.5      # opt, true scatter / stated error (> 0; 1 = honest errors)

Model: frame positions ra = x0 + vx0 (t - t_ref) + east(t), dec = y0 + vy0
(t - t_ref) + north(t); positions relative to the mass are east(t), north(t);
RV = vz0 + v_z(t) (+ f times the exact redshift excess); Gaussian noise with the
stated errors (times the set's ``error_factor``), plus the set's offset or
zero-point, which are the data-set terms of the fit (deepwell.model.datasets)
with the same signs; periods from Kepler's third law with the shared mass and
distance.  With the Romer delay the orbit is taken at the emission epoch.  With
precession or a Plummer mass the orbit is integrated
(deepwell.model.kernels.post_newtonian) from the
star's elements taken as osculating Keplerian elements at its apocentre epoch
t_peri + P/2; truth.json then also gives each star's ``osculating_epoch``.  The
effects are evaluated with the relativity kernels directly, not through the
fitter's model.  Epochs are rounded to 1e-5 yr
before the model is evaluated, positions and their errors to 1e-4 mas,
velocities and their errors to 1e-3 km/s.
"""

import json
import math
import os
import re
import shutil
import tempfile
import tomllib
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from deepwell.core.constants import DEFAULT_REFERENCE_EPOCH, KMS_PER_AU_PER_YR
from deepwell.core.errors import OutputError, SettingsError
from deepwell.core.units import UNITS
from deepwell.model.kernels.orbit import keplerian_track, period_from_a
from deepwell.model.kernels.relativity import emission_epochs, pn_track, redshift_velocity

__all__ = ["Shared", "Star", "Campaign", "SimEffects", "Systematics", "ScenarioDescription",
           "SimulatedData", "load_description", "simulate", "truth_parameters", "write_scenario"]

POSITION_COLUMNS = ("star", "epoch", "ra", "dec", "ra_err", "dec_err", "dataset", "relative_to")
VELOCITY_COLUMNS = ("star", "epoch", "vr", "vr_err", "dataset")
OUTPUT_FILES = ("positions.csv", "velocities.csv", "truth.json", "description.toml")
ELEMENT_KEYS = ("a", "e", "inc", "node", "peri_arg", "t_peri")
#: Units of truth.json (astropy unit strings; epochs are Julian years in TT).
TRUTH_UNITS = {k: UNITS[k] for k in ("mass", "distance", "x0", "y0", "vx0", "vy0", "vz0",
                                     "reference_epoch", "a", "e", "inc", "node", "peri_arg",
                                     "t_peri", "period")} | {
    "pericentre": "AU", "offset": UNITS["dx"], "zero_point": UNITS["dvz"], "error_factor": ""}
_REQUIRED = object()
_MIN_ERROR = {"positions": 1e-3, "velocities": 1e-2}  # 10x the rounding step


@dataclass(frozen=True)
class Shared:
    """True shared parameters (Msun, pc, mas, mas/yr, km/s)."""

    mass: float
    distance: float
    x0: float = 0.0
    y0: float = 0.0
    vx0: float = 0.0
    vy0: float = 0.0
    vz0: float = 0.0


@dataclass(frozen=True)
class Star:
    """True Keplerian elements of one star (mas, deg, Julian yr)."""

    name: str
    a: float
    e: float
    inc: float
    node: float
    peri_arg: float
    t_peri: float


@dataclass(frozen=True)
class SimEffects:
    """True strengths of the relativistic effects and of a Plummer sphere."""

    romer: bool = True
    redshift: float = 1.0  # f
    precession: float = 1.0  # f_sp
    plummer_mass: float = 0.0  # Msun, total
    plummer_scale: float | None = None  # au

    @property
    def integrated(self):
        return self.precession != 0.0 or self.plummer_mass != 0.0


@dataclass(frozen=True)
class Systematics:
    """Instrument systematics of one data set.

    Attributes
    ----------
    offset : tuple of float
        (east, north) offset in mas added to the set's frame-relative positions.
    zero_point : float
        km/s added to the set's radial velocities.
    error_factor : float
        True scatter divided by the stated error (1 for honest errors).
    """

    offset: tuple = (0.0, 0.0)
    zero_point: float = 0.0
    error_factor: float = 1.0


NO_SYSTEMATICS = Systematics()


@dataclass(frozen=True)
class Campaign:
    """One observing campaign; see the module docstring for the meaning of each field."""

    dataset: str
    kind: str
    start: float
    end: float
    cadence: float
    error: tuple
    scatter_days: float = 20.0
    relative_to: str = "frame"
    corr: float = 0.0
    stars: tuple | None = None
    coverage: float = 1.0
    max_separation: float | None = None


@dataclass(frozen=True)
class ScenarioDescription:
    """A validated scenario description (see the module docstring)."""

    name: str
    story: str
    seed: int
    reference_epoch: float
    shared: Shared
    stars: tuple
    campaigns: tuple
    source: str = ""
    text: str = field(default="", repr=False, compare=False)
    effects: SimEffects = SimEffects()
    systematics: dict = field(default_factory=dict)  # data set -> Systematics

    def systematics_of(self, dataset):
        """The :class:`Systematics` of ``dataset`` (none stated: honest, no offset)."""
        return self.systematics.get(dataset, NO_SYSTEMATICS)


@dataclass(frozen=True)
class SimulatedData:
    """Simulated tables in the CSV layout and the truth record of ``truth.json``."""

    positions: pd.DataFrame
    velocities: pd.DataFrame
    truth: dict


class _Table:
    """Typed, range-checked reads from one TOML table; errors carry file, line and key."""

    def __init__(self, table, header, path, lines):
        if not isinstance(table, dict):
            where = str(header[-1]) if header else None
            raise SettingsError("must be a table", file=path, column=where)
        self.table, self.header, self.path, self.lines = table, header, path, lines
        self.used = set()

    def row(self, key):
        """Line (1-based) of ``key`` inside this table, else of its header, else None."""
        lines = self.lines
        heads = [i for i, line in enumerate(lines) if line.lstrip().startswith("[")]
        pattern = re.compile(r"^[\s\[]*[\"']?" + re.escape(key) + r"[\"']?\s*[=.\]]")
        if not self.header:
            stop = heads[0] if heads else len(lines)
            hits = [i for i in range(stop) if pattern.match(lines[i])]
            hits += [i for i in heads if pattern.match(lines[i])]
            return hits[0] + 1 if hits else None
        array = isinstance(self.header[-1], int)
        dotted = ".".join(str(h) for h in self.header if not isinstance(h, int))
        want, nth = (f"[[{dotted}]]", self.header[-1]) if array else (f"[{dotted}]", 0)
        found = [i for i in heads if re.sub(r"[\s\"']", "", lines[i].split("#")[0]) == want]
        if len(found) <= nth:
            return None
        start = found[nth] + 1
        stop = next((i for i in heads if i >= start), len(lines))
        hits = [i for i in range(start, stop) if pattern.match(lines[i])]
        return hits[0] + 1 if hits else start

    def fail(self, key, message):
        raise SettingsError(message, file=self.path, row=self.row(key), column=key)

    def get(self, key, default=_REQUIRED):
        self.used.add(key)
        if key not in self.table:
            if default is _REQUIRED:
                self.fail(key, "missing required key")
            return default
        return self.table[key]

    def number(self, key, default=_REQUIRED, lo=-math.inf, hi=math.inf, lo_open=False,
               hi_open=False, value=None):
        if value is None:
            if key not in self.table:
                return self.get(key, default)
            value = self.get(key)
        if isinstance(value, bool) or not isinstance(value, int | float) \
                or not math.isfinite(value):
            self.fail(key, f"must be a finite number, got {value!r}")
        if value < lo or value > hi or (lo_open and value == lo) or (hi_open and value == hi):
            left, right = "(" if lo_open else "[", ")" if hi_open else "]"
            self.fail(key, f"must be in {left}{lo:g}, {hi:g}{right}, got {value!r}")
        return float(value)

    def text(self, key, default=_REQUIRED, choices=None):
        value = self.get(key, default)
        if not isinstance(value, str) or not value.strip():
            self.fail(key, f"must be a non-empty string, got {value!r}")
        if choices is not None and value not in choices:
            self.fail(key, f"must be one of {', '.join(map(repr, choices))}, got {value!r}")
        return value

    def finish(self):
        for key in self.table:
            if key not in self.used:
                self.fail(key, "unknown key")


def _read_campaign(t, star_names):
    kind = t.text("kind", choices=("positions", "velocities"))
    start, end = t.number("start"), t.number("end")
    if end <= start:
        t.fail("end", f"must be later than start ({start:g}), got {end:g}")
    raw = t.get("error")
    pair = list(raw) if isinstance(raw, list) else [raw, raw]
    if len(pair) != 2:
        t.fail("error", "must be a number or a pair [low, high]")
    lo = t.number("error", lo=_MIN_ERROR[kind], value=pair[0])
    error = (lo, t.number("error", lo=_MIN_ERROR[kind], value=pair[1]))
    if error[1] < lo:
        t.fail("error", f"a range must be [low, high] with low <= high, got {raw!r}")
    for key in ("relative_to", "corr") if kind == "velocities" else ():
        if key in t.table:
            t.fail(key, "applies to positions only")
    stars = t.get("stars", None)
    if stars is not None:
        if not isinstance(stars, list) or not stars or not all(isinstance(s, str) for s in stars):
            t.fail("stars", "must be a non-empty list of star names")
        for name in stars:
            if name not in star_names:
                t.fail("stars", f"unknown star {name!r}")
        stars = tuple(stars)
    return Campaign(
        dataset=t.text("dataset"), kind=kind, start=start, end=end,
        cadence=t.number("cadence", lo=0.0, lo_open=True), error=error,
        scatter_days=t.number("scatter_days", 20.0, lo=0.0),
        relative_to=t.text("relative_to", "frame", choices=("frame", "mass")),
        corr=t.number("corr", 0.0, lo=-1.0, hi=1.0, lo_open=True, hi_open=True), stars=stars,
        coverage=t.number("coverage", 1.0, lo=0.0, hi=1.0, lo_open=True),
        max_separation=t.number("max_separation", None, lo=0.0, lo_open=True))


def load_description(path):
    """Read and validate a scenario description (layout: module docstring).

    Raises
    ------
    SettingsError
        For an unreadable file, bad TOML, a missing, unknown or out-of-range key
        (``column`` is the key, ``row`` its line when it can be found).
    """
    try:
        text = Path(path).read_text(encoding="utf-8")
        doc = tomllib.loads(text)
    except OSError as exc:
        raise SettingsError(f"cannot read the description: {exc.strerror}", file=path) from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        found = re.search(r"line (\d+)", str(exc))
        raise SettingsError(f"not valid TOML: {exc}", file=path,
                            row=int(found.group(1)) if found else None) from None
    lines = text.splitlines()
    top = _Table(doc, (), path, lines)
    name, story = top.text("name"), top.text("story")
    seed = top.get("seed")
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        top.fail("seed", f"must be an integer >= 0, got {seed!r}")
    ref = top.number("reference_epoch", DEFAULT_REFERENCE_EPOCH)
    t = _Table(top.get("truth"), ("truth",), path, lines)
    shared = Shared(mass=t.number("mass", lo=0.0, lo_open=True),
                    distance=t.number("distance", lo=0.0, lo_open=True),
                    **{k: t.number(k, 0.0) for k in ("x0", "y0", "vx0", "vy0", "vz0")})
    t.finish()
    effects = _read_effects(_Table(top.get("effects", {}), ("effects",), path, lines))
    star_tables = top.get("stars")
    if not isinstance(star_tables, dict) or not star_tables:
        top.fail("stars", "needs at least one [stars.NAME] table")
    stars = []
    for sname, table in star_tables.items():
        s = _Table(table, ("stars", sname), path, lines)
        stars.append(Star(
            name=sname, a=s.number("a", lo=0.0, lo_open=True),
            e=s.number("e", lo=0.0, hi=1.0, hi_open=True), inc=s.number("inc", lo=0.0, hi=180.0),
            node=s.number("node", lo=0.0, hi=360.0, hi_open=True),
            peri_arg=s.number("peri_arg", lo=0.0, hi=360.0, hi_open=True),
            t_peri=s.number("t_peri")))
        s.finish()
    raw = top.get("campaigns")
    if not isinstance(raw, list) or not raw:
        top.fail("campaigns", "needs at least one [[campaigns]] table")
    campaigns, kinds = [], {}
    for i, table in enumerate(raw):
        c = _Table(table, ("campaigns", i), path, lines)
        campaigns.append(_read_campaign(c, star_tables))
        c.finish()
        label = (campaigns[-1].kind, campaigns[-1].relative_to)
        if kinds.setdefault(campaigns[-1].dataset, label) != label:
            c.fail("dataset", "a data set name may be reused only with the same kind and frame")
    systematics = _read_systematics(top, campaigns, path, lines)
    top.finish()
    return ScenarioDescription(name, story, seed, ref, shared, tuple(stars), tuple(campaigns),
                               str(path), text, effects, systematics)


def _read_systematics(top, campaigns, path, lines):
    """The ``[systematics.NAME]`` tables, checked against the campaigns' data sets."""
    raw = top.get("systematics", {})
    if not isinstance(raw, dict):
        top.fail("systematics", "must be a table of [systematics.NAME] tables")
    out = {}
    for dname, table in raw.items():
        t = _Table(table, ("systematics", dname), path, lines)
        camps = [c for c in campaigns if c.dataset == dname]
        if not camps:
            known = ", ".join(sorted({c.dataset for c in campaigns}))
            t.fail("offset" if "offset" in t.table else next(iter(t.table), "offset"),
                   f"data set {dname!r} is observed by no campaign (data sets: {known})")
        kind = camps[0].kind
        offset = (0.0, 0.0)
        if "offset" in t.table:
            if kind != "positions" or all(c.relative_to != "frame" for c in camps):
                t.fail("offset", "applies to data sets with frame-relative positions only")
            pair = t.get("offset")
            if not isinstance(pair, list) or len(pair) != 2:
                t.fail("offset", "must be a pair [east, north] in mas")
            offset = tuple(t.number("offset", value=v) for v in pair)
        if "zero_point" in t.table and kind != "velocities":
            t.fail("zero_point", "applies to velocity data sets only")
        out[dname] = Systematics(offset=offset, zero_point=t.number("zero_point", 0.0),
                                 error_factor=t.number("error_factor", 1.0, lo=0.0,
                                                       lo_open=True, hi=100.0))
        t.finish()
    return out


def _read_effects(fx):
    romer = fx.get("romer", True)
    if not isinstance(romer, bool):
        fx.fail("romer", f"must be true or false, got {romer!r}")
    out = SimEffects(romer=romer, redshift=fx.number("redshift", 1.0, lo=-10.0, hi=10.0),
                     precession=fx.number("precession", 1.0, lo=-10.0, hi=10.0),
                     plummer_mass=fx.number("plummer_mass", 0.0, lo=0.0),
                     plummer_scale=fx.number("plummer_scale", None, lo=0.0, lo_open=True))
    if out.plummer_mass > 0.0 and out.plummer_scale is None:
        fx.fail("plummer_mass", "a Plummer mass needs plummer_scale (au)")
    fx.finish()
    return out


def truth_parameters(description):
    """Flat dict of the true parameters (Msun, pc, mas, mas/yr, km/s; angles in deg)."""
    out = asdict(description.shared)
    out["stars"] = {s.name: {k: getattr(s, k) for k in ELEMENT_KEYS} for s in description.stars}
    return out


def _truth_record(description):
    """Contents of ``truth.json``: true parameters, units, periods and pericentres."""
    shared = description.shared
    stars = {}
    for name, el in truth_parameters(description)["stars"].items():
        period = float(period_from_a(el["a"], shared.mass, shared.distance))
        pericentre = el["a"] * (1.0 - el["e"]) * 1e-3 * shared.distance  # a[au] = a["] R0[pc]
        stars[name] = {**el, "period": period, "pericentre": pericentre}
        if description.effects.integrated:
            stars[name]["osculating_epoch"] = el["t_peri"] + 0.5 * period
    return {"scenario": description.name, "story": description.story, "seed": description.seed,
            "reference_epoch": description.reference_epoch, "units": TRUTH_UNITS,
            "shared": asdict(shared), "stars": stars, "effects": asdict(description.effects),
            "systematics": {d: {"offset": list(x.offset), "zero_point": x.zero_point,
                                "error_factor": x.error_factor}
                            for d, x in sorted(description.systematics.items())}}


def _observe(description, camp, rng):
    """One campaign's rows: epochs, star selection, noiseless model, noise."""
    stars = [s for s in description.stars if camp.stars is None or s.name in camp.stars]
    n = max(1, math.floor((camp.end - camp.start) * camp.cadence + 1e-9))
    nominal = camp.start + (np.arange(n) + 0.5) / camp.cadence
    jitter = rng.uniform(-1.0, 1.0, n) * camp.scatter_days / 365.25
    # unique after rounding: at high cadence, jittered epochs can coincide (or pile up at
    # the campaign's ends), and one star cannot be observed twice at one epoch by one set
    epochs = np.unique(np.round(np.clip(nominal + jitter, camp.start, camp.end), 5))
    n = epochs.size
    t, idx = np.repeat(epochs, len(stars)), np.tile(np.arange(len(stars)), n)
    keep = rng.uniform(size=t.size) < camp.coverage
    el = {k: np.array([getattr(s, k) for s in stars])[idx] for k in ELEMENT_KEYS}
    sh = description.shared
    angles = np.radians([el["inc"], el["node"], el["peri_arg"]])
    period = period_from_a(el["a"], sh.mass, sh.distance)
    track = _true_track(t, el, angles, period, sh, description.effects)
    if camp.max_separation is not None:
        keep &= np.hypot(track.east, track.north) <= camp.max_separation
    size, names = int(keep.sum()), np.array([s.name for s in stars])[idx][keep]
    t = t[keep]
    sys = description.systematics_of(camp.dataset)
    if camp.kind == "velocities":
        err = np.round(rng.uniform(*camp.error, size), 3)
        fx = description.effects
        v_sq = track.v_east**2 + track.v_north**2 + track.v_z**2
        r_au = np.sqrt(track.east**2 + track.north**2 + track.z**2) * 1e-3 * sh.distance
        vr = redshift_velocity(track.v_z, v_sq, r_au, sh.mass, f=fx.redshift, vz0=sh.vz0)
        vr = vr[keep] + sys.zero_point + err * (sys.error_factor * rng.standard_normal(size))
        return pd.DataFrame({"star": names, "epoch": t, "vr": np.round(vr, 3), "vr_err": err,
                             "dataset": camp.dataset})
    ra_err, dec_err = (np.round(rng.uniform(*camp.error, size), 4) for _ in range(2))
    z1, z2 = rng.standard_normal(size), rng.standard_normal(size)
    z1, z2 = sys.error_factor * z1, sys.error_factor * z2
    ra = track.east[keep] + ra_err * z1
    dec = track.north[keep] + dec_err * (camp.corr * z1 + math.sqrt(1.0 - camp.corr**2) * z2)
    if camp.relative_to == "frame":
        dt = t - description.reference_epoch
        ra, dec = ra + sh.x0 + sh.vx0 * dt, dec + sh.y0 + sh.vy0 * dt
        ra, dec = ra + sys.offset[0], dec + sys.offset[1]
    return pd.DataFrame({"star": names, "epoch": t, "ra": np.round(ra, 4), "dec": np.round(dec, 4),
                         "ra_err": ra_err, "dec_err": dec_err, "dataset": camp.dataset,
                         "relative_to": camp.relative_to, "corr": camp.corr})


@dataclass(frozen=True)
class _Track:
    """Sky offsets (mas), z (mas) and velocities in km/s of simulated rows."""

    east: np.ndarray
    north: np.ndarray
    z: np.ndarray
    v_east: np.ndarray
    v_north: np.ndarray
    v_z: np.ndarray


def _true_track(t, el, angles, period, sh, fx):
    """True track at observed epochs ``t`` with the description's effects.

    Evaluated straight from the kernels (deepwell.model.kernels.orbit and
    deepwell.model.kernels.relativity),
    not through the fitter's model, so that a slip in that wiring cannot hide.
    """
    kms = sh.distance * 1e-3 * KMS_PER_AU_PER_YR  # mas/yr -> km/s
    if fx.integrated:
        a_au = el["a"] * 1e-3 * sh.distance
        tr = pn_track(t[:, None], a_au, el["e"], *angles, el["t_peri"], sh.mass,
                      el["t_peri"] + 0.5 * period, f_sp=fx.precession, m_ext=fx.plummer_mass,
                      b_ext=fx.plummer_scale, light_time=fx.romer, steps_per_orbit=96)
        to_mas = 1e3 / sh.distance
        return _Track(*(x[:, 0] * to_mas for x in (tr.east, tr.north, tr.z)),
                      *(x[:, 0] for x in (tr.v_east, tr.v_north, tr.v_z)))
    args = (el["a"], el["e"], *angles, el["t_peri"], period, sh.distance)
    t_em = t
    if fx.romer:
        t_em = emission_epochs(t, lambda tt: keplerian_track(tt, *args).z * 1e-3 * sh.distance)
    tr = keplerian_track(t_em, *args)
    return _Track(tr.east, tr.north, tr.z, tr.v_east * kms, tr.v_north * kms, tr.v_z)


def simulate(description, rng=None):
    """Simulate every campaign; ``rng`` defaults to ``default_rng(description.seed)``.

    Returns
    -------
    SimulatedData
        Tables with ``POSITION_COLUMNS`` (plus ``corr`` when any correlation is
        non-zero) and ``VELOCITY_COLUMNS``; ``truth`` as written to ``truth.json``.
    """
    rng = np.random.default_rng(description.seed) if rng is None else rng
    parts = {"positions": [], "velocities": []}
    for camp in description.campaigns:
        parts[camp.kind].append(_observe(description, camp, rng))
    tables = {}
    for kind, columns in (("positions", POSITION_COLUMNS + ("corr",)),
                          ("velocities", VELOCITY_COLUMNS)):
        frames = [f for f in parts[kind] if len(f)]
        table = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(
            {c: pd.Series(dtype=object if c in ("star", "dataset", "relative_to") else float)
             for c in columns})
        if kind == "positions" and not (table["corr"] != 0.0).any():
            table = table.drop(columns="corr")
        tables[kind] = table
    return SimulatedData(tables["positions"], tables["velocities"], _truth_record(description))


def write_scenario(description_path, out_dir, replace=False):
    """Simulate a scenario and write ``OUTPUT_FILES`` into ``out_dir``; return its path.

    Files are written to a temporary folder beside ``out_dir`` and moved into
    place when complete.  A non-empty ``out_dir`` raises OutputError unless
    ``replace`` is true; even then only ``OUTPUT_FILES`` are replaced.
    """
    description = load_description(description_path)
    data = simulate(description)
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: exists and is not a folder")
    present = sorted(p.name for p in out.iterdir()) if out.is_dir() else []
    if present and not replace:
        raise OutputError(f"{out}: folder is not empty (holds {', '.join(present[:3])}"
                          f"{', ...' if len(present) > 3 else ''}); choose a new or empty folder, "
                          f"or replace to overwrite only {', '.join(OUTPUT_FILES)}")
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".partial", dir=out.parent))
    try:
        data.positions.to_csv(tmp / "positions.csv", index=False)
        data.velocities.to_csv(tmp / "velocities.csv", index=False)
        (tmp / "truth.json").write_text(json.dumps(data.truth, indent=2) + "\n", encoding="utf-8")
        (tmp / "description.toml").write_text(description.text, encoding="utf-8")
        if present:
            for name in OUTPUT_FILES:
                os.replace(tmp / name, out / name)
            tmp.rmdir()
        else:
            if out.is_dir():
                out.rmdir()
            os.replace(tmp, out)
    except OSError as exc:
        raise OutputError(f"{out}: cannot write scenario: {exc}") from None
    finally:
        if tmp.exists():
            shutil.rmtree(tmp)
    return out
