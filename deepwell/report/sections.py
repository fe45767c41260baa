"""Summary blocks and report.md sections of the newer analyses.

Part of the report layer (:mod:`deepwell.report`): relativistic effects,
extended-mass limits, the enclosed-mass profile and the posterior sample.
Each analysis has a ``*_block`` function (JSON-safe dict for summary.json)
and an ``md_*`` function (list of report.md lines).  Every number carries its
unit; every model assumption that could mislead is said in words.
"""

import math

from deepwell.core.jsonsafe import json_safe
from deepwell.core.units import UNITS
from deepwell.results.compactness import compactness_from_samples
from deepwell.results.effect_sizes import DETECTABLE_RULE

from .analysis_tables import posterior_summary
from .tables import OSCULATING_STATEMENT, format_asymmetric, format_value_error, md_text

__all__ = ["OSCULATING_STATEMENT", "effects_block", "md_effects", "newtonian_sentence",
           "extended_block", "md_extended", "enclosed_block", "md_enclosed",
           "posterior_parameters", "sampling_block", "posterior_compactness", "md_posterior",
           "not_converged_banner"]



# ------------------------------------------------------------------ effects
#: Units of the numeric entries of deepwell.results.effect_sizes.star_effect_sizes.
EFFECT_UNITS = {k: UNITS[k] for k in (
    "redshift_excess_kms", "redshift_first_order_kms", "precession_arcmin", "precession_mas",
    "romer_range_days", "romer_rv_kms", "romer_sky_mas", "min_position_error_mas",
    "median_velocity_error_kms", "osculating_epoch", "integrated_period", "pericentre_emitted",
    "pericentre_observed")}


def effects_block(result, sizes):
    """The "effects" entry of summary.json: what was modelled and for which stars."""

    m = result.model
    integ = [s for s, i in zip(m.stars, m.integrated, strict=True) if i]
    return {
        "modelled": m.effects.describe(),
        "extra_parameters": list(m.effects.extra_names),
        "integrated_stars": integ,
        "keplerian_stars": [s for s in m.stars if s not in integ],
        "osculating_elements": OSCULATING_STATEMENT if integ else None,
        "notes": list(m.effect_notes()),
        "detectable_rule": DETECTABLE_RULE,
        "units": EFFECT_UNITS,
        "detectable": {s: [k[len("detectable_"):] for k in ("detectable_redshift",
                                                            "detectable_precession",
                                                            "detectable_romer") if sizes[s][k]]
                       for s in m.stars},
    }


def _dchi2(value):
    """An expected chi-square difference: two significant figures, whole numbers from 10."""
    return "<0.1" if value < 0.1 else f"{value:.2g}" if value < 10 else f"{value:.0f}"


def _yes(flag):
    return "yes" if flag else "no"


def _unmodelled(model, sizes):
    """Per star, the detectable effects the model does not include."""
    fx = model.effects
    have = {"redshift": fx.redshift != "off", "precession": fx.precession,
            "Rømer delay": fx.romer}
    key = {"redshift": "detectable_redshift", "precession": "detectable_precession",
           "Rømer delay": "detectable_romer"}
    out = {}
    for s in model.stars:
        miss = [k for k in key if sizes[s][key[k]] and not have[k]]
        if miss:
            out[s] = miss
    return out


def newtonian_sentence(newtonian):
    """One report.md line on the Newtonian model refitted to the same data."""
    k = newtonian.fewer_parameters
    params = (f"{k} fewer free parameter{'s' if k != 1 else ''}" if k > 0 else
              "the same number of free parameters (the effect strengths are held, so the "
              "models are not nested and Wilks' theorem does not apply)")
    text = (f"- The Newtonian model refitted to the same data ({', '.join(newtonian.switched_off)}"
            f" switched off; started at this fit's solution) has χ² = "
            f"{newtonian.chi2_newtonian:.1f} against {newtonian.chi2_full:.1f}: "
            f"Δχ² = {newtonian.delta_chi2:.1f} with {params}. The effect figures show the data "
            "and the model relative to it.")
    if not newtonian.converged:
        text += (" **That refit did NOT converge: its χ² may lie above the Newtonian optimum, so "
                 "the Δχ² may be too large.**")
    return text


def md_effects(result, sizes, figures, newtonian=None):
    """The "Relativistic effects" section of report.md."""
    m = result.model
    out = ["## Relativistic effects", "",
           f"Modelled in this fit: **{m.effects.describe()}**.", ""]
    out += [f"- {n[0].upper() + n[1:]}." for n in m.effect_notes()]
    if newtonian is not None:
        out.append(newtonian_sentence(newtonian))
    for name in m.layout.extra:
        if name in ("f", "f_sp"):
            kind = "redshift factor f" if name == "f" else "precession factor f_SP"
            fixed = not result.free[m.layout.names().index(name)]
            if fixed:
                out.append(f"- The {kind} was held at {result.value(name):g} "
                           "(1: general relativity), not fitted.")
            else:
                value = format_value_error(result.value(name), result.sigma(name), "text")
                out.append(f"- The {kind} was fitted: {name} = {value} "
                           "(0: Newtonian, 1: general relativity).")
    out += ["", f"What each star's data can detect: {DETECTABLE_RULE}. Δχ² columns: that "
            "expected chi-square difference for the redshift, the precession and the Rømer "
            "delay.", "",
            "| Star | integrated | redshift at pericentre (km/s) | median RV error (km/s) | "
            "precession (arcmin/orbit) | sky shift (mas/orbit) | smallest position error "
            "(mas) | Rømer range (d) | Δχ² z / prec. / Rømer | detectable |",
            "|---|---|---|---|---|---|---|---|---|---|"]
    for s in m.stars:
        d = sizes[s]
        det = [k for k, key in (("redshift", "detectable_redshift"),
                                ("precession", "detectable_precession"),
                                ("Rømer", "detectable_romer")) if d[key]]
        vel = d["median_velocity_error_kms"]
        out.append(f"| {md_text(s)} | {_yes(d['integrated'])} | {d['redshift_excess_kms']:.3g} | "
                   f"{'–' if not math.isfinite(vel) else f'{vel:.2g}'} | "
                   f"{d['precession_arcmin']:.3g} | {d['precession_mas']:.2g} | "
                   f"{d['min_position_error_mas']:.2g} | {d['romer_range_days']:.3g} | "
                   f"{_dchi2(d['dchi2_redshift'])} / {_dchi2(d['dchi2_precession'])} / "
                   f"{_dchi2(d['dchi2_romer'])} | {', '.join(det) or 'none'} |")
    missed = _unmodelled(m, sizes)
    if missed:
        out += ["", "**The data could detect effects this fit leaves out:** "
                + "; ".join(f"{md_text(s)}: {', '.join(k)}" for s, k in missed.items())
                + ". The fitted elements, mass and distance may be biased by them; refit with "
                "these effects switched on."]
    integ = [s for s in m.stars if sizes[s]["integrated"]]
    if integ:
        out += ["", "Integrated stars: the fitted t_peri and period are those of the "
                "osculating ellipse; the observed pericentre epoch and the integrated period "
                "differ:", "",
                "| Star | osculating epoch (yr) | fitted t_peri (yr) | observed pericentre (yr) "
                "| fitted period (yr) | integrated period (yr) |", "|---|---|---|---|---|---|"]
        for s in integ:
            d = sizes[s]
            out.append(f"| {md_text(s)} | {d['osculating_epoch']:.4f} | "
                       f"{result.value(f'{s}:t_peri'):.4f} | {d['pericentre_observed']:.4f} | "
                       f"{result.value(f'{s}:period'):.4f} | {d['integrated_period']:.4f} |")
    shown = [k for k in figures if k.startswith(("redshift_", "precession_"))]
    out += ["", ("Figures comparing the data with the Newtonian model refitted to them: "
                 + ", ".join(f"`figures/{k}.png`" for k in shown) + ".") if shown else
            "No effect figures: either figures were not drawn, no Newtonian model was "
            "refitted, or no star's effect exceeds its errors.", "",
            "Numbers per star: `tables/effects.ecsv`, `tables/effects.tex`.",
            ""]
    return out


# ------------------------------------------------------------------ extended mass
def extended_block(limits):
    """The "extended_mass" entry of summary.json (list, one entry per scale radius)."""
    out = []
    for r in limits:
        out.append(json_safe({
            "profile": "Plummer sphere centred on the mass, scale radius held fixed",
            "scale_radius": {"value": r["scale_radius_au"], "unit": "AU"},
            "reference_radius": {"value": r["reference_radius_au"], "unit": "AU"},
            "mass": {"value": r["ext_mass_msun"], "sigma": r["ext_mass_sigma_msun"],
                     "unit": "solMass"},
            "fraction": {"value": r["ext_fraction"], "sigma": r["ext_fraction_sigma"],
                         "unit": ""},
            "upper_95": {"value": r["upper_95_msun"], "unit": "solMass"},
            "upper_997": {"value": r["upper_997_msun"], "unit": "solMass"},
            "upper_95_fraction": {"value": r["upper_95_fraction"], "unit": ""},
            "upper_997_fraction": {"value": r["upper_997_fraction"], "unit": ""},
            "detected": r["detected"], "chi2": r["chi2"], "method": r["method"]}))
    return out


def md_extended(limits):
    """The "Extended mass" section of report.md."""
    ref = limits[0]["reference_radius_au"]
    out = ["## Extended mass around the central mass", "",
           "**These limits assume a Plummer density profile** centred on the mass, with its "
           "scale radius b held fixed in each fit; other profiles give other limits. The mass "
           f"is quoted inside the reference radius r_ref = {ref:.4g} au and as a fraction of "
           "the central point mass. Upper limits treat the least-squares value and error as a "
           "Gaussian truncated at zero (flat prior on a non-negative mass).", "",
           "| b (au) | fitted M_ext (M☉) | 95% upper limit (M☉) | 99.7% upper limit (M☉) | "
           "95% limit / M | 99.7% limit / M | detected at 99.7% |",
           "|---|---|---|---|---|---|---|"]
    for r in limits:
        out.append(f"| {r['scale_radius_au']:.4g} | {r['ext_mass_msun']:.3g} ± "
                   f"{r['ext_mass_sigma_msun']:.2g} | {r['upper_95_msun']:.3g} | "
                   f"{r['upper_997_msun']:.3g} | {r['upper_95_fraction']:.3g} | "
                   f"{r['upper_997_fraction']:.3g} | {_yes(r['detected'])} |")
    det = [r for r in limits if r["detected"]]
    out += ["", ("An extended mass is detected (99.7% interval above zero) for b = "
                 + ", ".join(f"{r['scale_radius_au']:.4g} au" for r in det)
                 + ": check first whether another model error (distance, frame, a poorly "
                 "constrained star) could mimic it.") if det else
            "No extended mass is detected for any scale radius tried.", "",
            "Table: `tables/extended_mass.ecsv`, `tables/extended_mass.tex`.", ""]
    return out


# ------------------------------------------------------------------ enclosed mass
def enclosed_block(profile):
    """The "enclosed_mass" entry of summary.json."""
    def cons(c):
        return {"chi2": c.chi2, "dof": c.dof, "p_value": c.p_value, "stars": list(c.stars)}

    return json_safe({
        "joint_mass": {"value": profile.joint_mass, "sigma": profile.joint_mass_sigma,
                       "unit": "solMass"},
        "stars": {s.star: {"mass": {"value": s.mass, "sigma": s.mass_sigma, "unit": "solMass"},
                           "r_peri": {"value": s.r_peri_au, "unit": "AU"},
                           "r_apo": {"value": s.r_apo_au, "unit": "AU"},
                           "r_mean": {"value": s.r_mean_au, "unit": "AU"},
                           "coverage": s.coverage, "poorly_constrained": s.poorly_constrained,
                           "reason": s.reason} for s in profile.stars},
        "consistency": cons(profile.consistency),
        "consistency_well_constrained": cons(profile.consistency_good),
        "notes": list(profile.notes),
    })


def _consistency_sentence(c, which):
    if c.dof < 1:
        return f"{which}: too few stars for a consistency test."
    verdict = ("consistent with one point mass" if c.p_value >= 0.01 else
               "NOT consistent with one point mass (p < 0.01)")
    return (f"{which}: χ² = {c.chi2:.2f} for {c.dof} degrees of freedom, p = {c.p_value:.3g}: "
            f"the per-star masses are {verdict}.")


def md_enclosed(profile, figures):
    """The "Enclosed mass" section of report.md."""
    out = ["## Enclosed mass", "",
           "Each star was refitted alone with its own central mass (distance and frame held at "
           "the joint fit): a Keplerian orbit measures the mass inside it.", "",
           "- " + _consistency_sentence(profile.consistency, "All stars"),
           "- " + _consistency_sentence(profile.consistency_good, "Well-constrained stars only"),
           "", "| Star | mass (M☉) | pericentre (au) | apocentre (au) | coverage | note |",
           "|---|---|---|---|---|---|"]
    for s in profile.stars:
        out.append(f"| {md_text(s.star)} | {s.mass:.4g} ± {s.mass_sigma:.2g} | {s.r_peri_au:.4g} | "
                   f"{s.r_apo_au:.4g} | {s.coverage:.2f} | "
                   f"{'poorly constrained: ' + s.reason if s.poorly_constrained else ''} |")
    out += ["", "Caveats:", "", *[f"- {n}" for n in profile.notes], ""]
    if "enclosed_mass" in figures:
        out += ["The figure `figures/enclosed_mass.png` (below) shows the profile.", ""]
    out += ["Table: `tables/enclosed_mass.ecsv`.", ""]
    return out


# ------------------------------------------------------------------ posterior
def _post_q(posterior, label):
    v, lo, hi, sig, unit = posterior_summary(posterior, label)
    return {"value": v, "lower": lo, "upper": hi, "sigma": sig, "unit": unit}


def posterior_parameters(result, posterior, star_order):
    """(parameters, stars) of summary.json from the posterior median and percentiles."""
    params = {n: json_safe(_post_q(posterior, n)) for n in result.model.layout.shared_names
              if n in posterior.labels}
    for n in params:
        params[n]["unit"] = UNITS.get(n, params[n]["unit"])
    stars = {s: {q: json_safe(_post_q(posterior, f"{s}:{q}")) for q in star_order}
             for s in result.stars}
    return params, stars


def sampling_block(posterior):
    """The "sampling" entry of summary.json."""
    names = list(posterior.sampled_names)
    return json_safe({
        "statement": posterior.statement, "converged": posterior.converged,
        "sampler": posterior.sampler, "diagnostics": list(posterior.diagnostics),
        "n_steps": list(posterior.n_steps), "burn": list(posterior.burn),
        "n_walkers": posterior.n_walkers, "n_ensembles": int(posterior.samples.shape[0]),
        "thin": posterior.thin, "n_samples": int(posterior.flat_samples.shape[0]),
        "tau": dict(zip(names, posterior.tau, strict=True)),
        "rhat": dict(zip(names, posterior.rhat, strict=True)),
        "ess": dict(zip(names, posterior.ess, strict=True)),
        **({"ess_bulk": dict(zip(names, posterior.ess_bulk, strict=True)),
            "ess_tail": dict(zip(names, posterior.ess_tail, strict=True))}
           if posterior.ess_bulk is not None else {}),
        "rhat_method": "rank-normalised split R-hat (arviz; Vehtari et al. 2021)",
        "implied_priors": list(posterior.implied_priors),
        "marginalised": list(posterior.marginalised),
        "seed": posterior.seed, "percentiles": "value: median; lower/upper: 16th/84th "
        "percentiles; sigma: half their distance",
    })


def posterior_compactness(result, posterior, star):
    """Compactness numbers over the posterior for ``star``'s pericentre, or None."""
    if star is None or f"{star}:r_peri" not in posterior.labels:
        return None
    flat = posterior.flat_samples
    m = flat[:, posterior.labels.index("mass")]
    r = flat[:, posterior.labels.index(f"{star}:r_peri")]
    ok = (m > 0) & (r > 0)
    return {"star": star, **compactness_from_samples(m[ok], r[ok])}


def not_converged_banner(posterior):
    """Bold warning for the top of report.md, or None when the sampling converged."""
    if posterior is None or posterior.converged:
        return None
    return ("**WARNING: the posterior sampling did NOT converge. Posterior numbers in this "
            "report may be too narrow or biased; see the Posterior section.**")


def _fmt_post(posterior, label):
    v, lo, hi, _, _ = posterior_summary(posterior, label)
    return format_asymmetric(v, v - lo, hi - v, "text")


def md_posterior(result, posterior, comp, figures):
    """The "Posterior" section of report.md (starts with the convergence statement)."""
    if posterior.sampler == "nuts":
        how = (f"{posterior.samples.shape[0]} independent No-U-Turn (Hamiltonian) chains, "
               f"{', '.join(str(n) for n in posterior.n_steps)} draws after warm-up")
    else:
        how = (f"{posterior.samples.shape[0]} independent ensembles of {posterior.n_walkers} "
               f"walkers, {', '.join(str(n) for n in posterior.n_steps)} steps")
    out = ["## Posterior", "", posterior.statement, "",
           f"{how} (burn-in {', '.join(str(b) for b in posterior.burn)}), "
           f"{posterior.flat_samples.shape[0]} samples kept. Values are medians, errors run to "
           "the 16th and 84th percentiles.", "",
           *[f"- {d}" for d in posterior.diagnostics], "",
           f"- Central mass: **{_fmt_post(posterior, 'mass')} M☉** (least squares "
           f"{result.value('mass'):.5g} M☉)",
           f"- Distance: **{_fmt_post(posterior, 'distance')} pc** (least squares "
           f"{result.value('distance'):.5g} pc)"]
    for n in result.model.layout.shared_names:
        if n in ("mass", "distance") or n not in posterior.labels:
            continue
        unit = UNITS.get(n, "")
        out.append(f"- {n}: {_fmt_post(posterior, n)}{' ' + unit if unit else ''}")
    out += ["", "| Star | P (yr) | a (mas) | e | r_peri (au) |", "|---|---|---|---|---|"]
    for s in result.stars:
        out.append(f"| {md_text(s)} | " + " | ".join(_fmt_post(posterior, f"{s}:{q}")
                                                    for q in ("period", "a", "e", "r_peri")) + " |")
    out += ["", "Priors implied by the sampled parameters (flat in the sampled quantity unless "
            "stated):", "", *([f"- {p}" for p in posterior.implied_priors] or ["- none listed"])]
    if posterior.marginalised:
        out += ["", "Frame terms integrated out analytically (drawn afterwards from their "
                "conditional distribution): " + ", ".join(posterior.marginalised) + "."]
    if comp is not None:
        r, x = comp["r_peri"], comp["r_peri_in_rs"]
        dens = comp["mean_density_lower_limit"]
        out += ["", f"Compactness over the posterior (pericentre of star {md_text(comp['star'])}): "
                f"r_peri = {r['median']:.4g} au (16–84%: {r['p16']:.4g}–{r['p84']:.4g} au), "
                f"{x['median']:.4g} Schwarzschild radii ({x['p16']:.4g}–{x['p84']:.4g}); mean "
                f"density at least {dens['median']:.3g} M☉/pc³ ({dens['p16']:.3g}–"
                f"{dens['p84']:.3g} M☉/pc³)."]
    shown = [k for k in ("corner", "mass_distance") if k in figures]
    if shown:
        out += ["", "Figures: " + ", ".join(f"`figures/{k}.png`" for k in shown)
                + " (below); the sky and star figures show orbits of posterior draws."]
    out += ["", "Tables: `tables/posterior_shared.ecsv`, `tables/posterior_stars.ecsv`, "
            "`tables/posterior.tex`; least-squares numbers stay in `summary.json` under "
            "\"least_squares\".", ""]
    return out
