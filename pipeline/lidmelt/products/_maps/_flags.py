"""The validity flags of a run on maps and in reports: read the flag grid, hatch, count.

Every run writes ``validity_flag.tif``: uint8 bit flags per cell, 255 outside the data (see
:data:`lidmelt.physics.FLAG_MEANINGS` for the bits). Maps of the outputs draw the cells whose
flag has one of :data:`MARKED_FLAGS` set with hatching over the colours (one hatch pattern
per flag kind, with a legend entry each); cells with invalid inputs (bit 1) are nodata in the
outputs already and are not hatched. The report counts the cells per flag bit
(:func:`flag_counts`).

A flag is hatched only on the maps of the variables it concerns (:func:`concerns`): the top of
the melting column (the lid) does not depend on the onset or the water, and the excess to melt
is found at the lid, not at the onset, so flags about the onset and the water are not drawn on
those two maps.

The melt-thickness maps (:data:`DEEP_HATCHED_VARIABLES`) are also hatched, with their own
pattern and legend entry, where more than :data:`DEEP_SHARE_HATCHED` of a cell's melt is made
beyond the melting model's calibrated pressure (the run's ``deep_melt_share`` output:
:func:`deep_share_cells`), where the solidus follows a continued published curve.

Hatched areas are polygons of the hatched cells (traced with :func:`rasterio.features.shapes`)
drawn as vectors with a transparent face, so the data colours stay visible beneath them; each
hatch line is dark over a wider white line, so it shows on dark and light colours alike. On a
thinned data layer a block of cells is hatched if any of its cells is flagged, so that small
flagged areas do not vanish.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from matplotlib.patches import Patch

from lidmelt.grids._rundir import FlagGrid, RunDir
from lidmelt.physics._flags import FLAG_BEYOND_CALIBRATION, FLAG_NO_ONSET, FLAG_WATER_SATURATED

#: The flag bits marked on maps, in legend order.
MARKED_FLAGS = (FLAG_BEYOND_CALIBRATION, FLAG_NO_ONSET, FLAG_WATER_SATURATED)
#: Hatch pattern per marked flag bit (matplotlib hatch strings; doubled = denser).
FLAG_HATCHES = {
    FLAG_BEYOND_CALIBRATION: "///",
    FLAG_NO_ONSET: "\\\\\\",
    FLAG_WATER_SATURATED: "...",
}
#: Legend text per marked flag bit (the full meaning goes to the caption).
FLAG_SHORT_LABELS = {
    FLAG_BEYOND_CALIBRATION: "beyond calibration (flagged)",
    FLAG_NO_ONSET: "no solidus crossing (flagged)",
    FLAG_WATER_SATURATED: "free water at onset (flagged)",
}
#: The share of a cell's melt made beyond the calibrated pressure (``deep_melt_share``) above
#: which the melt-thickness maps hatch the cell: more than a quarter of its melt then rests on
#: phase relations continued beyond the model's calibration. lidmelt's choice, the value
#: issue 18 asks for; no published source (a reader's threshold, not a physical one).
DEEP_SHARE_HATCHED = 0.25
#: Hatch pattern of those cells (horizontal lines: distinct from every flag's pattern, and
#: readable over the "beyond calibration" flag's diagonal lines, which cover them too).
DEEP_HATCH = "---"
#: The maps hatched where the deep share exceeds :data:`DEEP_SHARE_HATCHED`.
DEEP_HATCHED_VARIABLES = frozenset({"melt_thickness_km", "anomaly_melt_thickness_km"})
#: Colour of the hatch lines: near black, over a wider white hatch of the same pattern (a
#: halo), so that the hatching shows on the dark and the light ends of every colour scale.
HATCH_COLOR = "0.1"
#: (colour, hatch line width in pt, zorder) of the two hatch layers: the halo, then the line.
_HATCH_LAYERS = (("white", 1.8, 1.5), (HATCH_COLOR, 0.8, 1.6))


#: Variables that no marked flag concerns: every marked flag is about the onset of melting or
#: the source water at the onset, which neither the lid nor the excess to melt (found at the
#: lid) depends on.
NOT_CONCERNED = frozenset({"melting_top_km", "excess_to_melt_k"})


def concerns(bit: int, variable: str) -> bool:
    """Whether flag ``bit`` says something about ``variable`` (its map hatches those cells);
    an ensemble layer (``<variable>_p<q>``) follows its variable."""
    base = variable.rpartition("_p")[0] or variable
    return bit in MARKED_FLAGS and variable not in NOT_CONCERNED and base not in NOT_CONCERNED


def marked_kinds(flags: FlagGrid, variable: str | None = None) -> tuple[int, ...]:
    """The bits of :data:`MARKED_FLAGS` that at least one cell carries (and, with
    ``variable``, that concern it: :func:`concerns`)."""
    return tuple(
        bit
        for bit in MARKED_FLAGS
        if (variable is None or concerns(bit, variable)) and flags.cells_with(bit).any()
    )


def flag_counts(flags: FlagGrid) -> list[tuple[int, str, int]]:
    """``(bit, meaning, cells)`` for every known flag bit, in bit order."""
    return [
        (bit, flags.meanings[bit], int(flags.cells_with(bit).sum()))
        for bit in sorted(flags.meanings)
    ]


def _block_any(mask: np.ndarray, step: int) -> np.ndarray:
    """``mask`` thinned by ``step``: a block is set if any of its cells is set."""
    if step <= 1:
        return mask
    ny, nx = mask.shape
    padded = np.pad(mask, ((0, -ny % step), (0, -nx % step)))
    return padded.reshape(padded.shape[0] // step, step, -1, step).any(axis=(1, 3))


def draw_hatching(
    ax: Any, cells: np.ndarray, hatch: str, *, da: Any, src_crs: Any, step: int
) -> list[Any]:
    """Hatch the True ``cells`` (a mask on the grid of ``da``) with ``hatch`` over the data
    layer (a halo and a line layer); return the artists (none when no cell is set).

    ``da`` is the drawn variable (its grid transform places the polygons); ``step`` is the
    data layer's stride.
    """
    from affine import Affine
    from rasterio.features import shapes
    from shapely.geometry import shape

    transform = da.rio.transform() * Affine.scale(step)
    mask = _block_any(cells, step)
    if not mask.any():
        return []
    geoms = [
        shape(geom) for geom, _ in shapes(mask.astype(np.uint8), mask=mask, transform=transform)
    ]
    return [
        ax.add_geometries(
            geoms,
            crs=src_crs,
            facecolor="none",
            edgecolor="none",
            linewidth=0.0,
            hatch=hatch,
            hatchcolor=colour,
            hatch_linewidth=width,
            zorder=zorder,
        )
        for colour, width, zorder in _HATCH_LAYERS
    ]


def draw_flag_hatching(
    ax: Any, flags: FlagGrid, bits: tuple[int, ...], *, da: Any, src_crs: Any, step: int
) -> list[Any]:
    """Hatch the cells carrying each of ``bits`` over the data layer; return the artists
    (:func:`draw_hatching`, one pattern per bit)."""
    kw = {"da": da, "src_crs": src_crs, "step": step}
    return [
        a for bit in bits for a in draw_hatching(ax, flags.cells_with(bit), FLAG_HATCHES[bit], **kw)
    ]


def flag_legend_handles(bits: tuple[int, ...]) -> list[Any]:
    """One hatched legend entry per flag bit in ``bits``."""
    return [
        Patch(
            facecolor="white",
            edgecolor=HATCH_COLOR,
            lw=0.5,
            hatch=FLAG_HATCHES[bit],
            label=FLAG_SHORT_LABELS[bit],
        )
        for bit in bits
    ]


def flag_caption(flags: FlagGrid | None, bits: tuple[int, ...]) -> str:
    """The caption's sentence on the hatching (empty when nothing is hatched)."""
    if flags is None or not bits:
        return ""
    parts = [
        f"validity flag {bit}, {int(flags.cells_with(bit).sum()):,} cells: {flags.meanings[bit]}"
        for bit in bits
    ]
    return "Hatched: flagged cells (" + "; ".join(parts) + ")."


def calibrated_pressure_gpa(summary: dict[str, Any]) -> float | None:
    """The melting model's calibrated pressure (GPa) the run recorded
    (``model.parameters.calibrated_max_pressure_gpa``), or None."""
    params = (summary.get("model") or {}).get("parameters") or {}
    try:
        pc = float(params["calibrated_max_pressure_gpa"])
    except (KeyError, TypeError, ValueError):
        return None
    return pc if math.isfinite(pc) else None


def deep_share_cells(run: RunDir, variable: str, shape: tuple[int, ...]) -> np.ndarray | None:
    """The cells a map of ``variable`` hatches as made mostly beyond the calibrated pressure:
    ``deep_melt_share`` > :data:`DEEP_SHARE_HATCHED` (NaN, no melt, is never hatched); None
    for other variables, a run without that output, another grid shape or no such cell."""
    if variable not in DEEP_HATCHED_VARIABLES or "deep_melt_share" not in run.outputs:
        return None
    share = np.asarray(run.open("deep_melt_share").values, dtype=float)
    if share.shape != tuple(shape):
        return None
    with np.errstate(invalid="ignore"):
        cells = np.isfinite(share) & (share > DEEP_SHARE_HATCHED)
    return cells if cells.any() else None


def _beyond_text(summary: dict[str, Any]) -> str:
    pc = calibrated_pressure_gpa(summary)
    return f"{pc:g} GPa" if pc is not None else "the calibrated pressure"


def deep_legend_handles(cells: np.ndarray | None, summary: dict[str, Any]) -> list[Any]:
    """The legend entry of the deep-share hatching (none when nothing is hatched)."""
    if cells is None:
        return []
    label = (
        f"more than {100 * DEEP_SHARE_HATCHED:g} % of the melt made beyond {_beyond_text(summary)}"
    )
    return [Patch(facecolor="white", edgecolor=HATCH_COLOR, lw=0.5, hatch=DEEP_HATCH, label=label)]


def deep_caption(cells: np.ndarray | None, summary: dict[str, Any], panel: str = "") -> str:
    """The caption's sentence on the deep-share hatching (empty when nothing is hatched);
    ``panel`` names the overview's panel ("c": "in (c)")."""
    if cells is None:
        return ""
    pc = calibrated_pressure_gpa(summary)
    where = (
        f"{pc:g} GPa, the model's calibrated pressure"
        if pc is not None
        else ("the model's calibrated pressure")
    )
    return (
        f"Hatched with horizontal lines{f' in ({panel})' if panel else ''} "
        f"({int(cells.sum()):,} cells): more than "
        f"{100 * DEEP_SHARE_HATCHED:g} % of the melt is made beyond {where} "
        f"(deep_melt_share > {DEEP_SHARE_HATCHED:g}), where the solidus follows a continued "
        "published curve."
    )
