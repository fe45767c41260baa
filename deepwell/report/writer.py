"""The written report of a fit: summary.json, tables, figures and report.md.

:func:`write_report` takes a :class:`~deepwell.fit.result.FitResult` and a folder
and writes everything into it; :func:`save_report` does the same through the
safe output folder of :mod:`deepwell.report.outdir`. The numbers are taken from the
result as they are: uncertainties are 1-sigma from the stated data errors and
are not rescaled by the reduced chi-square.

Layout of the folder::

    summary.json                machine-readable numbers (units: astropy strings)
    report.md                   readable report with the figures embedded
    tables/shared.ecsv, .tex    shared parameters (least squares)
    tables/stars.ecsv, .tex     per-star elements and derived numbers (least squares)
    tables/effects.ecsv, .tex   sizes of the relativistic effects per star
    tables/enclosed_mass.ecsv   per-star enclosed masses (deepwell.results.enclosed)
    tables/extended_mass.*      Plummer-mass limits (when computed)
    tables/posterior_*.ecsv,    posterior medians and percentiles (when sampled)
      posterior.tex
    figures/*.pdf, *.png        see deepwell.report.figures, figures_effects, figures_posterior

With a posterior sample the "parameters" and "stars" entries of summary.json
are posterior medians with 16th/84th percentiles (``lower``/``upper``) and
``sigma`` = half their distance; the least-squares numbers stay under
"least_squares".  The newer analyses' blocks and report sections live in
:mod:`deepwell.report.sections`.
"""

import json
import math
from pathlib import Path

import numpy as np

from deepwell.core.jsonsafe import json_safe
from deepwell.core.text import plural
from deepwell.core.version import __version__
from deepwell.model.quality import GOOD_RPERI_ERROR, POOR_COVERAGE, POOR_PERIOD_ERROR
from deepwell.results.compactness import compactness, compactness_paragraph
from deepwell.results.saved_fit import write_state

from .analysis_tables import write_extra_tables
from .figures.enclosed import enclosed_caption, enclosed_figure
from .figures.gallery import FigureOptions, choose_star_figures, left_out_text, write_figures
from .inference_data import INFERENCE_FILE, write_inference_data
from .outdir import staged_output
from .robustness import (
    robustness_figure_jobs,
    robustness_markdown,
    robustness_summary,
    write_robustness_tables,
)
from .sections import (
    effects_block,
    enclosed_block,
    extended_block,
    md_effects,
    md_enclosed,
    md_extended,
    md_posterior,
    not_converged_banner,
    posterior_compactness,
    posterior_parameters,
    sampling_block,
)
from .tables import format_value_error, md_text, star_numbers, write_tables

__all__ = ["report_notes", "compactness_choice", "summary_dict", "write_summary",
           "markdown_report", "write_report", "save_report"]

#: Order of the per-star quantities in summary.json.
SUMMARY_STAR_ORDER = ("period", "e", "a", "inc", "node", "peri_arg", "t_peri", "r_peri")


def _relative(result, label):
    v = result.value(label)
    return result.sigma(label) / abs(v) if v != 0 else float("inf")


def _far_from_one(chi2, dof):
    """Reduced chi-square more than 3 sigma from 1 (sigma = sqrt(2/dof); common practice)."""
    return dof > 0 and abs(chi2 / dof - 1.0) > 3.0 * math.sqrt(2.0 / dof)


def report_notes(result):
    """Plain-language warnings about the fit, for report.md and summary.json."""
    notes = list(result.notes)
    if not result.converged:
        notes.append("The optimiser did not report convergence: treat every number as provisional.")
    if _far_from_one(result.chi2, result.dof):
        notes.append(
            f"The reduced chi-square is {result.reduced_chi2:.2f} for {result.dof} degrees of "
            f"freedom (expected 1 ± {math.sqrt(2.0 / result.dof):.2f}): the stated errors or "
            "the model do not describe the data well; the uncertainties are not rescaled.")
    for star in result.stars:
        s = star_numbers(result, star)
        rel_p = _relative(result, f"{star}:period")
        if s["coverage"] < POOR_COVERAGE or not rel_p <= POOR_PERIOD_ERROR:
            notes.append(
                f"Star {star} is poorly constrained (phase coverage {s['coverage']:.2f}, "
                f"relative period error {100 * rel_p:.2g}%): its elements and errors rest on "
                "a short arc and may be biased; do not over-interpret them.")
        if s["n_velocities"] == 0:
            notes.append(f"Star {star} has no radial velocities: its node and argument of "
                         "pericentre are ambiguous by 180 deg (either pair fits the positions).")
        dof = int(result.star_ndata[result.stars.index(star)]) - 6
        if _far_from_one(s["reduced_chi2"] * max(dof, 1), dof):
            notes.append(f"Star {star} has a reduced chi-square of {s['reduced_chi2']:.2f} "
                         f"({dof} degrees of freedom), far from 1.")
    for star, file, reason in result.observations.dropped_stars:
        notes.append(f"Star {star} was left out ({file}: {reason}).")
    return notes


def compactness_choice(result):
    """The star with the smallest well-constrained pericentre, or None.

    Well constrained: phase coverage >= POOR_COVERAGE and relative pericentre
    error < GOOD_RPERI_ERROR.

    Returns
    -------
    tuple (star, r_peri_au, r_peri_err_au) or None
    """
    best = None
    for star in result.stars:
        label = f"{star}:r_peri"
        r, err = result.value(label), result.sigma(label)
        cov = result.star_summary(star)["coverage"]
        if cov >= POOR_COVERAGE and r > 0 and err / r < GOOD_RPERI_ERROR:
            if best is None or r < best[1]:
                best = (star, r, err)
    return best


def _compactness(result):
    choice = compactness_choice(result)
    if choice is None:
        return None, None
    star, r, err = choice
    rep = compactness(result.value("mass"), r)
    data = {"star": star, "r_peri_sigma": {"value": _num(err), "unit": "AU"}, **rep.to_dict()}
    return data, rep


# -------------------------------------------------------------------- summary
def _num(x):
    """JSON-safe float (None for nan/inf)."""
    return json_safe(float(x))


def _q(result, label):
    value, sigma, unit = result.quantity(label)
    return {"value": _num(value), "sigma": _num(sigma), "unit": unit}


def summary_dict(result, extra=None, posterior=None, profile=None, extended_limits=None,
                 effect_sizes=None, sampling_failed=None, newtonian=None):
    """The content of summary.json (see the module docstring of deepwell.report).

    Parameters
    ----------
    extra : dict, optional
        Additional top-level entries (e.g. the command line); may not reuse a
        contract key.
    posterior : deepwell.fit.sampling.PosteriorResult, optional
        "parameters" and "stars" become posterior medians and percentiles;
        adds "sampling" and "least_squares".
    profile : deepwell.results.enclosed.EnclosedMassProfile, optional
        Adds "enclosed_mass".
    extended_limits : list of dict, optional
        From :func:`deepwell.results.effect_sizes.extended_mass_limits`; adds "extended_mass".
    effect_sizes : dict, optional
        From :func:`deepwell.results.effect_sizes.star_effect_sizes`; adds "effects" and,
        per star, "effect_sizes", "integrated_period" and "pericentre_observed".
    sampling_failed : str, optional
        Why a requested sampling gave no posterior; adds a "sampling" entry saying so.
    newtonian : deepwell.results.newtonian.NewtonianRefit, optional
        Adds "newtonian_refit" (its chi-squares, Δχ² and parameter counts).
    """
    shared = result.model.layout.shared_names
    params = {}
    for name in shared:
        value, sigma = result.value(name), result.sigma(name)
        fixed = not bool(result.free[result.model.layout.index(name)])
        params[name] = {"value": _num(value), "sigma": None if fixed else _num(sigma),
                        "unit": result.model.layout.spec(name).unit, "fixed": fixed}
    stars, fit_stars = {}, {}
    for star in result.stars:
        stars[star] = {q: _q(result, f"{star}:{q}") for q in SUMMARY_STAR_ORDER}
        s = result.star_summary(star)
        fit_stars[star] = {"reduced_chi2": _num(s["reduced_chi2"]),
                           "n_positions": s["n_positions"], "n_velocities": s["n_velocities"],
                           "coverage": _num(s["coverage"])}
    obs = result.observations
    out = {
        "parameters": params,
        "stars": stars,
        "fit": {"chi2": _num(result.chi2), "dof": int(result.dof),
                "reduced_chi2": _num(result.reduced_chi2), "stars": fit_stars,
                "converged": bool(result.converged)},
        "mass_distance": {"correlation": _num(result.mass_distance_correlation),
                          "exponent": _num(result.mass_distance_exponent)},
        "reference_epoch": float(result.model.reference_epoch),
        "software": {"name": "deepwell", "version": __version__},
        "inputs": {"folder": str(obs.folder), "checksums": dict(obs.checksums)},
        "settings": result.settings.to_dict(),
        "notes": report_notes(result),
        "dropped_stars": [{"star": s, "file": f, "reason": r} for s, f, r in obs.dropped_stars],
        "compactness": _compactness(result)[0],
    }
    if effect_sizes is not None:
        out["effects"] = effects_block(result, effect_sizes)
        for star in result.stars:
            d = effect_sizes[star]
            stars[star]["integrated_period"] = {"value": _num(d["integrated_period"]),
                                                "unit": "yr"}
            stars[star]["pericentre_observed"] = {"value": _num(d["pericentre_observed"]),
                                                  "unit": "yr"}
            stars[star]["effect_sizes"] = json_safe(d)
    if newtonian is not None:
        out["newtonian_refit"] = json_safe(newtonian.as_dict())
    if profile is not None:
        out["enclosed_mass"] = enclosed_block(profile)
    if extended_limits:
        out["extended_mass"] = extended_block(extended_limits)
    if sampling_failed is not None:
        out["sampling"] = {"converged": False, "posterior": None,
                           "statement": f"NOT CONVERGED: no posterior: {sampling_failed}"}
    if posterior is not None:
        p_params, p_stars = posterior_parameters(result, posterior, SUMMARY_STAR_ORDER)
        out["least_squares"] = {"parameters": params,
                                "stars": {s: {q: stars[s][q] for q in SUMMARY_STAR_ORDER}
                                          for s in result.stars}}
        for star in result.stars:
            extra_keys = {k: v for k, v in stars[star].items() if k not in SUMMARY_STAR_ORDER}
            p_stars[star].update(extra_keys)
        out["parameters"], out["stars"] = p_params, p_stars
        out["sampling"] = sampling_block(posterior)
        choice = compactness_choice(result)
        out["compactness_posterior"] = json_safe(
            posterior_compactness(result, posterior, choice[0] if choice else None))
    for key, value in (extra or {}).items():
        if key in out:
            raise ValueError(f"extra entry {key!r} would replace a summary.json field")
        out[key] = value
    return out


def write_summary(result, path, extra=None, **analyses):
    """Write summary.json (strict JSON: no NaN) and return the dict written.

    ``analyses``: the keyword arguments of :func:`summary_dict`.
    """
    data = summary_dict(result, extra, **analyses)
    Path(path).write_text(json.dumps(data, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    return data


# ------------------------------------------------------------------- markdown
ASSUMPTIONS = (
    "All stars orbit one Newtonian point mass on fixed Keplerian ellipses; the stars do "
    "not pull on each other and no extended mass (such as a star cluster) is included.",
    "No relativistic effects were modelled: no light-travel (Rømer) delay, no gravitational "
    "or transverse redshift, no pericentre precession. For the tightest orbits these shift "
    "radial velocities near pericentre by tens to a couple of hundred km/s.",
    "Frame-relative positions share one reference point that drifts linearly "
    "(x0 + vx0 (t - t_ref), y0 + vy0 (t - t_ref)); positions measured against the mass "
    "itself carry no frame terms.",
    "Errors are Gaussian and independent between epochs, as stated in the input tables.",
)


def _assumptions(result):
    """ASSUMPTIONS, adapted to the effects in the fitted model (and any the settings asked
    for that the model lacks)."""
    out = list(ASSUMPTIONS)
    m = result.model
    fx = m.effects
    integ = [s for s, i in zip(m.stars, m.integrated, strict=True) if i]
    if fx.any_on:
        how = ("first post-Newtonian order" + (" plus the extended mass" if fx.extended_mass
                                               else ""))
        if integ and len(integ) == len(m.stars):
            orbit = f"every star moves on an integrated orbit ({how})"
        elif integ:
            orbit = (("star " if len(integ) == 1 else "stars ") + ", ".join(integ)
                     + (" moves" if len(integ) == 1 else " move")
                     + f" on integrated orbits ({how}), the others on fixed Keplerian ellipses")
        else:
            orbit = "the stars move on fixed Keplerian ellipses"
        ext = (f"an extended mass is included as a Plummer sphere of fixed scale radius "
               f"{fx.extended_scale:g} au (other profiles would give other results)"
               if fx.extended_mass else "no extended mass (such as a star cluster) is included")
        out[0] = (f"All stars orbit one central point mass: {orbit}; the stars do not pull on "
                  f"each other and {ext}.")
        out[1] = (f"Relativistic effects modelled: {fx.describe()} (see \"Relativistic "
                  "effects\"); any effect not named there is left out.")
    try:
        asked = result.settings.effect_switches()
    except (AttributeError, ValueError):
        asked = None
    if asked is not None and asked.describe() != fx.describe():
        out.append(f"The settings ask for effects ({asked.describe()}) but the fitted model "
                   f"has {fx.describe()}: the difference was NOT applied.")
    return out


def _md_pm(result, label):
    return format_value_error(result.value(label), result.sigma(label), "text")


def _md_star_tables(result, numbers):
    lines = ["| Star | P (yr) | a (mas) | e | i (deg) | Ω (deg) | ω (deg) | t_peri (yr) |",
             "|---|---|---|---|---|---|---|---|"]
    for s in result.stars:
        lines.append(f"| {md_text(s)} | " + " | ".join(_md_pm(result, f"{s}:{q}") for q in
                     ("period", "a", "e", "inc", "node", "peri_arg", "t_peri")) + " |")
    lines += ["", "| Star | r_peri (au) | r_peri (R_s) | v_peri (km/s) | coverage | "
              "positions | velocities | reduced χ² |", "|---|---|---|---|---|---|---|---|"]
    for s in result.stars:
        n = numbers[s]
        lines.append(
            f"| {md_text(s)} | {_md_pm(result, f'{s}:r_peri')} | "
            f"{format_value_error(n['r_peri_rs'], n['r_peri_rs_err'], 'text')} | "
            f"{format_value_error(n['v_peri_kms'], n['v_peri_kms_err'], 'text')} | "
            f"{n['coverage']:.2f} | {n['n_positions']} | {n['n_velocities']} | "
            f"{n['reduced_chi2']:.2f} |")
    return lines


def markdown_report(result, notes, comp, figures, posterior=None, profile=None,
                    extended_limits=None, effect_sizes=None, robustness="",
                    sampling_failed=None, figures_note="", newtonian=None):
    """Text of report.md.

    Parameters
    ----------
    notes : list of str
        From :func:`report_notes`.
    comp : tuple (dict, CompactnessReport) or (None, None)
    figures : dict
        From :func:`deepwell.report.figures.write_figures` (empty: no figures).
    posterior, profile, extended_limits, effect_sizes, newtonian : optional
        The analyses (:meth:`deepwell.results.Analyses.report_kwargs`); each adds its section.
    robustness : str, optional
        Markdown of the data-set, outlier and jackknife sections, put before the figures.
    figures_note : str, optional
        Markdown heading the figures (which stars have no figures of their own:
        :func:`deepwell.report.figures.gallery.left_out_text`).
    """
    numbers = {s: star_numbers(result, s) for s in result.stars}
    obs = result.observations
    rho, alpha = result.mass_distance_correlation, result.mass_distance_exponent
    n_vel = result.model.vel.n if result.model.vel is not None else 0
    banner = not_converged_banner(posterior)
    if sampling_failed is not None:
        banner = ("**WARNING: the posterior sampling was asked for but produced no posterior "
                  f"({sampling_failed}). Every number in this report is from the least-squares "
                  "fit; its errors are a linear approximation.**")
    kind = "relativistic" if result.model.effects.any_on else "Keplerian"
    out = [
        *([banner, ""] if banner else []),
        "# deepwell report", "",
        f"Joint {kind} fit of the {'orbit' if len(result.stars) == 1 else 'orbits'} of "
        f"{plural(len(result.stars), 'star')} around one central mass, "
        f"from {plural(result.model.pos.n, 'sky position')} and "
        f"{plural(n_vel, 'radial velocity', 'radial velocities')} in "
        f"`{obs.folder}`.", "",
        "## Key numbers", "",
        f"- Central mass: **{_md_pm(result, 'mass')} M☉**",
        f"- Distance: **{_md_pm(result, 'distance')} pc**",
        f"- Correlation of mass and distance: {rho:.3f}",
        f"- Mass–distance exponent α = {alpha:.2f}: along the degeneracy the mass scales as "
        "M ∝ R0^α. Positions alone give α = 3 (Kepler: M ∝ (a R0)³ / P²), radial velocities "
        "alone α = 0; the combined data land in between. The distance error therefore "
        "dominates the mass error when α is far from 0.",
        f"- χ² = {result.chi2:.1f} for {result.dof} degrees of freedom "
        f"(reduced χ² = {result.reduced_chi2:.2f}); optimiser "
        f"{'converged' if result.converged else 'did NOT converge'}.",
        f"- Reference point of the frame at epoch {result.model.reference_epoch:.1f}: "
        f"x0 = {_md_pm(result, 'x0')} mas, y0 = {_md_pm(result, 'y0')} mas; drift "
        f"vx0 = {_md_pm(result, 'vx0')} mas/yr, vy0 = {_md_pm(result, 'vy0')} mas/yr; "
        f"vz0 = {_md_pm(result, 'vz0')} km/s.", "",
        "Uncertainties are 1σ and use the stated data errors as given; they are **not** "
        "rescaled by the reduced χ². Values are rounded to two significant digits of their "
        "error; full precision is in `summary.json` and `tables/`."
        + (" These key numbers are from the least-squares fit; the posterior medians are in "
           "the Posterior section." if posterior is not None else ""), "",
        "## Stars", "", *_md_star_tables(result, numbers), "",
        "Angles: Ω is the position angle of the ascending node, ω the argument of pericentre "
        "(both wrapped to [0°, 360°)); coverage is the fraction of the orbit spanned by the "
        "position epochs.", "",
        "## Warnings and notes", "",
        *([f"- {md_text(n)}" for n in notes] or ["- None."]), "",
        "## Model assumptions", "", *[f"- {a}" for a in _assumptions(result)], "",
        "## How compact is the mass?", "",
    ]
    data, rep = comp
    if rep is None:
        out.append("No star has a well-constrained pericentre (phase coverage ≥ "
                   f"{POOR_COVERAGE} and relative pericentre error < {GOOD_RPERI_ERROR:.0%}), "
                   "so no statement on the compactness is made.")
    else:
        err = data["r_peri_sigma"]["value"]
        out.append(f"This uses the smallest well-constrained pericentre, that of star "
                   f"{md_text(data['star'])} ({format_value_error(rep.r_peri_au, err, 'text')} au; "
                   f"phase coverage ≥ {POOR_COVERAGE}, relative error < "
                   f"{GOOD_RPERI_ERROR:.0%}), and the best-fit mass; their errors are not "
                   "propagated into the numbers below. " + compactness_paragraph(rep))
    out.append("")
    if effect_sizes is not None:
        out += md_effects(result, effect_sizes, figures, newtonian)
    if extended_limits:
        out += md_extended(extended_limits)
    if profile is not None:
        out += md_enclosed(profile, figures)
    if sampling_failed is not None:
        out += ["## Posterior", "", f"NOT CONVERGED: no posterior was obtained: {sampling_failed}. "
                "The numbers above are the least-squares fit. The chains' checkpoints are kept "
                "beside the report folder; continue them with `--resume` (and a larger "
                "`--max-time`).", ""]
    if posterior is not None:
        choice = compactness_choice(result)
        out += md_posterior(result, posterior,
                            posterior_compactness(result, posterior,
                                                  choice[0] if choice else None), figures)
    if robustness:
        out += [robustness]
    out += ["## Figures", ""]
    if figures and figures_note:
        out += [figures_note, ""]
    if not figures:
        out.append("Figures were not drawn for this report.")
    for stem, fig in figures.items():
        png = next(p for p in fig["files"] if p.suffix == ".png")
        pdf = [p for p in fig["files"] if p.suffix == ".pdf"]
        link = f" ([PDF](figures/{pdf[0].name}))" if pdf else ""
        out += [f"![{md_text(stem)}](figures/{png.name})", "", f"*{md_text(fig['caption'])}*{link}",
                ""]
    out += ["## Files", "",
            "- `summary.json`: all numbers with units, settings, input checksums, notes.",
            "- `tables/shared.ecsv`, `tables/stars.ecsv`: tables with units (astropy ECSV).",
            "- `tables/shared.tex`, `tables/stars.tex`, `tables/star_numbers.tex`: LaTeX tables "
            "(booktabs).",
            "- Further tables of the sections above (effects, enclosed mass, extended mass, "
            "posterior), where computed, in `tables/`.", "",
            f"Written by deepwell {__version__}.", ""]
    return "\n".join(out)


# ---------------------------------------------------------------------- entry
def write_report(result, folder, analyses, figures=True, extra=None, progress=None):
    """Write the full report of ``result`` and its analyses into ``folder``.

    Parameters
    ----------
    result : deepwell.fit.FitResult
    folder : str or Path
        Existing (normally temporary, see :func:`save_report`) folder.
    analyses : deepwell.results.Analyses
        From :func:`deepwell.results.analyse`: effect sizes, enclosed-mass
        profile, data-set and outlier summaries and, when computed,
        extended-mass limits, jackknife refits and the posterior sample.
    figures : bool or deepwell.report.figures.gallery.FigureOptions, optional
        Also draw the figures (the slowest part, about half a second per star
        and process); options say which stars get figures of their own beyond
        :data:`~deepwell.report.figures.gallery.STAR_FIGURE_LIMIT` stars.
    extra : dict, optional
        Extra top-level entries for summary.json.
    progress : callable, optional
        Called with short progress lines while the figures are drawn.

    Returns
    -------
    list of Path
        Every file written.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    kw = analyses.report_kwargs()
    extra = {**(extra or {}), **robustness_summary(analyses)}
    write_summary(result, folder / "summary.json", extra, **kw)
    files = [folder / "summary.json"]
    files += write_tables(result, folder / "tables", sizes=analyses.effect_sizes)
    files += write_robustness_tables(analyses, folder / "tables")
    files += write_extra_tables(result, folder / "tables", sizes=analyses.effect_sizes,
                                limits=analyses.extended_limits, posterior=analyses.posterior,
                                profile=analyses.profile)
    figs, note = {}, ""
    if figures:
        options = figures if isinstance(figures, FigureOptions) else FigureOptions()
        more = [("enclosed_mass", lambda: enclosed_figure(analyses.profile),
                 enclosed_caption(analyses.profile)),
                *robustness_figure_jobs(analyses.jackknife)]
        figs = write_figures(result, folder / "figures", posterior=analyses.posterior,
                             effect_sizes=analyses.effect_sizes, options=options, more=more,
                             newtonian=analyses.newtonian,
                             progress=progress)
        note = left_out_text(choose_star_figures(result, options))
        files += [p for f in figs.values() for p in f["files"]]
    text = markdown_report(result, report_notes(result), _compactness(result), figs,
                           robustness=robustness_markdown(analyses), figures_note=note, **kw)
    (folder / "report.md").write_text(text, encoding="utf-8")
    files.append(folder / "report.md")
    files.append(write_state(result, folder))  # the saved fit, for later commands
    if analyses.posterior is not None:  # the samples themselves, for 'deepwell plan'
        path = folder / "posterior-samples.npz"
        flat = np.asarray(analyses.posterior.internal_samples)
        np.savez_compressed(path, internal_samples=flat.reshape(-1, flat.shape[-1]),
                            internal_names=np.array(analyses.posterior.internal_names))
        files.append(path)
        files.append(write_inference_data(analyses.posterior, folder / INFERENCE_FILE))
    return files


def save_report(result, final_dir, analyses, replace=False, figures=True, extra=None):
    """Write the report into a temporary folder and install it at ``final_dir``.

    The final folder is only touched once every file exists; see
    :mod:`deepwell.report.outdir` for the rules (``replace`` and foreign files).

    ``analyses``: from :func:`deepwell.results.analyse` (see :func:`write_report`).

    Returns
    -------
    Path
        ``final_dir``.
    """
    with staged_output(final_dir, replace) as tmp:
        write_report(result, tmp, analyses, figures=figures, extra=extra)
    return Path(final_dir)

