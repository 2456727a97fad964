"""Where the bundled demo data lives (installed package or source checkout)."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

__all__ = ["demo_path"]


def demo_path(name: str) -> Path:
    """Path of a file in ``data_demo/`` (invented data), installed or in a checkout.

    Parameters
    ----------
    name : str
        File name, e.g. ``"kestrel-4.toml"``.
    """
    candidates = []
    try:
        candidates.append(Path(str(resources.files("perierr.data_demo").joinpath(name))))
    except ModuleNotFoundError:
        pass
    candidates.append(Path(__file__).resolve().parent.parent / "data_demo" / name)
    for path in candidates:
        if path.is_file():
            return path
    raise FileNotFoundError(f"demo file {name!r} not found (looked in {', '.join(map(str, candidates))})")
