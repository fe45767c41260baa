"""The joint model: all stars around one mass, one distance, one drifting frame.

:class:`JointModel` turns an internal parameter vector (see
:mod:`deepwell.core.parameters`) into predicted sky positions and radial
velocities for every row of the observation tables, and into whitened
residuals for the fitter.  Everything is vectorised: a stack of parameter
vectors of shape (..., n_par) gives predictions of shape (..., n_rows), so
the same code serves the least-squares fit, finite differences and an
ensemble of walkers.

Model (``shared/physics.md`` section 3)::

    ra  = [x0 + vx0 (t - t_ref)] + east(t)     (frame rows; mass rows omit [..])
    dec = [y0 + vy0 (t - t_ref)] + north(t)
    vr  = vz0 + v_z(t)

Switchable relativistic pieces (:mod:`deepwell.model.effects`) change east, north
and v_z: the orbit is taken at the emission epoch (Romer delay), stars whose
precession matters are integrated at first post-Newtonian order (elements
osculating at each star's apocentre epoch t_peri + P/2), and vr gains the
relativistic redshift scaled by f.  Without effects the model is the plain
Keplerian one above, at the same cost as before.
"""

import copy
from dataclasses import dataclass

import numpy as np

from deepwell.core.constants import KMS_PER_AU_PER_YR
from deepwell.core.errors import SettingsError
from deepwell.core.parameters import EXTRA, SHARED, STAR_ELEMENTS
from deepwell.model.kernels.orbit import OrbitTrack, keplerian_track
from deepwell.model.kernels.post_newtonian import pn_track
from deepwell.model.kernels.relativity import (
    keplerian_emission_track,
    plummer_enclosed_mass,
    redshift_velocity,
)
from deepwell.model.layout import Layout
from deepwell.tables.datasets import DatasetConfig
from deepwell.tables.effects import Effects

from .datasets import DatasetTerms, mark_excluded
from .effects import choose_integrated, reference_radius_from
from .likelihood import mixture_rows

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


_MODEL_ARGS = {"observations", "reference_epoch", "stars", "priors", "effects", "integrated",
               "reference_radius", "datasets"}


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
    effects : deepwell.tables.effects, optional
        Relativistic pieces to include (default: none, the Keplerian model).
    integrated : sequence of bool, optional
        Per star: use the 1PN/Plummer orbit integrator (default: every star
        when precession or an extended mass is on; see :meth:`start_from`).
    reference_radius : float, optional
        Radius (au) inside which ``ext_fraction`` is quoted (default: the
        effects' value, else set by :meth:`start_from`).
    datasets : deepwell.tables.datasets, optional
        Data-set terms, error models, likelihood and excluded rows (default:
        none, every row alike).
    """

    def __init__(self, observations, reference_epoch=2000.0, stars=None, priors=(),
                 effects=None, integrated=None, reference_radius=None, datasets=None):
        pos = observations.positions
        vel = observations.velocities
        self.dataset_config = datasets
        if datasets is not None and datasets.exclude_rows:
            pos, found_p = mark_excluded(pos, datasets.exclude_rows, "positions")
            vel, found_v = mark_excluded(vel, datasets.exclude_rows, "velocities")
            missing = set(datasets.exclude_rows) - found_p - found_v
            if missing:
                f, n = sorted(missing)[0]
                raise SettingsError(f"no data row at {f} line {n} to exclude",
                                    file=datasets.source or "command line",
                                    column="fit.exclude_rows")
        pos = pos[~pos["exclude"].to_numpy(bool)]
        vel = vel[~vel["exclude"].to_numpy(bool)] if len(vel) else vel
        stars_given = stars
        if stars is None:
            stars = list(dict.fromkeys(pos["star"]))
        stars = tuple(stars)
        pos = pos[pos["star"].isin(stars)]
        vel = vel[vel["star"].isin(stars)] if len(vel) else vel
        self.stars = stars
        self.effects = Effects.newtonian() if effects is None else effects
        if integrated is None:
            integrated = np.full(len(stars), self.effects.integrates)
        self.integrated = np.asarray(integrated, bool)
        if reference_radius is None:
            reference_radius = self.effects.reference_radius
        self.reference_radius = reference_radius
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
        self.datasets = (DatasetTerms(datasets, self.pos, self.vel, file=datasets.source,
                                      strict=stars_given is None)
                         if datasets is not None and datasets.active else None)
        terms = self.datasets is not None
        self.layout = Layout(
            stars=stars,
            extra=self.effects.extra_names + (self.datasets.names if terms else ()),
            specs=tuple(EXTRA[n] for n in self.effects.extra_names)
            + (self.datasets.specs if terms else ()))
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
        self._star_rows = [np.flatnonzero(self._star_all == k) for k in range(len(stars))]
        self.priors = tuple(priors)
        self._prior_index = [self._prior_slot(p) for p in self.priors]
        self.observations = observations

    def replace(self, **changes):
        """A new model with the same construction arguments except ``changes``.

        Keys are the parameters of the constructor.  The stars are passed
        explicitly (``self.stars`` unless changed); when the stars change and
        ``integrated`` is not given, each kept star keeps its integrator flag.
        """
        unknown = set(changes) - _MODEL_ARGS
        if unknown:
            raise TypeError(f"JointModel has no argument {sorted(unknown)[0]!r}")
        args = dict(observations=self.observations, reference_epoch=self.reference_epoch,
                    stars=self.stars, priors=self.priors, effects=self.effects,
                    integrated=self.integrated, reference_radius=self.reference_radius,
                    datasets=self.dataset_config)
        if "stars" in changes and "integrated" not in changes:
            args["integrated"] = [self.integrated[self.stars.index(s)] for s in changes["stars"]]
        args.update(changes)
        return JointModel(**args)

    def with_measurements(self, ra, dec, vr=None):
        """The same model with other measured values at the same rows (for simulated data).

        Parameters
        ----------
        ra, dec : ndarray
            Positions (mas), one per position row of the model (``self.pos``).
        vr : ndarray, optional
            Radial velocities (km/s), one per velocity row (``self.vel``).

        Returns
        -------
        JointModel
            A shallow copy sharing epochs, errors and set-up; only the
            measured values differ (the observation tables are not rebuilt).
        """
        out = copy.copy(self)
        out.pos = copy.copy(self.pos)
        out.pos.ra, out.pos.dec = np.asarray(ra, float), np.asarray(dec, float)
        if self.vel is not None and vr is not None:
            out.vel = copy.copy(self.vel)
            out.vel.vr = np.asarray(vr, float)
        return out

    def for_stars(self, stars):
        """The same model restricted to some stars (priors on other stars dropped)."""
        keep = [p for p in self.priors if p.star is None or p.star in stars]
        return self.replace(stars=stars, priors=keep)

    def keplerian(self):
        """The same data and priors with every effect off (for the start search)."""
        keep = [p for p in self.priors if p.star is not None or p.name in SHARED]
        cfg = self.dataset_config
        plain = DatasetConfig(exclude_rows=cfg.exclude_rows) if cfg is not None else None
        return self.replace(priors=keep, datasets=plain, effects=None, integrated=None,
                            reference_radius=None)

    def start_from(self, keplerian_vec, settings=None):
        """Finish the effect set-up from a Keplerian starting vector.

        Inserts the effect strengths at their starting values (settings value,
        else the default of :data:`deepwell.core.parameters.EXTRA`), chooses which
        stars are integrated (:func:`deepwell.model.effects.choose_integrated`) and
        fixes the reference radius of the extended mass if none was given.

        Returns
        -------
        model : JointModel
            The finished model (a new object).
        vec : ndarray
            The starting vector in its layout.
        """
        kep = np.asarray(keplerian_vec, dtype=float)
        n0 = len(SHARED)
        extras = []
        for name in self.layout.extra:
            s = settings.shared_setting(name) if settings is not None else None
            if self.datasets is not None and name in self.datasets.names:
                default = self.datasets.start_value(name, self)
            else:
                default = self.layout.spec(name).default
            extras.append(s.value if s is not None and s.value is not None else default)
        vec = np.concatenate([kep[..., :n0], extras, kep[..., n0:]])
        el = self.layout.elements(vec)
        mass = float(self.layout.shared(vec, "mass"))
        dist = float(self.layout.shared(vec, "distance"))
        err = np.minimum(self.pos.ra_err, self.pos.dec_err)
        min_err = np.array([err[self.pos.star == k].min() if np.any(self.pos.star == k)
                            else np.inf for k in range(len(self.stars))])
        integ = choose_integrated(self.effects, el, mass, dist, min_err)
        ref = self.reference_radius
        if self.effects.extended_mass and ref is None:
            ref = reference_radius_from(el, dist)
        return self.replace(integrated=integ, reference_radius=ref), vec

    def effect_notes(self):
        """Plain statements of the effect model, for the fit's notes."""
        fx = self.effects
        notes = [f"relativistic effects modelled: {fx.describe()}"]
        if fx.integrates and self.integrated.any():
            notes.append(
                "integrated stars ("
                + ", ".join(s for s, i in zip(self.stars, self.integrated, strict=True) if i)
                + "): their elements a, e, inc, node, peri_arg, t_peri and period are "
                "OSCULATING Keplerian elements at each star's apocentre epoch t_peri + P/2; "
                "the observed pericentre epoch and integrated period differ slightly "
                "(see the effect summary)")
        if fx.precession and not self.integrated.all():
            notes.append(
                "stars kept Keplerian because their precession per orbit is below a tenth of "
                "their smallest position error: "
                + ", ".join(s for s, i in zip(self.stars, self.integrated, strict=True) if not i))
        if fx.extended_mass:
            notes.append(
                f"extended mass: a Plummer sphere with FIXED scale radius b = "
                f"{fx.extended_scale:g} au centred on the mass; ext_fraction is its mass "
                f"inside r_ref = {self.reference_radius:g} au over the point mass; other "
                "density profiles would give other limits")
        if self.datasets is not None:
            notes += self.datasets.notes()
        return notes

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
        """Orbit of every row relative to the mass, for internal vector(s) ``vec``.

        Returns an OrbitTrack (mas, mas/yr, km/s) at the emission epochs when
        the Romer delay is on, integrated for the integrated stars.
        """
        vec = np.asarray(vec, dtype=float)
        el = self.layout.elements(vec)
        dist = self.layout.shared(vec, "distance")[..., None]
        s = self._star_all
        fx = self.effects
        if not fx.romer and not self.integrated.any():
            return keplerian_track(self._t_all, el["a"], el["e"], el["inc"], el["node"],
                                   el["peri_arg"], el["t_peri"], el["period"], dist, star=s)
        shape = vec.shape[:-1] + (len(s),)
        out = {k: np.empty(shape) for k in ("east", "north", "z", "v_east", "v_north", "v_z")}
        kep = np.flatnonzero(~self.integrated[s])
        if kep.size:
            sk = s[kep]
            tr, _ = keplerian_emission_track(
                self._t_all[kep], el["a"], el["e"], el["inc"], el["node"], el["peri_arg"],
                el["t_peri"], el["period"], dist, romer=fx.romer, star=sk)
            for k in out:
                out[k][..., kep] = getattr(tr, k)
        if self.integrated.any():
            self._integrated_rows(vec, el, out)
        return OrbitTrack(**out)

    def _integrated_rows(self, vec, el, out):
        """Fill ``out`` at the rows of integrated stars (1PN and/or Plummer)."""
        fx = self.effects
        mass = self.layout.shared(vec, "mass")
        dist = self.layout.shared(vec, "distance")
        f_sp = self.layout.shared(vec, "f_sp") if fx.precession else 0.0
        m_ext, b_ext = 0.0, None
        if fx.extended_mass:
            if self.reference_radius is None:
                raise ValueError("the extended mass needs a reference radius: set "
                                 "[effects] reference_radius or call start_from()")
            r_ref, b_ext = self.reference_radius, fx.extended_scale
            total_per_inside = 1.0 / plummer_enclosed_mass(1.0, b_ext, r_ref)
            m_ext = self.layout.shared(vec, "ext_fraction") * mass * total_per_inside
        mas_per_au = 1e3 / dist[..., None]
        mas_yr_per_kms = mas_per_au / KMS_PER_AU_PER_YR
        for k in np.flatnonzero(self.integrated):
            rows = self._star_rows[k]
            a_au = el["a"][..., k] * 1e-3 * dist
            tr = pn_track(self._t_all[rows], a_au, el["e"][..., k], el["inc"][..., k],
                          el["node"][..., k], el["peri_arg"][..., k], el["t_peri"][..., k],
                          mass, el["t_peri"][..., k] + 0.5 * el["period"][..., k], f_sp=f_sp,
                          m_ext=m_ext, b_ext=b_ext, light_time=fx.romer,
                          steps_per_orbit=fx.steps_per_orbit)
            out["east"][..., rows] = tr.east * mas_per_au
            out["north"][..., rows] = tr.north * mas_per_au
            out["z"][..., rows] = tr.z * mas_per_au
            out["v_east"][..., rows] = tr.v_east * mas_yr_per_kms
            out["v_north"][..., rows] = tr.v_north * mas_yr_per_kms
            out["v_z"][..., rows] = tr.v_z

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
        vz0 = sh(vec, "vz0")[..., None]
        if self.effects.redshift == "off" or self.vel is None:
            vr = tr.v_z[..., npos:] + vz0
        else:
            dist = sh(vec, "distance")[..., None]
            mas_to_au = 1e-3 * dist
            v_z = tr.v_z[..., npos:]
            r_au = np.sqrt(tr.east[..., npos:] ** 2 + tr.north[..., npos:] ** 2
                           + tr.z[..., npos:] ** 2) * mas_to_au
            v_sky = (tr.v_east[..., npos:] ** 2 + tr.v_north[..., npos:] ** 2) \
                * (mas_to_au * KMS_PER_AU_PER_YR) ** 2
            vr = redshift_velocity(v_z, v_sky + v_z**2, r_au, sh(vec, "mass")[..., None],
                                   f=sh(vec, "f")[..., None],
                                   exact=self.effects.redshift == "exact", vz0=vz0)
        if self.datasets is not None:
            ra, dec, vr = self.datasets.shift(self, vec, ra, dec, vr)
        return Prediction(ra=ra, dec=dec, vr=vr)

    def data_residuals(self, vec):
        """Whitened residuals (data - model)/error of all data, shape (..., n_data).

        With a data-set error model the errors are the fitted ones.
        """
        p = self.predict(vec)
        if self.datasets is not None:
            return self.datasets.whitened(self, vec, p)
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
            for prior, slot in zip(self.priors, self._prior_index, strict=True):
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
        """All residual rows: data, then priors and penalties.

        Their sum of squares is -2 ln(likelihood x priors) up to a constant,
        also with fitted error terms and the mixture likelihood (extra rows
        after the data; see :mod:`deepwell.model.datasets`, :mod:`deepwell.model.likelihood`).
        """
        ds = self.datasets
        if ds is None:
            return np.concatenate([self.data_residuals(vec), self.prior_residuals(vec)],
                                  axis=-1)
        z = self.data_residuals(vec)
        parts = [z]
        if ds.mixture:
            q = self.layout.shared(vec, "outlier_frac")[..., None]
            parts = list(mixture_rows(self.pos.n, z, q, ds.config.outlier_width))
        parts += [ds.norm_rows(self, vec), self.prior_residuals(vec)]
        shape = z.shape[:-1]
        return np.concatenate([np.broadcast_to(p, shape + p.shape[-1:]) for p in parts],
                              axis=-1)

    def information_jacobian(self, jac, vec, free):
        """Jacobian rows whose J^T J is the information used for the covariance.

        ``jac`` is the Jacobian of :meth:`residuals`; unchanged without fitted
        error terms (see :meth:`deepwell.model.datasets.DatasetTerms.information_jacobian`).
        """
        if self.datasets is None or not self.datasets.n_norm_rows():
            return jac
        return self.datasets.information_jacobian(self, jac, vec, free)

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

    def residual_owner(self):
        """Star index that owns each residual row (-1: rows of shared parameters only).

        A row owned by star k depends on the shared parameters and on star k's
        elements only, which lets a Jacobian perturb one element of every star
        at once (see :func:`deepwell.fit.jacobian`).
        """
        data = [self.pos.star, self.pos.star,
                self.vel.star if self.vel else np.zeros(0, np.intp)]
        if self.datasets is not None:  # the mixture row and the normalisation rows
            n_extra = int(self.datasets.mixture) + self.datasets.n_norm_rows()
            data.append(np.full(n_extra, -1, np.intp))
        penalty = np.arange(len(self.stars))
        prior = np.array([-1 if p.star is None else self.stars.index(p.star)
                          for p in self.priors], dtype=np.intp)
        return np.concatenate(data + [penalty, prior]).astype(np.intp)

    # ---------------------------------------------------------------- helpers
    def _prior_slot(self, prior):
        if prior.star is None:
            if prior.name not in self.layout.shared_names:
                raise ValueError(f"unknown shared parameter {prior.name!r}")
            return ("shared", None)
        if prior.name not in STAR_ELEMENTS:
            raise ValueError(f"unknown element {prior.name!r}")
        return ("star", self.stars.index(prior.star))
