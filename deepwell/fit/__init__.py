"""Fitting the joint model: automatic start, least squares, outliers, result, posterior sampling,
Bayesian evidence."""

from .evidence import EvidenceResult, evidence, laplace_evidence, nested_evidence
from .joint import build_model, fit_joint
from .result import FitResult, FitWarning, assemble_result
from .sampling import PosteriorResult, sample_posterior

__all__ = ["fit_joint", "build_model", "FitResult", "FitWarning", "assemble_result",
           "sample_posterior", "PosteriorResult", "evidence", "laplace_evidence",
           "nested_evidence", "EvidenceResult"]
