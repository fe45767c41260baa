"""Starting orbits from the data alone, without hand-made guesses.

Three steps, each cheap:

1. Per star, a grid over period, eccentricity and pericentre epoch.  For fixed
   (P, e, t_peri) the sky positions are linear in the Thiele-Innes constants
   A, B, F, G, which are solved by weighted least squares (the classic
   visual-binary method, ``shared/physics.md`` section 2).  The best grid
   points are refined with (P, e, t_peri) free and A, B, F, G still solved
   linearly (variable projection).
2. Radial velocities break the 180-degree node ambiguity and set the scale:
   v_z is proportional to the distance, so each star with velocities gives a
   distance, and with its angular size and period a mass.  The stars are
   combined with a weighted median.
3. With that mass and distance fixed, each star's six elements are refined on
   its own positions and velocities (Kepler's third law now ties a to P).
"""

from dataclasses import dataclass, field, replace

import numpy as np
from scipy.optimize import least_squares

from deepwell.core.constants import KEPLER_K, KMS_PER_AU_PER_YR
from deepwell.core.errors import InputError
from deepwell.core.parameters import SHARED, STAR_ELEMENTS, STAR_INTERNAL
from deepwell.core.text import plural
from deepwell.model.kernels.kepler import solve_kepler
from deepwell.model.kernels.orbit import (
    a_from_period,
    elements_from_thiele_innes,
    keplerian_track,
    period_from_a,
)
from deepwell.model.layout import internal_star_values

__all__ = ["Candidate", "grid_search", "StartResult", "find_start"]

#: Grid cells (periods x eccentricities x phases x epochs) evaluated in one call.
GRID_CELLS = 400_000
_ECC_GRID = np.array([0.0, 0.2, 0.4, 0.55, 0.67, 0.76, 0.83, 0.88, 0.92, 0.95, 0.97, 0.985])


@dataclass(frozen=True)
class Candidate:
    """A sky-only orbit solution: (P, e, t_peri) and Thiele-Innes A, B, F, G (mas)."""

    period: float
    ecc: float
    t_peri: float
    abfg: tuple
    chi2: float
    sign: float = 1.0  # +1: node as returned by elements_from_thiele_innes; -1: flipped


def _xy(t, period, ecc, t_peri, rates=False):
    n = 2.0 * np.pi / period
    _, s, c = solve_kepler(n * (t - t_peri), ecc, tol=1e-9, max_iter=6)
    root = np.sqrt(1.0 - ecc * ecc)
    if not rates:
        return c - ecc, root * s
    denom = n / (1.0 - ecc * c)
    return -s * denom, root * c * denom


def _linear_ti(X, Y, east, north, w):
    """Weighted linear solve of north = A X + F Y, east = B X + G Y over the last axis."""
    sxx = np.sum(w * X * X, -1)
    sxy = np.sum(w * X * Y, -1)
    syy = np.sum(w * Y * Y, -1)
    bxn, byn = np.sum(w * X * north, -1), np.sum(w * Y * north, -1)
    bxe, bye = np.sum(w * X * east, -1), np.sum(w * Y * east, -1)
    det = sxx * syy - sxy * sxy
    det = np.where(np.abs(det) > 1e-300, det, np.inf)
    A = (syy * bxn - sxy * byn) / det
    F = (sxx * byn - sxy * bxn) / det
    B = (syy * bxe - sxy * bye) / det
    G = (sxx * bye - sxy * bxe) / det
    chi2 = np.sum(w * (east**2 + north**2), -1) - (A * bxn + F * byn + B * bxe + G * bye)
    return (A, B, F, G), chi2


def _velocity_chi2(vr, wv, vm, free_offset):
    """Chi-square of velocities against +vm and -vm (node flipped), offset optional."""
    out = []
    for sign in (1.0, -1.0):
        r = vr - sign * vm
        chi2 = np.sum(wv * r * r, -1)
        if free_offset:
            chi2 = chi2 - np.sum(wv * r, -1) ** 2 / np.sum(wv)
        out.append(chi2)
    return np.minimum(out[0], out[1]), np.where(out[0] <= out[1], 1.0, -1.0)


def _grid_point_chi2(d, period, ecc, tp, mass, dist, a_tol):
    """Chi-square on an (e, t_peri) grid at some periods; sign picks the node.

    ``period`` has shape (n_p, 1, 1, 1) (or is a scalar), ``ecc`` (n_e, 1, 1) and
    ``tp`` (n_p, 1, n_phase, 1); results have shape (n_p, n_e, n_phase).
    """
    X, Y = _xy(d["t"], period, ecc, tp)
    abfg, chi2 = _linear_ti(X, Y, d["east"], d["north"], d["w"])
    sign = np.ones_like(chi2)
    if mass is None:
        return chi2, sign, abfg
    a, inc, _, peri_arg = elements_from_thiele_innes(*abfg)
    a_k = a_from_period(np.asarray(period, float)[..., 0], mass, dist)
    chi2 = chi2 + ((a - a_k) / (a_tol * a_k)) ** 2
    if d["tv"].size:
        dX, dY = _xy(d["tv"], period, ecc, tp, rates=True)
        C = (a_k * np.sin(peri_arg) * np.sin(inc))[..., None]
        H = (a_k * np.cos(peri_arg) * np.sin(inc))[..., None]
        vm = (C * dX + H * dY) * dist * 1e-3 * KMS_PER_AU_PER_YR
        chi2_v, sign = _velocity_chi2(d["vr"], d["wv"], vm, d["tv"].size >= 4)
        chi2 = chi2 + chi2_v
    return chi2, sign, abfg


def grid_search(d, mass=None, dist=None, n_period=120, n_phase=32, keep=4, a_tol=0.1,
                period_range=None):
    """Best orbits of one star on a (P, e, t_peri) grid.

    Parameters
    ----------
    d : dict
        Star data: ``t, east, north, w`` (epochs in yr, offsets in mas,
        weights 1/sigma^2 in mas^-2) and ``tv, vr, wv`` (velocity epochs, km/s,
        weights).
    mass, dist : float, optional
        When given, Kepler's third law ties the Thiele-Innes size to the period
        (soft, relative tolerance ``a_tol``) and the velocities enter the score.
    n_period, n_phase : int
        Grid size in log period and pericentre phase (eccentricities are fixed).
    keep : int
        Number of distinct candidates (in period) returned.
    period_range : tuple, optional
        (min, max) period in yr; default (1 yr, max(3000 yr, 100 x data span)).

    Returns
    -------
    list of Candidate
        Sorted by chi-square.
    """
    t = d["t"]
    lo, hi = period_range or (1.0, max(3000.0, 100.0 * np.ptp(t)))
    phases = (np.arange(n_phase) + 0.5) / n_phase
    t_mid = np.average(t, weights=d["w"])
    ecc = _ECC_GRID[:, None, None]
    best = []
    periods = np.geomspace(lo, hi, n_period)
    # several periods per vectorised call (the same numbers as one period at a time)
    chunk = max(1, GRID_CELLS // (ecc.size * n_phase * max(t.size, d["tv"].size, 1)))
    for i in range(0, n_period, chunk):
        per = periods[i:i + chunk, None, None, None]
        tp = (t_mid + (phases - 0.5) * periods[i:i + chunk, None])[:, None, :, None]
        chi2s, signs, abfgs = _grid_point_chi2(d, per, ecc, tp, mass, dist, a_tol)
        for j, period in enumerate(periods[i:i + chunk]):
            chi2, sign = chi2s[j], np.broadcast_to(signs, chi2s.shape)[j]
            k = np.unravel_index(np.argmin(chi2), chi2.shape)
            best.append(Candidate(period, float(_ECC_GRID[k[0]]), float(tp[j, 0, k[1], 0]),
                                  tuple(float(v[j][k]) for v in abfgs), float(chi2[k]),
                                  float(sign[k])))
    best.sort(key=lambda c: c.chi2)
    chosen = []
    for cand in best:
        if all(abs(np.log(cand.period / c.period)) > 0.1 for c in chosen):
            chosen.append(cand)
        if len(chosen) >= keep:
            break
    return chosen


def _refine_sky(d, cand):
    """Variable projection: (log P, e, t_peri) nonlinear, A, B, F, G linear."""
    t, east, north, w = d["t"], d["east"], d["north"], d["w"]
    sw = np.sqrt(w)

    def resid(p):
        X, Y = _xy(t, np.exp(p[0]), p[1], p[2])
        (A, B, F, G), _ = _linear_ti(X, Y, east, north, w)
        return np.concatenate([sw * (north - A * X - F * Y), sw * (east - B * X - G * Y)])

    x0 = [np.log(cand.period), min(cand.ecc, 0.98), cand.t_peri]
    sol = least_squares(resid, x0, bounds=([-np.inf, 0.0, -np.inf], [np.inf, 0.995, np.inf]),
                        x_scale=[0.05, 0.05, 0.05 * cand.period], max_nfev=100)
    per, e, tpe = np.exp(sol.x[0]), sol.x[1], sol.x[2]
    X, Y = _xy(t, per, e, tpe)
    abfg, chi2 = _linear_ti(X, Y, east, north, w)
    return Candidate(per, e, tpe, tuple(float(v) for v in abfg), float(chi2), cand.sign)


@dataclass
class StartResult:
    """Starting internal vector and what the start search found out."""

    vec: np.ndarray
    notes: list = field(default_factory=list)
    star_distance: dict = field(default_factory=dict)  # star -> pc from its velocities
    star_mass: dict = field(default_factory=dict)  # star -> Msun from its sky orbit


def _node_options(cand):
    """Both (a, inc, node, peri_arg) solutions of a Thiele-Innes candidate; preferred first."""
    a, inc, node, peri_arg = (float(v) for v in elements_from_thiele_innes(*cand.abfg))
    opts = [(a, inc, node, peri_arg), (a, inc, node + np.pi, peri_arg + np.pi)]
    return opts if cand.sign > 0 else opts[::-1]


def _velocity_scale(cand, el, d):
    """Distance (pc) that scales the unit-distance v_z curve onto the velocities."""
    a, inc, node, peri_arg = el
    unit = keplerian_track(d["tv"], a, cand.ecc, inc, node, peri_arg, cand.t_peri,
                           cand.period, 1.0).v_z
    denom = np.sum(d["wv"] * unit * unit)
    if not denom > 0:
        return np.nan, np.inf, np.inf
    scale = np.sum(d["wv"] * unit * d["vr"]) / denom
    chi2 = np.sum(d["wv"] * (d["vr"] - scale * unit) ** 2)
    return scale, 1.0 / np.sqrt(denom), chi2


#: Error floors of the search (mas, km/s): they smooth the chi-square landscape so
#: that a coarse grid point of a precisely measured star still leads downhill.
POS_FLOOR, VEL_FLOOR = 0.5, 15.0


def _star_data(model, k, shared=None):
    """Data of star k for the grid; ``shared`` (x0, y0, vx0, vy0, vz0) removes the frame."""
    p = model.pos.star == k
    var = 0.5 * (model.pos.ra_err[p] ** 2 + model.pos.dec_err[p] ** 2) + POS_FLOOR**2
    east, north, vz0 = model.pos.ra[p], model.pos.dec[p], 0.0
    if shared is not None:
        x0, y0, vx0, vy0, vz0 = shared
        dt = model.pos.t[p] - model.reference_epoch
        east = east - model.pos.frame[p] * (x0 + vx0 * dt)
        north = north - model.pos.frame[p] * (y0 + vy0 * dt)
    out = dict(t=model.pos.t[p], east=east, north=north, w=1.0 / var)
    if model.vel is not None:
        v = model.vel.star == k
        out.update(tv=model.vel.t[v], vr=model.vel.vr[v] - vz0,
                   wv=1.0 / (model.vel.vr_err[v] ** 2 + VEL_FLOOR**2))
    else:
        out.update(tv=np.zeros(0), vr=np.zeros(0), wv=np.zeros(0))
    return out


#: The start search is centred on the data when their centre is this many times
#: farther from the origin than their own extent, with at least this many stars.
FAR_FACTOR, FAR_MIN_STARS = 3.0, 3


def _far_centre(model):
    """(east, north) mas centre of the frame-relative positions if the origin lies outside them.

    The centre is the median over stars of each star's median position; when it is
    more than :data:`FAR_FACTOR` times farther from the origin than any frame-relative
    position is from it, with at least :data:`FAR_MIN_STARS` stars, the origin (where
    the search assumes the mass) cannot be inside the orbits.  None otherwise (one
    star on a partial arc near apocentre may well lie to one side of its mass).
    """
    pos = model.pos
    frame = pos.frame > 0
    if not frame.any():
        return None
    stars = np.unique(pos.star[frame])
    if stars.size < FAR_MIN_STARS:
        return None
    med = np.array([[np.median(pos.ra[frame & (pos.star == k)]),
                     np.median(pos.dec[frame & (pos.star == k)])] for k in stars])
    centre = np.median(med, axis=0)
    reach = np.max(np.hypot(pos.ra[frame] - centre[0], pos.dec[frame] - centre[1]))
    if np.hypot(*centre) <= FAR_FACTOR * reach:
        return None
    return float(centre[0]), float(centre[1])


def _scale_from_stars(model, data, res):
    """Distance and mass from sky-only orbits and velocities of every star."""
    dists, dist_w, rows = [], [], []
    for k, d in enumerate(data):
        cand = _refine_sky(d, grid_search(d, keep=1)[0])
        cover = min(np.ptp(d["t"]) / cand.period, 1.0)
        a_mas = _node_options(cand)[0][0]
        rows.append((a_mas, cand.period, cover, len(d["t"])))
        if d["tv"].size < 2:
            continue
        fits = [_velocity_scale(cand, el, d) for el in _node_options(cand)]
        good = [f for f in fits if f[0] > 0]
        if not good:
            continue
        scale, err, _ = min(good, key=lambda f: f[2])
        res.star_distance[model.stars[k]] = float(scale)
        dists.append(scale)
        dist_w.append(cover**2 / max(err / scale, 1e-3))
    return dists, dist_w, rows


def find_start(model, settings, shared_start=None, progress=None):
    """Starting internal vector for the joint fit of ``model``.

    Parameters
    ----------
    model : deepwell.model.JointModel
    settings : deepwell.tables.settings.Settings
    shared_start : dict, optional
        Starting values of shared parameters that override the search.
    progress : callable, optional
        Called with one line per star searched (for long searches).

    Returns
    -------
    StartResult
    """
    layout = model.layout
    res = StartResult(vec=np.zeros(layout.size))
    shared = {n: 0.0 for n in SHARED}
    for name in SHARED:
        s = settings.shared_setting(name)
        if s.value is not None:
            shared[name] = s.value
    shared.update(shared_start or {})
    given = {n for n in ("x0", "y0") if settings.shared_setting(n).value is not None}
    centre = None if given or {"x0", "y0"} & set(shared_start or {}) else _far_centre(model)
    frame = None
    if centre is not None:
        shared["x0"], shared["y0"] = centre
        frame = tuple(shared[n] for n in ("x0", "y0", "vx0", "vy0", "vz0"))
        res.notes.append(
            f"the frame-relative positions lie far from the frame origin (their centre is "
            f"{np.hypot(*centre):.4g} mas away, far beyond every star's positions): the start "
            f"search was centred on ({centre[0]:.6g}, {centre[1]:.6g}) mas instead of "
            "assuming the mass near the origin; check x0, y0")
    data = [_star_data(model, k, shared=frame) for k in range(len(model.stars))]

    dists, dist_w, rows = _scale_from_stars(model, data, res)
    if settings.shared_setting("distance").value is not None:
        dist = settings.shared_setting("distance").value
    elif dists:
        dist = _weighted_median(np.array(dists), np.array(dist_w))
    else:
        raise InputError("the distance cannot be found: no star has enough radial velocities; "
                         "give [shared.distance] a value (and fixed = true) in the settings")
    masses = np.array([KEPLER_K * (a * 1e-3 * dist) ** 3 / p**2 for a, p, _, _ in rows])
    weights = np.array([c**2 * n for _, _, c, n in rows])
    for star, m in zip(model.stars, masses, strict=True):
        res.star_mass[star] = float(m)
    mass = settings.shared_setting("mass").value or _weighted_median(masses, weights)
    shared.update(mass=mass, distance=dist)
    for name in SHARED:
        res.vec[layout.index(name)] = shared[name]
    res.notes.append(f"automatic start: mass {mass:.4g} solMass and distance {dist:.5g} pc "
                     f"from {plural(len(dists), 'star')} with velocities")

    # per-star search with Kepler's third law and the velocities, then refinement
    # with the star's own mass free (the distance held), so that a small error
    # of the starting mass does not trap a precisely measured orbit
    own_mass, own_w = [], []
    say = progress or (lambda text: None)
    for k, d in enumerate(data):
        say(f"starting orbit of {model.stars[k]} (star {k + 1} of {len(data)})")
        cands = grid_search(d, mass=mass, dist=dist)
        cands = _distinct([_refine_sky(d, c) for c in cands] + cands)
        star = model.stars[k]
        block, m_k, sig_k = _refine_star(model.for_stars([star]),
                                         _floored(model, star).for_stars([star]),
                                         res.vec, layout, cands, settings)
        i0 = layout.n_shared + k * len(STAR_INTERNAL)
        res.vec[i0:i0 + len(STAR_INTERNAL)] = block
        res.star_mass[model.stars[k]] = m_k
        if np.isfinite(sig_k) and sig_k > 0:
            own_mass.append(m_k)
            own_w.append((m_k / sig_k) ** 2)
    if own_mass and settings.shared_setting("mass").value is None:
        mass = _weighted_median(np.array(own_mass), np.array(own_w))
        res.vec[layout.index("mass")] = mass
        res.notes.append(f"refined starting mass {mass:.4g} solMass from the stars' own orbits")
    return res


def _weighted_median(values, weights):
    order = np.argsort(values)
    cw = np.cumsum(weights[order])
    return float(values[order][np.searchsorted(cw, 0.5 * cw[-1])])


def _distinct(cands):
    """Candidates with distinct (period, e, t_peri), in the given order."""
    out = []
    for c in cands:
        if all(abs(np.log(c.period / o.period)) > 1e-3 or abs(c.ecc - o.ecc) > 1e-3
               or abs(c.t_peri - o.t_peri) > 1e-3 * c.period for o in out):
            out.append(c)
    return out


def _floored(model, star):
    """The model of one star with the search's error floors added in quadrature."""
    obs = model.observations
    pos = obs.positions[obs.positions["star"] == star].copy()
    pos["ra_err"] = np.hypot(pos["ra_err"], POS_FLOOR)
    pos["dec_err"] = np.hypot(pos["dec_err"], POS_FLOOR)
    pos["corr"] = pos["corr"] * 0.0
    vel = obs.velocities[obs.velocities["star"] == star].copy()
    vel["vr_err"] = np.hypot(vel["vr_err"], VEL_FLOOR)
    return type(model)(replace(obs, positions=pos, velocities=vel), model.reference_epoch,
                       stars=[star])


def polish_stars(model, vec, stars):
    """Search again for the orbits of some stars with the shared parameters held.

    A star on a short arc can be trapped in a wrong orbit at the start, when the
    frame offset and drift were still unknown.  With the joint fit's mass,
    distance and frame, its grid search and refinement are repeated; a new orbit
    is kept when it lowers that star's chi-square by more than 1.

    Parameters
    ----------
    model : deepwell.model.JointModel
        The full model (any effects); the search itself is Keplerian.
    vec : ndarray
        Internal vector of the joint fit.
    stars : sequence of int
        Indices of the stars to search again.

    Returns
    -------
    vec : ndarray
        The vector with improved star blocks.
    changed : list of str
        Stars whose orbit changed.
    """
    kep = model.keplerian()
    n_ex = len(model.layout.extra)
    kvec = np.concatenate([vec[:len(SHARED)], vec[len(SHARED) + n_ex:]])
    sh = dict(zip(SHARED, kvec[:len(SHARED)], strict=True))
    frame = (sh["x0"], sh["y0"], sh["vx0"], sh["vy0"], sh["vz0"])
    vec = np.array(vec, dtype=float)
    chi_now = model.star_chi2(vec)[0]
    changed = []
    for k in stars:
        star = model.stars[k]
        d = _star_data(kep, k, shared=frame)
        cands = grid_search(d, mass=sh["mass"], dist=sh["distance"])
        cands = _distinct([_refine_sky(d, c) for c in cands] + cands)
        block, _, _ = _refine_star(kep.for_stars([star]), _floored(kep, star).for_stars([star]),
                                   kvec, kep.layout, cands, None, own_mass=False)
        i0 = model.layout.n_shared + k * len(STAR_INTERNAL)
        trial = vec.copy()
        trial[i0:i0 + len(STAR_INTERNAL)] = block
        chi_new = model.star_chi2(trial)[0][k]
        if chi_new < chi_now[k] - 1.0:
            vec, chi_now[k] = trial, chi_new
            changed.append(star)
    return vec, changed


def _refine_star(sub, soft, vec, layout, cands, settings, own_mass=True):
    """Best six internal elements of one star, with the star's own mass free.

    ``sub`` is the joint model restricted to this star, so its internal vector
    is the shared block followed by one star block; ``soft`` is the same with
    the error floors.  Each start is refined on ``soft`` with the mass held,
    then with the star's own mass free, then on the true errors.

    Returns
    -------
    block : ndarray
        The six internal elements.
    mass, sigma : float
        The star's own mass (Msun) and its formal error (inf if undetermined).
    """
    mass, dist = vec[layout.index("mass")], vec[layout.index("distance")]
    n_sh = layout.n_shared
    user = settings.stars.get(sub.stars[0]) if settings is not None else None
    starts = []
    if user is not None and set(user.start) == set(STAR_ELEMENTS):
        s = user.start
        starts.append(internal_star_values(period_from_a(s["a"], mass, dist), s["e"],
                                           np.radians(s["inc"]), np.radians(s["node"]),
                                           np.radians(s["peri_arg"]), s["t_peri"]))
        if user.fixed:
            return starts[0], mass, np.inf
    has_rv = sub.vel is not None and sub.vel.n >= 2
    for cand in cands:
        for el in _node_options(cand)[: 1 if has_rv else 2]:
            a, inc, node, peri_arg = el
            starts.append(internal_star_values(cand.period, cand.ecc, inc, node, peri_arg,
                                               cand.t_peri))
    base = vec[:n_sh].copy()

    def resid(x, mod, mass_free):
        x = np.asarray(x)
        b = np.broadcast_to(base, x.shape[:-1] + base.shape)
        if mass_free:
            v = np.concatenate([b, x[..., 1:]], axis=-1)
            v[..., 0] = x[..., 0] * mass
        else:
            v = np.concatenate([b, x], axis=-1)
        return mod.residuals(v)

    def jac(x, mod, mass_free):
        # all central differences in one vectorised model call
        h = 1e-6 * np.maximum(np.abs(x), 1e-2)
        h[-1] = h[0 if not mass_free else 1] * 0.1 if x.size > 1 else h[-1]
        trial = np.repeat(x[None, :], 2 * x.size, axis=0)
        trial[0::2][np.diag_indices(x.size)] += h
        trial[1::2][np.diag_indices(x.size)] -= h
        out = resid(trial, mod, mass_free)
        return ((out[0::2] - out[1::2]) / (2.0 * h)[:, None]).T

    def run(mod, x0, mass_free):
        scale = _star_scale(x0[1:] if mass_free else x0)
        if mass_free:
            scale = np.concatenate([[0.01], scale])
        return least_squares(resid, x0, jac=jac, x_scale=scale, max_nfev=300, method="lm",
                             args=(mod, mass_free))

    best = None
    for x0 in starts:
        try:
            s1 = run(soft, x0, False)
            if own_mass:
                s2 = run(soft, np.concatenate([[1.0], s1.x]), True)
                sol = run(sub, s2.x, True)
            else:
                sol = run(sub, s1.x, False)
                sol.x = np.concatenate([[1.0], sol.x])
        except ValueError:
            continue
        if not (np.all(np.isfinite(sol.x)) and sol.x[0] > 0):
            continue
        cost = np.sum(sol.fun**2)
        if best is None or cost < best[0]:
            best = (cost, sol)
    if best is None:
        return starts[0], mass, np.inf
    sol = best[1]
    x = sol.x[1:].copy()
    x[4] = np.mod(x[4], 2 * np.pi)
    try:
        cov = np.linalg.inv(sol.jac.T @ sol.jac)
        sig = float(np.sqrt(cov[0, 0])) * mass
    except np.linalg.LinAlgError:
        sig = np.inf
    return x, float(sol.x[0] * mass), sig


def _star_scale(x):
    per = abs(x[0])
    return np.array([0.01 * per, 0.05, 0.05, 0.05, 0.05, 0.01 * per])
