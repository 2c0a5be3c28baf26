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

Hatched areas are polygons of the flagged cells (traced with :func:`rasterio.features.shapes`)
drawn as vectors with a transparent face, so the data colours stay visible beneath them; each
hatch line is dark over a wider white line, so it shows on dark and light colours alike. On a
thinned data layer a block of cells is hatched if any of its cells is flagged, so that small
flagged areas do not vanish.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from matplotlib.patches import Patch

from lidmelt.grids.rundir import FlagGrid
from lidmelt.physics import (
    FLAG_BEYOND_CALIBRATION,
    FLAG_NO_ONSET,
    FLAG_WATER_SATURATED,
)

__all__ = [
    "FLAG_HATCHES",
    "FLAG_SHORT_LABELS",
    "HATCH_COLOR",
    "MARKED_FLAGS",
    "NOT_CONCERNED",
    "concerns",
    "draw_flag_hatching",
    "flag_caption",
    "flag_counts",
    "flag_legend_handles",
    "marked_kinds",
]

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
#: Colour of the hatch lines: near black, over a wider white hatch of the same pattern (a
#: halo), so that the hatching shows on the dark and the light ends of every colour scale.
HATCH_COLOR = "0.1"
#: (colour, hatch line width in pt, zorder) of the two hatch layers: the halo, then the line.
_HATCH_LAYERS = (("white", 1.8, 1.5), (HATCH_COLOR, 0.8, 1.6))


#: Variables that no marked flag concerns: every marked flag is about the onset of melting or
#: the source water at the onset, which neither the lid nor the excess to melt (found at the
#: lid) depends on.
NOT_CONCERNED = frozenset({"lid_depth_km", "excess_to_melt_k"})


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


def draw_flag_hatching(
    ax: Any, flags: FlagGrid, bits: tuple[int, ...], *, da: Any, src_crs: Any, step: int
) -> list[Any]:
    """Hatch the cells carrying each of ``bits`` over the data layer; return the artists.

    ``da`` is the drawn variable (its grid transform places the polygons); ``step`` is the
    data layer's stride.
    """
    from affine import Affine
    from rasterio.features import shapes
    from shapely.geometry import shape

    transform = da.rio.transform() * Affine.scale(step)
    artists = []
    for bit in bits:
        mask = _block_any(flags.cells_with(bit), step)
        if not mask.any():
            continue
        geoms = [
            shape(geom) for geom, _ in shapes(mask.astype(np.uint8), mask=mask, transform=transform)
        ]
        for colour, width, zorder in _HATCH_LAYERS:
            artists.append(
                ax.add_geometries(
                    geoms,
                    crs=src_crs,
                    facecolor="none",
                    edgecolor="none",
                    linewidth=0.0,
                    hatch=FLAG_HATCHES[bit],
                    hatchcolor=colour,
                    hatch_linewidth=width,
                    zorder=zorder,
                )
            )
    return artists


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
