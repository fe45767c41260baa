"""One call that runs every analysis of a finished fit; the report only writes what it returns.

:func:`analyse` gathers what ``deepwell fit`` reports beside the fit itself:
the effect sizes per star, the enclosed-mass profile (one small refit per
star), the Newtonian model refitted to the same data when the fit has
relativistic effects (what the effect figures compare with), the
per-data-set and outlier summaries, and on request the
extended-mass limits (one fit per scale radius), the jackknife refits and a
posterior sample handed in from the sampler.
"""

from dataclasses import dataclass

from .datasets import dataset_summary
from .effect_sizes import extended_mass_limits, star_effect_sizes
from .enclosed import enclosed_mass_profile
from .jackknife import jackknife as run_jackknife
from .newtonian import newtonian_refit, relativistic_effects
from .outliers import outlier_table

__all__ = ["Analyses", "analyse"]


@dataclass(frozen=True)
class Analyses:
    """Everything reported about a fit beside the fit itself.

    Attributes
    ----------
    effect_sizes : dict
        Star -> effect sizes (:func:`~deepwell.results.effect_sizes.star_effect_sizes`).
    profile : deepwell.results.enclosed.EnclosedMassProfile
        Per-star enclosed masses and their consistency with one point mass.
    datasets : list of dict
        Per data set and kind (:func:`~deepwell.results.datasets.dataset_summary`).
    outliers : list of dict
        Likely outliers and points beyond 4 sigma
        (:func:`~deepwell.results.outliers.outlier_table`).
    extended_limits : list of dict or None
        Plummer-mass limits per scale radius, when asked for.
    jackknife : tuple of JackknifeResult
        Leave-one-out refits, when asked for.
    posterior : deepwell.fit.sampling.PosteriorResult or None
        Posterior sample of the fit, when sampled.
    sampling_failed : str or None
        Why a requested posterior sampling produced nothing (the report then
        rests on the least-squares fit and says so).
    newtonian : deepwell.results.newtonian.NewtonianRefit or None
        The Newtonian model refitted to the same data (None when the fit has
        no relativistic effect).
    """

    effect_sizes: dict
    profile: object
    datasets: list
    outliers: list
    extended_limits: list | None = None
    jackknife: tuple = ()
    posterior: object = None
    sampling_failed: str | None = None
    newtonian: object = None

    def report_kwargs(self):
        """The analyses as the keyword arguments of the summary and markdown writers."""
        return {"posterior": self.posterior, "profile": self.profile,
                "extended_limits": self.extended_limits, "effect_sizes": self.effect_sizes,
                "sampling_failed": self.sampling_failed, "newtonian": self.newtonian}


def analyse(result, extended_mass=(), external=None, jackknife=(), posterior=None,
            progress=None, sampling_failed=None):
    """Run the analyses of a finished fit.

    Parameters
    ----------
    result : deepwell.fit.FitResult
    extended_mass : sequence of float, optional
        Plummer scale radii (au) for extended-mass limits (one fit each).
    external : deepwell.tables.ExternalConstraints, optional
        Enclosed masses from other tracers, drawn with the profile.
    jackknife : sequence of {"star", "dataset"}, optional
        Leave one star / data set out at a time (one fit each).
    posterior : deepwell.fit.sampling.PosteriorResult, optional
        A posterior sample of ``result``, carried to the report.
    sampling_failed : str, optional
        Why a requested sampling produced no posterior.
    progress : callable, optional
        Called with a short text before each slow step.

    Returns
    -------
    Analyses
    """
    say = progress or (lambda text: None)
    limits = None
    if extended_mass:
        say(f"extended-mass limits: one fit per scale radius ({len(extended_mass)})")
        limits = extended_mass_limits(result.observations, result.settings, extended_mass)
    say("effect sizes and their detectability (a linearised refit per star and effect)")
    sizes = star_effect_sizes(result)
    newt = None
    if relativistic_effects(result.model.effects):
        say("the Newtonian model refitted to the same data (started at this solution)")
        newt = newtonian_refit(result)
    say("enclosed-mass profile (one refit per star)")
    profile = enclosed_mass_profile(result, external=external, progress=say)
    jk = []
    for by in jackknife:
        say(f"jackknife: leave one {by} out")
        jk.append(run_jackknife(result.observations, result.settings, by=by, result=result))
    return Analyses(effect_sizes=sizes, profile=profile, datasets=dataset_summary(result),
                    outliers=outlier_table(result), extended_limits=limits,
                    jackknife=tuple(jk), posterior=posterior, sampling_failed=sampling_failed,
                    newtonian=newt)
