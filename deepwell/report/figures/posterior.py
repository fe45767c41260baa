"""Figures of a posterior sample: corner plot, mass-distance contours, predictive bands.

Pure functions compute what is drawn (:func:`credible_levels`,
:func:`mass_distance_data`, :func:`predictive_draws`, :func:`velocity_band`,
:func:`sky_draw_tracks`); the ``*_figure`` functions only draw.  Figures use
the Agg canvas without pyplot state and deepwell's STYLE, like
:mod:`deepwell.report.figures`.
"""

import matplotlib
import numpy as np
from scipy import ndimage

from deepwell.model.epochs import model_at_epochs, star_vector
from deepwell.model.kernels.orbit import keplerian_track

from .style import MODEL_COLOUR, PALETTE, SOLAR_MASS, STYLE, new_figure, unit_label

__all__ = ["corner_labels", "corner_figure", "credible_levels", "mass_distance_data",
           "mass_distance_figure", "predictive_draws", "velocity_band", "sky_draw_tracks",
           "CONTOUR_LEVELS", "N_DRAWS"]

#: Probability inside the mass-distance contours: the 1-sigma and 2-sigma
#: fractions of a one-dimensional Gaussian (68.3% and 95.4%).
CONTOUR_LEVELS = (0.6827, 0.9545)
#: Posterior draws used for the predictive bands.
N_DRAWS = 100


def corner_labels(posterior, names):
    """Labels among ``names`` that vary in the sample (fixed parameters are left out)."""
    out = []
    for name in names:
        if name in posterior.labels:
            x = posterior.flat_samples[:, posterior.labels.index(name)]
            if np.ptp(x) > 0 and np.all(np.isfinite(x)):
                out.append(name)
    return out


def corner_figure(posterior, names):
    """Corner plot (``corner`` package) of the posterior of ``names`` with units on the axes."""
    import corner

    labels = corner_labels(posterior, names)
    idx = [posterior.labels.index(n) for n in labels]
    data = posterior.flat_samples[:, idx]
    axis = [f"{n} ({unit_label(posterior.units[i])})" if posterior.units[i]
            else f"{n} (dimensionless)" for n, i in zip(labels, idx, strict=True)]
    with matplotlib.rc_context(STYLE):
        size = max(4.0, 1.35 * len(labels))
        fig = new_figure((size, size))
        # bins from the number of draws and a one-bin smoothing of the 2-d
        # histograms, as for the mass-distance figure: few draws on a fine
        # grid draw noise as structure
        bins = int(np.clip(np.sqrt(len(data)) / 1.5, 15, 40))
        corner.corner(data, fig=fig, labels=axis, quantiles=(0.16, 0.5, 0.84),
                      levels=CONTOUR_LEVELS, color=PALETTE[3], plot_datapoints=False,
                      bins=bins, smooth=1.0, label_kwargs={"fontsize": 7})
    return fig


# ------------------------------------------------------------ mass and distance
def credible_levels(density_at_samples, levels=CONTOUR_LEVELS):
    """Density thresholds whose contours enclose the fractions ``levels`` of the samples.

    Notes
    -----
    The threshold of level q is the (1 - q) quantile of the (smoothed) density
    evaluated at the samples themselves, so the region above it holds a
    fraction q of the samples whatever the smoothing (common practice for
    highest-density regions from samples).
    """
    d = np.asarray(density_at_samples, float)
    return [float(np.quantile(d, 1.0 - q)) for q in levels]


def _cell(x, edges):
    return np.clip(np.searchsorted(edges, x, side="right") - 1, 0, len(edges) - 2)


def mass_distance_data(posterior, bins=None, smooth=1.2):
    """Gridded joint density of mass and distance with its credible-level thresholds.

    Returns
    -------
    dict
        ``mass``, ``distance`` (cell centres, Msun and pc), ``density``
        (shape (n_distance, n_mass), normalised to sum 1, smoothed by a
        Gaussian of ``smooth`` cells), ``thresholds`` (for CONTOUR_LEVELS, see
        :func:`credible_levels`),
        ``median`` (mass, distance) and ``samples`` (n, 2).

    Notes
    -----
    ``bins`` (per axis) defaults to sqrt(n) / 1.5 within [20, 60]: a fine
    grid with few samples breaks the outer contour into islands around lone
    draws.
    """
    s = posterior.flat_samples
    if bins is None:
        bins = int(np.clip(np.sqrt(len(s)) / 1.5, 20, 60))
    m = s[:, posterior.labels.index("mass")]
    d = s[:, posterior.labels.index("distance")]
    rm = np.percentile(m, [0.05, 99.95])
    rd = np.percentile(d, [0.05, 99.95])
    pad_m, pad_d = 0.1 * np.ptp(rm), 0.1 * np.ptp(rd)
    h, em, ed = np.histogram2d(m, d, bins=bins, range=[[rm[0] - pad_m, rm[1] + pad_m],
                                                        [rd[0] - pad_d, rd[1] + pad_d]])
    h = ndimage.gaussian_filter(h.T, smooth)
    h /= h.sum()
    at_samples = h[_cell(d, ed), _cell(m, em)]
    return {"mass": 0.5 * (em[1:] + em[:-1]), "distance": 0.5 * (ed[1:] + ed[:-1]),
            "density": h, "thresholds": credible_levels(at_samples),
            "median": (float(np.median(m)), float(np.median(d))), "samples": np.stack([m, d], 1)}


def mass_distance_figure(posterior, least_squares=None):
    """Joint posterior of mass and distance with 68.3% and 95.4% contours.

    ``least_squares``: optional ((mass, sigma), (distance, sigma)) drawn as a cross.
    """
    dd = mass_distance_data(posterior)
    t1, t2 = dd["thresholds"]
    with matplotlib.rc_context(STYLE):
        fig = new_figure((5.0, 4.4))
        ax = fig.add_axes((0.17, 0.12, 0.78, 0.84))
        ax.contourf(dd["mass"], dd["distance"], dd["density"], levels=[t2, t1, np.inf],
                    colors=[PALETTE[1], PALETTE[3]], alpha=0.6)
        ax.contour(dd["mass"], dd["distance"], dd["density"], levels=[t2, t1],
                   colors=MODEL_COLOUR, linewidths=0.7)
        ax.plot(*dd["median"], "o", color=MODEL_COLOUR, ms=4, label="posterior median",
                zorder=5)
        ax.fill_between([], [], color=PALETTE[3], alpha=0.6, label="68.3% of the posterior")
        ax.fill_between([], [], color=PALETTE[1], alpha=0.6, label="95.4% of the posterior")
        if least_squares is not None:
            (m, sm), (d, sd) = least_squares
            ax.errorbar([m], [d], xerr=[sm], yerr=[sd], fmt="s", color=PALETTE[4], ms=4,
                        mfc="none", label="least squares ± 1σ")
        ax.set_xlabel(f"central mass ({SOLAR_MASS})")
        ax.set_ylabel("distance (pc)")
        ax.legend(loc="best")
    return fig


# ------------------------------------------------------------ predictive bands
def predictive_draws(posterior, n=N_DRAWS, seed=0):
    """``n`` internal vectors drawn without replacement from the posterior sample."""
    flat = posterior.internal_samples.reshape(-1, posterior.internal_samples.shape[-1])
    rng = np.random.Generator(np.random.PCG64(seed))
    pick = rng.choice(flat.shape[0], size=min(n, flat.shape[0]), replace=False)
    return flat[np.sort(pick)]


def velocity_band(result, star, draws, t, quantiles=(16.0, 84.0)):
    """Percentiles over posterior draws of the full model's radial velocity at epochs ``t``.

    Returns
    -------
    lo, hi : ndarray
        km/s, the 16th and 84th percentiles by default (a 68% band).
    """
    model = model_at_epochs(result.model, star, t_vel=t)
    vr = model.predict(star_vector(result.model, draws, star)).vr
    lo, hi = np.percentile(vr, quantiles, axis=0)
    return lo, hi


def sky_draw_tracks(result, star, draws, n=240):
    """Keplerian sky tracks (one orbit each) of ``star`` for posterior draws.

    Returns
    -------
    east, north : ndarray, shape (n_draws, n)
        mas, relative to the mass (osculating ellipses for integrated stars, as
        in the main figures).
    """
    lay = result.model.layout
    k = result.model.stars.index(star)
    el = {q: v[..., k][:, None] for q, v in lay.elements(draws).items()}
    dist = lay.shared(draws, "distance")[:, None]
    ecc_anom = np.linspace(0.0, 2.0 * np.pi, n)
    t = el["t_peri"] + el["period"] * (ecc_anom - el["e"] * np.sin(ecc_anom)) / (2.0 * np.pi)
    tr = keplerian_track(t, el["a"], el["e"], el["inc"], el["node"], el["peri_arg"],
                         el["t_peri"], el["period"], dist)
    return tr.east, tr.north
