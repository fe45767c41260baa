"""The joint model of one star evaluated at chosen epochs (figures, planning, effect sizes)."""

import numpy as np
import pandas as pd

from deepwell.core.parameters import SHARED
from deepwell.tables.observations import Observations

__all__ = ["observations_at", "model_at_epochs", "star_vector", "with_shared"]


# ------------------------------------------------------------------ evaluation
def observations_at(stars, t_pos, t_vel, pos_err=1.0, vel_err=1.0, relative_to="mass",
                    dataset="model"):
    """Observation tables with one row per star and chosen epoch, measured values zero.

    For evaluating a model where nothing was observed (predictions, Jacobians,
    forecasts): only the epochs, the stated errors (``pos_err`` mas in each
    coordinate, ``vel_err`` km/s) and what positions are measured against
    (``relative_to``: "mass" or "frame") matter.  Rows are star by star.
    """
    stars = list(stars)
    t_pos, t_vel = np.asarray(t_pos, float), np.asarray(t_vel, float)

    def rows(t):
        n = t.size * len(stars)
        return {"star": np.repeat(stars, t.size), "epoch": np.tile(t, len(stars)),
                "dataset": dataset, "exclude": False, "line": np.arange(n), "file": dataset}

    pos = pd.DataFrame({**rows(t_pos), "ra": 0.0, "dec": 0.0, "ra_err": pos_err,
                        "dec_err": pos_err, "corr": 0.0, "relative_to": relative_to})
    vel = pd.DataFrame({**rows(t_vel), "vr": 0.0, "vr_err": vel_err})
    return Observations(pos, vel, (), {}, "")


def model_at_epochs(model, star, t_pos=(), t_vel=(), newtonian=False):
    """The joint model of ``model`` for one star (same effects, integration) at chosen epochs.

    Parameters
    ----------
    model : deepwell.model.JointModel
    star : str
        Star whose rows are made.
    t_pos, t_vel : array_like
        Observed epochs (Julian yr) of position and velocity rows.
    newtonian : bool
        Every effect off (the layout then has no extra shared parameters: use
        :func:`star_vector` with ``newtonian=True``).

    Returns
    -------
    JointModel
        Its only star is ``star``; position rows are mass-relative (no frame
        terms).  Evaluate it with :func:`star_vector` of the full vector.
    """
    obs = observations_at((star,), t_pos, t_vel)
    if newtonian:
        return model.replace(observations=obs, stars=(star,), priors=(), datasets=None,
                             effects=None, integrated=None, reference_radius=None)
    return model.replace(observations=obs, stars=(star,), priors=(), datasets=None)


def star_vector(model, vec, star, newtonian=False):
    """The vector(s) of :func:`model_at_epochs` for ``star`` from internal vector(s) ``vec``.

    The model at chosen epochs has no data-set terms (its rows belong to no
    data set), so their parameters are dropped; with ``newtonian`` the effect
    strengths are dropped too (the Keplerian layout has none).
    """
    vec = np.asarray(vec, float)
    lay = model.layout
    keep = list(SHARED) + ([] if newtonian else list(model.effects.extra_names))
    cols = [lay.shared_names.index(n) for n in keep]
    block = lay.star_block(vec)[..., model.stars.index(star), :]
    return np.concatenate([vec[..., cols], block], axis=-1)


def with_shared(model, vec, name, value):
    """Copy of ``vec`` with shared parameter ``name`` set to ``value``."""
    out = np.array(vec, float)
    out[..., model.layout.shared_names.index(name)] = value
    return out
