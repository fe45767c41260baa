"""Which physics do the data demand? The model ladder compared, with verdicts in words.

:func:`compare_models` turns a fitted ladder (:func:`deepwell.fit.ladder.fit_ladder`)
and, optionally, bootstrap trials (:mod:`deepwell.tools.compare`) into a
:class:`ModelComparison`: one :class:`ModelRow` per model (chi-square, dof,
Delta chi-square against its parent and against the lowest chi-square, AIC, BIC,
strengths, mass and distance) and one :class:`EffectTest` per model that has a
parent, with a one-sentence verdict.

Information criteria (up to a constant common to all models of the same data,
since chi-square = -2 ln L + const for Gaussian errors)::

    AIC = chi2 + 2 k,   BIC = chi2 + k ln n     (k fitted parameters, n data)

Significance
    A Delta chi-square between nested models with dk extra free parameters
    follows chi-square(dk) under the simpler model when the regularity
    conditions hold (Wilks 1938, Ann. Math. Stat. 9, 60): the "asymptotic p"
    below.  It does not hold when the models differ by a switch and no free
    parameter (dk = 0: the Romer, redshift and precession rungs, whose
    strengths are held at 1), nor when the fitted errors are mis-stated; the
    parametric bootstrap then gives the calibrated p = k/n, k of n simulated
    data sets (made by the simpler model) reaching the observed Delta
    chi-square, with its exact 95% Clopper-Pearson interval, and the one-sided
    Gaussian equivalent z = Phi^-1(1 - p).

Evidence hook
    :class:`ModelRow` has ``log_evidence``, ``log_evidence_err`` and
    ``evidence_method``, None here; an evidence calculation fills them with
    :func:`with_evidence` and the report then shows them and the Bayes
    factors against the parent.
"""

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from deepwell.core.text import plural
from deepwell.model.quality import PERICENTRE_ANGLE, PERICENTRE_EPOCHS, pericentre_epochs_count

from .effect_sizes import truncated_gaussian_upper_limit
from .proportions import clopper_pearson

__all__ = ["ModelRow", "EffectTest", "ModelComparison", "compare_models", "bootstrap_p",
           "extrapolated_p",
           "with_evidence", "DETECTION_SIGMA", "P_LEVEL"]

#: A test counts as a detection at this Gaussian-equivalent significance (common practice).
DETECTION_SIGMA = 3.0
#: Probability content of the interval on a bootstrap p-value.
P_LEVEL = 0.95
#: Reduced chi-square above which the stated errors look too small (common practice).
ERRORS_TOO_SMALL = 1.5


@dataclass(frozen=True)
class ModelRow:
    """One fitted model.

    ``f``/``f_sp`` are (value, sigma) with sigma None when the strength is held
    fixed, or None when the effect is off; ``ext`` is (M_ext(<r_ref)/M,
    sigma) or None.  Masses in solMass, distances in pc.
    """

    key: str
    label: str
    parent: str | None
    chi2: float
    dof: int
    n_free: int
    n_data: int
    delta_parent: float | None
    delta_best: float
    aic: float
    bic: float
    f: tuple | None
    f_sp: tuple | None
    ext: tuple | None
    mass: tuple
    distance: tuple
    converged: bool
    seconds: float
    log_evidence: float | None = None
    log_evidence_err: float | None = None
    evidence_method: str | None = None


@dataclass(frozen=True)
class EffectTest:
    """The comparison of one model with its parent.

    Attributes
    ----------
    key, parent : str
        The model and the one it is compared with (the simpler one, except
        for a model that drops an effect: :attr:`deepwell.fit.ladder.Rung.pair`).
    tests : str
        What is tested, in words.
    delta : float
        Observed chi2(simpler) - chi2(richer).
    extra_free : int
        Free parameters the model adds (0 for a switch with its strength held).
    asymptotic_p : float or None
        chi-square(extra_free) tail probability of ``delta`` (Wilks), None for 0.
    null_deltas : ndarray or None
        Bootstrap Delta chi-square values under the parent model.
    p, p_interval, z : float, (float, float), float or None
        Bootstrap p-value, its 95% Clopper-Pearson interval, its Gaussian
        equivalent (a lower bound ``z_lower`` when no trial reached delta).
    n_failed : int
        Bootstrap trials that failed (left out).
    verdict : str
    """

    key: str
    parent: str
    tests: str
    delta: float
    extra_free: int
    asymptotic_p: float | None
    null_deltas: np.ndarray | None = None
    p: float | None = None
    p_interval: tuple | None = None
    z: float | None = None
    z_lower: float | None = None
    n_failed: int = 0
    verdict: str = ""


@dataclass(frozen=True)
class ModelComparison:
    """The ladder's table, its tests and verdicts, and plain warnings."""

    rows: tuple
    tests: tuple
    notes: tuple
    n_data: int
    reference_radius: float | None
    bootstrap: dict | None = None  # trials per test, seed, error scale, elapsed
    evidence_prior: tuple = ()  # the stated prior of the evidences, one line per piece

    @property
    def has_evidence(self):
        return any(r.log_evidence is not None for r in self.rows)

    def row(self, key):
        return next(r for r in self.rows if r.key == key)

    @property
    def verdicts(self):
        return tuple(t.verdict for t in self.tests)


def _strength(res, name):
    lay = res.model.layout
    if name not in lay.extra:
        return None
    v = float(res.value(name))
    return (v, res.sigma(name)) if res.free[lay.index(name)] else (v, None)


def _row(fit, by_key, best, n_data):
    res, rung = fit.result, fit.rung
    k = res.n_free
    pair = rung.pair
    return ModelRow(
        key=rung.key, label=rung.label, parent=rung.parent, chi2=res.chi2, dof=res.dof,
        n_free=k, n_data=n_data,
        delta_parent=None if pair is None else by_key[pair[0]].chi2 - by_key[pair[1]].chi2,
        delta_best=res.chi2 - best, aic=res.chi2 + 2 * k, bic=res.chi2 + k * math.log(n_data),
        f=_strength(res, "f"), f_sp=_strength(res, "f_sp"), ext=_strength(res, "ext_fraction"),
        mass=(res.value("mass"), res.sigma("mass")),
        distance=(res.value("distance"), res.sigma("distance")),
        converged=bool(res.converged), seconds=float(fit.seconds))


def bootstrap_p(observed, null_deltas, level=P_LEVEL):
    """Bootstrap p-value of an observed Delta chi-square.

    Returns
    -------
    p : float
        k / n, k the simulated values >= ``observed`` (NaN ones left out).
    interval : (float, float)
        Exact Clopper-Pearson interval of probability ``level``.
    z, z_lower : float or None
        Phi^-1(1 - p), or (for k = 0) None and the bound Phi^-1(1 - upper end).
    """
    d = np.asarray(null_deltas, float)
    d = d[np.isfinite(d)]
    n = d.size
    if n == 0:
        return None, None, None, None
    k = int(np.sum(d >= observed - 1e-9 * max(1.0, abs(observed))))
    lo, hi = clopper_pearson(k, n, level)
    p = k / n
    if k == 0:
        return p, (lo, hi), None, float(stats.norm.isf(hi))
    return p, (lo, hi), float(stats.norm.isf(p)), None


def extrapolated_p(observed, null_deltas):
    """Tail probability of ``observed`` under a law matched to the null's first two moments.

    A null that takes negative values (two models with no free parameter
    between them: Delta chi-square = -d^2 + 2 d z for a linear model, a
    Gaussian) is matched by a Gaussian; a null >= 0 by a scaled chi-square
    c chi-square(nu) with c = var/(2 mean), nu = 2 mean^2/var (Satterthwaite
    1946, Biometrics Bull. 2, 110; from memory).  Only for observed values
    beyond every simulated one; it is an extrapolation, not a calibration.

    Returns
    -------
    (p, law) : (float, str) or (None, None) with fewer than 10 values.
    """
    d = np.asarray(null_deltas, float)
    d = d[np.isfinite(d)]
    if d.size < 10 or not np.std(d) > 0:
        return None, None
    mean, var = float(np.mean(d)), float(np.var(d, ddof=1))
    if d.min() < 0 or mean <= 0:
        return float(stats.norm.sf(observed, mean, np.sqrt(var))), "Gaussian"
    c, nu = var / (2 * mean), 2 * mean**2 / var
    return float(stats.chi2.sf(observed / c, nu)), "scaled chi-square"


def _sigma(z):
    """A Gaussian-equivalent significance in words (p below double precision past ~37)."""
    return f"{z:.1f} sigma" if np.isfinite(z) else "more than 37 sigma (p below 1e-300)"


def _p_text(t):
    if t.p is None:
        return None
    n = t.null_deltas.size if t.null_deltas is not None else 0
    lo, hi = t.p_interval
    if t.z is None:
        text = f"bootstrap p < {hi:.2g} (0 of {n} simulated data sets reach it)"
        p_x, law = extrapolated_p(t.delta, t.null_deltas)
        if p_x is not None:
            z_x = float(stats.norm.isf(p_x)) if p_x > 0 else float("inf")
            text += (f"; extrapolated p = {p_x:.2g} ({_sigma(z_x)}) from a {law} law "
                     "matched to the null's mean and variance")
        return text
    return f"bootstrap p = {t.p:.3g} (95% interval {lo:.2g}-{hi:.2g}, {n} data sets; " \
           f"{t.z:.1f} sigma)"


def _calibrated_z(t):
    """Gaussian-equivalent significance a verdict may use, and whether it is a lower bound."""
    if t.z is not None:
        return t.z, False
    if t.z_lower is not None and t.z_lower >= DETECTION_SIGMA:
        return t.z_lower, True
    p_x, _ = extrapolated_p(t.delta, t.null_deltas)
    if p_x is None:
        return None, True
    return (float(stats.norm.isf(p_x)) if p_x > 0 else float("inf")), True


def _significance(t):
    """(z, phrase) of a test; z None without a usable calibration."""
    if t.p is not None:
        z, _ = _calibrated_z(t)
        return z, _p_text(t)
    if t.extra_free == 0:
        return None, ("no calibrated significance: the model adds no free parameter, so this "
                      "Delta chi-square follows no chi-square law; run the bootstrap")
    z = float(stats.norm.isf(t.asymptotic_p)) if t.asymptotic_p > 0 else float("inf")
    return z, (f"asymptotic p = {t.asymptotic_p:.3g} from chi-square({t.extra_free}) (Wilks; "
               "not calibrated by simulation)")


def _strength_text(name, value):
    v, s = value
    if not s or not np.isfinite(s):
        return f"{name} = {v:.3g} (error not determined)"
    return (f"{name} = {v:.3f} +- {s:.3f}: {abs(v) / s:.1f} sigma from 0 (Newtonian), "
            f"{abs(v - 1.0) / s:.1f} sigma from 1 (general relativity)")


def _verdict(t, row, pair, reference_radius, coverage):
    z, why = _significance(t)
    head = f"{t.tests}: Delta chi-square = {t.delta:.2f}"
    if row.key in ("f-free", "f_sp-free"):
        name = "f" if row.key == "f-free" else "f_sp"
        value = row.f if name == "f" else row.f_sp
        text = f"{t.tests}: {_strength_text(name, value)}; Delta chi-square = {t.delta:.2f}, {why}"
    elif row.ext is not None:
        x, s = row.ext
        m = row.mass[0]
        where = f"inside {reference_radius:g} au" if reference_radius else ""
        if s and x - DETECTION_SIGMA * s > 0 and (z is None or z >= DETECTION_SIGMA):
            text = (f"{head}; extended mass preferred: M_ext = {x * m:.3g} +- {s * m:.3g} "
                    f"solMass {where} ({x / s:.1f} sigma); {why}")
        else:
            up = truncated_gaussian_upper_limit(x, s, 0.95) * m if s else float("nan")
            text = (f"{head}; no extended mass needed: 95% upper limit {up:.3g} solMass "
                    f"{where} (least-squares value truncated at M_ext >= 0); {why}")
    elif t.delta < 0:
        text = (f"{head}; not supported: the model fits worse than the simpler one (a "
                f"bootstrap p, if any, then says only that the simpler model fails too: {why})")
    elif z is None and t.p == 0.0:
        text = f"{head}; beyond every simulated value, too few data sets to say more ({why})"
    elif z is None:
        text = f"{head}; {why}"
    elif z >= DETECTION_SIGMA:
        about = "about " if t.p == 0.0 and np.isfinite(z) else ""
        text = f"{head}; detected at {about}{_sigma(z)} ({why})"
    else:
        text = f"{head}; not detected (below {DETECTION_SIGMA:g} sigma: {why})"
    if ("redshift" in t.tests or "precession" in t.tests) and not coverage:
        text += (f"; NOTE: no star's pericentre passage is covered (at least "
                 f"{PERICENTRE_EPOCHS} epochs within {PERICENTRE_ANGLE:g} deg of true "
                 "anomaly), where this effect builds up")
    if not row.converged:
        text += "; NOTE: this model's fit did not converge"
    red = [r.chi2 / r.dof for r in pair if r.dof > 0]
    if red and min(red) > ERRORS_TOO_SMALL:
        text += (f"; NOTE: neither model fits (reduced chi-square {red[0]:.2f} and "
                 f"{red[-1]:.2f}), so this step compares two inadequate models")
    return text + "."


def _covered_stars(result):
    return [s for k, s in enumerate(result.stars)
            if pericentre_epochs_count(result.model, result.internal, k) >= PERICENTRE_EPOCHS]


def compare_models(ladder, bootstrap=None, bootstrap_info=None):
    """Table, tests and verdicts of a fitted ladder.

    Parameters
    ----------
    ladder : list of deepwell.fit.ladder.LadderFit
    bootstrap : dict, optional
        Model key -> (array of simulated Delta chi-square under its parent,
        number of failed trials).
    bootstrap_info : dict, optional
        Trials per test, seed, error scale and wall time, for the report.

    Returns
    -------
    ModelComparison
    """
    bootstrap = bootstrap or {}
    by_key = {f.rung.key: f.result for f in ladder}
    n_data = ladder[0].result.n_data
    best = min(f.result.chi2 for f in ladder)
    rows = [_row(f, by_key, best, n_data) for f in ladder]
    ref = next((f.result.model.reference_radius for f in ladder
                if f.rung.scale_radius is not None), None)
    covered = _covered_stars(by_key.get("precession", ladder[-1].result))
    tests = []
    for f, row in zip(ladder, rows, strict=True):
        if f.rung.pair is None:
            continue
        null, alt = (by_key[k] for k in f.rung.pair)
        dk = alt.n_free - null.n_free
        delta = row.delta_parent
        t = EffectTest(f.rung.key, f.rung.parent, f.rung.tests, delta, dk,
                       float(stats.chi2.sf(delta, dk)) if dk > 0 else None)
        if f.rung.key in bootstrap:
            deltas, failed = bootstrap[f.rung.key]
            p, interval, z, z_lower = bootstrap_p(delta, deltas)
            t = dataclasses.replace(t, null_deltas=np.asarray(deltas, float), p=p,
                                    p_interval=interval, z=z, z_lower=z_lower,
                                    n_failed=int(failed))
        tests.append(dataclasses.replace(
            t, verdict=_verdict(t, row, [r for r in rows if r.key in f.rung.pair], ref,
                                covered)))
    return ModelComparison(tuple(rows), tuple(tests), tuple(_notes(ladder, rows, covered)),
                           n_data, ref, bootstrap_info)


def _notes(ladder, rows, covered):
    notes = []
    richest = min(rows, key=lambda r: r.chi2)
    red = richest.chi2 / richest.dof if richest.dof > 0 else float("nan")
    if red > ERRORS_TOO_SMALL:
        notes.append(f"the lowest reduced chi-square is {red:.2f}: the stated errors look too "
                     "small, which inflates every Delta chi-square by about that factor; "
                     "calibrate with the bootstrap using the fitted error scale")
    bad = [r.key for r in rows if not r.converged]
    if bad:
        notes.append("the fits of " + ", ".join(bad) + " did not converge")
    notes.append("stars with a covered pericentre passage: "
                 + (", ".join(covered) if covered else "none"))
    moved = [r for r in rows if r.mass[1] > 0]
    if moved:
        lo, hi = min(r.mass[0] for r in moved), max(r.mass[0] for r in moved)
        sig = min(r.mass[1] for r in moved)
        notes.append(f"the mass moves by {hi - lo:.3g} solMass across the models "
                     f"({(hi - lo) / sig:.1f} times its smallest error)")
    failed = [f.rung.key for f in ladder if f.result.notes and any(
        "not constrained" in n for n in f.result.notes)]
    if failed:
        notes.append(f"{plural(len(failed), 'model')} with unconstrained parameter "
                     "combinations: " + ", ".join(failed))
    return notes


def with_evidence(comparison, evidences, prior=(), notes=()):
    """The comparison with log-evidences filled in.

    Parameters
    ----------
    evidences : dict
        Model key -> (log_evidence, log_evidence_err, method); natural log.
    prior : sequence of str
        The stated prior of the evidences, in words (the report prints it).
    notes : sequence of str
        Remarks on the evidences, added to the comparison's notes.
    """
    rows = tuple(dataclasses.replace(r, log_evidence=evidences[r.key][0],
                                     log_evidence_err=evidences[r.key][1],
                                     evidence_method=evidences[r.key][2])
                 if r.key in evidences else r for r in comparison.rows)
    return dataclasses.replace(comparison, rows=rows, evidence_prior=tuple(prior),
                               notes=tuple(comparison.notes) + tuple(notes))
