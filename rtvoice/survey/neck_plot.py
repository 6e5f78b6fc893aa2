"""PNG heat maps across the neck: one placement's descriptor, or the difference of two placements.

Frets run across (as on a neck seen from the player), strings down with string 1, the highest,
on top. Each cell names the lowest harmonics it lacks: missing at this placement (one map), or
lost (``-``) and gained (``+``) against the other placement (a comparison). Drawn on
matplotlib's file-only Agg backend (:func:`rtvoice.survey.plot.pyplot`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from rtvoice.engine import note_name
from rtvoice.survey.neck import DEFAULT_HARMONICS, NeckComparison, NeckMap, harmonic_numbers
from rtvoice.survey.plot import LABELS, ODD_EVEN_SHOWN_DB, pyplot

_TEXT_SIZE = 6.5


def _held(value: str, data: np.ndarray) -> np.ma.MaskedArray:
    """Masked where undefined; odd/even held within +-60 dB (an absent kind reads as +-inf)."""
    if value.endswith("odd_even_db"):
        data = np.clip(data, -ODD_EVEN_SHOWN_DB, ODD_EVEN_SHOWN_DB)
    return np.ma.masked_invalid(data)


def _figure(plt, neck: NeckMap):
    rows, cols = neck.shape
    fig, ax = plt.subplots(figsize=(max(6.0, 0.8 * cols + 3.0), max(3.0, 0.75 * rows + 2.0)))
    ax.set_xticks(range(cols), [str(f) for f in neck.frets])
    ax.set_yticks(range(rows), [f"{s}" for s in neck.strings])
    ax.set_xlabel("fret (0 = open)")
    ax.set_ylabel("string (1 = highest)")
    ax.set_ylim(rows - 0.5, -0.5)  # string 1 on top
    scale = neck.settings.get("string.scale_length_mm")
    pickup = neck.settings.pickups[neck.pickup_index]
    ax.set_title(
        f"{scale:g} mm scale; pickup {neck.pickup_index} at {pickup['position'] * scale:.1f} mm from the saddle"
        + (f" (slant {pickup.get('slant', 0.0) * scale:+.1f} mm)" if pickup.get("slant", 0.0) else "")
        + f", pluck at {neck.settings.get('excitation.position') * scale:.1f} mm",
        fontsize=9,
    )
    return fig, ax


def _numbers(ks: list[int], per_line: int = 4) -> str:
    """Harmonic numbers, a few to a line, so a cell's label stays within its cell."""
    return "\n".join(" ".join(map(str, ks[i : i + per_line])) for i in range(0, len(ks), per_line))


def _label_cells(ax, neck: NeckMap, texts: list[list[str]]) -> None:
    for i in range(len(neck.strings)):
        for j in range(len(neck.frets)):
            note = note_name(int(neck.notes[i, j]))
            text = note if not texts[i][j] else f"{note}\n{texts[i][j]}"
            ax.text(j, i, text, ha="center", va="center", fontsize=_TEXT_SIZE, color="black",
                    bbox={"boxstyle": "round,pad=0.1", "facecolor": "white", "alpha": 0.55, "linewidth": 0})


def _finish(plt, fig, path: Path | str, note: str) -> None:
    fig.text(0.01, 0.01, note, ha="left", va="bottom", fontsize=7)
    fig.tight_layout(rect=(0.0, 0.04, 1.0, 1.0))
    fig.savefig(path, dpi=110)
    plt.close(fig)


def plot_neck(neck: NeckMap, path: Path | str, value: str = "centroid_hz",
              harmonics: int = DEFAULT_HARMONICS) -> None:
    """Heat map of ``value`` over strings and frets; each cell names its missing low harmonics."""
    plt = pyplot("--plot", path)
    fig, ax = _figure(plt, neck)
    mesh = ax.imshow(_held(value, neck.value(value)), cmap="viridis", aspect="auto", interpolation="nearest")
    fig.colorbar(mesh, ax=ax, label=LABELS[value])
    h = min(harmonics, neck.missing.shape[-1])
    texts = [[_numbers(harmonic_numbers(neck.missing[i, j, :h])) for j in range(len(neck.frets))]
             for i in range(len(neck.strings))]
    _label_cells(ax, neck, texts)
    _finish(plt, fig, path, f"numbers: harmonics 1..{h} more than {neck.missing_below_db:g} dB below the strongest")


def plot_neck_difference(comparison: NeckComparison, path: Path | str, value: str = "centroid_hz") -> None:
    """Heat map of this placement minus the other of ``value``; each cell names the low harmonics it
    loses (-) and gains (+) against the other placement, and lost cells are outlined."""
    plt = pyplot("--plot", path)
    main = comparison.main
    fig, ax = _figure(plt, main)
    diff = _held(value, comparison.difference(value))
    span = float(np.max(np.abs(diff))) if diff.count() else 1.0
    span = span if span > 0 else 1.0
    mesh = ax.imshow(diff, cmap="coolwarm", vmin=-span, vmax=span, aspect="auto", interpolation="nearest")
    fig.colorbar(mesh, ax=ax, label=f"difference: {LABELS[value]}")
    texts = []
    for i in range(len(main.strings)):
        row = []
        for j in range(len(main.frets)):
            lost, gained = harmonic_numbers(comparison.lost[i, j]), harmonic_numbers(comparison.gained[i, j])
            parts = ([f"-{_numbers(lost)}"] if lost else []) + ([f"+{_numbers(gained)}"] if gained else [])
            row.append("\n".join(parts))
            if lost:
                ax.add_patch(plt.Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, edgecolor="black", linewidth=1.6))
        texts.append(row)
    _label_cells(ax, main, texts)
    other = comparison.against.settings
    scale = other.get("string.scale_length_mm")
    pickup = other.pickups[comparison.against.pickup_index]
    _finish(plt, fig, path,
            f"this placement minus the other (pickup at {pickup['position'] * scale:.1f} mm, pluck at "
            f"{other.get('excitation.position') * scale:.1f} mm); -: harmonics 1..{comparison.harmonics} lost "
            f"(outlined), +: gained (weaker by more than {comparison.lost_by_db:g} dB, or below the floor)")


__all__ = ["plot_neck", "plot_neck_difference"]
