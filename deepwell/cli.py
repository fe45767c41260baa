"""The ``deepwell`` command line: a thin layer over the library.

Each sub-command parses its options, calls one library function and turns a
user error into one line on stderr with exit status 2 (never a traceback).
"""

import argparse
import logging
import os
import sys
import time
import warnings
from pathlib import Path

from . import __version__
from .errors import DeepwellError

__all__ = ["main"]

log = logging.getLogger("deepwell")


def _common():
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("-q", "--quiet", action="store_true", help="print only warnings")
    return common


def _add_fit(sub):
    p = sub.add_parser("fit", parents=[_common()],
                       help="fit all stars around one central mass and write a report")
    p.add_argument("scenario", help="folder with positions.csv (and velocities.csv)")
    io = p.add_argument_group("output")
    io.add_argument("--out", required=True, help="report folder to create")
    io.add_argument("--replace", action="store_true",
                    help="replace an earlier deepwell report in --out (foreign files are kept)")
    io.add_argument("--no-figures", action="store_true", help="skip the figures (faster)")
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
    gr.add_argument("--extended-mass", nargs="+", type=float, metavar="B_AU",
                    help="upper limits on a Plummer mass for these scale radii (au; one fit each)")
    gr.add_argument("--reference-radius", type=float, metavar="AU",
                    help="radius inside which the extended mass is quoted (default: "
                         "apocentre of the tightest star)")
    post = p.add_argument_group("posterior sampling")
    post.add_argument("--sample", action="store_true",
                      help="sample the joint posterior after the fit (slow: minutes to hours)")
    post.add_argument("--sampler", choices=("nuts", "ensemble"), default="nuts",
                      help="nuts: No-U-Turn Hamiltonian chains (default); ensemble: emcee "
                           "differential-evolution ensembles")
    post.add_argument("--steps", type=int,
                      help="kept draws per chain, or steps per ensemble (default: run until "
                           "the convergence rule holds)")
    post.add_argument("--warmup", type=int, help="warm-up transitions per NUTS chain "
                                                 "(default 300)")
    post.add_argument("--chains", "--ensembles", dest="chains", type=int,
                      help="independent chains (default 4) or ensembles (default 2); R-hat "
                           "is computed across them")
    post.add_argument("--walkers", type=int, help="walkers per ensemble (--sampler ensemble)")
    post.add_argument("--max-time", type=float, metavar="SECONDS",
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
    p.set_defaults(func=_run_fit)


def _add_simulate(sub):
    p = sub.add_parser("simulate", parents=[_common()],
                       help="make invented data from a scenario description")
    p.add_argument("description", help="scenario description (TOML)")
    p.add_argument("--out", required=True, help="scenario folder to create")
    p.add_argument("--replace", action="store_true", help="replace an earlier simulation")
    p.set_defaults(func=_run_simulate)


def _parser():
    parser = argparse.ArgumentParser(
        prog="deepwell",
        description="Weigh the dark mass at a galaxy's centre from the orbits of its stars.",
    )
    parser.add_argument("--version", action="version", version=f"deepwell {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    _add_fit(sub)
    _add_simulate(sub)
    from .calibrate import add_calibrate_parser
    from .plan import add_plan_parser

    add_plan_parser(sub)
    add_calibrate_parser(sub)
    return parser


def _run_fit(args):
    from .fit import fit_joint
    from .outdir import discard_output, install_output, prepare_output
    from .report import write_report
    from .settings import Settings, load_settings
    from .tables import read_observations

    t0 = time.perf_counter()
    settings = load_settings(args.settings) if args.settings else Settings()
    settings = _effect_settings(settings, args)
    settings = _dataset_settings(settings, args)
    obs = read_observations(args.scenario, min_epochs=settings.min_epochs, strict=args.strict)
    tmp = prepare_output(args.out, replace=args.replace)
    try:
        result = fit_joint(obs, settings, progress=log.info)
        extra = {"command": "deepwell " + " ".join(args.argv)}
        kwargs = {}
        if args.extended_mass:
            from .effect_summary import extended_mass_limits

            log.info("extended-mass limits: one fit per scale radius (%d)",
                     len(args.extended_mass))
            kwargs["extended_limits"] = extended_mass_limits(obs, settings, args.extended_mass)
        if args.external:
            from .profile import enclosed_mass_profile, read_external_constraints

            kwargs["profile"] = enclosed_mass_profile(
                result, external=read_external_constraints(args.external))
        if args.sample:
            kwargs["posterior"] = _sample(result, args)
        if args.jackknife:
            from .jackknife import jackknife

            kwargs["jackknife"] = []
            for by in args.jackknife:
                log.info("jackknife: leave one %s out", by)
                kwargs["jackknife"].append(jackknife(obs, settings, by=by, result=result))
        log.info("writing the report")
        write_report(result, tmp, figures=not args.no_figures, extra=extra, **kwargs)
        install_output(tmp, args.out, replace=args.replace)
    except BaseException:
        discard_output(tmp)
        raise
    m, sm, _ = result.quantity("mass")
    d, sd, _ = result.quantity("distance")
    log.info("mass %.4g +- %.2g solMass, distance %.5g +- %.2g pc, chi2/dof %.1f/%d (%.1f s)",
             m, sm, d, sd, result.chi2, result.dof, time.perf_counter() - t0)
    log.info("report: %s", Path(args.out) / "report.md")
    return 0


def _effect_settings(settings, args):
    """Settings with the command line's effect switches applied."""
    from .effects import effects_from_args

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
    from .datasets import datasets_from_args

    flags = dict(reference=args.reference_set, offsets=True if args.offsets else None,
                 drifts=True if args.drifts else None,
                 zero_points=True if args.zero_points else None,
                 error_model=args.error_model,
                 likelihood="mixture" if args.outliers else None)
    if all(v is None for v in flags.values()):
        return settings
    return datasets_from_args(settings, **flags)


def _sample(result, args):
    """Posterior sampling with checkpoints beside the report folder."""
    from .sampling import sample_posterior

    chains = Path(str(Path(args.out)) + ".chains")
    log.info("sampling the posterior (checkpoints in %s; resume with --resume)", chains)
    post = sample_posterior(result, n_walkers=args.walkers, n_steps=args.steps, seed=args.seed,
                            checkpoint=chains, resume=args.resume, progress=not args.quiet,
                            max_time=args.max_time, n_ensembles=args.chains,
                            sampler=args.sampler, n_warmup=args.warmup)
    log.info("%s", post.statement)
    return post


def _run_simulate(args):
    from .simulate import write_scenario

    out = write_scenario(args.description, args.out, replace=args.replace)
    log.info("scenario written to %s", out)
    return 0


def main(argv=None):
    """Entry point of the ``deepwell`` command; returns the exit status."""
    # One BLAS thread: the matrices are small and the cores are better used by
    # the model and the sampler's processes (set before numpy is first imported).
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    parser = _parser()
    args = parser.parse_args(argv)
    args.argv = list(sys.argv[1:] if argv is None else argv)
    logging.basicConfig(format="deepwell: %(message)s", stream=sys.stderr, force=True,
                        level=logging.WARNING if getattr(args, "quiet", False) else logging.INFO)
    logging.captureWarnings(True)
    shown = warnings.formatwarning
    warnings.formatwarning = lambda message, category, *rest, **kw: \
        f"{category.__name__}: {message}"  # one line, no source line
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default")
            return args.func(args)
    except DeepwellError as exc:
        print(f"deepwell: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("deepwell: interrupted; nothing was written", file=sys.stderr)
        return 130
    finally:
        logging.captureWarnings(False)
        warnings.formatwarning = shown


if __name__ == "__main__":
    sys.exit(main())
