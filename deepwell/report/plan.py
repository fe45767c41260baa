"""Writing a plan: ECSV tables, figures and ``plan.md``.

The reporting layer of :mod:`deepwell.tools.plan`: it takes a finished
:class:`~deepwell.tools.plan.Plan` and writes, into one folder,

==========================  ===================================================
``predictions.ecsv``        positions, separation, RV with 68% / 95% bands
``passages.ecsv``           next pericentre and apocentre epochs with sigmas
``approaches.ecsv``         intervals in which two stars may be confused
``forecast.ecsv``           errors now / after each candidate epoch, ranks
``predictions.pdf/.png``    separation and RV against epoch, with bands
``gain.pdf/.png``           forecast gain against candidate epoch
``plan.md``                 key dates, ranking and caveats in words
==========================  ===================================================

Figures are built on a plain :class:`matplotlib.figure.Figure` with the Agg
canvas inside ``matplotlib.rc_context(STYLE)``.
"""

from pathlib import Path

import matplotlib
import numpy as np
from astropy.table import Table

from deepwell.core.text import plural
from deepwell.core.units import unit_of
from deepwell.report.figures.style import (
    COLOUR,
    MARKERS,
    PALETTE,
    STYLE,
    new_figure,
    save_figure,
)

from .tables import md_text

__all__ = ["write_plan", "predictions_figure", "gain_figure", "plan_markdown", "figure_captions"]

def _table(frame, description):
    t = Table.from_pandas(frame)
    for col in t.colnames:
        unit = unit_of(col)
        if unit:
            t[col].unit = unit
    t.meta["description"] = description
    return t


#: Colours of the prediction bands, the same for every star (legend entries match them).
BAND_68 = dict(color=PALETTE[3], alpha=0.45, lw=0)
BAND_95 = dict(color=PALETTE[1], alpha=0.35, lw=0)
SEASON = dict(color=COLOUR["yellow"], alpha=0.3, lw=0, zorder=0)
CANDIDATE = dict(color=COLOUR["vermillion"], marker="|", ms=7, mew=1.0, ls="none")

#: Panels of the predictions figure: column, axis label (with units).
PREDICTED = (("ra", r"$\Delta\alpha\cos\delta$ (mas)"), ("dec", r"$\Delta\delta$ (mas)"),
             ("sep", "separation (mas)"), ("pa", "position angle (deg)"),
             ("vr", "$v_r$ (km/s)"))


def _candidates(plan):
    fc = plan.forecast
    return fc.loc[fc["candidate"] != "all", "epoch"].to_numpy(float)


def _mark_seasons(ax, plan, cand, legend=False):
    """Shade the observable seasons (if the months are known) and tick the candidate epochs."""
    for j, (lo, hi) in enumerate(plan.seasons):
        ax.axvspan(lo, hi, **SEASON, label="observable season" if legend and j == 0 else None)
    ax.plot(cand, np.full(cand.size, 0.96), transform=ax.get_xaxis_transform(), **CANDIDATE,
            label="candidate epoch" if legend else None, zorder=5)


def _unwrapped(rows, q):
    """Best fit and bands of column q; position angles unwrapped along the epochs."""
    best = rows[q].to_numpy(float)
    shift = np.zeros_like(best)
    if q == "pa":  # continuous through north, centred in [0, 360) where it can be
        shift = np.degrees(np.unwrap(np.radians(best))) - best
        shift -= 360.0 * np.floor(np.median(best + shift) / 360.0)
    return best + shift, {tag: rows[f"{q}_{tag}"].to_numpy(float) + shift
                          for tag in ("lo95", "lo68", "hi68", "hi95")}


def predictions_figure(plan):
    """RA and Dec offsets, separation, position angle and RV of every chosen star.

    One row of panels per star, with the 68% and 95% bands of the draws (the
    same colours for every star, as in the legend), the observable seasons
    shaded when the months are known, the candidate epochs ticked at the top
    of every panel and the next pericentre dashed.  No title: the caption in
    ``plan.md`` says what is shown.
    """
    pred = plan.predictions
    stars = list(dict.fromkeys(pred["star"]))
    cand = _candidates(plan)
    height = 0.75 + 1.35 * len(stars)
    fig = new_figure((11.0, height))
    axes = fig.subplots(len(stars), len(PREDICTED), squeeze=False, sharex=True)
    fig.subplots_adjust(left=0.06, right=0.99, top=1 - 0.42 / height,
                        bottom=0.33 / height + 0.02, wspace=0.38, hspace=0.18)
    for k, star in enumerate(stars):
        rows = pred[pred["star"] == star]
        t = rows["epoch"].to_numpy()
        pas = plan.passages[plan.passages["star"] == star]
        for j, (q, label) in enumerate(PREDICTED):
            ax = axes[k, j]
            first = k == 0 and j == 0
            _mark_seasons(ax, plan, cand, legend=first)
            best, band = _unwrapped(rows, q)
            ax.fill_between(t, band["lo95"], band["hi95"], **BAND_95,
                            label="95% band" if first else None)
            ax.fill_between(t, band["lo68"], band["hi68"], **BAND_68,
                            label="68% band" if first else None)
            ax.plot(t, best, color="black", lw=0.7, label="best fit" if first else None)
            for _, p in pas.iterrows():
                if t[0] <= p["pericentre"] <= t[-1]:
                    ax.axvline(p["pericentre"], color="black", ls="--", lw=0.5,
                               label="next pericentre")
            ax.set_ylabel(label, fontsize=7)
        axes[k, 0].text(0.03, 0.9, star, transform=axes[k, 0].transAxes, ha="left", va="top",
                        fontsize=7.5, fontweight="bold",
                        bbox=dict(boxstyle="round,pad=0.15", fc="white", ec="none", alpha=0.8))
    entries = {}
    for ax in axes.ravel():  # a pericentre may fall in the span of a later star only
        for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            entries.setdefault(lab, h)
    handles, labels = list(entries.values()), list(entries.keys())
    fig.legend(handles, labels, loc="upper center", ncols=len(labels),
               bbox_to_anchor=(0.5, 1.0 - 0.04 / height))
    for ax in axes[-1]:
        ax.set_xlabel("epoch (Julian yr)")
    return fig


def gain_figure(plan):
    """Forecast fractional shrinkage of each target's error against candidate epoch."""
    fc = plan.forecast[plan.forecast["candidate"] != "all"]
    targets = [c[len("gain_"):] for c in fc.columns if c.startswith("gain_")]
    fig = new_figure((6.5, 3.2))
    ax = fig.add_axes((0.11, 0.15, 0.86, 0.72))
    _mark_seasons(ax, plan, _candidates(plan), legend=True)
    for k, q in enumerate(targets):
        ax.plot(fc["epoch"], 100.0 * fc[f"gain_{q}"], marker=MARKERS[k % len(MARKERS)],
                color=PALETTE[k % len(PALETTE)], label=q)
    ax.set_xlabel("candidate epoch (Julian yr)")
    ax.set_ylabel("error shrinkage (%)")
    ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.01), ncols=6, borderaxespad=0.0)
    return fig


def figure_captions(plan):
    """Captions of the plan's figures (figures carry no titles): stem -> text."""
    s = plan.settings
    season = ("Yellow: the observable seasons (months " + ", ".join(map(str, s.months))
              + ", taken as twelfths of the Julian year). " if s.months else
              "No observable months were given, so no season is shaded. ")
    ticks = "Short vertical ticks at the top: the candidate epochs."
    return {
        "predictions": "Predicted offsets from the mass (east, north), separation, position "
                       "angle (east of north, unwrapped along the epochs) and radial velocity "
                       "of each planned star; black: best fit; shaded: 68% (dark) and 95% "
                       f"(light) bands of {s.n_draws} parameter draws ({plan.source}); dashed: "
                       "the next pericentre. " + season + ticks,
        "gain": "Forecast shrinkage of the error of each target after one more epoch "
                "(Fisher information; each epoch alone, relative to the data in hand). "
                + season + ticks,
    }


def _fmt(x, unit=""):
    if x is None or not np.isfinite(x):
        return "n/a"
    return f"{x:.4g} {unit}".rstrip()


def plan_markdown(plan, result, figures=True):
    """The text of ``plan.md``: key dates, ranking, confusion, caveats and figure captions."""
    s = plan.settings
    lines = [f"# Observing plan {s.start:g} to {s.end:g}", "",
             f"From the fit in this report ({plan.source}; "
             f"{plural(len(result.model.stars), 'star')}, "
             f"{s.n_draws} parameter draws). Epochs are Julian years (TT).", "",
             "**Read this first.** Every number here assumes that the fitted model is right "
             "and that new data have exactly the stated errors "
             f"({s.astrometry_error:g} mas per coordinate, {s.velocity_error:g} km/s). "
             "Predictions for poorly constrained stars are uncertain; the bands show how much.",
             "", *[f"- {md_text(src)}." for src in s.error_sources],
             *([f"- Planned stars: {', '.join(md_text(x) for x in s.stars)}."]
               if s.stars else []),
             "", "## Next passages", "",
             "| star | next pericentre | ± | next apocentre | ± | period (yr) |",
             "|---|---|---|---|---|---|"]
    def when(t):
        return f"{t:.3f}" + (" (in span)" if s.start <= t <= s.end else "")

    for _, p in plan.passages.iterrows():
        lines.append(f"| {md_text(p['star'])} | {when(p['pericentre'])} | "
                     f"{p['pericentre_sigma']:.3f} | "
                     f"{when(p['apocentre'])} | {p['apocentre_sigma']:.3f} | "
                     f"{p['period']:.3f} |")
    lines.append("")
    if plan.passages["integrated"].any():
        lines += ["Integrated (1PN) stars: epochs from the integrated orbit at the best fit, "
                  "uncertainties from the spread of the osculating elements.", ""]
    if plan.poorly_constrained:
        lines += [f"**Poorly constrained:** {', '.join(plan.poorly_constrained)}: their "
                  "predicted positions and dates are uncertain; do not point on them "
                  "without a wide search.", ""]
    lines += [f"## Confusion (pairs closer than {s.resolution:g} mas)", "",
              "Only star pairs are checked; closeness to a source at the mass itself is not.",
              ""]
    if len(plan.approaches):
        lines += ["| stars | from | to | closest | min. sep. (mas) | chance closer |",
                  "|---|---|---|---|---|---|"]
        for _, a in plan.approaches.iterrows():
            lines.append(f"| {md_text(a['star_a'])} / {md_text(a['star_b'])} | "
                         f"{a['start']:.2f} | {a['end']:.2f}"
                         f" | {a['closest_epoch']:.2f} | {a['min_separation']:.1f} | "
                         f"{100 * a['max_probability']:.0f}% |")
    else:
        lines.append("No pair of stars is predicted closer than the resolution.")
    lines += ["", "## Best epochs to observe", ""]
    if s.months:
        lines.append(f"Observable months: {', '.join(str(m) for m in s.months)} "
                     "(months taken as twelfths of the Julian year).")
    lines += ["Gains of single epochs are each relative to the data in hand; they do not "
              "add up.", ""]
    fc = plan.forecast
    single = fc[fc["candidate"] != "all"]
    every = fc[fc["candidate"] == "all"].iloc[0]
    for q in [c[len("gain_"):] for c in fc.columns if c.startswith("gain_")]:
        top = single.sort_values(f"rank_{q}").head(5)
        best = ", ".join(f"{r['epoch']:.3f} ({100 * r[f'gain_{q}']:.1f}%)"
                         for _, r in top.iterrows())
        unit = {"mass": "solMass", "distance": "pc"}.get(q, "")
        lines.append(f"- **{q}**: error now {_fmt(every[f'sigma_now_{q}'], unit)}; best single "
                     f"epochs (shrinkage): {best}; all {len(single)} candidates together: "
                     f"{_fmt(every[f'sigma_after_{q}'], unit)} "
                     f"({100 * every[f'gain_{q}']:.1f}% smaller).")
    lines += ["", "## Caveats and choices", ""]
    lines += [f"- {n}." if not n.endswith(".") else f"- {n}" for n in plan.notes]
    observed = ("each chosen star" if s.astrometry_field is None and s.velocity_field is None
                else "each chosen star inside the fields of view")
    lines += ["- The forecast is linear (Fisher information at the fitted solution); a star "
              "far from its fitted orbit, or a model that is wrong, makes it optimistic.",
              f"- Each candidate epoch observes {observed} once in position and RV.",
              ""]
    if figures:
        lines += ["## Figures", ""]
    for stem, caption in figure_captions(plan).items() if figures else ():
        lines += [f"![{stem}]({stem}.png)", "", f"*{md_text(caption.strip())}*", ""]
    lines += ["## Files", "",
              "`predictions.ecsv` (with `ra`, `dec`, `sep`, `pa` (deg east of north) and `vr` "
              "and their bands), `passages.ecsv`, `approaches.ecsv`, `forecast.ecsv` "
              "(tables with units), `predictions.pdf/.png`, `gain.pdf/.png`."]
    return "\n".join(lines) + "\n"


def write_plan(plan, result, folder, figures=True, formats=("pdf", "png")):
    """Write the plan's tables, figures and ``plan.md`` into ``folder``.

    Returns
    -------
    list of Path
        The files written.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    files = []
    for name, frame, text in (
            ("predictions", plan.predictions, "predicted positions relative to the mass and "
             "in the frame, separation and RV, best fit and 68/95% bands"),
            ("passages", plan.passages, "next pericentre and apocentre epochs (observed)"),
            ("approaches", plan.approaches, f"pairs closer than {plan.settings.resolution} mas"),
            ("forecast", plan.forecast, "forecast errors after each candidate epoch")):
        path = folder / f"{name}.ecsv"
        _table(frame, text).write(path, format="ascii.ecsv", overwrite=True)
        files.append(path)
    if figures:
        with matplotlib.rc_context(STYLE):
            for stem, build in (("predictions", predictions_figure), ("gain", gain_figure)):
                files += save_figure(build(plan), folder, stem, formats)
    path = folder / "plan.md"
    path.write_text(plan_markdown(plan, result, figures), encoding="utf-8")
    files.append(path)
    return files
