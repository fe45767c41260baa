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
from deepwell.report.figures.style import MARKERS, PALETTE, STYLE, new_figure, save_figure

from .tables import md_text

__all__ = ["write_plan", "predictions_figure", "gain_figure", "plan_markdown"]

def _table(frame, description):
    t = Table.from_pandas(frame)
    for col in t.colnames:
        unit = unit_of(col)
        if unit:
            t[col].unit = unit
    t.meta["description"] = description
    return t


def predictions_figure(plan):
    """Separation from the mass and RV of every star against epoch, with bands."""
    pred = plan.predictions
    stars = list(dict.fromkeys(pred["star"]))
    fig = new_figure((7.0, 0.4 + 1.5 * len(stars)))
    axes = fig.subplots(len(stars), 2, squeeze=False, sharex=True)
    fig.subplots_adjust(left=0.1, right=0.98, top=1 - 0.3 / (0.4 + 1.5 * len(stars)),
                        bottom=0.35 / (0.4 + 1.5 * len(stars)) + 0.02, wspace=0.3, hspace=0.25)
    for k, star in enumerate(stars):
        rows = pred[pred["star"] == star]
        colour = PALETTE[k % len(PALETTE)]
        t = rows["epoch"].to_numpy()
        for ax, q, label in ((axes[k, 0], "sep", "sep. (mas)"), (axes[k, 1], "vr", "$v_r$ (km/s)")):
            ax.fill_between(t, rows[f"{q}_lo95"], rows[f"{q}_hi95"], color=colour, alpha=0.2,
                            lw=0, label="95%")
            ax.fill_between(t, rows[f"{q}_lo68"], rows[f"{q}_hi68"], color=colour, alpha=0.45,
                            lw=0, label="68%")
            ax.plot(t, rows[q], color="black", lw=0.7, label="best fit")
            ax.set_ylabel(label)
        axes[k, 0].set_title(star, loc="left", fontsize=8)
        pas = plan.passages[plan.passages["star"] == star]
        for ax in axes[k]:
            for _, p in pas.iterrows():
                if t[0] <= p["pericentre"] <= t[-1]:
                    ax.axvline(p["pericentre"], color="black", ls="--", lw=0.5)
    axes[0, 1].legend(loc="upper right")
    for ax in axes[-1]:
        ax.set_xlabel("epoch (Julian yr)")
    return fig


def gain_figure(plan):
    """Forecast fractional shrinkage of each target's error against candidate epoch."""
    fc = plan.forecast[plan.forecast["candidate"] != "all"]
    targets = [c[len("gain_"):] for c in fc.columns if c.startswith("gain_")]
    fig = new_figure((6.5, 3.2))
    ax = fig.add_axes((0.11, 0.15, 0.86, 0.78))
    for k, q in enumerate(targets):
        ax.plot(fc["epoch"], 100.0 * fc[f"gain_{q}"], marker=MARKERS[k % len(MARKERS)],
                color=PALETTE[k % len(PALETTE)], label=q)
    ax.set_xlabel("candidate epoch (Julian yr)")
    ax.set_ylabel("error shrinkage (%)")
    ax.set_title("Forecast gain of one more epoch (all stars observed)", loc="left")
    ax.legend(loc="upper left")
    return fig


def _fmt(x, unit=""):
    if x is None or not np.isfinite(x):
        return "n/a"
    return f"{x:.4g} {unit}".rstrip()


def plan_markdown(plan, result):
    """The text of ``plan.md``: key dates, ranking, confusion and caveats."""
    s = plan.settings
    lines = [f"# Observing plan {s.start:g} to {s.end:g}", "",
             f"From the fit in this report ({plan.source}; "
             f"{plural(len(result.model.stars), 'star')}, "
             f"{s.n_draws} parameter draws). Epochs are Julian years (TT).", "",
             "**Read this first.** Every number here assumes that the fitted model is right "
             "and that new data have exactly the stated errors "
             f"({s.astrometry_error:g} mas per coordinate, {s.velocity_error:g} km/s). "
             "Predictions for poorly constrained stars are uncertain; the bands show how much.",
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
    lines += ["- The forecast is linear (Fisher information at the fitted solution); a star "
              "far from its fitted orbit, or a model that is wrong, makes it optimistic.",
              "- Each candidate epoch observes every star once in position and RV.",
              "", "## Files", "",
              "`predictions.ecsv`, `passages.ecsv`, `approaches.ecsv`, `forecast.ecsv` "
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
    path.write_text(plan_markdown(plan, result), encoding="utf-8")
    files.append(path)
    return files
