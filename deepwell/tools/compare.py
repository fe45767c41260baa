"""Which physics do the data demand: ``deepwell compare`` as one library call.

:func:`compare` reads a scenario, fits the model ladder
(:func:`deepwell.fit.ladder.fit_ladder`), optionally calibrates each step's
Delta chi-square with a parametric bootstrap (:func:`run_bootstrap`), and
writes the comparison report (:func:`deepwell.report.comparison.write_comparison`)
into a staged folder that replaces ``out`` only when complete.

Bootstrap
    For each tested model and its parent (the simpler model): simulate data
    sets from the parent's best fit at the observed epochs with the stated
    errors (or, with ``fitted_errors``, those errors times
    sqrt(chi2/dof) of the parent), refit both models
    (:func:`deepwell.fit.ladder.refit_simulated`) and record
    Delta chi-square = chi2(parent) - chi2(model).  Trial ``i`` (test
    ``i // n``, replicate ``i % n``) uses the seeds of
    :func:`deepwell.tools.calibrate.trial_seeds`, so the result does not depend
    on the number of workers or the order trials finish.  The trials run on
    Dask with :func:`deepwell.tools.calibrate.run_trials` and are saved one by one
    to the journal ``OUT.trials.jsonl`` (:mod:`deepwell.tools.journal`);
    ``resume`` continues an interrupted run.
"""

import logging
import os
import time
import traceback
from dataclasses import dataclass

import numpy as np

from deepwell.core.errors import SettingsError
from deepwell.fit.ladder import fit_ladder, refit_simulated, simulate_measurements
from deepwell.report.comparison import write_comparison
from deepwell.report.outdir import discard_output, install_output, prepare_output
from deepwell.results.comparison import compare_models, with_evidence
from deepwell.results.evidence import ladder_evidence
from deepwell.tables import read_observations

from .calibrate import open_client, run_trials, trial_seeds
from .journal import TrialJournal, journal_path
from .pipeline import epoch_settings

__all__ = ["BootstrapSpec", "bootstrap_trial", "bootstrap_tests", "run_bootstrap", "compare"]

log = logging.getLogger("deepwell")

#: Models whose step is bootstrapped by default (and every extended one): each effect
#: tested given all the others.
DEFAULT_TESTS = ("precession", "no-romer", "no-redshift")


@dataclass(frozen=True)
class BootstrapSpec:
    """What a worker needs: per test (key, parent fit, model fit, error factor)."""

    pairs: tuple
    n_per_test: int
    seed: int


def bootstrap_trial(index, spec):
    """One bootstrap trial; never raises (a failure is a record).

    Returns
    -------
    dict
        ``trial``, ``status`` ("ok", "not converged", "failed"), ``message``,
        ``test`` (model key), ``chi2_null``, ``chi2_alt``, ``delta``.
    """
    key, null, alt, scale = spec.pairs[index // spec.n_per_test]
    rec = {"trial": int(index), "status": "failed", "message": "", "test": key,
           "chi2_null": np.nan, "chi2_alt": np.nan, "delta": np.nan}
    try:
        sim, _ = trial_seeds(spec.seed, index)
        data = simulate_measurements(null, np.random.default_rng(sim), scale)
        out = refit_simulated(null, alt, data)
    except Exception as exc:  # a failed trial is recorded, not dropped
        last = traceback.extract_tb(exc.__traceback__)[-1]
        rec["message"] = f"{type(exc).__name__}: {exc} ({os.path.basename(last.filename)}:" \
                         f"{last.lineno})"
        return rec
    rec.update(status="ok" if out["converged"] else "not converged",
               chi2_null=out["chi2_null"], chi2_alt=out["chi2_alt"], delta=out["delta"])
    return rec


def bootstrap_tests(ladder, tests=None):
    """Keys of the models whose step is bootstrapped (default: the effects and extended)."""
    keys = [f.rung.key for f in ladder if f.rung.parent is not None]
    if tests is None:
        return [k for k in keys if k in DEFAULT_TESTS or k.startswith("extended-")]
    unknown = [t for t in tests if t not in keys]
    if unknown:
        raise SettingsError(f"no model {unknown[0]!r} to test (models: {', '.join(keys)})",
                            column="--test")
    return list(tests)


def run_bootstrap(ladder, n_trials, tests=None, seed=0, fitted_errors=False, client=None,
                  progress=None, journal=None, resume=False, scenario=""):
    """Parametric bootstrap of the chosen steps of a fitted ladder (module docstring).

    Parameters
    ----------
    ladder : list of deepwell.fit.ladder.LadderFit
    n_trials : int
        Simulated data sets per test.
    tests : sequence of str, optional
        Model keys to test against their parents (default :func:`bootstrap_tests`).
    seed : int
    fitted_errors : bool
        Scale the simulated errors by sqrt(chi2/dof) of the parent fit.
    client : distributed.Client, optional
        Default: a local cluster for the duration of the call.
    progress : bool or tqdm-like, optional
    journal : str or Path, optional
        Trial journal (:class:`deepwell.tools.journal.TrialJournal`).
    resume : bool
    scenario : str
        Name recorded in the journal's header.

    Returns
    -------
    deltas : dict
        Model key -> (array of Delta chi-square, one per usable trial; failed trials).
    info : dict
        ``trials_per_test``, ``seed``, ``errors``, ``elapsed_s``, ``not_converged``.
    """
    if n_trials < 1:
        raise ValueError(f"need at least one bootstrap trial, got {n_trials}")
    by_key = {f.rung.key: f for f in ladder}
    keys = bootstrap_tests(ladder, tests)
    pairs = []
    for k in keys:
        null, alt = (by_key[m].result for m in by_key[k].rung.pair)
        scale = float(np.sqrt(null.chi2 / null.dof)) if fitted_errors and null.dof > 0 else 1.0
        pairs.append((k, null, alt, scale))
    spec = BootstrapSpec(tuple(pairs), int(n_trials), int(seed))
    book = None
    if journal is not None:
        header = {"scenario": scenario, "seed": int(seed), "names": keys,
                  "mode": f"bootstrap of {n_trials} per test, "
                          f"{'fitted' if fitted_errors else 'stated'} errors"}
        book = TrialJournal(journal, header, resume)
    kw = {"done": book.done, "on_record": book.add} if book else {}
    total = len(keys) * int(n_trials)
    t0 = time.monotonic()
    if client is None:
        with open_client() as own:
            shared = own.scatter(spec, broadcast=True, hash=False)  # a fresh key each run
            records = run_trials(own, shared, total, progress,
                                 task=bootstrap_trial, **kw)
    else:
        shared = client.scatter(spec, broadcast=True, hash=False)  # a fresh key each run
        records = run_trials(client, shared, total, progress,
                             task=bootstrap_trial, **kw)
    out = {}
    for j, k in enumerate(keys):
        recs = records[j * n_trials:(j + 1) * n_trials]
        d = np.array([r.get("delta", np.nan) for r in recs if r["status"] != "failed"], float)
        out[k] = (d, sum(r["status"] == "failed" for r in recs))
    info = {"trials_per_test": int(n_trials), "seed": int(seed),
            "errors": "stated errors times sqrt(chi2/dof) of the simpler model"
                      if fitted_errors else "stated errors",
            "scales": {k: s for k, _, _, s in pairs},
            "elapsed_s": time.monotonic() - t0,
            "not_converged": sum(r["status"] == "not converged" for r in records)}
    return out, info


def compare(scenario, out, settings, scale_radii=(), n_bootstrap=0, tests=None, seed=0,
            fitted_errors=False, figures=True, replace=False, resume=False, scheduler=None,
            workers=None, in_process=False, progress=None, bar=None, evidence="laplace",
            evidence_seconds=None):
    """Fit the model ladder of ``scenario``, calibrate it, write the report folder ``out``.

    Parameters
    ----------
    scenario : str or Path
        Folder with positions.csv (and velocities.csv).
    out : str or Path
        Report folder to create (or replace, with ``replace``).
    settings : deepwell.tables.Settings
    scale_radii : sequence of float
        Plummer scale radii b (au) of the extended-mass models.
    n_bootstrap : int
        Simulated data sets per tested step (0: no bootstrap).
    tests, seed, fitted_errors :
        See :func:`run_bootstrap`.
    figures, replace, resume : bool
        Draw the figure; replace an earlier deepwell output; continue the
        bootstrap journal ``OUT.trials.jsonl``.
    scheduler, workers, in_process :
        The Dask cluster (:func:`deepwell.tools.calibrate.open_client`).
    progress : callable, optional
        Called with a short text at each phase.
    bar : bool, optional
        Show the bootstrap progress bar.
    evidence : {"laplace", "nested", "none"}
        How to compute each model's log-evidence
        (:func:`deepwell.results.evidence.ladder_evidence`): the Laplace
        approximation (default, costs nothing), nested sampling (hours for tens
        of parameters) or none.
    evidence_seconds : float, optional
        Time budget of each nested-sampling run (s); a run cut short is marked.

    Returns
    -------
    deepwell.results.comparison.ModelComparison
    """
    say = progress or (lambda text: None)
    settings = epoch_settings(scenario, settings, say)
    obs = read_observations(scenario, min_epochs=settings.min_epochs, columns=settings.columns)
    tmp = prepare_output(out, replace=replace)
    try:
        ladder = fit_ladder(obs, settings, scale_radii, progress=say)
        deltas, info = None, None
        if n_bootstrap:
            keys = bootstrap_tests(ladder, tests)
            say(f"bootstrap: {n_bootstrap} simulated data sets for each of {len(keys)} tests "
                f"({', '.join(keys)})")
            with open_client(scheduler, workers, not in_process) as client:
                deltas, info = run_bootstrap(ladder, n_bootstrap, keys, seed, fitted_errors,
                                             client, bar, journal_path(out), resume,
                                             str(scenario))
        comparison = compare_models(ladder, deltas, info)
        if evidence != "none":
            say(f"evidences of {len(ladder)} models ({evidence})")
            opts = {"max_seconds": evidence_seconds} if evidence == "nested" else {}
            ev = ladder_evidence(ladder, evidence, rng=np.random.default_rng(seed), **opts)
            comparison = with_evidence(comparison, ev.table(), ev.prior, ev.notes)
        say("writing the comparison")
        write_comparison(comparison, tmp, figures=figures)
        install_output(tmp, out, replace=replace)
    except BaseException:
        discard_output(tmp)
        raise
    journal_path(out).unlink(missing_ok=True)
    return comparison
