"""Plain-text face of a catalogue screen: one line per row, nearest first, cautions under their row."""

from __future__ import annotations

from ..cautions import BIASED_PARALLAX_FRACTION

__all__ = ["format_screen"]


def format_screen(rows, table_name: str) -> str:
    """The screen's rows as text, nearest nominal perihelion first, uncomputed rows last with their reason.

    Parameters
    ----------
    rows : sequence of perierr.screen.ScreenRow
    table_name : str
        Shown in the heading (the file name).
    """
    from ..screen import nearest_first

    lines = [
        f"Screening {len(rows)} rows of {table_name} (straight-line model, nominal ± linear 1σ)",
        f"  {'row':>3}  {'star':<24}{'t_ph [Myr]':>18}{'d_ph [pc]':>20}{'d_ph [au]':>12}  σ_ϖ/ϖ",
    ]
    weak = False
    for r in nearest_first(rows):
        if r.status != "ok":
            lines.append(f"  {r.row:>3}  {r.name:<24}{r.status}")
            continue
        flag = "  (weak: use a distance prior)" if r.parallax_fraction > BIASED_PARALLAX_FRACTION else ""
        weak = weak or bool(flag)
        lines.append(
            f"  {r.row:>3}  {r.name:<24}{r.time_myr:>+10.4f} ± {r.time_sigma:<6.2g}"
            f"{r.distance_pc:>11.4g} ± {r.distance_sigma:<6.2g}{r.distance_au:>12,.0f}"
            f"  {r.parallax_fraction:.1%}{flag}"
        )
        lines.extend(f"         note: {note}" for note in r.notes)
    if weak:
        lines.append(
            f"  (σ_ϖ/ϖ > {100 * BIASED_PARALLAX_FRACTION:g} %: 1/parallax is a biased distance; "
            "see perierr run --distance-prior)"
        )
    lines.append(
        "  (straight lines are a first look: the Galactic tide can move d_ph by thousands of au within a Myr; "
        "perierr run follows Galactic orbits)"
    )
    return "\n".join(lines)
