"""Result objects of a fit: values, covariance and computed statistics.

The reported (physical) quantities are a fixed, documented list: the shared
parameters, then for every star ``a`` (mas), ``e``, ``inc``, ``node``,
``peri_arg`` (deg), ``t_peri`` (yr), ``period`` (yr) and ``r_peri``
(pericentre distance, au).  Their covariance follows from the internal one by
the delta method.  Result objects never plot or write themselves: that is the
job of :mod:`deepwell.report.figures` and :mod:`deepwell.report`.
"""

import warnings
from dataclasses import dataclass

import numpy as np

from deepwell.core.parameters import STAR_ELEMENTS
from deepwell.core.text import plural
from deepwell.core.units import STAR_REPORTED, UNITS
from deepwell.model.kernels.orbit import pericentre_speed_kms
from deepwell.model.kernels.relativity import schwarzschild_radius_au
from deepwell.model.quality import phase_coverage

from .jacobian import default_steps, numerical_jacobian
from .least_squares import covariance

__all__ = ["FitResult", "FitWarning", "assemble_result", "physical_labels", "physical_vector"]



def physical_labels(layout):
    """Labels of the physical vector: shared names, then ``star:quantity``."""
    out = list(layout.shared_names)
    for s in layout.stars:
        out += [f"{s}:{q}" for q in STAR_REPORTED]
    return out


def physical_owner(layout):
    """Star index owning each entry of the physical vector (-1 for shared ones)."""
    own = [-1] * layout.n_shared
    for k in range(len(layout.stars)):
        own += [k] * len(STAR_REPORTED)
    return np.array(own, dtype=np.intp)


def physical_vector(layout, vec):
    """Reported quantities from internal vector(s); angles in degrees, unwrapped."""
    vec = np.asarray(vec, dtype=float)
    el = layout.elements(vec)
    dist = layout.shared(vec, "distance")[..., None]
    per_star = np.stack([
        el["a"], el["e"], np.degrees(el["inc"]), np.degrees(el["node"]),
        np.degrees(el["peri_arg"]), el["t_peri"], el["period"],
        el["a"] * 1e-3 * dist * (1.0 - el["e"]),
    ], axis=-1)
    flat = per_star.reshape(per_star.shape[:-2] + (-1,))
    return np.concatenate([vec[..., :layout.n_shared], flat], axis=-1)


def _wrap(label, value):
    q = label.split(":")[-1]
    if q in ("node", "peri_arg"):
        return float(np.mod(value, 360.0))
    return float(value)


@dataclass(frozen=True)
class FitResult:
    """The outcome of a joint fit.

    Attributes
    ----------
    model : JointModel
        The model that was fitted (data arrays and layout).
    internal, internal_cov, free : ndarray
        Best internal vector, its covariance (zeros for fixed entries) and the
        mask of fitted entries.
    values, cov, labels :
        Reported quantities (see module docstring), their covariance, labels.
    chi2, n_data, n_free :
        Chi-square of the data (priors excluded), number of data, of fitted
        parameters.
    star_chi2, star_ndata : ndarray
        Per-star chi-square and number of data.
    converged : bool
    nfev : int
    notes : tuple of str
        Warnings and remarks for the report.
    settings, observations :
        What went in, for the record.
    """

    model: object
    internal: np.ndarray
    internal_cov: np.ndarray
    free: np.ndarray
    values: np.ndarray
    cov: np.ndarray
    labels: list
    chi2: float
    n_data: int
    n_free: int
    star_chi2: np.ndarray
    star_ndata: np.ndarray
    converged: bool
    nfev: int
    notes: tuple
    settings: object
    observations: object

    # ---------------------------------------------------------- statistics
    @property
    def dof(self):
        return self.n_data - self.n_free

    @property
    def reduced_chi2(self):
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    @property
    def stars(self):
        return self.model.stars

    def star_reduced_chi2(self):
        """Per-star chi-square divided by (data - 6)."""
        dof = np.maximum(self.star_ndata - len(STAR_ELEMENTS), 1)
        return self.star_chi2 / dof

    def sigma(self, label):
        i = self.labels.index(label)
        return float(np.sqrt(max(self.cov[i, i], 0.0)))

    def value(self, label):
        i = self.labels.index(label)
        return _wrap(label, self.values[i])

    def quantity(self, label):
        """(value, sigma, unit) of a reported quantity."""
        lay = self.model.layout
        unit = (lay.spec(label).unit if label in lay.shared_names
                else UNITS[label.split(":")[-1]])
        return self.value(label), self.sigma(label), unit

    @property
    def mass_distance_correlation(self):
        i, j = self.labels.index("mass"), self.labels.index("distance")
        denom = np.sqrt(self.cov[i, i] * self.cov[j, j])
        return float(self.cov[i, j] / denom) if denom > 0 else float("nan")

    @property
    def mass_distance_exponent(self):
        """alpha in mass ~ distance**alpha along the mass-distance degeneracy."""
        i, j = self.labels.index("mass"), self.labels.index("distance")
        m, d = self.values[i], self.values[j]
        var_d = self.cov[j, j] / d**2
        return float(self.cov[i, j] / (m * d) / var_d) if var_d > 0 else float("nan")

    # ----------------------------------------------------- per-star details
    def star_summary(self, star):
        """Derived numbers of one star (pericentre in au and R_s, speed, coverage)."""
        k = self.stars.index(star)
        g = lambda q: self.value(f"{star}:{q}")  # noqa: E731
        mass = self.value("mass")
        a_au = g("a") * 1e-3 * self.value("distance")
        e = g("e")
        r_p = a_au * (1 - e)
        rs_au = schwarzschild_radius_au(mass)
        v_p = pericentre_speed_kms(mass, a_au, e)
        npos, nvel = self.model.star_counts()
        return {
            "r_peri_au": r_p,
            "r_peri_rs": float(r_p / rs_au),
            "v_peri_kms": float(v_p),
            "coverage": phase_coverage(self.model, self.internal, k),
            "n_positions": int(npos[k]),
            "n_velocities": int(nvel[k]),
            "reduced_chi2": float(self.star_reduced_chi2()[k]),
        }


class FitWarning(UserWarning):
    """A fit that finished but whose result needs care."""


def assemble_result(model, vec, free, settings, observations, notes=(), converged=True,
                    nfev=0):
    """A :class:`FitResult` at internal vector ``vec``: covariance and statistics.

    Used by :func:`fit_joint` and to rebuild a finished fit from its saved state.
    """
    notes = list(notes)
    cov_int, rank_def = covariance(model, vec, free)
    full_cov = np.zeros((model.layout.size, model.layout.size))
    full_cov[np.ix_(free, free)] = cov_int
    steps = default_steps(model, vec)
    steps[free] = np.where(np.diag(cov_int) > 0, 1e-3 * np.sqrt(np.diag(cov_int)), steps[free])
    G = numerical_jacobian(lambda v: physical_vector(model.layout, v), vec, free, steps,
                           model.layout, physical_owner(model.layout))
    cov_phys = G @ cov_int @ G.T
    chi_s, n_s = model.star_chi2(vec)
    if rank_def and not any("not constrained by the data" in n for n in notes):
        notes.append(f"{plural(rank_def, 'parameter combination')} "
                     f"{'is' if rank_def == 1 else 'are'} not constrained by the data "
                     f"(singular covariance); {'its' if rank_def == 1 else 'their'} errors "
                     "are not meaningful")
        warnings.warn(FitWarning(notes[-1]), stacklevel=2)
    return FitResult(
        model=model,
        internal=vec,
        internal_cov=full_cov,
        free=free,
        values=physical_vector(model.layout, vec),
        cov=cov_phys,
        labels=physical_labels(model.layout),
        chi2=float(model.chi2(vec)),
        n_data=model.n_data,
        n_free=int(free.sum()),
        star_chi2=chi_s,
        star_ndata=n_s,
        converged=converged,
        nfev=nfev,
        notes=tuple(notes),
        settings=settings,
        observations=observations,
    )
