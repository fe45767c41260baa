"""The internal parameter vector and its map to physical elements.

The fitter works on an internal, well-conditioned vector (period instead of
``a``, sqrt(e) cos w and sqrt(e) sin w, cos i); :class:`Layout` maps it to
the physical elements that are reported, in vectorised form so that it can
run on many trial vectors at once (walkers, finite differences).
"""

from dataclasses import dataclass

import numpy as np

from deepwell.core.parameters import MAX_ECC, SHARED, STAR_INTERNAL
from deepwell.model.kernels.orbit import a_from_period

__all__ = ["Layout", "internal_star_values"]


@dataclass(frozen=True)
class Layout:
    """Positions of the shared and per-star parameters in the internal vector.

    The internal vector is ``[mass, distance, x0, y0, vx0, vy0, vz0, extra...,
    star0(period, sqrt(e) cos w, sqrt(e) sin w, cos i, node[rad], t_peri), star1...]``.
    """

    stars: tuple
    extra: tuple = ()  # names of optional shared parameters (effects, data-set terms)
    specs: tuple = ()  # their ParameterSpec declarations, in the same order

    def spec(self, name):
        """Declaration of shared parameter ``name`` (the seven shared ones and the extras)."""
        if name in SHARED:
            return SHARED[name]
        return self.specs[self.extra.index(name)]

    @property
    def shared_names(self):
        return tuple(SHARED) + tuple(self.extra)

    @property
    def n_shared(self):
        return len(self.shared_names)

    @property
    def size(self):
        return self.n_shared + len(STAR_INTERNAL) * len(self.stars)

    def names(self):
        """Internal parameter names: the shared ones, then ``<star>:<element>`` per star.

        Names are stable: they depend on the star (and data-set) names, not on
        their order, so two fits of overlapping data share the names of what
        they share.
        """
        out = list(self.shared_names)
        for star in self.stars:
            out += [f"{star}:{p}" for p in STAR_INTERNAL]
        return out

    def index(self, name):
        return self.names().index(name)

    def carry(self, other, vec):
        """This layout's internal vector with the values of ``vec`` in layout ``other``, by name.

        For a model restricted to some stars (:meth:`JointModel.for_stars`),
        whose data-set terms are only those of the sets those stars appear in:
        its vector is not a slice of the joint one, so values are matched by
        parameter name.  Every name of this layout must be in ``other``.
        """
        vec = np.asarray(vec, dtype=float)
        where = {n: i for i, n in enumerate(other.names())}
        missing = [n for n in self.names() if n not in where]
        if missing:
            raise KeyError(f"parameter {missing[0]!r} is not in the other layout")
        return vec[..., [where[n] for n in self.names()]]

    def star_block(self, vec):
        """Per-star internal parameters as an array of shape (..., n_stars, 6)."""
        vec = np.asarray(vec, dtype=float)
        tail = vec[..., self.n_shared:]
        return tail.reshape(vec.shape[:-1] + (len(self.stars), len(STAR_INTERNAL)))

    def shared(self, vec, name):
        return np.asarray(vec, dtype=float)[..., self.shared_names.index(name)]

    def elements(self, vec):
        """Physical elements of every star from an internal vector.

        Returns
        -------
        dict of ndarray, each of shape (..., n_stars)
            ``a`` (mas), ``e``, ``inc``, ``node``, ``peri_arg`` (rad),
            ``t_peri`` (yr), ``period`` (yr); eccentricity clipped to MAX_ECC.
        """
        blk = self.star_block(vec)
        mass = self.shared(vec, "mass")[..., None]
        dist = self.shared(vec, "distance")[..., None]
        period = blk[..., 0]
        h, k = blk[..., 1], blk[..., 2]
        ecc = np.minimum(h * h + k * k, MAX_ECC)
        return {
            "period": period,
            "a": a_from_period(period, mass, dist),
            "e": ecc,
            "inc": np.arccos(np.clip(blk[..., 3], -1.0, 1.0)),
            "node": blk[..., 4],
            "peri_arg": np.arctan2(k, h),
            "t_peri": blk[..., 5],
        }

    def ecc_excess(self, vec):
        """How far sqrt(e) parameters push e beyond MAX_ECC (0 inside)."""
        blk = self.star_block(vec)
        return np.maximum(blk[..., 1] ** 2 + blk[..., 2] ** 2 - MAX_ECC, 0.0)


def internal_star_values(period, ecc, inc, node, peri_arg, t_peri):
    """Internal per-star block from physical elements (angles in radians)."""
    sq = np.sqrt(ecc)
    return np.array(
        [period, sq * np.cos(peri_arg), sq * np.sin(peri_arg), np.cos(inc), node, t_peri],
        dtype=float,
    )
