"""Screening candidates with a fitted model: ranked predictions, uncertainty and status per row."""

from .table import CAUTION, prediction_table

__all__ = ["CAUTION", "prediction_table"]
