"""``deepwell fit``: fit all stars around one central mass and write a report folder."""

import logging
import math
import time
from pathlib import Path

from deepwell.core.errors import OptionError
from deepwell.fit.sampling import SamplerOptions
from deepwell.report import STAR_FIGURE_LIMIT, FigureOptions
from deepwell.tables import Settings, datasets_from_args, effects_from_args, load_settings
from deepwell.tools.pipeline import FitJob, fit_report

from .options import common, count, positive

__all__ = ["add_fit_parser", "run_fit"]

log = logging.getLogger("deepwell")


def add_fit_parser(sub):
    """Define the ``fit`` sub-command."""
    p = sub.add_parser("fit", parents=[common()],
                       help="fit all stars around one central mass and write a report")
    p.add_argument("scenario", help="folder with positions.csv (and velocities.csv)")
    io = p.add_argument_group("output")
    io.add_argument("--out", required=True, help="report folder to create")
    io.add_argument("--replace", action="store_true",
                    help="replace an earlier deepwell report in --out (foreign files are kept)")
    io.add_argument("--no-figures", action="store_true", help="skip the figures (faster)")
    io.add_argument("--figure-stars", nargs="+", metavar="STAR",
                    help=f"stars that get figures of their own even beyond "
                         f"{STAR_FIGURE_LIMIT} stars (where only the best-constrained orbits "
                         "get them)")
    io.add_argument("--all-star-figures", action="store_true",
                    help=f"figures for every star, however many (default: at most "
                         f"{STAR_FIGURE_LIMIT} stars get their own)")
    mod = p.add_argument_group("model and data")
    mod.add_argument("--settings", help="TOML settings file (fixed values, bounds, priors)")
    mod.add_argument("--strict", action="store_true",
                     help="stop on a star with too few epochs instead of setting it aside")
    gr = p.add_argument_group("relativity and extended mass (default: Romer delay, exact "
                              "redshift with f = 1, 1PN precession with f_sp = 1)")
    gr.add_argument("--newtonian", action="store_true",
                    help="switch every relativistic effect off (Keplerian orbits)")
    gr.add_argument("--no-romer", action="store_true", help="no light-travel (Romer) delay")
    gr.add_argument("--redshift", choices=("exact", "first-order", "off"),
                    help="form of the relativistic redshift")
    gr.add_argument("--no-precession", action="store_true",
                    help="no Schwarzschild precession (Keplerian ellipses)")
    gr.add_argument("--fit-f", action="store_true", help="fit the redshift factor f")
    gr.add_argument("--fit-f-sp", action="store_true", help="fit the precession factor f_sp")
    gr.add_argument("--extended-mass", nargs="+", type=positive, metavar="B_AU",
                    help="upper limits on a Plummer mass for these scale radii (au; one fit each)")
    gr.add_argument("--reference-radius", type=positive, metavar="AU",
                    help="radius inside which the extended mass is quoted (default: "
                         "apocentre of the tightest star)")
    post = p.add_argument_group("posterior sampling")
    post.add_argument("--sample", action="store_true",
                      help="sample the joint posterior after the fit (slow: minutes to hours)")
    post.add_argument("--sampler", choices=("nuts", "ensemble"), default="nuts",
                      help="nuts: No-U-Turn Hamiltonian chains (default); ensemble: emcee "
                           "differential-evolution ensembles")
    post.add_argument("--steps", type=count(1),
                      help="kept draws per chain, or steps per ensemble (default: run until "
                           "the convergence rule holds)")
    post.add_argument("--warmup", type=count(0), help="warm-up transitions per NUTS chain "
                                                 "(default 300)")
    post.add_argument("--chains", "--ensembles", dest="chains", type=count(1),
                      help="independent chains (default 4) or ensembles (default 2); R-hat "
                           "is computed across them")
    post.add_argument("--walkers", type=count(2), help="walkers per ensemble (--sampler ensemble)")
    post.add_argument("--max-time", type=positive, metavar="SECONDS",
                      help="wall-time budget per chain; a run cut short says NOT CONVERGED")
    post.add_argument("--seed", type=int, default=0, help="random seed of the sampler")
    post.add_argument("--resume", action="store_true",
                      help="continue the sampling saved in REPORT_DIR.chains/")
    ds = p.add_argument_group("data sets (the 'dataset' column; see [datasets] in the settings)")
    ds.add_argument("--reference-set", nargs="+", metavar="NAME",
                    help="data set(s) that define the frame and velocity zero (no offsets)")
    ds.add_argument("--offsets", action="store_true",
                    help="fit a position offset for every other frame-relative imaging set")
    ds.add_argument("--drifts", action="store_true", help="... and an offset drift (mas/yr)")
    ds.add_argument("--zero-points", action="store_true",
                    help="fit a velocity zero-point for every other spectroscopic set")
    ds.add_argument("--error-model", choices=("scale", "jitter", "none"),
                    help="fit an error scale or an added jitter per data set")
    ds.add_argument("--outliers", action="store_true",
                    help="outlier-mixture likelihood instead of the plain Gaussian")
    ds.add_argument("--jackknife", nargs="+", choices=("star", "dataset"),
                    help="leave-one-out refits: the shift of mass and distance for each")
    prof = p.add_argument_group("enclosed mass")
    prof.add_argument("--external", metavar="CSV",
                      help="enclosed-mass constraints at larger radii (radius_pc, mass, mass_err)")
    p.set_defaults(func=run_fit)
    return p


def check_options(args):
    """Refuse options that cannot be used as given, before any data are read.

    Raises
    ------
    OptionError
        Naming the option: sampling options without ``--sample``, radii, times
        and counts that are not positive.
    """
    if not args.sample:
        for option, value in (("--steps", args.steps), ("--warmup", args.warmup),
                              ("--chains", args.chains), ("--walkers", args.walkers),
                              ("--max-time", args.max_time), ("--resume", args.resume or None),
                              ("--seed", None if args.seed == 0 else args.seed),
                              ("--sampler", None if args.sampler == "nuts" else args.sampler)):
            if value is not None:
                raise OptionError(option, "applies to posterior sampling only: add --sample "
                                          "(or leave the option out)")
    if args.no_figures:
        for option, value in (("--figure-stars", args.figure_stars),
                              ("--all-star-figures", args.all_star_figures or None)):
            if value is not None:
                raise OptionError(option, "asks for figures, but --no-figures skips them")
    for b in args.extended_mass or ():
        if not (b > 0 and math.isfinite(b)):
            raise OptionError("--extended-mass", f"scale radii must be positive (au), got {b:g}")
    positive = (("--reference-radius", args.reference_radius, "au"),
                ("--max-time", args.max_time, "s"))
    for option, value, unit in positive:
        if value is not None and not (value > 0 and math.isfinite(value)):
            raise OptionError(option, f"must be positive ({unit}), got {value:g}")
    for option, value, least in (("--steps", args.steps, 1), ("--warmup", args.warmup, 0),
                                 ("--chains", args.chains, 1), ("--walkers", args.walkers, 2)):
        if value is not None and value < least:
            raise OptionError(option, f"must be at least {least}, got {value}")


def run_fit(args):
    """Run ``deepwell fit``: settings from the file and the options, then one library call."""
    check_options(args)
    t0 = time.perf_counter()
    settings = load_settings(args.settings) if args.settings else Settings()
    settings = _dataset_settings(_effect_settings(settings, args), args)
    job = FitJob(figures=_figures(args), strict=args.strict,
                 extended_mass=tuple(args.extended_mass or ()), external=args.external,
                 jackknife=tuple(args.jackknife or ()), sampling=_sampling(args),
                 resume=args.resume, extra={"command": "deepwell " + " ".join(args.argv)})
    result, _ = fit_report(args.scenario, args.out, settings, job, replace=args.replace,
                           progress=log.info)
    m, sm, _ = result.quantity("mass")
    d, sd, _ = result.quantity("distance")
    log.info("mass %.4g +- %.2g solMass, distance %.5g +- %.2g pc, chi2/dof %.1f/%d (%.1f s)",
             m, sm, d, sd, result.chi2, result.dof, time.perf_counter() - t0)
    log.info("report: %s", Path(args.out) / "report.md")
    return 0


def _figures(args):
    """False without figures, else the figure options of the command line."""
    if args.no_figures:
        return False
    return FigureOptions(star_limit=None if args.all_star_figures else STAR_FIGURE_LIMIT,
                         stars=tuple(args.figure_stars or ()))


def _sampling(args):
    """The sampler options of the command line (None without --sample)."""
    if not args.sample:
        return None
    return SamplerOptions(sampler=args.sampler, n_chains=args.chains, n_steps=args.steps,
                          n_warmup=args.warmup, n_walkers=args.walkers, max_time=args.max_time,
                          seed=args.seed, progress=not args.quiet)


def _effect_settings(settings, args):
    """Settings with the command line's effect switches applied."""

    flags = dict(
        romer=False if args.no_romer else None,
        redshift=args.redshift,
        precession=False if args.no_precession else None,
        fit_f=True if args.fit_f else None,
        fit_f_sp=True if args.fit_f_sp else None,
        reference_radius=args.reference_radius,
        newtonian=args.newtonian,
    )
    if not any(v not in (None, False) for v in flags.values()):
        return settings
    return effects_from_args(settings, **flags)


def _dataset_settings(settings, args):
    """Settings with the command line's data-set switches applied."""

    flags = dict(reference=args.reference_set, offsets=True if args.offsets else None,
                 drifts=True if args.drifts else None,
                 zero_points=True if args.zero_points else None,
                 error_model=args.error_model,
                 likelihood="mixture" if args.outliers else None)
    if all(v is None for v in flags.values()):
        return settings
    return datasets_from_args(settings, **flags)
