"""How well the data cover an orbit, and the quality rules built on it (one place).

The fitter uses the coverage rule to pick stars for a second start search,
the results use all of them to flag poorly constrained orbits, and the report
quotes them; every threshold is defined here only.
"""

import numpy as np

__all__ = ["POOR_COVERAGE", "POOR_PERIOD_ERROR", "GOOD_RPERI_ERROR", "POOR_REL_SIGMA",
           "POOR_REDUCED_CHI2", "DETECTABLE_DCHI2", "PERICENTRE_ANGLE", "PERICENTRE_EPOCHS",
           "phase_coverage", "pericentre_epochs_count"]

#: An orbit whose data span less than this fraction of it (in mean anomaly) is
#: a partial arc: linear errors may understate the real uncertainty (common practice).
POOR_COVERAGE = 0.5
#: A relative period error above this marks a poorly constrained orbit.
POOR_PERIOD_ERROR = 0.20
#: A pericentre distance known better than this (relative) counts in the compactness bound.
GOOD_RPERI_ERROR = 0.20
#: A per-star mass with sigma/M above this is flagged in the enclosed-mass profile.
POOR_REL_SIGMA = 0.2
#: A star fitting worse than this reduced chi-square is searched again (periods, start).
POOR_REDUCED_CHI2 = 2.0
#: An effect counts as detectable in a star's data when the expected chi-square
#: difference between the models with and without it, after refitting the star's
#: elements (deepwell.results.detectability), is at least this: about 3 sigma for
#: one added parameter (chi-square with 1 dof, common practice).
DETECTABLE_DCHI2 = 9.0

#: Half-width (deg of true anomaly) of the pericentre passage, where the redshift and the
#: precession of an eccentric orbit build up (common practice: r < a(1 - e^2) there).
PERICENTRE_ANGLE = 90.0
#: A pericentre passage counts as covered with at least this many epochs inside it.
PERICENTRE_EPOCHS = 3


def pericentre_epochs_count(model, vec, k):
    """Epochs of star k (positions and velocities) in a pericentre passage.

    The passage is the part of the orbit with true anomaly |nu| < PERICENTRE_ANGLE,
    i.e. |t - t_peri - n P| < P M_90 / (2 pi), M_90 the mean anomaly at nu = 90 deg:
    E = 2 arctan(sqrt((1 - e)/(1 + e)) tan(nu/2)), M = E - e sin E (Kepler's equation).

    Returns
    -------
    int
        Number of distinct epochs (yr, rounded to 1e-6) inside a passage.
    """
    el = model.layout.elements(vec)
    e, period, t_p = float(el["e"][k]), float(el["period"][k]), float(el["t_peri"][k])
    half = np.radians(PERICENTRE_ANGLE) / 2.0
    ecc_anom = 2.0 * np.arctan(np.sqrt((1.0 - e) / (1.0 + e)) * np.tan(half))
    window = period * (ecc_anom - e * np.sin(ecc_anom)) / (2.0 * np.pi)
    t = model.pos.t[model.pos.star == k]
    if model.vel is not None:
        t = np.concatenate([t, model.vel.t[model.vel.star == k]])
    phase = np.mod(t - t_p + 0.5 * period, period) - 0.5 * period
    return int(np.unique(np.round(t[np.abs(phase) < window], 6)).size)


def phase_coverage(model, vec, k):
    """Fraction of star k's orbit (in mean anomaly) spanned by its position epochs.

    One minus the largest gap between the orbital phases of the epochs, so a
    complete orbit gives 1 and a short arc gives roughly (span / period).
    """
    el = model.layout.elements(vec)
    t = model.pos.t[model.pos.star == k]
    if t.size < 2:
        return 0.0
    period = el["period"][k]
    if np.ptp(t) >= period:
        phase = np.sort(np.mod((t - el["t_peri"][k]) / period, 1.0))
        gaps = np.diff(np.concatenate([phase, [phase[0] + 1.0]]))
        return float(1.0 - gaps.max())
    return float(np.ptp(t) / period)
