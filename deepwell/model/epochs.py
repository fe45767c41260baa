"""The joint model of one star evaluated at chosen epochs (figures, planning, effect sizes)."""

from types import SimpleNamespace

import numpy as np
import pandas as pd

__all__ = ["model_at_epochs", "star_vector", "with_shared"]


# ------------------------------------------------------------------ evaluation
def _fake_observations(star, t_pos, t_vel):
    """Minimal observation tables (one star) at chosen epochs, for evaluating a model."""
    t_pos = np.asarray(t_pos, float)
    t_vel = np.asarray(t_vel, float)
    pos = pd.DataFrame({"star": [star] * t_pos.size, "epoch": t_pos, "ra": 0.0, "dec": 0.0,
                        "ra_err": 1.0, "dec_err": 1.0, "corr": 0.0, "exclude": False,
                        "relative_to": "mass", "dataset": "model", "line": 0})
    vel = pd.DataFrame({"star": [star] * t_vel.size, "epoch": t_vel, "vr": 0.0, "vr_err": 1.0,
                        "exclude": False, "dataset": "model", "line": 0})
    return SimpleNamespace(positions=pos, velocities=vel)


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
    obs = _fake_observations(star, t_pos, t_vel)
    if newtonian:
        return model.replace(observations=obs, stars=(star,), priors=(), datasets=None,
                             effects=None, integrated=None, reference_radius=None)
    return model.replace(observations=obs, stars=(star,), priors=(), datasets=None)


def star_vector(model, vec, star, newtonian=False):
    """Shared part and ``star``'s block of internal vector(s) ``vec`` of ``model``.

    With ``newtonian`` the extra shared parameters (effect strengths) are
    dropped too: the Keplerian layout has none.
    """
    vec = np.asarray(vec, float)
    lay = model.layout
    n_sh = lay.n_shared
    n0 = n_sh - len(lay.extra) if newtonian else n_sh
    k = model.stars.index(star)
    block = lay.star_block(vec)[..., k, :]
    return np.concatenate([vec[..., :n0], block], axis=-1)


def with_shared(model, vec, name, value):
    """Copy of ``vec`` with shared parameter ``name`` set to ``value``."""
    out = np.array(vec, float)
    out[..., model.layout.shared_names.index(name)] = value
    return out
