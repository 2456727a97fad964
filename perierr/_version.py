"""The version of perierr: its single source (``pyproject.toml`` repeats it; a test checks they agree)."""

__all__ = ["__version__"]

__version__ = "0.1.0"
