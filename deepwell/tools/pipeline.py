"""The whole job of ``deepwell fit`` as one library call: tables in, report folder out.

:func:`fit_report` reads the scenario, fits, runs the analyses, samples the
posterior when asked, and writes the report into a staged folder that
replaces ``out`` only when everything is written (a failed run leaves an
existing folder untouched).
"""

import dataclasses
import math
import tomllib
import warnings
from dataclasses import dataclass
from pathlib import Path

from deepwell.core.errors import OptionError
from deepwell.fit import fit_joint, sample_posterior
from deepwell.fit.sampling import SamplingError, SamplingWarning
from deepwell.report import (
    FigureOptions,
    discard_output,
    install_output,
    prepare_output,
    write_report,
)
from deepwell.results import analyse
from deepwell.tables import input_size, read_external_constraints, read_observations

__all__ = ["FitJob", "fit_report", "chains_folder", "described_epoch", "epoch_settings",
           "check_figure_stars"]


@dataclass(frozen=True)
class FitJob:
    """What ``deepwell fit`` is asked to do beside the fit itself.

    Attributes
    ----------
    figures : bool or deepwell.report.FigureOptions
        Draw the figures (options: which stars get figures of their own).
    strict : bool
        Stop on a star with too few epochs instead of setting it aside.
    extended_mass : tuple of float
        Plummer scale radii (au) for extended-mass limits.
    external : str or None
        CSV of enclosed masses from other tracers.
    jackknife : tuple of str
        "star" and/or "dataset" leave-one-out refits.
    sampling : deepwell.fit.sampling.SamplerOptions or None
        Sample the posterior with these options (None: no sampling).
    resume : bool
        Continue a sampling run from its checkpoints.
    extra : dict
        Extra top-level entries of summary.json (e.g. the command line).
    """

    figures: object = True
    strict: bool = False
    extended_mass: tuple = ()
    external: str | None = None
    jackknife: tuple = ()
    sampling: object = None
    resume: bool = False
    extra: dict | None = None


def chains_folder(out):
    """Folder of the sampling checkpoints of a report folder: ``OUT.chains`` beside it."""
    return Path(str(Path(out)) + ".chains")


def described_epoch(scenario):
    """The reference epoch stated by a scenario folder's ``description.toml``, or None.

    A simulated scenario (``deepwell simulate``) states the epoch its frame
    terms x0, y0 refer to; None when the folder has no readable description.
    """
    path = Path(scenario) / "description.toml"
    try:
        value = tomllib.loads(path.read_text(encoding="utf-8")).get("reference_epoch")
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return None
    return float(value) if isinstance(value, (int, float)) and math.isfinite(value) else None


def epoch_settings(scenario, settings, say):
    """Settings whose reference epoch is the scenario's stated one, unless the user chose one.

    The settings file wins when it sets ``reference_epoch``; a difference from
    the scenario's description is then said in a warning.
    """
    stated = described_epoch(scenario)
    if stated is None or stated == settings.reference_epoch:
        return settings
    if "reference_epoch" in settings.raw:
        warnings.warn(UserWarning(
            f"the scenario's description.toml states reference_epoch = {stated:g}; the fit "
            f"uses {settings.reference_epoch:g} from the settings, so x0, y0 refer to that "
            "epoch"), stacklevel=2)
        return settings
    say(f"reference epoch {stated:g} from the scenario's description.toml")
    return dataclasses.replace(settings, reference_epoch=stated)


def check_figure_stars(figures, observations):
    """Refuse figure stars (``--figure-stars``) that are not in the observations.

    Raises
    ------
    OptionError
        Naming the first unknown star, and saying so when it was set aside for
        too few epochs.
    """
    if not isinstance(figures, FigureOptions):
        return
    known = set(observations.positions["star"].astype(str))
    dropped = {star: reason for star, _, reason in observations.dropped_stars}
    for star in figures.stars:
        if star in dropped:
            raise OptionError("--figure-stars", f"star '{star}' was set aside before the fit "
                                                f"({dropped[star]})")
        if star not in known:
            raise OptionError("--figure-stars", f"no star '{star}' in the observations")


def fit_report(scenario, out, settings, job=FitJob(), replace=False, progress=None):
    """Fit ``scenario`` with ``settings`` and write the report folder ``out``.

    Parameters
    ----------
    scenario : str or Path
        Folder with positions.csv (and velocities.csv).
    out : str or Path
        Report folder to create (or replace, with ``replace``).
    settings : deepwell.tables.Settings
    job : FitJob
    replace : bool
        Replace an earlier deepwell report in ``out`` (foreign files are kept);
        implied by ``job.resume`` (a resumed run updates its own report).
    progress : callable, optional
        Called with a short text at each phase.

    Returns
    -------
    result : deepwell.fit.FitResult
    analyses : deepwell.results.Analyses
    """
    say = progress or (lambda text: None)
    replace = replace or job.resume
    settings = epoch_settings(scenario, settings, say)
    say(f"reading {input_size(scenario)} of observations in {scenario}")
    obs = read_observations(scenario, min_epochs=settings.min_epochs, strict=job.strict,
                            columns=settings.columns)
    check_figure_stars(job.figures, obs)
    external = read_external_constraints(job.external) if job.external else None
    tmp = prepare_output(out, replace=replace)
    try:
        result = fit_joint(obs, settings, progress=say)
        posterior, failed = None, None
        if job.sampling is not None:
            chains = chains_folder(out)
            say(f"sampling the posterior (checkpoints in {chains}; resume with --resume)")
            try:
                posterior = sample_posterior(result, job.sampling, checkpoint=chains,
                                             resume=job.resume)
                say(posterior.statement)
            except SamplingError as exc:  # the least-squares report is still written
                failed = str(exc)
                warnings.warn(SamplingWarning(f"NOT CONVERGED: no posterior: {failed}; the "
                                              "report gives the least-squares fit"),
                              stacklevel=2)
        analyses = analyse(result, extended_mass=job.extended_mass, external=external,
                           jackknife=job.jackknife, posterior=posterior, progress=say,
                           sampling_failed=failed)
        say("writing the report")
        write_report(result, tmp, analyses, figures=job.figures, extra=job.extra,
                     progress=say)
        install_output(tmp, out, replace=replace)
    except BaseException:
        discard_output(tmp)
        raise
    return result, analyses
