"""The figure set of a fit report: which figures are drawn, their captions, and saving them.

Every star gets a figure of its own (and its effect figures) up to
:data:`STAR_FIGURE_LIMIT` stars; beyond that only the stars with the
best-constrained orbits and the stars the user names
(:class:`FigureOptions`) get them, chosen by :func:`choose_star_figures`, and
:func:`left_out_text` says in the report which stars have none and how to get
them.  The sky figure always shows every star.  The figures are drawn by
:func:`.drawing.draw_jobs` (in worker processes when that pays).
"""

from dataclasses import dataclass
from pathlib import Path

import matplotlib
import numpy as np

from deepwell.core.errors import OutputError
from deepwell.core.text import plural
from deepwell.model.quality import POOR_COVERAGE

from .drawing import draw_jobs
from .effects import effect_figure_jobs, effect_stem
from .orbits import (
    DENSITY_CELLS,
    LEGEND_STARS,
    figure_name,
    position_classes,
    sky_figure,
    sky_zoom,
    star_figure,
    star_inputs,
    velocity_classes,
)
from .posterior import corner_figure, mass_distance_figure, predictive_draws
from .style import FORMATS, RASTER_POINTS, STYLE

__all__ = ["write_figures", "sky_caption", "star_caption", "STAR_FIGURE_LIMIT",
           "FigureOptions", "StarFigureChoice", "choose_star_figures", "left_out_text"]

#: Most stars that get figures of their own (the star figure and its effect
#: figures) in a fit report: one figure per star of a survey of a thousand
#: stars would take an hour to draw and nobody would read them all.
STAR_FIGURE_LIMIT = 40

#: Figures started first when drawn in parallel: the slowest ones.
_SLOW_FIGURES = ("corner", "sky")


@dataclass(frozen=True)
class FigureOptions:
    """Which stars get figures of their own, and how many processes draw.

    Attributes
    ----------
    star_limit : int or None
        Most stars with figures (:data:`STAR_FIGURE_LIMIT`); None: every star
        (``deepwell fit --all-star-figures``).
    stars : tuple of str
        Stars that get their figures whatever the limit (``--figure-stars``).
    processes : int or None
        Most drawing processes (see :func:`.drawing.figure_processes`); 1 draws
        in the calling process.
    """

    star_limit: int | None = STAR_FIGURE_LIMIT
    stars: tuple = ()
    processes: int | None = None


@dataclass(frozen=True)
class StarFigureChoice:
    """The stars that get figures of their own, and those that do not.

    Attributes
    ----------
    drawn, left_out : tuple of str
        In the fit's order of stars.
    named : tuple of str
        The stars asked for by name (all in ``drawn``).
    limit : int or None
        The limit applied (None: none).
    """

    drawn: tuple
    left_out: tuple
    named: tuple
    limit: int | None


def _relative_period_errors(result):
    index = {label: i for i, label in enumerate(result.labels)}
    out = []
    for star in result.stars:
        i = index[f"{star}:period"]
        period, var = float(result.values[i]), float(result.cov[i, i])
        rel = np.sqrt(max(var, 0.0)) / abs(period) if period != 0 else np.inf
        out.append(rel if np.isfinite(rel) else np.inf)
    return np.array(out)


def choose_star_figures(result, options=FigureOptions()):
    """The stars whose own figures a report draws (:class:`StarFigureChoice`).

    Up to ``options.star_limit`` stars every star is drawn.  Beyond it the
    named stars (``options.stars``) come first, then the stars with the
    smallest relative period error sigma_P / P (the best-constrained orbits;
    ties go to the star with more data, then to the fit's order) until the
    limit is reached; all named stars are drawn even when they alone exceed it.

    Raises
    ------
    ValueError
        For a named star that is not among the fitted stars.
    """
    stars = list(result.stars)
    unknown = [s for s in options.stars if s not in stars]
    if unknown:
        raise ValueError(f"no star '{unknown[0]}' among the {len(stars)} fitted stars")
    named = tuple(dict.fromkeys(options.stars))
    limit = options.star_limit
    if limit is None or len(stars) <= limit:
        return StarFigureChoice(tuple(stars), (), named, limit)
    rel = _relative_period_errors(result)
    ndata = np.asarray(result.star_ndata)
    ranked = sorted(range(len(stars)), key=lambda k: (rel[k], -int(ndata[k]), k))
    chosen = set(named)
    for k in ranked:
        if len(chosen) >= limit:
            break
        chosen.add(stars[k])
    return StarFigureChoice(tuple(s for s in stars if s in chosen),
                            tuple(s for s in stars if s not in chosen), named, limit)


def left_out_text(choice):
    """Markdown saying which stars have no figure of their own, why, and how to get them.

    Empty when every star has its figures.
    """
    if not choice.left_out:
        return ""
    n_drawn, n_out = len(choice.drawn), len(choice.left_out)
    named = (f" (with {plural(len(choice.named), 'star')} named by `--figure-stars`)"
             if choice.named else "")
    return (f"**{n_out} of the {n_drawn + n_out} stars {'has' if n_out == 1 else 'have'} "
            "no star figure and no effect figures.** With "
            f"{n_drawn + n_out} stars, above the limit of {choice.limit} stars "
            f"(`STAR_FIGURE_LIMIT` in `deepwell/report/figures/gallery.py`), only "
            f"{plural(n_drawn, 'star')}{named} get a star figure (and effect figures): "
            "those with the best-constrained orbits (smallest relative period error, "
            "then most data). Every star is on the sky figure and in the tables. "
            f"Without figures of their own: {', '.join(choice.left_out)}. To draw them, "
            "name them in `deepwell fit ... --figure-stars NAME [NAME ...]`, or draw every "
            "star's figures with `--all-star-figures`.")


def write_figures(result, folder, formats=FORMATS, posterior=None, effect_sizes=None,
                  options=FigureOptions(), more=(), progress=None, newtonian=None):
    """Write the sky figure and the figures of the chosen stars into ``folder``.

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
    options : FigureOptions, optional
        Which stars get figures of their own (:func:`choose_star_figures`) and
        how many processes draw.
    more : sequence of (str, callable, str), optional
        Further figures ``(stem, build, caption)`` drawn with these (after them
        in the returned order); ``build()`` returns a Figure.
    progress : callable, optional
        Called with short progress lines (see :func:`.drawing.draw_jobs`).

    Returns
    -------
    dict
        Figure stem -> {"caption": str, "files": list of Path}; the sky figure is ``sky``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    draws = None
    band = ""
    if posterior is not None and tuple(posterior.internal_names) == tuple(
            result.model.layout.names()):
        draws = predictive_draws(posterior)
        band = (f" Thin lines: orbits of {len(draws)} posterior draws (posterior-predictive "
                "spread).")
    choice = choose_star_figures(result, options)
    inputs = star_inputs(result) if choice.drawn else None
    jobs = [("sky", lambda: sky_figure(result, draws), sky_caption(result) + band)]
    for star in choice.drawn:
        jobs.append((figure_name(star), lambda s=star: star_figure(result, s, draws, inputs),
                     star_caption(result, star, draws is not None)
                     + (band + " Shaded: 68% band (16th to 84th percentile) of the radial "
                        "velocity over the same draws." if draws is not None else "")))
    if effect_sizes is not None:
        skipped = {effect_stem(kind, star) for star in choice.left_out
                   for kind in ("redshift", "precession")}
        jobs += [job for job in effect_figure_jobs(result, effect_sizes, newtonian)
                 if job[0] not in skipped]
    if posterior is not None:
        jobs += _posterior_jobs(result, posterior)
    jobs += list(more)
    stems = [stem.casefold() for stem, _, _ in jobs]
    if len(set(stems)) != len(stems):  # file_stem makes this (all but) impossible
        twice = next(s for s in stems if stems.count(s) > 1)
        raise OutputError(f"{folder}: two figures would share the file name '{twice}'")
    with matplotlib.rc_context(STYLE):
        files = draw_jobs(jobs, folder, formats, processes=options.processes,
                          progress=progress, first=_SLOW_FIGURES)
    return {stem: {"caption": caption, "files": paths}
            for (stem, _, caption), paths in zip(jobs, files, strict=True)}


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
