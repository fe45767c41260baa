"""Calibration at scale: do the fit's intervals contain the truth as often as they claim?

``deepwell calibrate SCENARIO --trials N --out DIR`` simulates N data sets of a
scenario (a folder holding ``description.toml``, or the description file
itself) from its true parameters, fits each one, and counts how often the 68%
and 95% intervals of every fitted parameter with a stated truth contain it:
the shared parameters (and f, f_sp when free), the data-set terms that the
scenario's ``[systematics.NAME]`` inject (offsets, zero-points, error scales,
measured against the fit's reference set) and the per-star Keplerian
elements, each star alone and pooled per element
(:mod:`deepwell.tools.scoring` says what is scored and how fitted values are
aligned with the truth).
Each trial is a complete re-simulation (:func:`deepwell.tools.simulate.simulate`
with a fresh random generator): new noise *and* new epoch jitter and coverage
draws, so the coverage is that of the observing design, not of one epoch list.

Intervals checked
    least squares (default): value +- 1 sigma (68.27%) and +- 1.96 sigma (95%)
    from the fit's covariance; ``--sample``: the central 68.27% and 95%
    posterior intervals (percentiles of all draws of
    :func:`deepwell.fit.sampling.sample_posterior`), point value the median.

Verdict
    With n usable trials and nominal level p, an honest interval contains the
    truth k ~ Binomial(n, p) times.  The *acceptance band* is the central
    99.7% range of that distribution, [F^-1(0.0015), F^-1(0.9985)] with F the
    binomial CDF, computed exactly (:func:`acceptance_band`).  A coverage
    outside it is reported as "too narrow" (over-confident) or "too wide".
    The measured coverage also gets an exact 99.7% Clopper-Pearson interval
    (:func:`clopper_pearson`).  With 7 parameters x 2 levels about 4% of
    perfectly honest calibrations still show one flag by chance; with the
    per-star elements there are many more rows, and a single flag among
    them means little.  A pooled row counts all stars' hits of one element
    together (n = stars x trials), so it can tell sooner; it treats the stars
    as independent, which they are only approximately (they share the mass
    and distance).

Seeds
    Trial i uses ``numpy.random.SeedSequence(seed, spawn_key=(i,))``, which is
    ``SeedSequence(seed).spawn(N)[i]``; its first child drives the simulation
    and its second the sampler, so results do not depend on N, on the number
    of workers or on the order in which trials finish.  Nothing is seeded
    globally.

Dask
    Trials run as Dask tasks: on a local cluster of ``--workers`` processes
    (one thread each, BLAS/OpenMP threads set to 1) by default, or on an
    existing scheduler given by ``--scheduler ADDRESS`` (its workers need
    deepwell installed).  At most a few trials per worker are in flight, so
    thousands of trials need little memory.  A trial that fails is recorded
    with its error, never dropped silently.

Journal
    Finished trials are saved one by one to ``OUT.trials.jsonl``
    (:mod:`deepwell.tools.journal`); ``--resume`` continues a run that
    was interrupted.

Documented demo (not in the default test suite; ~2.5 h on 2 cores; result in README)::

    deepwell calibrate scenarios/rich --trials 800 --out calib-rich

References
----------
Clopper, C. J. & Pearson, E. S. 1934, Biometrika 26, 404 (exact binomial
interval; from memory).
"""

import logging
import math
import os
import time
import traceback
import uuid
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import special
from tqdm.auto import tqdm

from deepwell.core.errors import DeepwellError
from deepwell.core.parameters import SHARED
from deepwell.fit.joint import fit_joint
from deepwell.fit.sampling import SamplerOptions, sample_posterior
from deepwell.fit.sampling.ensemble import NoProgress
from deepwell.model.kernels.kepler import solve_kepler
from deepwell.model.kernels.post_newtonian import pn_track
from deepwell.results.proportions import clopper_pearson
from deepwell.tables.observations import Observations
from deepwell.tables.settings import Settings, SharedSetting

from .journal import TrialJournal
from .scoring import (
    POOL_PREFIX,
    aligned,
    pools_of,
    scored_names,
    star_scorable,
    star_shift,
    systematics_datasets,
    truth_of,
    unit_of_name,
)
from .simulate import ELEMENT_KEYS, load_description, simulate

__all__ = ["LEVELS", "BAND_LEVEL", "TOO_FEW", "trials_to_tell", "TrialSpec", "CalibrationResult",
           "acceptance_band", "clopper_pearson", "scenario_description", "fit_settings",
           "calibrated_names", "observations_from", "run_trial", "open_client", "run_trials",
           "summarise", "calibrate"]

log = logging.getLogger("deepwell")

#: Nominal interval levels: +-1 sigma and +-1.96 sigma of a Gaussian.
LEVELS = (math.erf(1.0 / math.sqrt(2.0)), 0.95)
_Z = {LEVELS[0]: 1.0, LEVELS[1]: float(special.ndtri(0.975))}
#: Probability content of the acceptance band and of the Clopper-Pearson interval.
BAND_LEVEL = 0.997
_TAGS = ("68", "95")
_POS = ["star", "epoch", "ra", "dec", "ra_err", "dec_err", "corr", "dataset", "relative_to",
        "exclude", "line", "file"]
_VEL = ["star", "epoch", "vr", "vr_err", "dataset", "exclude", "line", "file"]


# ------------------------------------------------------------------ statistics
def _binom_cdf(n, p):
    """Exact Binomial(n, p) CDF at k = 0..n (pmf summed in log space)."""
    k = np.arange(n + 1)
    with np.errstate(divide="ignore"):
        logpmf = (special.gammaln(n + 1) - special.gammaln(k + 1) - special.gammaln(n - k + 1)
                  + special.xlogy(k, p) + special.xlog1py(n - k, -p))
    return np.cumsum(np.exp(logpmf))


def acceptance_band(n, p, level=BAND_LEVEL):
    """Counts an honest interval of level ``p`` reaches in ``n`` trials.

    Returns
    -------
    (int, int)
        k_lo = smallest k with F(k) >= (1 - level)/2 and k_hi = smallest k
        with F(k) >= (1 + level)/2, F the Binomial(n, p) CDF: at least
        ``level`` of honest calibrations give k_lo <= k <= k_hi.
    """
    if n < 1:
        return 0, 0
    cdf = _binom_cdf(int(n), float(p))
    tail = 0.5 * (1.0 - level)
    lo = int(np.searchsorted(cdf, tail * (1 - 1e-13), side="left"))
    hi = int(np.searchsorted(cdf, (1.0 - tail) * (1 - 1e-13), side="left"))
    return lo, min(hi, int(n))


# ------------------------------------------------------------------ one trial
@dataclass(frozen=True)
class TrialSpec:
    """Everything a worker needs for one trial (small and picklable)."""

    description: object  # deepwell.tools.simulate.ScenarioDescription
    settings: object  # deepwell.tables.settings.Settings
    names: tuple  # scored parameters (deepwell.tools.scoring.scored_names)
    seed: int
    sample: SamplerOptions | None = None


def scenario_description(path):
    """The scenario description from a folder holding ``description.toml`` or a file."""

    path = Path(path)
    return load_description(path / "description.toml" if path.is_dir() else path)


def fit_settings(description, settings=None):
    """Fit settings whose effects and data-set terms match how ``description`` is simulated.

    A settings object with its own ``[effects]`` table keeps those effects, and
    one with its own ``[datasets]`` table keeps those data-set choices (that is
    how a deliberately different fit model is calibrated).  Otherwise the
    effects follow the scenario's ``[effects]`` and the data-set terms its
    ``[systematics.NAME]`` tables
    (:func:`deepwell.tools.scoring.systematics_datasets`: offsets and
    zero-points against a reference set, error scales).
    """

    settings = settings or Settings(reference_epoch=description.reference_epoch)
    if not settings.datasets:
        table = systematics_datasets(description)
        if table:
            settings = replace(settings, datasets=table)
            settings.dataset_config()  # validate
    if settings.effects:
        return settings
    fx = description.effects
    table = {"romer": bool(fx.romer), "redshift": "exact" if fx.redshift else "off",
             "precession": bool(fx.precession), "extended_mass": fx.plummer_mass > 0}
    if fx.plummer_mass > 0:
        table["extended_scale"] = fx.plummer_scale
    shared = dict(settings.shared)
    for name, value in (("f", fx.redshift), ("f_sp", fx.precession)):
        if value not in (0.0, 1.0) and name not in shared:
            shared[name] = SharedSetting(value=value, fixed=True)
    out = replace(settings, effects=table, shared=shared)
    out.effect_switches()  # validate
    return out


def calibrated_names(settings, description=None):
    """Parameters the fit frees and whose truth the scenario states.

    Without ``description``: the shared parameters and f, f_sp.  With it, also
    the data-set terms and the per-star elements
    (:func:`deepwell.tools.scoring.scored_names`).
    """
    if description is not None:
        return tuple(scored_names(description, settings))
    fx = settings.effect_switches()
    names = [n for n in SHARED if not settings.shared_setting(n).fixed]
    names += [n for n in ("f", "f_sp") if n in fx.extra_names
              and not settings.shared_setting(n).fixed]
    return tuple(names)


def observations_from(data, min_epochs=3):
    """In-memory :class:`Observations` of simulated tables (stars with too few epochs dropped)."""
    pos, vel = data.positions.copy(), data.velocities.copy()
    for df, name in ((pos, "simulated positions"), (vel, "simulated velocities")):
        df["exclude"] = False
        df["line"] = np.arange(len(df), dtype=int) + 2
        df["file"] = name
    if "corr" not in pos:
        pos["corr"] = 0.0
    counts = pos.groupby("star").epoch.nunique()
    dropped = tuple((s, "simulated positions", f"only {int(c)} position epochs")
                    for s, c in counts.items() if c < min_epochs)
    gone = [d[0] for d in dropped]
    pos = pos[~pos.star.isin(gone)][_POS].reset_index(drop=True)
    vel = vel[~vel.star.isin(gone) & vel.star.isin(set(pos.star))][_VEL].reset_index(drop=True)
    return Observations(pos, vel, dropped, {}, "simulated")


def trial_seeds(seed, index):
    """(simulation SeedSequence, sampler seed) of trial ``index``."""
    sim, mcmc = np.random.SeedSequence(seed, spawn_key=(int(index),)).spawn(2)
    return sim, int(mcmc.generate_state(1)[0])


def _posterior_draws(spec, result, index):
    """({label: all draws}, converged) of the posterior of one trial's fit."""
    opt = replace(spec.sample, seed=trial_seeds(spec.seed, index)[1], progress=False,
                  processes=1)
    post = sample_posterior(result, opt)
    draws = {lab: post.samples[..., i].ravel() for i, lab in enumerate(post.labels)}
    return draws, bool(post.converged)


def _intervals(spec, result, index):
    """{name: (value, sigma, lo68, hi68, lo95, hi95)} from a fit or its posterior; notes.

    Per-star elements are compared like with like (:mod:`deepwell.tools.scoring`):
    each is moved by the difference between the true elements of the fitted
    pericentre passage and the stated ones, angles by whole turns.  A name the
    fit lacks, or a star that cannot be compared like with like, gets NaN.
    """
    names = spec.names
    truth = truth_of(spec.description, spec.settings, names)
    draws, converged = (None, True) if spec.sample is None else \
        _posterior_draws(spec, result, index)
    stars = {s.name: s for s in spec.description.stars}
    shift, skip = {}, {}
    for star in sorted({n.rpartition(":")[0] for n in names
                        if n.rpartition(":")[2] in ELEMENT_KEYS} & set(result.stars)):
        why = star_scorable(spec.description, result, star)
        if why:
            skip[star] = why
            continue
        label = f"{star}:t_peri"
        tp = result.value(label) if draws is None else float(np.median(draws[label]))
        shift.update({f"{star}:{el}": d
                      for el, d in star_shift(spec.description, stars[star], tp).items()})
    have = [n for n in names if n in result.labels and n.rpartition(":")[0] not in skip]
    out = {n: (np.nan,) * 6 for n in names}
    notes = [f"elements of {s} not scored: {why}" for s, why in sorted(skip.items())]
    q = [50.0] + [100 * x for p in LEVELS for x in (0.5 - p / 2, 0.5 + p / 2)]
    for n in have:
        if draws is None:
            v, s = float(aligned(result.value(n), n, truth[n], shift.get(n, 0.0))), \
                result.sigma(n)
            out[n] = (v, s, *(x for p in LEVELS for x in (v - _Z[p] * s, v + _Z[p] * s)))
        else:
            med, lo68, hi68, lo95, hi95 = np.percentile(
                aligned(draws[n], n, truth[n], shift.get(n, 0.0)), q)
            out[n] = (med, 0.5 * (hi68 - lo68), lo68, hi68, lo95, hi95)
    return out, converged, notes


def run_trial(index, spec):
    """Simulate and fit trial ``index``; never raises (a failure is a record).

    Returns
    -------
    dict
        ``trial, status ("ok", "not converged" or "failed"), message, chi2,
        n_data, n_stars`` and ``NAME_value, NAME_sigma, NAME_lo68, NAME_hi68,
        NAME_lo95, NAME_hi95`` per calibrated parameter (NaN when failed).
    """

    rec = {"trial": int(index), "status": "failed", "message": "", "chi2": np.nan,
           "n_data": 0, "n_stars": 0}
    for n in spec.names:
        rec.update({f"{n}_{k}": np.nan for k in ("value", "sigma", "lo68", "hi68", "lo95",
                                                  "hi95")})
    try:
        sim_seq, _ = trial_seeds(spec.seed, index)
        data = simulate(spec.description, np.random.default_rng(sim_seq))
        obs = observations_from(data, spec.settings.min_epochs)
        result = fit_joint(obs, spec.settings)
        found, ok, notes = _intervals(spec, result, index)
    except Exception as exc:  # a failed trial is recorded, not dropped
        last = traceback.extract_tb(exc.__traceback__)[-1]
        rec["message"] = f"{type(exc).__name__}: {exc} ({os.path.basename(last.filename)}:" \
                         f"{last.lineno})"
        return rec
    for n, vals in found.items():
        rec.update(zip((f"{n}_{k}" for k in ("value", "sigma", "lo68", "hi68", "lo95", "hi95")),
                       map(float, vals), strict=True))
    converged = bool(result.converged) and ok
    rec.update(status="ok" if converged else "not converged", chi2=float(result.chi2),
               n_data=int(result.n_data), n_stars=len(result.stars),
               message="; ".join([f"dropped {s}: {why}" for s, _, why in obs.dropped_stars]
                                 + notes))
    return rec


# ------------------------------------------------------------------ running trials
def _warm_up():
    """Load the compiled kernels once in a worker (numba cache) before trials arrive."""

    solve_kepler(np.array([0.5]), np.array([0.3]))
    pn_track(np.array([2000.0, 2001.0]), 100.0, 0.5, 1.0, 1.0, 1.0, 2000.0, 4e6, 2000.0)
    return True


@contextmanager
def open_client(scheduler=None, n_workers=None, processes=True):
    """A Dask client: to ``scheduler`` if given, else to a new local cluster.

    The local cluster has ``n_workers`` (default: CPU count) single-threaded
    workers; ``processes=False`` keeps them as threads in this process (fast
    to start, for tests).  Client and cluster are closed on exit.
    """
    from distributed import Client, LocalCluster

    chatty = logging.getLogger("distributed")
    level = chatty.level
    chatty.setLevel(max(level, logging.WARNING))  # Dask's start-up chatter
    try:
        if scheduler:
            with Client(scheduler) as client:
                yield client
            return
        threads = {k: "1" for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
                                    "MKL_NUM_THREADS")}
        kw = {"env": threads} if processes else {}
        with LocalCluster(n_workers=n_workers or os.cpu_count() or 1, threads_per_worker=1,
                          processes=processes, dashboard_address=":0", **kw) as cluster, \
                Client(cluster) as client:
            yield client
    finally:
        chatty.setLevel(level)


def _progress(enabled, total):
    if not enabled:
        return NoProgress()
    if not isinstance(enabled, bool):
        return enabled

    return tqdm(total=total, desc="trials", unit="trial", dynamic_ncols=True)


def run_trials(client, spec, n_trials, progress=None, in_flight=None, done=None,
               on_record=None, task=None):
    """Run trials 0..n_trials-1 on ``client``; return the records in trial order.

    At most ``in_flight`` trials (default 4 per worker) are submitted at once.
    A trial whose worker dies is recorded as failed with the Dask error.
    ``done`` maps trial index -> record of trials already run (they are not
    run again); ``on_record(record)`` is called as each new trial finishes.
    ``task(index, spec) -> record`` runs one trial (default :func:`run_trial`;
    it must never raise and its record has ``trial`` and ``status``).
    """
    task = task or run_trial
    from distributed import as_completed

    try:
        client.run(_warm_up)
    except Exception as exc:  # e.g. deepwell missing on a remote worker
        raise DeepwellError(f"the Dask workers cannot run deepwell: {type(exc).__name__}: "
                            f"{exc}") from None
    run_id = uuid.uuid4().hex[:12]  # task keys unique even for equal runs on one scheduler
    n_workers = max(1, len(client.scheduler_info().get("workers", {})))
    in_flight = in_flight or 4 * n_workers
    done = {i: r for i, r in (done or {}).items() if i < n_trials}
    bar = _progress(progress, n_trials)
    bar.update(len(done))
    todo = iter([i for i in range(n_trials) if i not in done])
    futures = {}

    def submit(i):
        fut = client.submit(task, i, spec, pure=False, key=f"deepwell-trial-{run_id}-{i}")
        futures[fut.key] = i
        return fut

    queue = as_completed([submit(i) for _, i in zip(range(in_flight), todo, strict=False)])
    records = dict(done)
    failed = sum(r["status"] == "failed" for r in done.values())
    for fut in queue:
        i = futures.pop(fut.key)
        try:
            rec = fut.result()
        except Exception as exc:  # worker lost, task cancelled
            rec = {"trial": i, "status": "failed", "message": f"{type(exc).__name__}: {exc}"}
        records[i] = rec
        if on_record is not None:
            on_record(rec)
        failed += rec["status"] == "failed"
        bar.update(1)
        bar.set_postfix_str(f"{failed} failed", refresh=False)
        nxt = next(todo, None)
        if nxt is not None:
            queue.add(submit(nxt))
    bar.close()
    return [records[i] for i in range(n_trials)]


# ------------------------------------------------------------------ summary
@dataclass(frozen=True)
class CalibrationResult:
    """Outcome of a calibration run.

    Attributes
    ----------
    trials : pandas.DataFrame
        One row per trial (see :func:`run_trial`), in trial order.
    table : pandas.DataFrame
        One row per calibrated parameter (see :func:`summarise`).
    truth : dict
        True value of every calibrated parameter (in the fit's reference
        convention, :mod:`deepwell.tools.scoring`).
    units : dict
        Unit of every calibrated parameter and pooled row.
    scenario, mode : str
        Scenario name; "least squares" or "posterior".
    seed, n_trials : int
    elapsed : float
        Wall time, s.
    pools : dict
        {pooled row name: member names} of the per-star elements.
    """

    trials: pd.DataFrame
    table: pd.DataFrame
    truth: dict
    units: dict
    scenario: str
    mode: str
    seed: int
    n_trials: int
    elapsed: float
    pools: dict = field(default_factory=dict)

    @property
    def n_failed(self):
        return int((self.trials.status == "failed").sum())

    @property
    def n_not_converged(self):
        return int((self.trials.status == "not converged").sum())

    @property
    def honest(self):
        return bool(self.table.honest.all())


#: A coverage inside its band is called honest only when the band is narrower than
#: +-TELL_HALF_WIDTH; a wider band cannot tell honest intervals from mis-stated ones.
TELL_HALF_WIDTH = 0.1
#: Verdict of a coverage inside a band too wide to tell.
TOO_FEW = "too few trials to tell"


def trials_to_tell(p, half_width=TELL_HALF_WIDTH):
    """Trials needed for a 99.7% band of about +-half_width at level p (normal approximation)."""
    return int(math.ceil(9.0 * p * (1.0 - p) / half_width**2))


def _verdict(k, band, n):
    if k < band[0]:
        return "too narrow"
    if k > band[1]:
        return "too wide"
    return TOO_FEW if (band[1] - band[0]) / n > 2.0 * TELL_HALF_WIDTH else "honest"


def _statement(row):
    """One clause on a parameter's calibration, for calibration.md."""
    verdicts = {tag: row[f"verdict{tag}"] for tag in _TAGS}
    if row["honest"]:
        return "honest: both intervals contain the truth as often as they claim"
    if all(v in ("honest", TOO_FEW) for v in verdicts.values()):
        need = max(trials_to_tell(p) for p in LEVELS)
        return ("consistent with honest intervals, but too few trials to tell: the acceptance "
                f"bands are wider than +-{TELL_HALF_WIDTH:g} (about {need} trials would "
                "narrow them enough)")
    bad = [f"the {tag}% interval is {v}" for tag, v in verdicts.items()
           if v not in ("honest", TOO_FEW)]
    return "NOT honest: " + " and ".join(bad)


def _columns(trials, name, true):
    """(value, sigma, lo68, hi68, lo95, hi95, truth) arrays of ``name`` over usable trials."""
    v, s = trials[f"{name}_value"].to_numpy(float), trials[f"{name}_sigma"].to_numpy(float)
    use = np.isfinite(v) & np.isfinite(s) & (s > 0)
    ends = [trials[f"{name}_{k}{tag}"].to_numpy(float)[use] for tag in _TAGS
            for k in ("lo", "hi")]
    return (v[use], s[use], *ends, np.full(int(use.sum()), float(true)))


def _row(name, group, true, cols, level):
    """One summary row from the stacked columns of :func:`_columns`."""
    v, s, lo68, hi68, lo95, hi95, t = cols
    n = int(v.size)
    pull = (v - t) / s
    err = v - t
    row = {"parameter": name, "group": group, "truth": true, "trials": n}
    for tag, p, lo, hi in zip(_TAGS, LEVELS, (lo68, lo95), (hi68, hi95), strict=True):
        k = int(((lo <= t) & (hi >= t)).sum())
        band = acceptance_band(n, p, level)
        cp = clopper_pearson(k, n, level)
        row.update({f"nominal{tag}": p, f"hits{tag}": k,
                    f"coverage{tag}": k / n if n else np.nan,
                    f"band{tag}_lo": band[0] / n if n else np.nan,
                    f"band{tag}_hi": band[1] / n if n else np.nan,
                    f"cp{tag}_lo": cp[0], f"cp{tag}_hi": cp[1],
                    f"verdict{tag}": _verdict(k, band, n) if n else "no trials"})
    sd = lambda x: float(np.std(x, ddof=1)) if x.size > 1 else np.nan  # noqa: E731
    row.update(bias=float(np.mean(err)) if n else np.nan,
               bias_err=sd(err) / math.sqrt(n) if n > 1 else np.nan,
               bias_sigma=float(np.mean(pull)) if n else np.nan,
               bias_sigma_err=sd(pull) / math.sqrt(n) if n > 1 else np.nan,
               pull_scatter=sd(pull))
    row["honest"] = row["verdict68"] == row["verdict95"] == "honest"
    row["statement"] = _statement(row)
    return row


def summarise(trials, truth, level=BAND_LEVEL, groups=None, pools=None):
    """Coverage, bands, bias and pull scatter per parameter from the trial records.

    Trials that failed, or whose interval is not finite, are left out of
    that parameter's counts (``trials`` column).

    Parameters
    ----------
    trials : pandas.DataFrame
        Trial records (:func:`run_trial`).
    truth : dict
        True value of each scored name.
    level : float
        Probability content of the acceptance band and the Clopper-Pearson interval.
    groups : dict, optional
        Group of each name ("shared", "data set", "star"); default "shared".
    pools : dict, optional
        {pooled row name: member names}: each pooled row counts the hits of all
        its members together, n = the sum of their usable trials, against
        Binomial(n, nominal) (members' truths differ; its ``truth`` is NaN).
        This treats the members as independent; stars share the mass and
        distance, so their hits may be correlated, which widens the true
        spread of the pooled count beyond the binomial band.

    Returns
    -------
    pandas.DataFrame
        One row per name, then one per pool (group "pooled").
    """
    groups = groups or {}
    rows = [_row(name, groups.get(name, "shared"), true, _columns(trials, name, true), level)
            for name, true in truth.items()]
    for pool, members in (pools or {}).items():
        parts = [_columns(trials, m, truth[m]) for m in members]
        cols = tuple(np.concatenate(c) for c in zip(*parts, strict=True))
        row = _row(pool, "pooled", np.nan, cols, level)
        row["statement"] += (f" (pooled over {len(members)} stars, counted as independent "
                             "trials)")
        rows.append(row)
    return pd.DataFrame(rows)


def calibrate(description, n_trials, seed=0, settings=None, sample=None, client=None,
              progress=None, in_flight=None, journal=None, resume=False):
    """Simulate, fit and score ``n_trials`` data sets of a scenario.

    Parameters
    ----------
    description : deepwell.tools.simulate.ScenarioDescription
    n_trials : int
    seed : int
        Root of the per-trial seeds (module docstring).
    settings : deepwell.tables.settings.Settings, optional
        Fit settings; by default their effects match the scenario (:func:`fit_settings`).
    sample : deepwell.fit.sampling.SamplerOptions, optional
        Check posterior intervals instead of least-squares ones.
    client : distributed.Client, optional
        Default: a local cluster for the duration of the call.
    progress : bool or tqdm-like, optional
    journal : str or Path, optional
        Save each finished trial there as it arrives
        (:class:`deepwell.tools.journal.TrialJournal`).
    resume : bool
        Skip the trials already in ``journal``.

    Returns
    -------
    CalibrationResult
    """
    if n_trials < 1:
        raise ValueError(f"need at least one trial, got {n_trials}")
    settings = fit_settings(description, settings)
    groups = scored_names(description, settings)
    names = tuple(groups)
    spec = TrialSpec(description, settings, names, int(seed), sample)
    book = None
    if journal is not None:

        header = {"scenario": description.name, "seed": int(seed), "names": list(names),
                  "mode": "least squares" if sample is None else f"posterior {sample}"}
        book = TrialJournal(journal, header, resume)
    kw = {"done": book.done, "on_record": book.add} if book else {}
    t0 = time.monotonic()
    if client is None:
        with open_client() as own:
            records = run_trials(own, spec, n_trials, progress, in_flight, **kw)
    else:
        records = run_trials(client, spec, n_trials, progress, in_flight, **kw)
    trials = pd.DataFrame(records, columns=list(run_trial_columns(names)))
    truth = truth_of(description, settings, names)
    pools = pools_of(groups)
    units = {n: unit_of_name(n) for n in names}
    units.update({p: unit_of_name(p.removeprefix(POOL_PREFIX)) for p in pools})
    table = summarise(trials, truth, groups=groups, pools=pools)
    return CalibrationResult(trials, table, truth, units, description.name,
                             "least squares" if sample is None else "posterior", int(seed),
                             int(n_trials), time.monotonic() - t0, pools)


def run_trial_columns(names):
    """Columns of a trial record, in order."""
    yield from ("trial", "status", "message", "chi2", "n_data", "n_stars")
    for n in names:
        yield from (f"{n}_{k}" for k in ("value", "sigma", "lo68", "hi68", "lo95", "hi95"))


