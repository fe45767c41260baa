"""The joint model: all stars around one mass, one distance, one drifting frame.

:class:`JointModel` turns an internal parameter vector (see
:mod:`deepwell.parameters`) into predicted sky positions and radial
velocities for every row of the observation tables, and into whitened
residuals for the fitter.  Everything is vectorised: a stack of parameter
vectors of shape (..., n_par) gives predictions of shape (..., n_rows), so
the same code serves the least-squares fit, finite differences and an
ensemble of walkers.

Model (``shared/physics.md`` section 3)::

    ra  = [x0 + vx0 (t - t_ref)] + east(t)     (frame rows; mass rows omit [..])
    dec = [y0 + vy0 (t - t_ref)] + north(t)
    vr  = vz0 + v_z(t)
"""

from dataclasses import dataclass

import numpy as np

from .orbit import keplerian_track
from .parameters import SHARED, STAR_ELEMENTS, Layout

__all__ = ["JointModel", "Prediction", "Prior"]


@dataclass(frozen=True)
class Prediction:
    """Model values at the observed rows (positions in mas, velocities in km/s)."""

    ra: np.ndarray
    dec: np.ndarray
    vr: np.ndarray


@dataclass(frozen=True)
class Prior:
    """A Gaussian prior on a physical parameter: shared name or (star, element)."""

    name: str
    mean: float
    sigma: float
    star: str | None = None


class _Rows:
    """Plain arrays of one observation table, taken once from a DataFrame."""

    def __init__(self, frame, star_index, columns):
        self.star = np.array([star_index[s] for s in frame["star"]], dtype=np.intp)
        self.t = frame["epoch"].to_numpy(float)
        for name in columns:
            setattr(self, name, frame[name].to_numpy(float))
        self.n = len(frame)


class JointModel:
    """Joint Keplerian model of all stars.

    Parameters
    ----------
    observations : deepwell.tables.Observations
        The input tables; rows with ``exclude`` true are left out.
    reference_epoch : float
        Julian year of x0, y0 (the frame reference epoch).
    stars : sequence of str, optional
        Stars to model (default: every star with positions).
    priors : sequence of Prior, optional
        Gaussian priors, added as extra residual rows.
    """

    def __init__(self, observations, reference_epoch=2000.0, stars=None, priors=()):
        pos = observations.positions
        vel = observations.velocities
        pos = pos[~pos["exclude"].to_numpy(bool)]
        vel = vel[~vel["exclude"].to_numpy(bool)] if len(vel) else vel
        if stars is None:
            stars = list(dict.fromkeys(pos["star"]))
        stars = tuple(stars)
        pos = pos[pos["star"].isin(stars)]
        vel = vel[vel["star"].isin(stars)] if len(vel) else vel
        self.stars = stars
        self.layout = Layout(stars=stars)
        self.reference_epoch = float(reference_epoch)
        index = {s: k for k, s in enumerate(stars)}
        self.pos = _Rows(pos, index, ("ra", "dec", "ra_err", "dec_err", "corr"))
        self.pos.frame = (pos["relative_to"].to_numpy(str) == "frame").astype(float)
        self.pos.dataset = pos["dataset"].to_numpy(str)
        self.pos.line = pos["line"].to_numpy(int) if "line" in pos else np.zeros(len(pos), int)
        self.vel = _Rows(vel, index, ("vr", "vr_err")) if len(vel) else None
        if self.vel is not None:
            self.vel.dataset = vel["dataset"].to_numpy(str)
            self.vel.line = vel["line"].to_numpy(int) if "line" in vel else np.zeros(len(vel), int)
        self._t_all = np.concatenate([self.pos.t, self.vel.t if self.vel else []])
        self._star_all = np.concatenate(
            [self.pos.star, self.vel.star if self.vel else np.zeros(0, np.intp)]
        )
        # Whitening of correlated (ra, dec) errors: r1 = dra/sa,
        # r2 = (ddec/sd - rho dra/sa) / sqrt(1 - rho^2).
        root = np.sqrt(1.0 - self.pos.corr**2)
        self._w_ra = 1.0 / self.pos.ra_err
        self._w_dec = 1.0 / (self.pos.dec_err * root)
        self._w_mix = -self.pos.corr / (self.pos.ra_err * root)
        self.priors = tuple(priors)
        self._prior_index = [self._prior_slot(p) for p in self.priors]
        self.observations = observations

    def for_stars(self, stars):
        """The same model restricted to some stars (priors on other stars dropped)."""
        keep = [p for p in self.priors if p.star is None or p.star in stars]
        return JointModel(self.observations, self.reference_epoch, stars=stars, priors=keep)

    # ------------------------------------------------------------------ sizes
    @property
    def n_data(self):
        """Number of measured numbers (2 per position row, 1 per velocity row)."""
        return 2 * self.pos.n + (self.vel.n if self.vel else 0)

    def star_counts(self):
        """Per star: (position epochs, velocity epochs)."""
        npos = np.bincount(self.pos.star, minlength=len(self.stars))
        nvel = (np.bincount(self.vel.star, minlength=len(self.stars))
                if self.vel else np.zeros(len(self.stars), int))
        return npos, nvel

    # ------------------------------------------------------------- evaluation
    def track(self, vec):
        """Orbit of every row relative to the mass, for internal vector(s) ``vec``."""
        el = self.layout.elements(vec)
        dist = self.layout.shared(vec, "distance")[..., None]
        s = self._star_all
        return keplerian_track(
            self._t_all, el["a"][..., s], el["e"][..., s], el["inc"][..., s],
            el["node"][..., s], el["peri_arg"][..., s], el["t_peri"][..., s],
            el["period"][..., s], dist,
        )

    def predict(self, vec):
        """Predicted ra, dec (mas) and vr (km/s) at every observed row."""
        vec = np.asarray(vec, dtype=float)
        tr = self.track(vec)
        npos = self.pos.n
        sh = self.layout.shared
        dt = self.pos.t - self.reference_epoch
        fx = (sh(vec, "x0")[..., None] + sh(vec, "vx0")[..., None] * dt) * self.pos.frame
        fy = (sh(vec, "y0")[..., None] + sh(vec, "vy0")[..., None] * dt) * self.pos.frame
        ra = tr.east[..., :npos] + fx
        dec = tr.north[..., :npos] + fy
        vr = tr.v_z[..., npos:] + sh(vec, "vz0")[..., None]
        return Prediction(ra=ra, dec=dec, vr=vr)

    def data_residuals(self, vec):
        """Whitened residuals (data - model)/error of all data, shape (..., n_data)."""
        p = self.predict(vec)
        d_ra = self.pos.ra - p.ra
        d_dec = self.pos.dec - p.dec
        parts = [d_ra * self._w_ra, d_dec * self._w_dec + d_ra * self._w_mix]
        if self.vel is not None:
            parts.append((self.vel.vr - p.vr) / self.vel.vr_err)
        return np.concatenate(parts, axis=-1)

    def prior_residuals(self, vec):
        """Residual rows of the Gaussian priors and the eccentricity penalty."""
        vec = np.asarray(vec, dtype=float)
        rows = [1e3 * self.layout.ecc_excess(vec)]
        if self.priors:
            phys = None
            vals = []
            for prior, slot in zip(self.priors, self._prior_index):
                if slot[0] == "shared":
                    vals.append(self.layout.shared(vec, prior.name))
                else:
                    if phys is None:
                        phys = self.layout.elements(vec)
                    v = phys[prior.name][..., slot[1]]
                    if prior.name in ("inc", "node", "peri_arg"):
                        v = np.degrees(v)
                    vals.append(v)
            vals = np.stack(vals, axis=-1)
            means = np.array([p.mean for p in self.priors])
            sig = np.array([p.sigma for p in self.priors])
            rows.append((vals - means) / sig)
        return np.concatenate(rows, axis=-1)

    def residuals(self, vec):
        """All residual rows: data, then priors and penalties."""
        return np.concatenate([self.data_residuals(vec), self.prior_residuals(vec)], axis=-1)

    def chi2(self, vec):
        """Chi-square of the data alone (priors excluded)."""
        r = self.data_residuals(vec)
        return np.sum(r * r, axis=-1)

    def star_chi2(self, vec):
        """Per-star chi-square and number of data, as two arrays."""
        r = self.data_residuals(vec)
        owner = np.concatenate([self.pos.star, self.pos.star,
                                self.vel.star if self.vel else np.zeros(0, np.intp)])
        chi = np.bincount(owner, weights=r * r, minlength=len(self.stars))
        ndat = np.bincount(owner, minlength=len(self.stars))
        return chi, ndat

    # ---------------------------------------------------------------- helpers
    def _prior_slot(self, prior):
        if prior.star is None:
            if prior.name not in SHARED:
                raise ValueError(f"unknown shared parameter {prior.name!r}")
            return ("shared", None)
        if prior.name not in STAR_ELEMENTS:
            raise ValueError(f"unknown element {prior.name!r}")
        return ("star", self.stars.index(prior.star))
