"""What a calibration scores against the injected truth, and how a fitted value meets it.

Three groups of fitted parameters are scored (:func:`scored_names`):

``shared``
    mass, distance, x0, y0, vx0, vy0, vz0 when free, and f, f_sp when the fit
    frees them.
``data set``
    the data-set terms of :mod:`deepwell.model.datasets` that the fit frees
    and whose truth the scenario's ``[systematics.NAME]`` tables fix: offsets
    ``D:dx``, ``D:dy`` (and drifts ``D:dvx``, ``D:dvy``, true value 0),
    zero-points ``D:dvz`` and error scales ``D:pos_scale``, ``D:vel_scale``.
    A jitter (``D:pos_jitter``, ``D:vel_jitter``) and ``outlier_frac`` have no
    true value in a simulation whose errors are wrong by a *factor* and which
    has no outliers, so they are not scored.
``star``
    the six Keplerian elements ``STAR:a``, ``e``, ``inc``, ``node``,
    ``peri_arg``, ``t_peri`` of every star not held fixed; the summary adds a
    pooled row per element (all stars together).

Reference convention
    The simulator adds a set's ``offset`` to its frame-relative positions and
    its ``zero_point`` to its velocities; the model adds ``D:dx``, ``D:dy`` to
    the predicted positions and ``D:dvz`` to the predicted velocities of set D,
    with the same sign.  The fit measures them against its reference set R
    (which carries none), so the fit's x0, y0 are those of R's frame and its
    vz0 is R's: true x0 = x0 + offset_R[0], y0 = y0 + offset_R[1], vz0 = vz0 +
    zero_point_R; true D:dx = offset_D[0] - offset_R[0], D:dy likewise, and
    D:dvz = zero_point_D - zero_point_R.  Without a reference of a kind, the
    fit's frame is that of every set of the kind when they share one offset
    (one set, say), else the plain truth (the fit model is then wrong, and the
    calibration should say so).  The true error scale of D is its
    ``error_factor``.

Per-star elements: like with like
    A fitted ``t_peri`` may be any pericentre passage (the start search takes
    the one nearest the middle of the data), k passages from the stated one.
    Its true value is that of passage k (:func:`passage_truth`): t_peri + k P
    for a Keplerian star.  A star the simulator integrates (precession or a
    Plummer mass) carries *osculating* elements at the epoch t_peri + P/2, the
    same convention as the fit's integrated stars, so the truth of passage k
    is the osculating ellipse of the true track at that passage's own
    t_peri' + P'/2 (found by iteration; all six elements differ from the
    stated ones by the precession).  Each fitted element is stored moved by
    (true value of passage k - stated value), so it is compared with the
    stated truth, and its sigma is the fit's own; ``node`` and ``peri_arg``
    are then moved by whole turns to lie within 180 deg of the truth.  A star
    integrated in the simulation but Keplerian in the fit (the fit's
    ``precession_stars = "auto"`` found its precession small) has mean, not
    osculating, elements and is left out of the counts, with the reason in
    each trial's message.
"""

from types import SimpleNamespace

import numpy as np

from deepwell.core.constants import GM_SUN_AU3_PER_YR2, KMS_PER_AU_PER_YR
from deepwell.core.parameters import EXTRA, SHARED
from deepwell.core.units import UNITS
from deepwell.model.datasets import DatasetTerms
from deepwell.model.kernels.orbit import elements_from_state, period_from_a
from deepwell.model.kernels.post_newtonian import pn_track

from .simulate import ELEMENT_KEYS

__all__ = ["GROUPS", "ANGLES", "POOL_PREFIX", "systematics_datasets", "dataset_terms",
           "scored_names", "truth_of", "unit_of_name", "pools_of", "wrap_near",
           "passage_truth", "passage_of", "star_shift", "star_scorable", "aligned"]

#: Groups of scored parameters, in the order of the summary table.
GROUPS = ("shared", "data set", "star", "pooled")
#: Elements measured modulo 360 deg.
ANGLES = ("node", "peri_arg")
#: Name of a pooled row: POOL_PREFIX + element.
POOL_PREFIX = "all stars:"
_SCORED_TERMS = ("dx", "dy", "dvx", "dvy", "dvz", "scale")


# ------------------------------------------------------------------ fit settings
def _sets(description):
    """(frame position sets, velocity sets, every set) in order of first campaign."""
    frame, vel, every = [], [], []
    for c in description.campaigns:
        every.append(c.dataset)
        if c.kind == "velocities":
            vel.append(c.dataset)
        elif c.relative_to == "frame":
            frame.append(c.dataset)
    return (list(dict.fromkeys(frame)), list(dict.fromkeys(vel)), list(dict.fromkeys(every)))


def systematics_datasets(description):
    """The ``[datasets]`` table that frees the data-set terms the scenario injects.

    The reference of positions is the first frame-relative position set (in
    campaign order) without an offset, else the first such set; that of
    velocities the first velocity set without a zero-point, else the first.
    Every other set whose offset (zero-point) differs from its reference's gets
    an offset (zero-point); every set whose ``error_factor`` is not 1 gets an
    error ``scale``.  A scenario without systematics gives ``{}`` (no terms).

    Returns
    -------
    dict
        As written in a settings file: ``{"reference": [...], "sets": {NAME: {...}}}``.
    """
    if not description.systematics:
        return {}
    sy = description.systematics_of
    frame, vel, every = _sets(description)
    sets, reference = {}, []
    for names, key, of, zero in ((frame, "offset", lambda d: tuple(sy(d).offset), (0.0, 0.0)),
                                 (vel, "zero_point", lambda d: sy(d).zero_point, 0.0)):
        if not names:
            continue
        ref = next((d for d in names if of(d) == zero), names[0])
        moved = [d for d in names if d != ref and of(d) != of(ref)]
        if moved:
            reference.append(ref)
        for d in moved:
            sets.setdefault(d, {})[key] = True
    for d in every:
        if sy(d).error_factor != 1.0:
            sets.setdefault(d, {})["error_model"] = "scale"
    if not sets:
        return {}
    return {**({"reference": reference} if reference else {}), "sets": sets}


def dataset_terms(description, settings):
    """The :class:`DatasetTerms` the fit of a scenario has (None without data-set terms).

    Resolved against the scenario's campaigns (one stand-in row per data set),
    with the same rules the fitted model applies to its rows.
    """
    config = settings.dataset_config()
    if not config.active:
        return None
    pos_sets = {}
    for c in description.campaigns:
        if c.kind == "positions":
            pos_sets[c.dataset] = max(pos_sets.get(c.dataset, 0.0),
                                      1.0 if c.relative_to == "frame" else 0.0)
    vel_sets = [c.dataset for c in description.campaigns if c.kind == "velocities"]
    pos = SimpleNamespace(dataset=np.array(list(pos_sets), str),
                          frame=np.array(list(pos_sets.values()), float))
    vel = SimpleNamespace(dataset=np.array(list(dict.fromkeys(vel_sets)), str))
    return DatasetTerms(config, pos, vel, file=config.source, strict=False)


# ------------------------------------------------------------------ names and truth
def scored_names(description, settings):
    """{name: group} of every parameter the calibration scores (module docstring).

    ``settings`` are the fit settings (their effects decide whether f and
    f_sp are free, their data-set choices which terms exist).
    """
    fx = settings.effect_switches()
    out = {n: "shared" for n in SHARED if not settings.shared_setting(n).fixed}
    out.update({n: "shared" for n in ("f", "f_sp")
                if n in fx.extra_names and not settings.shared_setting(n).fixed})
    terms = dataset_terms(description, settings)
    for name, _, _, term in terms.terms if terms is not None else ():
        if term in _SCORED_TERMS:
            out[name] = "data set"
    for star in description.stars:
        st = settings.stars.get(star.name)
        if st is None or not st.fixed:
            out.update({f"{star.name}:{el}": "star" for el in ELEMENT_KEYS})
    return out


def _frame_shift(names, reference, of):
    """Injected term of the set whose frame the fit's shared parameters take."""
    ref = next((d for d in reference if d in names), None)
    if ref is not None:
        return of(ref)
    values = {of(d) for d in names}
    return values.pop() if len(values) == 1 else None


def truth_of(description, settings, names):
    """True value of each scored name, in the fit's reference convention (module docstring)."""
    sy = description.systematics_of
    frame, vel, _ = _sets(description)
    reference = settings.dataset_config().reference
    off_ref = _frame_shift(frame, reference, lambda d: tuple(sy(d).offset))
    zp_ref = _frame_shift(vel, reference, lambda d: sy(d).zero_point)
    off_ref, zp_ref = off_ref or (0.0, 0.0), zp_ref or 0.0
    sh = vars(description.shared)
    values = {**sh, "x0": sh["x0"] + off_ref[0], "y0": sh["y0"] + off_ref[1],
              "vz0": sh["vz0"] + zp_ref, "f": description.effects.redshift,
              "f_sp": description.effects.precession}
    terms = dataset_terms(description, settings)
    for name, _, d, term in terms.terms if terms is not None else ():
        s = sy(d)
        values[name] = {"dx": s.offset[0] - off_ref[0], "dy": s.offset[1] - off_ref[1],
                        "dvx": 0.0, "dvy": 0.0, "dvz": s.zero_point - zp_ref,
                        "scale": s.error_factor}.get(term)
    for star in description.stars:
        values.update({f"{star.name}:{el}": getattr(star, el) for el in ELEMENT_KEYS})
    return {n: float(values[n]) for n in names}


def unit_of_name(name):
    """Astropy unit string of a scored name (shared, ``D:term``, ``STAR:element``)."""
    if name in SHARED:
        return SHARED[name].unit
    if name in EXTRA:
        return EXTRA[name].unit
    term = name.rsplit(":", 1)[-1]
    return UNITS[term.removeprefix("pos_").removeprefix("vel_")]


def pools_of(groups):
    """{pooled row name: [member names]} of the per-star elements, one per element."""
    out = {}
    for el in ELEMENT_KEYS:
        members = [n for n, g in groups.items() if g == "star" and n.rsplit(":", 1)[-1] == el]
        if members:
            out[POOL_PREFIX + el] = members
    return out


# ------------------------------------------------------------------ like with like
def wrap_near(value, truth, turn):
    """``value`` moved by whole ``turn`` to lie within half a turn of ``truth``; and k."""
    k = np.round((np.asarray(value, float) - truth) / turn)
    return value - k * turn, k


def _elements(star):
    return {el: float(getattr(star, el)) for el in ELEMENT_KEYS}


def passage_truth(description, star, k):
    """True elements of ``star`` in the convention of a fit that found pericentre passage ``k``.

    Parameters
    ----------
    description : ScenarioDescription
    star : deepwell.tools.simulate.Star
    k : int
        Passages after (k > 0) or before the stated ``t_peri``.

    Returns
    -------
    dict
        a (mas), e, inc, node, peri_arg (deg), t_peri (Julian yr).  A
        Keplerian star keeps its elements with t_peri + k P.  An integrated
        star (precession or Plummer mass) gets the osculating elements of its
        true track at the epoch t_peri' + P'/2 of those same elements (the
        fit's convention), found by fixed-point iteration from the apocentre k
        periods on; k = 0 returns the stated elements exactly.
    """
    el = _elements(star)
    sh, fx = description.shared, description.effects
    period = float(period_from_a(el["a"], sh.mass, sh.distance))
    if k == 0:
        return el
    if not fx.integrated:
        return {**el, "t_peri": el["t_peri"] + k * period}
    a_au = el["a"] * 1e-3 * sh.distance
    angles = np.radians([el["inc"], el["node"], el["peri_arg"]])
    gm = sh.mass * GM_SUN_AU3_PER_YR2
    t_osc, out = el["t_peri"] + (k + 0.5) * period, el
    for _ in range(_PASSAGE_ITERATIONS):
        tr = pn_track(t_osc, a_au, el["e"], *angles, el["t_peri"], sh.mass,
                      el["t_peri"] + 0.5 * period, f_sp=fx.precession, m_ext=fx.plummer_mass,
                      b_ext=fx.plummer_scale, light_time=False, steps_per_orbit=96)
        state = np.array([tr.east, tr.north, tr.z, tr.v_east / KMS_PER_AU_PER_YR,
                          tr.v_north / KMS_PER_AU_PER_YR, tr.v_z / KMS_PER_AU_PER_YR], float)
        osc = elements_from_state(state, gm, t_osc)
        p_osc = float(osc["period"])
        # the passage half an osculating period before t_osc (an apocentre is ambiguous)
        t_p, _ = wrap_near(float(osc["t_peri"]), t_osc - 0.5 * p_osc, p_osc)
        out = {"a": float(osc["a"]) / (1e-3 * sh.distance), "e": float(osc["ecc"]),
               "inc": float(np.degrees(np.arccos(np.clip(osc["cos_inc"], -1.0, 1.0)))),
               "node": float(np.degrees(osc["node"]) % 360.0),
               "peri_arg": float(np.degrees(np.arctan2(osc["e_sin"], osc["e_cos"])) % 360.0),
               "t_peri": float(t_p)}
        t_next = t_p + 0.5 * p_osc
        if abs(t_next - t_osc) < 1e-9 * period:
            break
        t_osc = t_next
    return out


#: Iterations of the osculating-epoch fixed point (it contracts by ~GM/(c^2 a) per step).
_PASSAGE_ITERATIONS = 8


def passage_of(description, star, t_peri_fit):
    """Passage k of a fitted ``t_peri`` and the true elements of that passage."""
    el = _elements(star)
    sh = description.shared
    period = float(period_from_a(el["a"], sh.mass, sh.distance))
    k = int(wrap_near(t_peri_fit, el["t_peri"], period)[1])
    truth = passage_truth(description, star, k)
    for _ in range(3):  # integrated radial periods differ from P by up to a few per cent
        step = int(wrap_near(t_peri_fit, truth["t_peri"], period)[1])
        if step == 0:
            break
        k += step
        truth = passage_truth(description, star, k)
    return k, truth


def star_shift(description, star, t_peri_fit):
    """{element: true value of the fitted passage - stated true value}; angles wrapped.

    Subtracting it from the fitted elements compares them with the stated
    truth like with like (module docstring).
    """
    _, truth = passage_of(description, star, t_peri_fit)
    stated = _elements(star)
    out = {el: truth[el] - stated[el] for el in ELEMENT_KEYS}
    for el in ANGLES:
        out[el] = float(wrap_near(out[el], 0.0, 360.0)[0])
    return out


def star_scorable(description, result, star):
    """Why the elements of ``star`` cannot be compared with the truth (None if they can)."""
    if not description.effects.integrated:
        return None
    if not result.model.integrated[list(result.stars).index(star)]:
        return "Keplerian in the fit, integrated in the simulation"
    return None


def aligned(value, name, truth, shift):
    """A fitted value (or draws) of ``name`` moved by ``shift`` and, for angles, whole turns."""
    v = np.asarray(value, float) - shift
    if name.rpartition(":")[2] in ANGLES:
        v = wrap_near(v, truth, 360.0)[0]
    return v
