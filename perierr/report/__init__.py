"""Faces of an analysis: a readable text report, a JSON document, tables, figures and a one-page report."""

from .figures import (
    SeparationBands,
    budget_figure,
    corner_figure,
    distance_figure,
    figure_paths,
    separation_bands,
    separation_figure,
    write_figures,
)
from .html import html_report, pdf_report, write_page
from .jsonout import to_json, write_json
from .rounding import latex_interval, round_interval
from .tables import latex_rows, result_table, write_table
from .text import format_analysis

__all__ = [
    "SeparationBands",
    "budget_figure",
    "corner_figure",
    "distance_figure",
    "figure_paths",
    "format_analysis",
    "html_report",
    "latex_interval",
    "latex_rows",
    "pdf_report",
    "result_table",
    "round_interval",
    "separation_bands",
    "separation_figure",
    "to_json",
    "write_figures",
    "write_json",
    "write_page",
    "write_table",
]
