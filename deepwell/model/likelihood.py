"""Outliers: the mixture likelihood, outlier probabilities and the list of far points.

Mixture model (after Hogg, Bovy & Lang 2010, arXiv:1008.4686, from memory):
each point (a position row with its two numbers, or one velocity) comes with
probability 1 - q from the Gaussian of its (fitted) errors and with
probability q from a Gaussian W times wider (W = ``[fit] outlier_width``).
In whitened units, with rho^2 the point's squared whitened residual and d its
dimension (2 or 1)::

    -2 ln L_i = l(rho^2) = -2 ln[(1 - q) exp(-rho^2/2) + q W^-d exp(-rho^2/(2 W^2))]

(up to a constant; the ln sigma normalisation is in :mod:`deepwell.model.datasets`).
Least squares minimises it exactly through a residual transform: every
whitened number z of point i becomes z * sqrt((l(rho^2) - l(0)) / rho^2)
(real because the density falls with rho; smooth at rho = 0, where the factor
tends to l'(0)), and one extra row sqrt(sum_i l_i(0) + 1) carries the part
that depends on q alone.  So the sum of squared residuals is -2 ln L up to a
constant, as for the Gaussian.  Outlier probability of point i:
q N_broad / [(1 - q) N + q N_broad].
"""

import numpy as np

__all__ = ["mixture_parts", "mixture_rows", "point_sq", "outlier_probabilities"]


def point_sq(n_pos, z):
    """Per point: squared whitened residual and dimension, from data residuals ``z``."""
    rho2 = np.concatenate([z[..., :n_pos] ** 2 + z[..., n_pos:2 * n_pos] ** 2,
                           z[..., 2 * n_pos:] ** 2], axis=-1)
    dim = np.concatenate([np.full(n_pos, 2.0), np.ones(z.shape[-1] - 2 * n_pos)])
    return rho2, dim


def mixture_parts(rho2, dim, q, width):
    """Log-weights of the core and broad components, l(rho^2) and l(0)."""
    q = np.clip(q, 0.0, 1.0 - 1e-12)
    with np.errstate(divide="ignore"):
        lq = np.log(q)
    core0 = np.log1p(-q)
    broad0 = lq - dim * np.log(width)
    a1 = core0 - 0.5 * rho2
    a2 = broad0 - 0.5 * rho2 / width**2
    ell = -2.0 * np.logaddexp(a1, a2)
    ell0 = -2.0 * np.logaddexp(core0, broad0)
    return a1, a2, ell, ell0


def mixture_rows(n_pos, z, q, width):
    """Transformed data rows and the q row (see module docstring).

    ``z`` has shape (..., n_data); ``q`` shape (..., 1).
    """
    rho2, dim = point_sq(n_pos, z)
    _, _, ell, ell0 = mixture_parts(rho2, dim, q, width)
    qc = np.clip(q, 0.0, 1.0 - 1e-12)
    kappa = ((1 - qc) + qc * width ** (-dim - 2)) / ((1 - qc) + qc * width ** (-dim))
    small = rho2 < 1e-10
    f = np.where(small, kappa, np.maximum(ell - ell0, 0.0) / np.where(small, 1.0, rho2))
    root = np.sqrt(f)
    factor = np.concatenate([root[..., :n_pos], root[..., :n_pos], root[..., n_pos:]], axis=-1)
    extra = np.sqrt(np.sum(np.broadcast_to(ell0, rho2.shape), axis=-1) + 1.0)
    return z * factor, extra[..., None]


def outlier_probabilities(model, vec):
    """Per point (position rows, then velocity rows): probability of being an outlier.

    None when the model does not use the mixture likelihood.
    """
    terms = getattr(model, "datasets", None)
    if terms is None or not terms.mixture:
        return None
    z = model.data_residuals(vec)
    rho2, dim = point_sq(model.pos.n, z)
    q = model.layout.shared(vec, "outlier_frac")
    a1, a2, _, _ = mixture_parts(rho2, dim, q, terms.config.outlier_width)
    return np.exp(a2 - np.logaddexp(a1, a2))


