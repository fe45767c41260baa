"""The ``[effects]`` table of a settings file: which relativistic pieces a fit uses.

Each effect is one switch in the ``[effects]`` table of the settings file::

    [effects]
    romer = true              # light-travel (Romer) delay across the orbit
    redshift = "exact"        # "exact", "first-order" or "off"; strength f (shared.f)
    precession = true         # 1PN orbits (Schwarzschild precession); strength f_sp
    precession_stars = "auto" # "auto": integrate only stars where it matters; "all"
    extended_mass = false     # Plummer sphere centred on the mass (ext_fraction)
    extended_scale = 1000.0   # au, Plummer scale radius b (required when on)
    reference_radius = 2000.0 # au, radius inside which the extended mass is quoted
                              # (default: apocentre of the tightest star, 2 digits)
    steps_per_orbit = 48      # integrator steps per orbit (accuracy ~0.01 uas)

The strengths are optional shared parameters (:data:`deepwell.core.parameters.EXTRA`):
``f`` and ``f_sp`` are held at 1 unless ``[shared.f] fixed = false`` (or
``fixed = false`` under ``[shared.f_sp]``) frees them; ``ext_fraction`` is
fitted whenever the extended mass is on.  How the model uses the switches is
described in :mod:`deepwell.model.effects`.
"""

import dataclasses
from dataclasses import dataclass

import numpy as np

from deepwell.core.errors import SettingsError
from deepwell.core.parameters import EXTRA

__all__ = ["Effects", "REDSHIFT_FORMS", "parse_effects", "effects_from_args"]


REDSHIFT_FORMS = ("exact", "first-order", "off")


@dataclass(frozen=True)
class Effects:
    """The effect switches of one fit (see the module docstring)."""

    romer: bool = True
    redshift: str = "exact"
    precession: bool = True
    precession_stars: str = "auto"
    extended_mass: bool = False
    extended_scale: float | None = None  # au
    reference_radius: float | None = None  # au
    steps_per_orbit: int = 48

    @classmethod
    def newtonian(cls):
        """All effects off: the plain Keplerian model."""
        return cls(romer=False, redshift="off", precession=False)

    @property
    def extra_names(self):
        """Optional shared parameters these switches add, in vector order."""
        names = []
        if self.redshift != "off":
            names.append("f")
        if self.precession:
            names.append("f_sp")
        if self.extended_mass:
            names.append("ext_fraction")
        return tuple(names)

    @property
    def any_on(self):
        return self.romer or self.redshift != "off" or self.precession or self.extended_mass

    @property
    def integrates(self):
        """Whether some stars may need the orbit integrator."""
        return self.precession or self.extended_mass

    def relativistic(self):
        """Names of the relativistic pieces switched on, in the order Rømer, redshift, 1PN.

        Returns
        -------
        tuple of str
            Some of "Rømer delay", "redshift (exact)" / "redshift (first-order)",
            "1PN precession".
        """
        parts = []
        if self.romer:
            parts.append("Rømer delay")
        if self.redshift != "off":
            parts.append(f"redshift ({self.redshift})")
        if self.precession:
            parts.append("1PN precession")
        return tuple(parts)

    def describe(self):
        """One line naming the modelled effects."""
        parts = list(self.relativistic())
        if self.extended_mass:
            parts.append(f"Plummer extended mass (b = {self.extended_scale:g} au)")
        return ", ".join(parts) if parts else "none (Newtonian, Keplerian orbits)"


_KEYS = {f.name for f in dataclasses.fields(Effects)}


def parse_effects(table, file=None):
    """Validate an ``[effects]`` mapping into :class:`Effects` (defaults fill the rest).

    Raises
    ------
    SettingsError
        For an unknown key or a value of the wrong type or range.
    """
    if table is None:
        return Effects()
    if not isinstance(table, dict):
        raise SettingsError("expected a table", file=file, column="effects")
    unknown = set(table) - _KEYS
    if unknown:
        raise SettingsError(f"unknown key (known: {', '.join(sorted(_KEYS))})", file=file,
                            column=f"effects.{sorted(unknown)[0]}")
    kw = {}

    def fail(key, msg):
        raise SettingsError(msg, file=file, column=f"effects.{key}")

    for key in ("romer", "precession", "extended_mass"):
        if key in table:
            if not isinstance(table[key], bool):
                fail(key, "must be true or false")
            kw[key] = table[key]
    if "redshift" in table:
        value = table["redshift"]
        if value is False:
            value = "off"
        if value not in REDSHIFT_FORMS:
            fail("redshift", f"must be one of {', '.join(REDSHIFT_FORMS)}, got {value!r}")
        kw["redshift"] = value
    if "precession_stars" in table:
        if table["precession_stars"] not in ("auto", "all"):
            fail("precession_stars", "must be \"auto\" or \"all\"")
        kw["precession_stars"] = table["precession_stars"]
    for key in ("extended_scale", "reference_radius"):
        if key in table:
            v = table[key]
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not v > 0 \
                    or not np.isfinite(v):
                fail(key, f"must be a positive number of au, got {v!r}")
            kw[key] = float(v)
    if "steps_per_orbit" in table:
        v = table["steps_per_orbit"]
        if isinstance(v, bool) or not isinstance(v, int) or not 16 <= v <= 1024:
            fail("steps_per_orbit", "must be an integer in [16, 1024]")
        kw["steps_per_orbit"] = v
    fx = Effects(**kw)
    if fx.extended_mass and fx.extended_scale is None:
        fail("extended_scale", "extended_mass = true needs extended_scale (au)")
    return fx


def effects_from_args(settings, romer=None, redshift=None, precession=None,
                      extended_mass=None, extended_scale=None, reference_radius=None,
                      fit_f=None, fit_f_sp=None, newtonian=False):
    """Settings with effect switches overridden (for the command line).

    Parameters
    ----------
    settings : deepwell.tables.settings.Settings
    romer, precession, extended_mass : bool or None
        Switch an effect on or off; None keeps the settings file's choice.
    redshift : {"exact", "first-order", "off"} or None
    extended_scale, reference_radius : float or None
        Plummer scale radius and reference radius, au.
    fit_f, fit_f_sp : bool or None
        Fit (True) or hold at its settings value, default 1 (False) the
        redshift factor f / the precession factor f_sp.
    newtonian : bool
        Switch every effect off first (the others then switch single ones on).

    Returns
    -------
    deepwell.tables.settings.Settings
        A new, validated settings object.
    """
    table = {} if newtonian else dict(settings.effects)
    if newtonian:
        table.update(romer=False, redshift="off", precession=False, extended_mass=False)
    for key, value in (("romer", romer), ("redshift", redshift), ("precession", precession),
                       ("extended_mass", extended_mass), ("extended_scale", extended_scale),
                       ("reference_radius", reference_radius)):
        if value is not None:
            table[key] = value
    parse_effects(table, file="command line")
    shared = dict(settings.shared)
    for name, fit in (("f", fit_f), ("f_sp", fit_f_sp)):
        if fit is not None:
            old = settings.shared_setting(name)
            shared[name] = dataclasses.replace(old, fixed=not fit,
                                               value=EXTRA[name].default
                                               if old.value is None else old.value)
    return dataclasses.replace(settings, effects=table, shared=shared)
