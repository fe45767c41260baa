"""The figure set of a fit report: which figures are drawn, their captions, and saving them."""

from pathlib import Path

import matplotlib

from deepwell.core.errors import OutputError
from deepwell.core.text import plural
from deepwell.model.quality import POOR_COVERAGE

from .effects import effect_figure_jobs
from .orbits import (
    DENSITY_CELLS,
    LEGEND_STARS,
    figure_name,
    position_classes,
    sky_figure,
    sky_zoom,
    star_figure,
    velocity_classes,
)
from .posterior import corner_figure, mass_distance_figure, predictive_draws
from .style import FORMATS, RASTER_POINTS, STYLE, save_figure

__all__ = ["write_figures", "sky_caption", "star_caption"]


def write_figures(result, folder, formats=FORMATS, posterior=None, effect_sizes=None,
                  newtonian=None):
    """Write the sky figure and one figure per star into ``folder``.

    Parameters
    ----------
    result : deepwell.fit.result.FitResult
    folder : str or Path
        Created if missing.
    formats : tuple of str, optional
        File formats; PDF is vector, PNG uses STYLE["savefig.dpi"] (200).
    posterior : deepwell.fit.sampling.PosteriorResult, optional
        Adds posterior-predictive orbits and bands, a corner plot of the
        shared parameters (``corner``) and the mass-distance posterior
        (``mass_distance``).
    effect_sizes : dict, optional
        From :func:`deepwell.results.effect_sizes.star_effect_sizes`: adds the
        redshift and precession figures of the stars where the effect exceeds
        the errors (see :func:`deepwell.report.figures.effects.effect_figure_jobs`).
    newtonian : deepwell.results.newtonian.NewtonianRefit, optional
        The Newtonian model refitted to the same data, which the effect figures
        compare with (without it no effect figure is drawn).

    Returns
    -------
    dict
        Figure stem -> {"caption": str, "files": list of Path}; the sky figure is ``sky``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = {}
    draws = None
    band = ""
    if posterior is not None and tuple(posterior.internal_names) == tuple(
            result.model.layout.names()):
        draws = predictive_draws(posterior)
        band = (f" Thin lines: orbits of {len(draws)} posterior draws (posterior-predictive "
                "spread).")
    jobs = [("sky", lambda: sky_figure(result, draws), sky_caption(result) + band)]
    for star in result.model.stars:
        jobs.append((figure_name(star), lambda s=star: star_figure(result, s, draws),
                     star_caption(result, star, draws is not None)
                     + (band + " Shaded: 68% band (16th to 84th percentile) of the radial "
                        "velocity over the same draws." if draws is not None else "")))
    if effect_sizes is not None:
        jobs += effect_figure_jobs(result, effect_sizes, newtonian)
    if posterior is not None:
        jobs += _posterior_jobs(result, posterior)
    stems = [stem.casefold() for stem, _, _ in jobs]
    if len(set(stems)) != len(stems):  # file_stem makes this (all but) impossible
        twice = next(s for s in stems if stems.count(s) > 1)
        raise OutputError(f"{folder}: two figures would share the file name '{twice}'")
    with matplotlib.rc_context(STYLE):
        for stem, build, caption in jobs:
            out[stem] = {"caption": caption, "files": save_figure(build(), folder, stem, formats)}
    return out


def sky_caption(result):
    """Caption of the sky figure (its title too: figures carry none)."""
    m = result.model
    n = len(m.stars)
    text = (f"{'Orbit' if n == 1 else 'Orbits'} of {plural(n, 'star')} around the central "
            "mass (black cross), on the sky. Frame-relative positions have the fitted "
            "reference-point drift subtracted, so every data set is shown relative to the "
            "mass; lines are the fitted orbits"
            + (", arrows show the direction of motion" if n <= LEGEND_STARS else "")
            + ". East is to the left, north up.")
    zoom = sky_zoom(result)
    if zoom is not None:
        text += f" (a) All orbits; (b) the central ±{zoom:.0f} mas."
    if n <= LEGEND_STARS:
        text += (" Each star has its own pair of colour and marker shape (legend at right), "
                 "so stars stay apart in print and for colour-blind readers.")
        if m.pos.n > RASTER_POINTS:
            text += (f" The {m.pos.n} positions are drawn as small dots without error bars "
                     "(rasterised in the PDF).")
    else:
        text += (f" With {n} stars the orbits are thin grey lines without arrows and no "
                 "legend names the stars; ")
        text += (f"the {m.pos.n} positions are shown as their density (counts per cell of "
                 f"{DENSITY_CELLS} x {DENSITY_CELLS} over each panel, logarithmic colour "
                 "scale, rasterised in the PDF)." if m.pos.n > RASTER_POINTS else
                 "the positions are black dots without error bars.")
    return text


def star_caption(result, star, bands=False):
    """Caption of one star's figure: what the panels show, and how well the orbit is covered."""
    pos, vel = position_classes(result, star), velocity_classes(result, star)
    text = (f"Star {star}: sky track relative to the mass (left; black cross: the mass, open "
            "circle: pericentre, dots: the labelled epochs in Julian years, arrows: direction "
            "of motion), position residuals (data minus model) and, if measured, radial "
            "velocities with their residuals (right). Error bars are the stated 1-sigma "
            "errors; the model lines are the best (least-squares) fit.")
    split = "; ".join(", ".join(c) for classes in (pos, vel) if len(classes) > 1
                      for c in classes)
    if split:
        text += (" Data sets whose typical errors differ by more than a factor 10 get their "
                 f"own residual panels ({split}), so precise data do not vanish next to "
                 "coarse ones.")
    coverage = result.star_summary(star)["coverage"]
    if coverage < POOR_COVERAGE:
        text += (f" The data cover {coverage:.0%} of the orbit: the orbit is poorly "
                 "constrained.")
    return text


def _posterior_jobs(result, posterior):
    shared = list(result.model.layout.shared_names)
    lsq = ((result.value("mass"), result.sigma("mass")),
           (result.value("distance"), result.sigma("distance")))
    return [
        ("corner", lambda: corner_figure(posterior, shared),
         "Posterior of the shared parameters (parameters held fixed are left out). Diagonal: "
         "one-dimensional histograms with the 16th, 50th and 84th percentiles (dashed); off "
         "the diagonal: pairs, with contours enclosing 68.3% and 95.4% of the samples."),
        ("mass_distance", lambda: mass_distance_figure(posterior, lsq),
         "Joint posterior of the central mass and the distance: shaded regions enclose 68.3% "
         "(dark) and 95.4% (light) of the posterior samples (smoothed histogram); dot: "
         "posterior median; open square: least-squares value with its 1σ errors. The tilt "
         "is the mass-distance degeneracy."),
    ]
