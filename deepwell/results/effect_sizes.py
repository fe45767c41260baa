"""Numbers about the relativistic effects for the report: sizes, epochs, limits.

* :func:`star_effect_sizes` -- per star, how large the redshift, precession
  and Romer delay are at the fitted orbit, against the star's data precision;
  for integrated stars also the osculating epoch, the integrated period and the
  observed pericentre epoch.
* :func:`extended_mass_limits` -- fits with a Plummer sphere of fixed scale
  radius, one per radius, and upper limits on its mass inside a reference radius.
"""

import numpy as np
from scipy import optimize, stats

from deepwell.core.constants import C_AU_PER_YR
from deepwell.fit.joint import fit_joint
from deepwell.model.kernels.orbit import keplerian_track
from deepwell.model.kernels.post_newtonian import pn_track
from deepwell.model.kernels.relativity import (
    effect_sizes,
    keplerian_emission_track,
    plummer_enclosed_mass,
)
from deepwell.model.quality import DETECTABLE_DCHI2
from deepwell.tables.effects import effects_from_args

from .detectability import effect_dchi2

__all__ = ["star_effect_sizes", "pericentre_epochs", "extended_mass_limits",
           "truncated_gaussian_upper_limit"]

DETECTABLE_RULE = (
    "an effect counts as detectable when the expected chi-square difference between the "
    "models with and without it, at the star's actual epochs and fitted errors, after a "
    "linearised refit of every fitted parameter except the effect strengths (the star's "
    "elements, mass, distance, frame and data-set terms), is at least "
    f"{DETECTABLE_DCHI2:g} (about 3 sigma); the effect sizes beside it are single-epoch "
    "numbers for orientation only")


def _star_elements(result, k):
    lay = result.model.layout
    el = {n: float(v[k]) for n, v in lay.elements(result.internal).items()}
    el["mass"] = float(lay.shared(result.internal, "mass"))
    el["distance"] = float(lay.shared(result.internal, "distance"))
    return el


def _romer_shifts(el):
    """Largest RV (km/s) and sky (mas) change the Romer delay makes over one orbit."""
    t = el["t_peri"] + el["period"] * np.linspace(-0.5, 0.5, 4001)
    args = (el["a"], el["e"], el["inc"], el["node"], el["peri_arg"], el["t_peri"],
            el["period"], el["distance"])
    plain = keplerian_track(t, *args)
    late, _ = keplerian_emission_track(t, *args, romer=True)
    dv = np.max(np.abs(late.v_z - plain.v_z))
    dpos = np.max(np.hypot(late.east - plain.east, late.north - plain.north))
    return float(dv), float(dpos)


def pericentre_epochs(result, star, n_grid=2001):
    """Integrated period and pericentre epochs of an integrated star near its data.

    Returns
    -------
    dict
        ``osculating_epoch`` (Julian yr, where the fitted elements hold),
        ``integrated_period`` (yr, between successive pericentres of the
        integrated orbit), ``pericentre_emitted`` (epoch of closest approach
        nearest the fitted osculating t_peri) and ``pericentre_observed``
        (the same plus the light time z/c, as seen by the observer).
    """
    model = result.model
    k = model.stars.index(star)
    el = _star_elements(result, k)
    vec = result.internal
    f_sp = float(model.layout.shared(vec, "f_sp")) if model.effects.precession else 0.0
    m_ext, b_ext = 0.0, None
    if model.effects.extended_mass:
        b_ext = model.effects.extended_scale
        m_ext = (float(model.layout.shared(vec, "ext_fraction")) * el["mass"]
                 / plummer_enclosed_mass(1.0, b_ext, model.reference_radius))
    a_au = el["a"] * 1e-3 * el["distance"]
    t_ref = el["t_peri"] + 0.5 * el["period"]
    P = el["period"]

    def r_at(t):
        tr = pn_track(np.atleast_1d(t), a_au, el["e"], el["inc"], el["node"], el["peri_arg"],
                      el["t_peri"], el["mass"], t_ref, f_sp=f_sp, m_ext=m_ext, b_ext=b_ext,
                      steps_per_orbit=model.effects.steps_per_orbit)
        return np.sqrt(tr.east**2 + tr.north**2 + tr.z**2), tr

    peris = []
    for n in (0, 1):  # the osculating pericentre's passage and the next one
        centre = el["t_peri"] + n * P
        half = 0.05 * P
        grid = centre + np.linspace(-half, half, n_grid // 10)
        r, _ = r_at(grid)
        i = int(np.argmin(r))
        lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
        # minimise over the offset from the bracket's middle: Brent's tolerance is
        # relative to |x|, which would be ~1e-5 yr for x ~ 2000
        mid = 0.5 * (lo + hi)
        sol = optimize.minimize_scalar(lambda dt, m=mid: float(r_at(m + dt)[0][0]),
                                       bounds=(lo - mid, hi - mid), method="bounded",
                                       options={"xatol": 1e-9})
        peris.append(mid + float(sol.x))
    _, tr = r_at(peris[0])
    return {"osculating_epoch": t_ref, "integrated_period": peris[1] - peris[0],
            "pericentre_emitted": peris[0],
            "pericentre_observed": peris[0] + float(tr.z[0]) / C_AU_PER_YR}


def star_effect_sizes(result):
    """Effect sizes of every star at its fitted orbit (f = f_sp = 1).

    Parameters
    ----------
    result : deepwell.fit.result.FitResult

    Returns
    -------
    dict[str, dict]
        Per star: ``redshift_excess_kms`` (exact, at pericentre),
        ``redshift_first_order_kms``, ``precession_arcmin`` and
        ``precession_mas`` (per orbit, on the sky), ``romer_range_days``
        (peak to peak), ``romer_rv_kms`` and ``romer_sky_mas`` (largest change
        of RV and position over an orbit), ``min_position_error_mas``,
        ``median_velocity_error_kms`` (nan without velocities), the expected
        chi-square differences ``dchi2_redshift``, ``dchi2_precession``,
        ``dchi2_romer`` (:func:`deepwell.results.detectability.effect_dchi2`), booleans
        ``detectable_redshift``, ``detectable_precession``, ``detectable_romer``
        and ``detectable`` (any; see :data:`DETECTABLE_RULE`), ``integrated``
        (1PN orbit in the fit) and, for integrated stars, the entries of
        :func:`pericentre_epochs`; for Keplerian stars ``osculating_epoch`` is
        None and the period and pericentre are the fitted Keplerian ones.
    """
    model = result.model
    fisher = effect_dchi2(result)
    out = {}
    for k, star in enumerate(model.stars):
        el = _star_elements(result, k)
        a_au = el["a"] * 1e-3 * el["distance"]
        sz = effect_sizes(a_au, el["e"], el["mass"], el["distance"], el["inc"], el["peri_arg"])
        pos = model.pos.star == k
        min_pos = float(np.min(np.minimum(model.pos.ra_err[pos], model.pos.dec_err[pos])))
        vel_err = (model.vel.vr_err[model.vel.star == k] if model.vel is not None
                   else np.zeros(0))
        med_vel = float(np.median(vel_err)) if vel_err.size else float("nan")
        rv_romer, sky_romer = _romer_shifts(el)
        d = {
            "redshift_excess_kms": float(sz.redshift_excess_kms),
            "redshift_first_order_kms": float(sz.redshift_first_order_kms),
            "precession_arcmin": float(sz.precession_arcmin),
            "precession_mas": float(sz.precession_mas),
            "romer_range_days": float(sz.romer_range_days),
            "romer_rv_kms": rv_romer,
            "romer_sky_mas": sky_romer,
            "min_position_error_mas": min_pos,
            "median_velocity_error_kms": med_vel,
            **fisher[star],
            "integrated": bool(model.integrated[k]),
        }
        d["detectable"] = d["detectable_redshift"] or d["detectable_precession"] \
            or d["detectable_romer"]
        if model.integrated[k]:
            d.update(pericentre_epochs(result, star))
        else:
            tr = keplerian_track(el["t_peri"], el["a"], el["e"], el["inc"], el["node"],
                                 el["peri_arg"], el["t_peri"], el["period"], el["distance"])
            z_p = float(tr.z) * 1e-3 * el["distance"] / C_AU_PER_YR if model.effects.romer else 0.0
            d.update(osculating_epoch=None, integrated_period=el["period"],
                     pericentre_emitted=el["t_peri"], pericentre_observed=el["t_peri"] + z_p)
        out[star] = d
    return out


def truncated_gaussian_upper_limit(value, sigma, level):
    """Upper limit of a quantity >= 0 from a Gaussian estimate (value, sigma).

    Notes
    -----
    Posterior for a flat prior on x >= 0 and a Gaussian likelihood: the normal
    N(value, sigma) truncated at 0.  The limit U solves
    [Phi((U - value)/sigma) - Phi(-value/sigma)] / [1 - Phi(-value/sigma)] = level.
    """
    a = (0.0 - value) / sigma
    return float(stats.truncnorm.ppf(level, a, np.inf, loc=value, scale=sigma))


def extended_mass_limits(observations, settings, scale_radii_au, fit=None):
    """Limits on a Plummer sphere around the mass, one fit per scale radius.

    Parameters
    ----------
    observations : deepwell.tables.Observations
    settings : deepwell.tables.settings.Settings
        The fit's settings; the extended mass is switched on here (f and f_sp
        stay as the settings have them).
    scale_radii_au : sequence of float
        Plummer scale radii b (au), each held fixed in its own fit.
    fit : callable, optional
        ``fit(observations, settings) -> FitResult`` (default
        :func:`deepwell.fit.fit_joint`).

    Returns
    -------
    list of dict
        Per scale radius: ``scale_radius_au``, ``reference_radius_au``,
        ``ext_fraction`` and ``ext_fraction_sigma`` (least-squares value of
        M_ext(<r_ref)/M and its error, may be negative), ``ext_mass_msun`` and
        ``ext_mass_sigma_msun``, ``upper_95_fraction``, ``upper_997_fraction``,
        ``upper_95_msun``, ``upper_997_msun``, ``lower_997_fraction`` (value
        minus 2.968 sigma: the lower end of the two-sided 99.7% interval),
        ``detected`` (that lower end above zero), ``chi2`` and ``method``.

    Notes
    -----
    The upper limits use :func:`truncated_gaussian_upper_limit`: the
    Gaussian (value, sigma) of the least-squares fit truncated at the
    physical bound M_ext >= 0 (a flat prior on M_ext >= 0).  The reference
    radius is the settings' ``reference_radius`` or, if none is set, the one
    the first fit chooses (apocentre of the tightest star), kept for all radii.
    """
    fit = fit or fit_joint
    ref = settings.effect_switches().reference_radius
    z997 = stats.norm.ppf(1.0 - 0.5 * (1.0 - 0.997))
    rows = []
    for b in scale_radii_au:
        s_b = effects_from_args(settings, extended_mass=True, extended_scale=float(b),
                                reference_radius=ref)
        res = fit(observations, s_b)
        ref = res.model.reference_radius
        x, sig = res.value("ext_fraction"), res.sigma("ext_fraction")
        mass = res.value("mass")
        up95 = truncated_gaussian_upper_limit(x, sig, 0.95)
        up997 = truncated_gaussian_upper_limit(x, sig, 0.997)
        rows.append({
            "scale_radius_au": float(b), "reference_radius_au": float(ref),
            "ext_fraction": x, "ext_fraction_sigma": sig,
            "ext_mass_msun": x * mass, "ext_mass_sigma_msun": sig * mass,
            "upper_95_fraction": up95, "upper_997_fraction": up997,
            "upper_95_msun": up95 * mass, "upper_997_msun": up997 * mass,
            "lower_997_fraction": float(x - z997 * sig), "detected": bool(x - z997 * sig > 0.0),
            "chi2": res.chi2,
            "method": "least-squares value and error truncated at M_ext >= 0 "
                      "(flat prior on M_ext >= 0); Plummer sphere with the scale radius "
                      "held fixed; mass quoted inside the reference radius",
        })
    return rows
