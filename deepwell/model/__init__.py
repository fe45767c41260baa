"""The joint model: every star's predicted positions and velocities from one parameter vector.

It never imports the fitter: fitting, sampling and outlier handling live in
:mod:`deepwell.fit` and call the model.
"""

from .epochs import model_at_epochs, star_vector
from .joint import JointModel, Prediction, Prior
from .layout import Layout, internal_star_values
from .quality import phase_coverage

__all__ = ["JointModel", "Prediction", "Prior", "Layout", "internal_star_values",
           "model_at_epochs", "star_vector", "phase_coverage"]
