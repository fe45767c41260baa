"""Tools built on fits and reports: the fit pipeline, planning, calibration, simulation, demo."""

from .demo import refresh_figures
from .pipeline import FitJob, fit_report
from .plan import make_plan
from .simulate import write_scenario

__all__ = ["fit_report", "FitJob", "make_plan", "write_scenario", "refresh_figures"]
