"""A ladder of nested models fitted to the same data, each started from the previous one.

:func:`fit_ladder` fits, in this order (:func:`ladder_rungs`):

1. ``newtonian``: Keplerian orbits, no relativistic piece;
2. ``romer``: + the Romer (light-travel) delay;
3. ``redshift``: + the relativistic redshift, f held at 1;
4. ``precession``: + 1PN (Schwarzschild) precession, f_sp held at 1;
5. ``extended-<b>``: + a Plummer sphere of scale radius b (au), its mass
   ``ext_fraction`` free, one rung per requested radius, each on top of 4;
6. ``no-romer`` and ``no-redshift``: model 4 without the Romer delay, respectively
   without the redshift -- the simpler model of a "given everything else" test of
   that effect (model 4 against model 3 is the same test for the precession);
7. ``f-free`` and ``f_sp-free``: model 4 with f, respectively f_sp, fitted,
   compared with the model without that effect (``no-redshift``, ``redshift``):
   one added free parameter, so Wilks' chi-square(1) applies asymptotically.

Only one fit searches for starting orbits: a full :func:`deepwell.fit.fit_joint`
with the settings' own model (by default general relativity), or a given
finished fit; the Newtonian rung starts from its solution (its time includes
it), and every other rung from the solution of the model it is compared with
(its ``parent``), new strengths at the values that
reproduce the parent where the strength is free (0), so a nested rung can only
lower the chi-square.  The other settings (priors, data-set terms, bounds,
redshift form, integrated stars rule) are those of the given settings.

:func:`refit_simulated` is the bootstrap's refit: new measured values at the
same rows, both models of one comparison refitted from their solutions.
"""

import dataclasses
import time
from dataclasses import dataclass

import numpy as np

from deepwell.core.parameters import SHARED
from deepwell.tables.effects import effects_from_args

from .joint import _unconstrained_shared, build_model, fit_joint
from .least_squares import bounds, minimise
from .result import assemble_result

__all__ = ["Rung", "LadderFit", "ladder_rungs", "fit_ladder", "refit_rung",
           "simulate_measurements", "refit_simulated"]

#: Value of a freed strength at which a model reduces to its parent (no effect).
NULL_STRENGTH = {"f": 0.0, "f_sp": 0.0, "ext_fraction": 0.0}


@dataclass(frozen=True)
class Rung:
    """One model of the ladder.

    Attributes
    ----------
    key : str
        Short name (``newtonian``, ``romer``, ``redshift``, ``precession``,
        ``extended-<b>``, ``f-free``, ``f_sp-free``).
    label : str
        What the model adds, for tables.
    effects : dict
        Its ``[effects]`` table (on top of the settings' other effect keys).
    free : tuple of str
        Effect strengths fitted (``f``, ``f_sp``; ``ext_fraction`` always is
        when the extended mass is on).
    parent : str or None
        Key of the model it starts from and is compared with (the simpler one,
        unless ``drops``).
    tests : str or None
        What the comparison with the parent tests, in words.
    drops : bool
        The rung drops an effect of its parent: it is the simpler model of
        its comparison.
    """

    key: str
    label: str
    effects: dict
    free: tuple = ()
    parent: str | None = None
    tests: str | None = None
    drops: bool = False

    @property
    def pair(self):
        """(simpler, richer) model keys of the rung's comparison, or None."""
        if self.parent is None:
            return None
        return (self.key, self.parent) if self.drops else (self.parent, self.key)

    @property
    def scale_radius(self):
        """Plummer scale radius b (au) of an extended-mass rung, else None."""
        return self.effects.get("extended_scale") if self.effects.get("extended_mass") else None


@dataclass(frozen=True)
class LadderFit:
    """A fitted rung: the model, its :class:`~deepwell.fit.FitResult`, wall time (s)."""

    rung: Rung
    result: object
    seconds: float


def ladder_rungs(scale_radii=(), redshift_form="exact"):
    """The rungs of the ladder (module docstring), in fitting order.

    Parameters
    ----------
    scale_radii : sequence of float
        Plummer scale radii b (au), one extended-mass rung each.
    redshift_form : {"exact", "first-order"}
        Form of the redshift term when it is on.
    """
    off = dict(romer=False, redshift="off", precession=False, extended_mass=False)
    gr = dict(off, romer=True, redshift=redshift_form, precession=True)
    rungs = [
        Rung("newtonian", "Newtonian (Keplerian orbits)", off),
        Rung("romer", "+ Romer delay", dict(off, romer=True), parent="newtonian",
             tests="Romer delay"),
        Rung("redshift", "+ redshift (f = 1)", dict(off, romer=True, redshift=redshift_form),
             parent="romer", tests="relativistic redshift"),
        Rung("precession", "+ 1PN precession (f_sp = 1)", gr, parent="redshift",
             tests="Schwarzschild precession, given Romer delay and redshift"),
    ]
    for b in scale_radii:
        rungs.append(Rung(f"extended-{float(b):g}", f"+ Plummer mass, b = {float(b):g} au",
                          dict(gr, extended_mass=True, extended_scale=float(b)),
                          parent="precession", tests=f"extended mass (b = {float(b):g} au)"))
    rungs.append(Rung("no-romer", "all but the Romer delay", dict(gr, romer=False),
                      parent="precession", drops=True,
                      tests="Romer delay, given redshift and precession"))
    rungs.append(Rung("no-redshift", "all but the redshift", dict(gr, redshift="off"),
                      parent="precession", drops=True,
                      tests="relativistic redshift, given Romer delay and precession"))
    rungs.append(Rung("f-free", "f fitted", gr, free=("f",), parent="no-redshift",
                      tests="redshift strength f against 0, given Romer delay and precession"))
    rungs.append(Rung("f_sp-free", "f_sp fitted", gr, free=("f_sp",), parent="redshift",
                      tests="precession strength f_sp against 0, given Romer delay and "
                            "redshift"))
    return tuple(rungs)


def _rung_settings(settings, rung, reference_radius=None):
    """The settings of one rung: its effects over the settings' other effect keys."""
    table = dict(settings.effects)
    table.update(rung.effects)
    if reference_radius is not None and rung.effects.get("extended_mass"):
        table.setdefault("reference_radius", reference_radius)
    s = dataclasses.replace(settings, effects=table)
    return effects_from_args(s, fit_f="f" in rung.free, fit_f_sp="f_sp" in rung.free)


def _keplerian_part(layout, vec):
    """The seven shared parameters and the star blocks of an internal vector."""
    vec = np.asarray(vec, float)
    return np.concatenate([vec[:len(SHARED)], vec[layout.n_shared:]])


def _start_vector(model, vec0, free, parent):
    """``vec0`` with the parent's values of the strengths both models have (or the null)."""
    vec0 = vec0.copy()
    old = parent.model.layout
    for name in model.layout.extra:
        i = model.layout.index(name)
        if not free[i]:
            continue
        if name in old.extra:
            vec0[i] = parent.internal[old.index(name)]
        elif name in NULL_STRENGTH:
            vec0[i] = NULL_STRENGTH[name]
    return vec0


def refit_rung(observations, settings, rung, parent, reference_radius=None):
    """Fit one rung starting from the finished fit ``parent``.

    Parameters
    ----------
    observations : deepwell.tables.Observations
    settings : deepwell.tables.settings.Settings
        The user's settings (the rung sets the effects and freed strengths).
    rung : Rung
    parent : deepwell.fit.FitResult
        The fit whose solution is the start.
    reference_radius : float, optional
        Radius (au) inside which the extended mass is quoted (kept the same for
        every extended-mass rung).

    Returns
    -------
    deepwell.fit.FitResult
    """
    s = _rung_settings(settings, rung, reference_radius)
    model = build_model(observations, s)
    model, vec0 = model.start_from(_keplerian_part(parent.model.layout, parent.internal), s)
    lo, hi, free = bounds(model, s)
    unused = _unconstrained_shared(model)
    for name in unused:
        free[model.layout.index(name)] = False
    vec0 = np.clip(_start_vector(model, vec0, free, parent), lo, hi)
    vec, sol = minimise(model, vec0, free, lo, hi)
    notes = model.effect_notes()
    if not sol.success:
        notes.append(f"the optimiser stopped without convergence: {sol.message}")
    return assemble_result(model, vec, free, s, observations, notes,
                           converged=bool(sol.success), nfev=int(sol.nfev))


def fit_ladder(observations, settings, scale_radii=(), base=None, progress=None):
    """Fit every rung of the ladder on the same data (module docstring).

    Parameters
    ----------
    observations : deepwell.tables.Observations
    settings : deepwell.tables.settings.Settings
    scale_radii : sequence of float
        Plummer scale radii b (au), one extended-mass rung each.
    base : deepwell.fit.FitResult, optional
        A finished fit of these data to start from (default: a full
        :func:`~deepwell.fit.fit_joint` with ``settings``).
    progress : callable, optional
        Called with a short text before each fit.

    Returns
    -------
    list of LadderFit
        In the order of :func:`ladder_rungs`.
    """
    say = progress or (lambda text: None)
    form = settings.effect_switches().redshift
    rungs = ladder_rungs(scale_radii, "exact" if form == "off" else form)
    done = {}
    out = []
    ref = settings.effect_switches().reference_radius
    t0 = time.monotonic()
    if base is None:
        say("the shared start: one full fit with the settings' own model")
        base = fit_joint(observations, settings)
    for rung in rungs:
        say(f"model {len(out) + 1} of {len(rungs)}: {rung.label}")
        parent = done[rung.parent] if rung.parent is not None else base
        res = refit_rung(observations, settings, rung, parent, ref)
        if rung.scale_radius is not None and ref is None:
            ref = res.model.reference_radius
        done[rung.key] = res
        out.append(LadderFit(rung, res, time.monotonic() - t0))
        t0 = time.monotonic()
    return out


# ------------------------------------------------------------------ bootstrap refits
def simulate_measurements(result, rng, error_scale=1.0):
    """Measured values drawn from a fit's model at its own rows, with its row errors.

    Parameters
    ----------
    result : deepwell.fit.FitResult
        Its best-fit prediction is the mean.
    rng : numpy.random.Generator
    error_scale : float
        Factor on every stated error (e.g. the square root of the reduced
        chi-square, to simulate with the errors the residuals suggest).

    Returns
    -------
    ra, dec : ndarray (mas)
    vr : ndarray or None (km/s)

    Notes
    -----
    Positions get correlated Gaussian noise: d_ra = s_ra z1,
    d_dec = s_dec (rho z1 + sqrt(1 - rho^2) z2), with z1, z2 ~ N(0, 1); the
    velocities d_vr = s_vr z3.  Data-set error models are not simulated (the
    stated errors are used).
    """
    model = result.model
    pred = model.predict(result.internal)
    pos = model.pos
    z1, z2 = rng.standard_normal(pos.n), rng.standard_normal(pos.n)
    ra = pred.ra + error_scale * pos.ra_err * z1
    dec = pred.dec + error_scale * pos.dec_err * (pos.corr * z1
                                                  + np.sqrt(1.0 - pos.corr**2) * z2)
    vr = None
    if model.vel is not None:
        vr = pred.vr + error_scale * model.vel.vr_err * rng.standard_normal(model.vel.n)
    return ra, dec, vr


def _refit(result, data, vec0):
    model = result.model.with_measurements(*data)
    lo, hi, _ = bounds(model, result.settings)
    vec, sol = minimise(model, np.clip(vec0, lo, hi), result.free, lo, hi)
    return float(model.chi2(vec)), vec, bool(sol.success)


def refit_simulated(null, alt, data):
    """Refit the simpler and the richer model of one comparison to simulated data.

    Parameters
    ----------
    null, alt : deepwell.fit.FitResult
        The simpler model (whose best fit made ``data``) and the richer one,
        both fitted to the observed data.
    data : tuple
        ``(ra, dec, vr)`` from :func:`simulate_measurements` of ``null``.

    Returns
    -------
    dict
        ``chi2_null``, ``chi2_alt``, ``delta`` (= chi2_null - chi2_alt) and
        ``converged`` (both optimisers).

    Notes
    -----
    The null model starts at its own best fit (the truth of the simulation);
    the richer one starts from the null's new solution, with the strengths it
    adds at the values that reproduce the null where they are free, so a
    nested richer model never ends above the null.
    """
    c_null, v_null, ok_null = _refit(null, data, null.internal)
    lay, old = alt.model.layout, null.model.layout
    start = alt.internal.copy()
    start[:len(SHARED)] = v_null[:len(SHARED)]
    start[lay.n_shared:] = v_null[old.n_shared:]
    for name in lay.extra:
        i = lay.index(name)
        if name in old.extra:
            start[i] = v_null[old.index(name)] if alt.free[i] else start[i]
        elif alt.free[i] and name in NULL_STRENGTH:
            start[i] = NULL_STRENGTH[name]
    c_alt, _, ok_alt = _refit(alt, data, start)
    return {"chi2_null": c_null, "chi2_alt": c_alt, "delta": c_null - c_alt,
            "converged": ok_null and ok_alt}
