"""JSON output: strict JSON (non-finite numbers become strings)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from .files import atomic_write_text

__all__ = ["to_json", "write_json"]


def _clean(obj):
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _clean(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        value = float(obj)
        return value if math.isfinite(value) else str(value)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def to_json(document: dict) -> str:
    """Serialize a result dict (``Analysis.to_dict()``) as strict JSON text."""
    return json.dumps(_clean(document), indent=2, allow_nan=False)


def write_json(document: dict, path) -> Path:
    """Write a result dict to ``path`` as JSON, atomically (see :mod:`.files`); returns the path."""
    return atomic_write_text(path, to_json(document) + "\n")
