"""Plot of gain curves (matplotlib, installed with perierr)."""

from __future__ import annotations

from pathlib import Path

from ..plan.metrics import Metric
from ..units import AU_PER_PC

__all__ = ["plot_gain_curves"]

#: (metric, axis label, scale); None is the curves' own probability metric.
_PANELS = (
    (Metric("distance_pc", "width90"), "90 % width of d_ph [au]", AU_PER_PC),
    (Metric("time_myr", "width90"), "90 % width of t_ph [Myr]", 1.0),
    (None, "P(d_ph < D)", 1.0),
)


def plot_gain_curves(curves, path=None):
    """Gain curves against the new precision relative to today's error.

    Parameters
    ----------
    curves : GainCurves
    path : str or Path, optional
        Save the figure there (format from the suffix).

    Returns
    -------
    matplotlib.figure.Figure
    """
    try:
        import matplotlib

        if path is not None:
            matplotlib.use("Agg", force=False)
        import matplotlib.pyplot as plt
    except ImportError:
        raise ImportError("plotting needs matplotlib, a dependency of perierr: reinstall perierr") from None
    fig, axes = plt.subplots(1, 3, figsize=(13, 4), constrained_layout=True)
    for ax, (key, label, scale) in zip(axes, _PANELS):
        key = key or curves.probability
        for name in curves.inputs:
            prec = curves.precision[name]
            rel = prec / curves.sigma[name]
            ax.plot(rel, curves.curves[name][key] * scale, marker=".", label=name)
        ax.axhline(curves.current[key] * scale, color="0.5", lw=0.8, ls="--")
        ax.set_xscale("log")
        ax.invert_xaxis()
        ax.set_xlabel("new precision / today's error")
        ax.set_ylabel(label.replace("D)", curves.threshold + ")"))
    axes[0].legend(fontsize="small")
    fig.suptitle(f"Gain curves ({curves.settings['n']} common draws; dashed: today)")
    if path is not None:
        from .files import atomic_path

        with atomic_path(path) as tmp:
            fig.savefig(tmp, dpi=120, format=Path(path).suffix.lstrip(".") or "png")
    return fig

