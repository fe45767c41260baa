"""Pure, vectorised physics kernels: Kepler's equation, orbit projection, relativity, 1PN orbits.

Functions of arrays only (no tables, settings or files); angles in radians,
epochs in Julian years, positions in mas or au as each docstring states.
"""

from .kepler import solve_kepler
from .orbit import (
    OrbitTrack,
    a_from_period,
    elements_from_state,
    kepler_state,
    keplerian_track,
    period_from_a,
    thiele_innes,
)
from .post_newtonian import integrate_orbits, osculating_state, pn_track
from .relativity import (
    effect_sizes,
    emission_epochs,
    keplerian_emission_track,
    plummer_enclosed_mass,
    redshift_velocity,
    romer_delay_days,
)

__all__ = ["solve_kepler", "OrbitTrack", "a_from_period", "period_from_a", "thiele_innes",
           "keplerian_track", "kepler_state", "elements_from_state", "integrate_orbits",
           "osculating_state", "pn_track", "effect_sizes", "emission_epochs",
           "keplerian_emission_track", "plummer_enclosed_mass", "redshift_velocity",
           "romer_delay_days"]
