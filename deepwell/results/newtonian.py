"""The Newtonian model refitted to the data of a relativistic fit.

The relativistic signal of a fit is shown (effect figures) and weighed (its
Δχ²) against the best *Newtonian* description of the same data, not against a
Keplerian orbit with the same elements: for integrated stars the fitted
elements are osculating at an epoch of the model's choosing (the apocentre),
and a Keplerian orbit with those elements touches the true orbit only there,
so "model minus Keplerian ellipse" would depend on that epoch.  The refitted
Newtonian model is the least-squares optimum with the Rømer delay, the
redshift and the 1PN precession switched off; the data-set terms, priors,
bounds and an extended mass (Newtonian gravity) are those of the fit.

The refit is a rung of the model ladder (:func:`deepwell.fit.ladder.refit_rung`)
started at the relativistic solution, so it costs a few Keplerian iterations.
"""

import dataclasses
import time
from dataclasses import dataclass

from deepwell.fit.ladder import Rung, refit_rung

__all__ = ["NEWTONIAN_RUNG", "NewtonianRefit", "relativistic_effects", "newtonian_refit"]

#: The refitted model: every relativistic piece off, everything else as fitted.
NEWTONIAN_RUNG = Rung("newtonian-refit", "Newtonian (relativistic effects off)",
                      dict(romer=False, redshift="off", precession=False))


def relativistic_effects(effects):
    """Names of the relativistic pieces switched on in ``effects`` (tables.effects.Effects).

    Returns
    -------
    tuple of str
        Some of "Rømer delay", "redshift (exact)" / "redshift (first-order)",
        "1PN precession", in that order.
    """
    return effects.relativistic()


@dataclass(frozen=True)
class NewtonianRefit:
    """The Newtonian model refitted to the data of a relativistic fit.

    Attributes
    ----------
    result : deepwell.fit.FitResult
        The refitted Newtonian model (its ``model`` and ``internal`` give the
        comparison predictions).
    switched_off : tuple of str
        The relativistic pieces of the fit that the refit leaves out
        (:func:`relativistic_effects`).
    chi2_full, chi2_newtonian : float
        Chi-square of the data under the relativistic fit and the refit.
    n_free_full, n_free_newtonian : int
        Fitted parameters of each.
    seconds : float
        Wall time of the refit (s).
    star_delta_chi2 : dict
        Star -> its own data's part of the Δχ² (the stars' parts add up to
        the Δχ² of the data).
    """

    result: object
    switched_off: tuple
    chi2_full: float
    chi2_newtonian: float
    n_free_full: int
    n_free_newtonian: int
    seconds: float
    star_delta_chi2: dict = dataclasses.field(default_factory=dict)

    @property
    def delta_chi2(self):
        """chi2(Newtonian) - chi2(relativistic): how much better the relativistic model fits."""
        return self.chi2_newtonian - self.chi2_full

    @property
    def fewer_parameters(self):
        """Free parameters the Newtonian model has fewer than the relativistic fit (>= 0)."""
        return self.n_free_full - self.n_free_newtonian

    @property
    def converged(self):
        return bool(self.result.converged)

    def as_dict(self):
        """JSON-ready summary (numbers and words, no arrays)."""
        return {"switched_off": list(self.switched_off), "chi2_full": self.chi2_full,
                "chi2_newtonian": self.chi2_newtonian, "delta_chi2": self.delta_chi2,
                "n_free_full": self.n_free_full, "n_free_newtonian": self.n_free_newtonian,
                "fewer_parameters": self.fewer_parameters, "converged": self.converged,
                "seconds": self.seconds,
                "star_delta_chi2": {s: float(v) for s, v in self.star_delta_chi2.items()}}


def newtonian_refit(result):
    """Refit ``result``'s data with the relativistic pieces off, from its solution.

    Parameters
    ----------
    result : deepwell.fit.FitResult
        A finished fit.

    Returns
    -------
    NewtonianRefit or None
        None when the fit has no relativistic piece (it is Newtonian already).

    Notes
    -----
    Δχ² = chi2(Newtonian) − chi2(relativistic); the models are nested only
    where a strength is fitted (f, f_sp free: the Newtonian model is the
    strength at 0), so with held strengths the Δχ² compares two models with
    the same number of parameters (``fewer_parameters`` = 0).
    """
    off = relativistic_effects(result.model.effects)
    if not off:
        return None
    t0 = time.monotonic()
    # The extended mass (if any) stays, quoted inside the fit's own reference radius.
    rung = dataclasses.replace(NEWTONIAN_RUNG, effects=dict(
        NEWTONIAN_RUNG.effects, extended_mass=bool(result.model.effects.extended_mass)))
    newt = refit_rung(result.observations, result.settings, rung, result,
                      reference_radius=result.model.reference_radius)
    return NewtonianRefit(result=newt, switched_off=off, chi2_full=float(result.chi2),
                          chi2_newtonian=float(newt.chi2), n_free_full=int(result.n_free),
                          n_free_newtonian=int(newt.n_free), seconds=time.monotonic() - t0,
                          star_delta_chi2={s: float(newt.star_chi2[newt.stars.index(s)]
                                                    - result.star_chi2[k])
                                           for k, s in enumerate(result.stars)})
