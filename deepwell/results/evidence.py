"""Evidences of a model ladder: one stated prior for all models, ln Z and Bayes factors.

:func:`ladder_evidence` computes ln Z for every fitted model of a ladder
(:func:`deepwell.fit.ladder.fit_ladder`) with :func:`deepwell.fit.evidence.evidence`.
All models share one prior for the parameters they share: the boxes of the
parameters without a natural range are centred on the *reference* model's
fit (the one with the lowest chi-square) and are ``width`` of its standard
errors wide on either side, so a Bayes factor between two models depends only
on the priors of what they do not share (the effect strengths, whose priors are
their declared ranges).  The Laplace approximation is the default: nested
sampling costs hours on a model of tens of parameters
(``tests/benchmarks/bench_evidence.py``).
"""

from dataclasses import dataclass

import numpy as np

from deepwell.fit.evidence import evidence
from deepwell.fit.stated_prior import DEFAULT_WIDTH, stated_prior

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
    base = stated_prior(ref, width)
    for key, res in fits.items():
        try:
            prior = stated_prior(res, width, reference=ref)
            results[key] = evidence(res, method=method, prior=prior, **options)
        except ValueError as exc:
            notes.append(f"no evidence for model {key}: {exc}")
            continue
        for line in prior.describe()[:len(prior.pieces)]:
            where.setdefault(line, []).append(key)
        notes += [f"model {key}: {n}" for n in results[key].notes
                  if "prior box" in n or "NOT FINISHED" in n]
    lines = [line if len(keys) == len(results) else f"{line} (models {', '.join(keys)})"
             for line, keys in where.items()] + list(base.notes)
    how = ("the Laplace approximation at each best fit" if method == "laplace"
           else "nested sampling (dynesty)")
    notes.insert(0, f"evidences by {how}; the shared prior boxes are centred on the fit of "
                 f"model {ref_key}, the one with the lowest chi-square")
    return LadderEvidence(results=results, reference=ref_key, prior=tuple(lines),
                          method=method, notes=tuple(notes))
