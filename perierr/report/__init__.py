"""Faces of an analysis: a readable text report, a JSON document, and tables for papers."""

from .figures import budget_figure, distance_figure
from .jsonout import to_json, write_json
from .rounding import latex_interval, round_interval
from .tables import latex_rows, result_table, write_table
from .text import format_analysis

__all__ = [
    "budget_figure",
    "distance_figure",
    "format_analysis",
    "latex_interval",
    "latex_rows",
    "result_table",
    "round_interval",
    "to_json",
    "write_json",
    "write_table",
]
