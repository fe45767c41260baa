"""Proper, stated priors over the internal vector, for the Bayesian evidence.

The evidence Z = integral of L(theta) pi(theta) d theta depends on the prior
pi, so every evidence deepwell computes comes with a prior that is proper
(normalised) and written out in plain words.  :class:`StatedPrior` is a product
of independent pieces, each acting on one or two internal coordinates:

* :class:`Uniform` -- uniform on [low, high];
* :class:`Gaussian` -- normal with mean and sigma (the settings' Gaussian priors);
* :class:`EccentricityDisk` -- uniform in (sqrt(e) cos w, sqrt(e) sin w) on the
  disk e < e_max, i.e. e uniform on [0, e_max) and w uniform over a full turn
  (density 1 / (pi e_max), because d(h, k) = 1/2 de dw);
* :class:`PhaseWindow` -- the pericentre epoch uniform over one period centred
  on a stated epoch (density 1 / P, P the star's period).

:meth:`StatedPrior.transform` maps the unit cube to these (for nested
sampling); :meth:`StatedPrior.log_density` is the normalised log density (for
the Laplace approximation).  :func:`stated_prior` builds one for a fitted
model (see its docstring for the rules).
"""

from dataclasses import dataclass

import numpy as np
from scipy.special import ndtri

from deepwell.core.parameters import MAX_ECC

from .least_squares import bounds

__all__ = ["EccentricityDisk", "Gaussian", "PhaseWindow", "StatedPrior", "Uniform",
           "stated_prior", "DEFAULT_WIDTH"]

#: Half-width, in standard errors of the reference fit, of the uniform box of a
#: parameter that has no natural range (mass, distance, frame terms, periods).
DEFAULT_WIDTH = 20.0


@dataclass(frozen=True)
class Uniform:
    """Uniform prior on [low, high] of coordinate ``index``."""

    index: int
    low: float
    high: float
    text: str

    def transform(self, u, theta):
        theta[..., self.index] = self.low + u[..., self.index] * (self.high - self.low)

    def log_density(self, theta):
        x = theta[..., self.index]
        inside = (x >= self.low) & (x <= self.high)
        return np.where(inside, -np.log(self.high - self.low), -np.inf)


@dataclass(frozen=True)
class Gaussian:
    """Normal prior N(mean, sigma^2) of coordinate ``index``."""

    index: int
    mean: float
    sigma: float
    text: str

    def transform(self, u, theta):
        theta[..., self.index] = self.mean + self.sigma * ndtri(u[..., self.index])

    def log_density(self, theta):
        z = (theta[..., self.index] - self.mean) / self.sigma
        return -0.5 * z * z - np.log(self.sigma * np.sqrt(2.0 * np.pi))


@dataclass(frozen=True)
class EccentricityDisk:
    """Uniform prior on the disk h^2 + k^2 < e_max of (h, k) = sqrt(e) (cos w, sin w).

    The unit-cube transform takes e = e_max u_h and w = centre + 2 pi (u_k - 1/2),
    so that a posterior near w = centre lies away from the seam of the cube.
    """

    h_index: int
    k_index: int
    e_max: float
    centre: float
    text: str

    def transform(self, u, theta):
        root = np.sqrt(self.e_max * u[..., self.h_index])
        w = self.centre + 2.0 * np.pi * (u[..., self.k_index] - 0.5)
        theta[..., self.h_index] = root * np.cos(w)
        theta[..., self.k_index] = root * np.sin(w)

    def log_density(self, theta):
        r2 = theta[..., self.h_index] ** 2 + theta[..., self.k_index] ** 2
        return np.where(r2 < self.e_max, -np.log(np.pi * self.e_max), -np.inf)


@dataclass(frozen=True)
class PhaseWindow:
    """Pericentre epoch uniform over one period centred on ``centre`` (density 1/P).

    ``period_index`` is the coordinate of the period, or -1 when the period is
    not sampled (then ``period`` gives it).  Listed after the period's piece, so
    the transform sees the period already mapped.
    """

    index: int
    period_index: int
    period: float
    centre: float
    text: str

    def _period(self, theta):
        return theta[..., self.period_index] if self.period_index >= 0 else self.period

    def transform(self, u, theta):
        theta[..., self.index] = self.centre + (u[..., self.index] - 0.5) * self._period(theta)

    def log_density(self, theta):
        p = self._period(theta)
        inside = np.abs(theta[..., self.index] - self.centre) <= 0.5 * p
        return np.where(inside, -np.log(p), -np.inf)


@dataclass(frozen=True)
class StatedPrior:
    """A proper prior over named coordinates: a product of independent pieces.

    Parameters
    ----------
    names : tuple of str
        Coordinate names (internal names for a deepwell model).
    pieces : tuple
        :class:`Uniform`, :class:`Gaussian`, :class:`EccentricityDisk` and
        :class:`PhaseWindow` objects covering every coordinate exactly once; a
        phase window comes after the piece of its period.
    notes : tuple of str
        Statements about how the prior was chosen, for the report.
    """

    names: tuple
    pieces: tuple
    notes: tuple = ()

    def __post_init__(self):
        seen = []
        for p in self.pieces:
            seen += [p.h_index, p.k_index] if isinstance(p, EccentricityDisk) else [p.index]
        if sorted(seen) != list(range(len(self.names))):
            raise ValueError("the prior pieces must cover every coordinate exactly once")

    @property
    def ndim(self):
        return len(self.names)

    def transform(self, u):
        """Coordinates from points ``u`` of the unit cube, shape (..., ndim)."""
        u = np.asarray(u, dtype=float)
        theta = np.empty_like(u)
        for p in self.pieces:
            p.transform(u, theta)
        return theta

    def log_density(self, theta):
        """Normalised log prior density at ``theta`` (-inf outside the support)."""
        theta = np.asarray(theta, dtype=float)
        return sum(p.log_density(theta) for p in self.pieces)

    def describe(self):
        """The prior in plain words: one line per piece, then the notes."""
        return tuple(p.text for p in self.pieces) + tuple(self.notes)

    def edge_distance(self, theta, sigma):
        """Per uniform piece: (name, distance of theta from the nearer edge in ``sigma``)."""
        out = []
        for p in self.pieces:
            if isinstance(p, Uniform) and sigma[p.index] > 0:
                d = min(theta[p.index] - p.low, p.high - theta[p.index]) / sigma[p.index]
                out.append((self.names[p.index], float(d)))
        return out


# ------------------------------------------------------------ deepwell models
def stated_prior(result, width=DEFAULT_WIDTH, reference=None):
    """The stated prior of a fitted model's free internal parameters.

    Rules, per free internal parameter (the coordinates of
    :mod:`deepwell.core.parameters`):

    * a Gaussian prior of the settings on a shared parameter, a star's node or
      its pericentre epoch: that Gaussian (node converted to radians);
    * (sqrt(e) cos w, sqrt(e) sin w) of a star: uniform on the disk e < MAX_ECC
      (e uniform, w uniform);
    * cos i: uniform on [-1, 1] (isotropic orientations);
    * node: uniform over a full turn centred on the reference value;
    * pericentre epoch: uniform over one period centred on the reference value;
    * an optional shared parameter (effect strength, data-set term) with finite
      bounds in the settings or its declaration: uniform between them;
    * everything else (mass, distance, frame terms, periods, unbounded terms):
      uniform on reference value +- ``width`` standard errors of the reference
      fit, cut to the parameter's bounds.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
        The fit whose free parameters the prior covers.
    width : float
        Half-width of the data-scaled boxes, in standard errors (default 20).
    reference : FitResult, optional
        The fit that sets the centres and widths (default: ``result``).  Models
        to be compared must share it, so that the parameters they share have
        the same prior; parameters absent from it fall back to ``result``.

    Returns
    -------
    StatedPrior
        Coordinates named as ``result.model.layout.names()`` at the free entries.

    Raises
    ------
    ValueError
        A Gaussian prior on a star element that is not an internal coordinate
        (a, e, inc, peri_arg: its normalisation over the internal coordinates
        has no closed form), or a box parameter without a finite standard error.
    """
    if width <= 0:
        raise ValueError(f"the prior width must be positive, not {width}")
    model = result.model
    names = model.layout.names()
    lo, hi, _ = bounds(model, result.settings)
    free = np.flatnonzero(result.free)
    pos = {names[i]: j for j, i in enumerate(free)}
    ref = result if reference is None else reference
    ref_names = ref.model.layout.names()
    ref_free = set(np.flatnonzero(ref.free))
    gauss = {}
    for prior in model.priors:
        key = prior.name if prior.star is None else f"{prior.star}:{prior.name}"
        if prior.star is not None and prior.name not in ("node", "t_peri"):
            raise ValueError(f"the evidence cannot use the Gaussian prior on {key}: a prior on "
                             f"{prior.name} is not a prior on one internal coordinate; put it "
                             "on the node, the pericentre epoch or a shared parameter, or "
                             "remove it")
        gauss[key] = prior

    def centre_sigma(name):
        src = ref if name in ref_names and ref_names.index(name) in ref_free else result
        i = src.model.layout.names().index(name)
        return float(src.internal[i]), float(np.sqrt(max(src.internal_cov[i, i], 0.0)))

    shared = set(model.layout.shared_names)

    def split(name):
        return (None, name) if name in shared else tuple(name.rsplit(":", 1))

    pieces, notes, done, n_box = [], [], set(), 0
    for name, j in pos.items():
        if j in done:
            continue
        i = names.index(name)
        star, el = split(name)
        unit = model.layout.spec(name).unit if star is None else "yr"
        if name in gauss and el != "t_peri":
            p = gauss[name]
            mean, sig = p.mean, p.sigma
            if el == "node":
                mean, sig, unit = np.radians(mean), np.radians(sig), "deg"
            pieces.append(Gaussian(j, mean, sig, f"{name}: Gaussian, mean {p.mean:g}, sigma "
                                   f"{p.sigma:g} {unit}".rstrip()))
        elif el in ("sqe_cos", "sqe_sin"):
            hj, kj = pos.get(f"{star}:sqe_cos"), pos.get(f"{star}:sqe_sin")
            if hj is None or kj is None:
                raise ValueError(f"{star}: eccentricity and pericentre argument must be free "
                                 "together for the evidence")
            h, k = (result.internal[names.index(f"{star}:{c}")] for c in ("sqe_cos", "sqe_sin"))
            pieces.append(EccentricityDisk(hj, kj, MAX_ECC, float(np.arctan2(k, h)),
                                           f"{star}: e uniform on [0, {MAX_ECC:g}) and the "
                                           "argument of pericentre uniform over a full turn"))
            done |= {hj, kj}
            continue
        elif el == "cos_inc":
            pieces.append(Uniform(j, -1.0, 1.0, f"{star}: cos(inc) uniform on [-1, 1] "
                                  "(isotropic orientation)"))
        elif el == "node":
            c, _ = centre_sigma(name)
            pieces.append(Uniform(j, c - np.pi, c + np.pi, f"{star}: node uniform over a full "
                                  f"turn, [{np.degrees(c) - 180:.6g}, "
                                  f"{np.degrees(c) + 180:.6g}] deg"))
        elif el == "t_peri":
            continue  # after its period, below
        elif star is None and name in model.layout.extra and np.isfinite(lo[i] + hi[i]):
            pieces.append(Uniform(j, float(lo[i]), float(hi[i]), f"{name}: uniform on "
                                  f"[{lo[i]:g}, {hi[i]:g}] {unit}".rstrip()))
        else:
            c, s = centre_sigma(name)
            if not (np.isfinite(s) and s > 0):
                raise ValueError(f"{name} has no finite standard error in the reference fit, "
                                 "so no data-scaled prior box can be stated for it; fix it in "
                                 "the settings or give it a Gaussian prior")
            a, b = max(c - width * s, lo[i]), min(c + width * s, hi[i])
            cut = " (cut to its bound)" if (a, b) != (c - width * s, c + width * s) else ""
            pieces.append(Uniform(j, a, b, f"{name}: uniform on [{a:.8g}, {b:.8g}] {unit}"
                                  .rstrip() + cut))
            n_box += 1
        done.add(j)
    for name, j in pos.items():  # pericentre epochs, after their periods
        star, el = split(name)
        if el != "t_peri":
            continue
        if name in gauss:
            p = gauss[name]
            pieces.append(Gaussian(j, p.mean, p.sigma, f"{name}: Gaussian, mean {p.mean:g}, "
                                   f"sigma {p.sigma:g} yr"))
            continue
        pj = pos.get(f"{star}:period", -1)
        period = float(result.internal[names.index(f"{star}:period")])
        c, _ = centre_sigma(name)
        pieces.append(PhaseWindow(j, pj, period, c, f"{star}: pericentre epoch uniform over "
                                  f"one period centred on {c:.6g} yr"))
    if n_box:
        notes.append(f"parameters without a natural range have a uniform prior {width:g} "
                     "standard errors either side of the "
                     + ("reference fit" if reference is not None else "fit")
                     + "; the evidence of every model depends on these widths, Bayes "
                     "factors between models that share them do not (while the posteriors "
                     "lie well inside)")
    return StatedPrior(names=tuple(pos), pieces=tuple(pieces), notes=tuple(notes))

