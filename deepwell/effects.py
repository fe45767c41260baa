"""Switchable relativistic pieces of the joint model and their settings.

Each effect is one switch in the ``[effects]`` table of the settings file
(:mod:`deepwell.settings`); the defaults are the physics a modern data set needs::

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

The strengths are optional shared parameters (:data:`deepwell.parameters.EXTRA`):
``f`` and ``f_sp`` are held at 1 unless ``[shared.f] fixed = false`` (or
``fixed = false`` under ``[shared.f_sp]``) frees them; ``ext_fraction`` is
fitted whenever the extended mass is on.

Model (``shared/physics.md`` sections 4-7):

* Romer: the orbit is evaluated at the emission epoch t_em solving
  t_em + z(t_em)/c = t_obs (two Newton steps for Keplerian stars, solved
  inside the integrator for integrated stars).  The frame drift uses t_obs.
* Redshift: RV = vz0 + v_z + f * excess (exact or first order), from
  :func:`deepwell.relativity.redshift_velocity`.
* Precession / extended mass: the star's elements are *osculating* Keplerian
  elements at the star's own apocentre epoch t_peri + P/2 (P from Kepler's law
  with the point mass); the track is integrated from there with
  :func:`deepwell.pn.pn_track`.  ``t_peri`` and the period are then those of
  the osculating ellipse, not the observed pericentre passage and the
  integrated period (see :mod:`deepwell.effect_summary`).
"""

import dataclasses
from dataclasses import dataclass

import numpy as np

from .constants import C_AU_PER_YR, KMS_PER_AU_PER_YR
from .errors import SettingsError
from .orbit import OrbitTrack, kepler_xy, thiele_innes
from .parameters import EXTRA
from .relativity import effect_sizes

__all__ = ["Effects", "REDSHIFT_FORMS", "parse_effects", "effects_from_args",
           "keplerian_emission_track", "choose_integrated", "reference_radius_from"]

REDSHIFT_FORMS = ("exact", "first-order", "off")
#: A star is integrated when its sky precession per orbit exceeds this many
#: times its smallest position error (``precession_stars = "auto"``).
INTEGRATE_THRESHOLD = 0.1


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

    def describe(self):
        """One line naming the modelled effects."""
        parts = []
        if self.romer:
            parts.append("Romer delay")
        if self.redshift != "off":
            parts.append(f"redshift ({self.redshift})")
        if self.precession:
            parts.append("1PN precession")
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
    settings : deepwell.settings.Settings
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
    deepwell.settings.Settings
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


# ------------------------------------------------------------------ model pieces
def keplerian_emission_track(t, a, ecc, inc, node, peri_arg, t_peri, period, distance,
                             romer=True, n_newton=2):
    """Keplerian track at the emission epochs of light observed at ``t``.

    Parameters are those of :func:`deepwell.orbit.keplerian_track` (``a`` in
    mas, angles in radians, epochs in Julian yr, ``distance`` in pc).

    Returns
    -------
    track : OrbitTrack
        At the emission epochs (mas, mas/yr, km/s).
    t_emit : ndarray
        Emission epochs (Julian yr).

    Notes
    -----
    Newton's method on g(t_em) = t_em + z(t_em)/c - t_obs from t_em = t_obs:
    t_em <- t_em - g / (1 + v_z/c).  The first step leaves at most a few
    hundred seconds near a tight pericentre, the second well below 1 s
    (physics.md sect. 4).
    """
    A, B, F, G, C, H = thiele_innes(a, inc, node, peri_arg)
    t = np.asarray(t, dtype=float)
    t_em = t
    if romer:
        to_au = np.asarray(distance) * 1e-3 / C_AU_PER_YR  # mas -> light-years of au
        for _ in range(n_newton):
            X, Y, dX, dY = kepler_xy(t_em, period, ecc, t_peri)
            z = (C * X + H * Y) * to_au
            vz = (C * dX + H * dY) * to_au
            t_em = t_em - (t_em + z - t) / (1.0 + vz)
    X, Y, dX, dY = kepler_xy(t_em, period, ecc, t_peri)
    to_kms = np.asarray(distance) * 1e-3 * KMS_PER_AU_PER_YR
    track = OrbitTrack(east=B * X + G * Y, north=A * X + F * Y, z=C * X + H * Y,
                       v_east=B * dX + G * dY, v_north=A * dX + F * dY,
                       v_z=(C * dX + H * dY) * to_kms)
    return track, np.broadcast_to(t_em, track.east.shape)


def star_sky_precession_mas(el, mass, distance):
    """Sky shift per orbit of each star's Schwarzschild precession, mas.

    ``el`` is the dict of :meth:`deepwell.parameters.Layout.elements` for one
    vector; ``mass`` (Msun) and ``distance`` (pc) are scalars.
    """
    a_au = el["a"] * 1e-3 * distance
    return effect_sizes(a_au, el["e"], mass, distance, el["inc"], el["peri_arg"]).precession_mas


def choose_integrated(effects, el, mass, distance, min_pos_err):
    """Which stars get the orbit integrator (boolean per star).

    With ``precession_stars = "auto"`` and no extended mass, a star is
    integrated when its sky precession per orbit exceeds
    :data:`INTEGRATE_THRESHOLD` times its smallest position error; the others
    stay Keplerian (their precession is below a tenth of their best error).
    """
    n = len(min_pos_err)
    if not effects.integrates:
        return np.zeros(n, bool)
    if effects.extended_mass or effects.precession_stars == "all":
        return np.ones(n, bool)
    sky = star_sky_precession_mas(el, mass, distance)
    return np.asarray(sky > INTEGRATE_THRESHOLD * np.asarray(min_pos_err), bool)


def reference_radius_from(el, distance):
    """Apocentre (au) of the star with the smallest apocentre, to 2 significant digits."""
    apo = el["a"] * 1e-3 * distance * (1.0 + el["e"])
    r = float(np.min(apo))
    return float(f"{r:.2g}")
