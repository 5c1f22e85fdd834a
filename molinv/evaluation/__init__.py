"""Evaluation: learning curves and the reports drawn from them."""

from .curves import CurveError, CurveRun, PowerLaw, fit_power_law, size_ladder, summarize
from .report import CAUTION, write_report

__all__ = ["CAUTION", "CurveError", "CurveRun", "PowerLaw", "fit_power_law", "size_ladder", "summarize", "write_report"]
