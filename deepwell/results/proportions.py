"""Binomial proportions: exact intervals on a fraction counted in trials.

Used by the calibration of intervals (:mod:`deepwell.tools.calibrate`) and by
the bootstrap p-values of model comparisons (:mod:`deepwell.results.comparison`).

References
----------
Clopper, C. J. & Pearson, E. S. 1934, Biometrika 26, 404 (exact binomial
interval; from memory).
"""

from scipy import special

__all__ = ["clopper_pearson"]


def clopper_pearson(k, n, level=0.997):
    """Exact (Clopper & Pearson 1934) interval on a proportion from k of n.

    Notes
    -----
    lower = B^-1(alpha/2; k, n - k + 1), upper = B^-1(1 - alpha/2; k + 1, n - k),
    B^-1 the inverse regularised incomplete beta function, alpha = 1 - level;
    lower = 0 for k = 0 and upper = 1 for k = n.
    """
    if n < 1:
        return float("nan"), float("nan")
    alpha = 1.0 - level
    lo = 0.0 if k == 0 else float(special.betaincinv(k, n - k + 1, alpha / 2))
    hi = 1.0 if k == n else float(special.betaincinv(k + 1, n - k, 1 - alpha / 2))
    return lo, hi
