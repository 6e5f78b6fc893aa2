"""PNG pictures of a survey: a heat map of one descriptor and a bar chart of two placements.

matplotlib is one of rtvoice's own dependencies, drawn on its file-only Agg backend (no display
needed). Should it be missing all the same (an install cut short), these raise SurveyError saying
to rerun the set-up (one line, exit status 2 on the command line).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from rtvoice.survey.inputs import Placement, SurveyError
from rtvoice.survey.result import DESCRIPTOR_FIELDS, SurveyResult

MAX_PANELS = 12
FLOOR_DB = -60.0  # bottom of the comparison chart
ODD_EVEN_SHOWN_DB = 60.0  # the map holds odd/even ratios within +-60 dB
LABELS = {
    "centroid_hz": "spectral centroid (Hz)",
    "centroid_ratio": "spectral centroid / f1 (harmonic number)",
    "odd_even_db": "odd-to-even harmonic energy (dB, held within +-60)",
    "level_db": "level re reference placement (dB)",
    "electronics_db": "level change by the electronics (dB)",
    "centroid_bare_hz": "spectral centroid without electronics (Hz)",
}


def pyplot(option: str, path: Path | str):
    """matplotlib.pyplot on the file-only Agg backend, or SurveyError saying how to install it."""
    try:
        import matplotlib
    except ImportError:
        # scripts/run installs every dependency into the project's .venv; a bare `pip install` of a
        # package by this name would reach an unrelated one on the public index.
        raise SurveyError(
            option,
            str(path),
            "needs matplotlib, which is not installed: rerun scripts/run (it sets up .venv with everything)",
        ) from None
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _mm_axes(ax, scale_mm: float, x: bool = True, y: bool = True) -> None:
    def to_mm(f):
        return np.asarray(f) * scale_mm

    def to_fraction(m):
        return np.asarray(m) / scale_mm

    if x:
        ax.secondary_xaxis("top", functions=(to_mm, to_fraction)).set_xlabel("mm from the bridge")
    if y:
        ax.secondary_yaxis("right", functions=(to_mm, to_fraction)).set_ylabel("mm from the bridge")


def _panels(result: SurveyResult, y_axis: str | None):
    """(title, index into the result arrays with the y axis and pickups left open) per panel."""
    dims = [("note", range(len(result.notes))), ("sensing", range(len(result.sensings)))]
    widths = range(result.widths.size) if y_axis != "width" else [None]
    for i_n, i_s, i_w in itertools.product(dims[0][1], dims[1][1], widths):
        note, f1 = result.notes[i_n], result.f1_hz[i_n]
        parts = [f"note {note} ({f1:.1f} Hz)", result.sensings[i_s]]
        place = result.place(i_n)
        if place.fretted:
            parts[0] += f" at string {place.string}, fret {place.fret}"
        if i_w is not None:
            w = result.widths[i_w]
            parts.append(f"width {w:.3g} ({w * result.scale_length_mm:.1f} mm)")
        if y_axis != "pluck":
            p = result.plucks[0]
            parts.append(f"pluck {p:.3g} ({p * result.scale_length_mm:.0f} mm)")
        yield ", ".join(parts), (i_n, i_s, i_w)


def check_map(path: Path | str, value: str, notes: int, sensings: int, plucks: int, widths: int) -> None:
    """SurveyError unless a map of ``value`` with these grid sizes can be drawn (checked early)."""
    if value not in DESCRIPTOR_FIELDS:
        raise SurveyError("--plot-value", value, f"use one of {', '.join(DESCRIPTOR_FIELDS)}")
    panels = notes * sensings * (widths if plucks > 1 else 1)
    if panels > MAX_PANELS:
        raise SurveyError(
            "--plot",
            str(path),
            f"{panels} panels (notes x sensings x widths); "
            f"a map draws at most {MAX_PANELS}: survey fewer notes, sensings or widths",
        )


def plot_map(result: SurveyResult, path: Path | str, value: str = "centroid_hz") -> None:
    """Heat map of ``value`` over pickup position (x) and pluck position or width (y).

    With a single pluck position and width the panel is a line over pickup position.
    Contour lines join equal values; a star marks the reference placement.
    """
    check_map(path, value, len(result.notes), len(result.sensings), result.plucks.size, result.widths.size)
    plt = pyplot("--plot", path)
    y_axis = "pluck" if result.plucks.size > 1 else "width" if result.widths.size > 1 else None
    panels = list(_panels(result, y_axis))
    cols = min(3, len(panels))
    rows = math.ceil(len(panels) / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(5.6 * cols, 4.6 * rows), squeeze=False)
    data = getattr(result, value)
    if value == "odd_even_db":  # a kind that is absent reads as +-inf or hundreds of dB
        data = np.clip(data, -ODD_EVEN_SHOWN_DB, ODD_EVEN_SHOWN_DB)
    scale, ref = result.scale_length_mm, result.reference
    for ax, (title, (i_n, i_s, i_w)) in zip(axes.flat, panels, strict=False):
        if y_axis == "pluck":
            z, ys, ref_y = data[i_n, i_s, i_w], result.plucks, ref.pluck
        elif y_axis == "width":
            z, ys, ref_y = data[i_n, i_s, :, 0, :], result.widths, ref.width
        else:
            z, ys, ref_y = data[i_n, i_s, i_w, 0][None, :], None, None
        _draw_panel(
            fig,
            ax,
            result.pickups,
            ys,
            np.ma.masked_invalid(z),
            ref.pickup,
            ref_y,
            y_axis,
            value,
            scale,
        )
        if result.fretted:  # positions fixed on the body: fractions of the open scale
            ax.set_xlabel("pickup position (fraction of the open scale from the bridge)")
        ax.set_title(title, fontsize=9)
    for ax in list(axes.flat)[len(panels) :]:
        ax.set_visible(False)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def _draw_panel(fig, ax, xs, ys, z, ref_x, ref_y, y_axis, value, scale) -> None:
    ax.set_xlabel("pickup position (fraction of the length from the bridge)")
    if ys is None:
        ax.plot(xs, z[0], color="C0")
        ax.axvline(ref_x, color="C3", linestyle="--", label="reference")
        ax.set_ylabel(LABELS[value])
        ax.legend(fontsize=8)
        _mm_axes(ax, scale, y=False)
        return
    mesh = ax.pcolormesh(xs, ys, z, shading="nearest", cmap="viridis")
    fig.colorbar(mesh, ax=ax, label=LABELS[value], pad=0.15)
    if len(xs) > 1 and len(ys) > 1 and z.count() > 1 and np.ptp(z.compressed()) > 0:
        lines = ax.contour(xs, ys, z, levels=8, colors="white", linewidths=0.6)
        ax.clabel(lines, fontsize=7, fmt="%.3g")
    if xs.min() <= ref_x <= xs.max() and ys.min() <= ref_y <= ys.max():
        ax.plot(
            [ref_x],
            [ref_y],
            marker="*",
            markersize=13,
            color="red",
            markeredgecolor="white",
            linestyle="none",
            label="reference",
        )
        ax.legend(fontsize=8, loc="upper right")
    ax.set_ylabel("pluck position (fraction)" if y_axis == "pluck" else "pickup width (fraction)")
    _mm_axes(ax, scale, y=y_axis == "pluck")


def placement_label(p: Placement, scale_mm: float) -> str:
    return (
        f"pickup {p.pickup:.3g} ({p.pickup * scale_mm:.0f} mm), pluck {p.pluck:.3g} "
        f"({p.pluck * scale_mm:.0f} mm), width {p.width:.3g} ({p.width * scale_mm:.1f} mm)"
    )


def comparison_levels(energies: np.ndarray) -> np.ndarray:
    """Harmonic levels in dB re the strongest harmonic of all placements, floored at FLOOR_DB."""
    with np.errstate(divide="ignore"):
        levels = 10 * np.log10(energies / energies.max())
    return np.maximum(levels, FLOOR_DB)


def plot_comparison(
    path: Path | str,
    note: int,
    f1_hz: float,
    placements: Sequence[Placement],
    energies: np.ndarray,
    scale_mm: float,
    max_harmonics: int = 40,
) -> None:
    """Grouped bars of each placement's harmonic levels over the listening window."""
    plt = pyplot("--compare-plot", path)
    levels = comparison_levels(energies)
    audible = np.flatnonzero(np.any(levels > FLOOR_DB, axis=0))
    count = int(min(max_harmonics, audible.max() + 1 if audible.size else 1))
    k = np.arange(1, count + 1)
    fig, ax = plt.subplots(figsize=(max(6.0, 0.28 * count + 2), 4.4))
    width = 0.8 / len(placements)
    for i, (p, lv) in enumerate(zip(placements, levels, strict=True)):
        ax.bar(
            k + (i - (len(placements) - 1) / 2) * width,
            lv[:count] - FLOOR_DB,
            width,
            bottom=FLOOR_DB,
            label=f"{chr(65 + i)}: {placement_label(p, scale_mm)}",
        )
    ax.set_xlabel("harmonic number")
    ax.set_ylabel("energy over the listening window (dB re strongest)")
    ax.set_ylim(FLOOR_DB, 3)
    ax.set_xticks(k[:: max(1, count // 20)])
    ax.set_title(f"note {note} ({f1_hz:.1f} Hz): harmonic levels of two placements", fontsize=10)
    ax.legend(fontsize=8, loc="upper right")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
