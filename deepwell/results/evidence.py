"""Evidences of a model ladder: one stated prior for all models, ln Z and Bayes factors.

:func:`ladder_evidence` computes ln Z for every fitted model of a ladder
(:func:`deepwell.fit.ladder.fit_ladder`) with :func:`deepwell.fit.evidence.evidence`.
All models share one prior for the parameters they share: the box of a
parameter without a natural range is the smallest one holding every model's
best fit +- ``width`` of that model's standard errors (a Newtonian fit of
relativistic data can sit tens of standard errors from the relativistic one),
and node and pericentre-epoch windows are centred on the *reference* fit (the
lowest chi-square), so a Bayes factor between two models depends only on the
priors of what they do not share (the effect strengths, whose priors are their
declared ranges).  The Laplace approximation is the default: nested
sampling costs hours on a model of tens of parameters
(``tests/benchmarks/bench_evidence.py``).
"""

import dataclasses
from dataclasses import dataclass

import numpy as np

from deepwell.fit.evidence import evidence
from deepwell.fit.stated_prior import DEFAULT_WIDTH, Uniform, stated_prior

__all__ = ["LadderEvidence", "ladder_evidence"]


@dataclass(frozen=True)
class LadderEvidence:
    """Evidences of the models of a ladder.

    Attributes
    ----------
    results : dict
        Model key -> :class:`deepwell.fit.evidence.EvidenceResult` (models whose
        evidence could not be computed are missing; see ``notes``).
    reference : str
        Key of the model whose fit centres the shared prior boxes.
    prior : tuple of str
        The prior, in words: the reference model's, then the lines of the
        parameters that only other models have.
    method : str
    notes : tuple of str
    """

    results: dict
    reference: str
    prior: tuple
    method: str
    notes: tuple

    def table(self):
        """Model key -> (ln Z, its error, method), for the comparison table."""
        return {k: (e.log_evidence, e.log_evidence_err, e.method)
                for k, e in self.results.items()}


def ladder_evidence(ladder, method="laplace", width=DEFAULT_WIDTH, rng=None, **options):
    """ln Z of every model of a fitted ladder, with one shared stated prior.

    Parameters
    ----------
    ladder : sequence of deepwell.fit.ladder.LadderFit
    method : {"laplace", "nested"}
    width : float
        Half-width of the shared prior boxes, in standard errors of the reference fit.
    rng : numpy.random.Generator, optional
        For nested sampling.
    **options :
        Passed to :func:`deepwell.fit.evidence.nested_evidence` (``nlive``,
        ``dlogz``, ``max_calls``, ``max_seconds``).

    Returns
    -------
    LadderEvidence
    """
    fits = {f.rung.key: f.result for f in ladder}
    ref_key = min(fits, key=lambda k: fits[k].chi2)
    ref = fits[ref_key]
    if method == "nested":
        options = dict(options, rng=np.random.default_rng() if rng is None else rng)
    results, notes, where = {}, [], {}
    union = _union_boxes(fits, width)
    for key, res in fits.items():
        try:
            prior = _widened(stated_prior(res, width, reference=ref), union)
            results[key] = evidence(res, method=method, prior=prior, **options)
        except ValueError as exc:
            notes.append(f"no evidence for model {key}: {exc}")
            continue
        for line in prior.describe()[:len(prior.pieces)]:
            where.setdefault(line, []).append(key)
        notes += [f"model {key}: {n}" for n in results[key].notes
                  if "prior box" in n or "NOT FINISHED" in n]
    lines = [line if len(keys) == len(results) else f"{line} (models {', '.join(keys)})"
             for line, keys in where.items()]
    lines.append(f"the uniform boxes of parameters without a natural range span every model's "
                 f"best fit +- {width:g} of its standard errors, the same box for every model; "
                 "the evidence of each model depends on these widths, Bayes factors between "
                 "models that share them do not (while the posteriors lie well inside)")
    how = ("the Laplace approximation at each best fit" if method == "laplace"
           else "nested sampling (dynesty)")
    notes.insert(0, f"evidences by {how}; node and pericentre-epoch windows are centred on "
                 f"the fit of model {ref_key}, the one with the lowest chi-square")
    return LadderEvidence(results=results, reference=ref_key, prior=tuple(lines),
                          method=method, notes=tuple(notes))


def _is_box(prior, piece):
    return isinstance(piece, Uniform) and piece.text.startswith(
        f"{prior.names[piece.index]}: uniform on [")


def _union_boxes(fits, width):
    """Per box parameter: the smallest box holding every model's own +- width box."""
    out = {}
    for res in fits.values():
        try:
            own = stated_prior(res, width)
        except ValueError:
            continue
        for p in own.pieces:
            if _is_box(own, p):
                name = own.names[p.index]
                lo, hi = out.get(name, (p.low, p.high))
                out[name] = (min(lo, p.low), max(hi, p.high))
    return out


def _widened(prior, union):
    """``prior`` with its boxes replaced by the shared ones of :func:`_union_boxes`."""
    pieces = []
    for p in prior.pieces:
        name = prior.names[p.index] if hasattr(p, "index") else None
        if name in union and _is_box(prior, p):
            lo, hi = union[name]
            unit = p.text.split("] ", 1)[1] if "] " in p.text else ""
            p = Uniform(p.index, lo, hi, f"{name}: uniform on [{lo:.8g}, {hi:.8g}] {unit}"
                        .rstrip())
        pieces.append(p)
    return dataclasses.replace(prior, pieces=tuple(pieces), notes=())
