"""Faces of an analysis: a readable text report and a JSON document."""

from .jsonout import to_json, write_json
from .text import format_analysis

__all__ = ["format_analysis", "to_json", "write_json"]
