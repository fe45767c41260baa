"""How the switchable relativistic pieces enter the joint model.

The switches themselves are read by :mod:`deepwell.tables.effects`.

Model (``shared/physics.md`` sections 4-7):

* Romer: the orbit is evaluated at the emission epoch t_em solving
  t_em + z(t_em)/c = t_obs (two Newton steps for Keplerian stars, solved
  inside the integrator for integrated stars).  The frame drift uses t_obs.
* Redshift: RV = vz0 + v_z + f * excess (exact or first order), from
  :func:`deepwell.model.kernels.relativity.redshift_velocity`.
* Precession / extended mass: the star's elements are *osculating* Keplerian
  elements at the star's own apocentre epoch t_peri + P/2 (P from Kepler's law
  with the point mass); the track is integrated from there with
  :func:`deepwell.model.kernels.post_newtonian.pn_track`.  ``t_peri`` and the period
  are then those of
  the osculating ellipse, not the observed pericentre passage and the
  integrated period (see :mod:`deepwell.results.effect_sizes`).
"""

import numpy as np

from deepwell.model.kernels.relativity import star_sky_precession_mas

__all__ = ["INTEGRATE_THRESHOLD", "choose_integrated", "reference_radius_from"]

#: A star is integrated when its sky precession per orbit exceeds this many
#: times its smallest position error (``precession_stars = "auto"``).
INTEGRATE_THRESHOLD = 0.1


def choose_integrated(effects, el, mass, distance, min_pos_err):
    """Which stars get the orbit integrator (boolean per star).

    With ``precession_stars = "auto"`` and no extended mass, a star is
    integrated when its sky precession per orbit exceeds
    :data:`INTEGRATE_THRESHOLD` times its smallest position error; the others
    stay Keplerian (their precession is below a tenth of their best error).
    """
    n = len(min_pos_err)
    if not effects.integrates:
        return np.zeros(n, bool)
    if effects.extended_mass or effects.precession_stars == "all":
        return np.ones(n, bool)
    sky = star_sky_precession_mas(el, mass, distance)
    return np.asarray(sky > INTEGRATE_THRESHOLD * np.asarray(min_pos_err), bool)


def reference_radius_from(el, distance):
    """Apocentre (au) of the star with the smallest apocentre, to 2 significant digits."""
    apo = el["a"] * 1e-3 * distance * (1.0 + el["e"])
    r = float(np.min(apo))
    return float(f"{r:.2g}")
