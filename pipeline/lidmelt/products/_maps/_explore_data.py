"""The data of the interactive map page (``maps/explore.html``): layers, values, flags, marks.

Every output variable of a run (an ensemble's layers and a history's included) becomes a layer:
its colours as a PNG drawn with the static maps' colour maps, limits and classes
(:mod:`._style`, :func:`._field.field_limits`), and its values as little-endian float32
(zlib-compressed, base64) for the readout under the cursor, exactly the GeoTIFF's values. The
validity flags go along as uint8 (zlib, base64). A grid too large for one page is shown every
``stride``-th cell in both directions (:func:`display_stride`: a budget of
:data:`CELL_BUDGET` values over all layers); each shown cell is the GeoTIFF cell at the centre
of its ``stride x stride`` block, read exactly, and the page says so.
"""

from __future__ import annotations

import base64
import io
import math
import zlib
from dataclasses import dataclass
from typing import Any

import numpy as np
from affine import Affine
from matplotlib import colormaps
from matplotlib.image import imsave

from lidmelt import __version__
from lidmelt.grids._rundir import RunDir, read_flags
from lidmelt.grids._zarr import in_store
from lidmelt.products._maps._field import field_limits, no_melt_cells
from lidmelt.products._maps._style import (
    NODATA_COLOR,
    ZERO_COLOR,
    colorbar_label,
    encode_categories,
    encode_classes,
    style_for,
    title_of,
    unit_label,
)

#: Values (float32 cells, all layers together) a page holds at most: about 24 MB of values
#: (32 MB as base64). Larger runs are shown every ``stride``-th cell (:func:`display_stride`).
CELL_BUDGET = 6_000_000
#: Colours sampled along a colour map for the page's colour bar (a CSS gradient).
GRADIENT_STOPS = 16


@dataclass(frozen=True)
class GridFrame:
    """Where the shown cells are: the full grid's shape, transform and CRS, and the stride."""

    height: int
    width: int
    transform: Affine
    crs: Any
    stride: int

    @property
    def offset(self) -> int:
        """Index of the shown cell inside its ``stride x stride`` block (its centre)."""
        return self.stride // 2

    @property
    def shape(self) -> tuple[int, int]:
        """Rows and columns of the shown grid."""
        o, s = self.offset, self.stride
        return len(range(o, self.height, s)), len(range(o, self.width, s))


def display_stride(height: int, width: int, layers: int, budget: int = CELL_BUDGET) -> int:
    """The smallest stride s with ``ceil(h/s) * ceil(w/s) * layers <= budget`` (1: every cell)."""
    s = max(1, math.isqrt(max(height * width * max(layers, 1) // max(budget, 1), 1)))
    while math.ceil(height / s) * math.ceil(width / s) * max(layers, 1) > budget:
        s += 1
    return s


def read_shown(run: RunDir, name: str, frame: GridFrame) -> np.ndarray:
    """A variable at the shown cells (float64, nodata as NaN), from its GeoTIFF or, in a run
    without GeoTIFFs, from the run's Zarr store (:meth:`RunDir.open`)."""
    o, s = frame.offset, frame.stride
    if in_store(run.summary, name):
        return np.ascontiguousarray(run.open(name).values[o::s, o::s])
    import rasterio

    with rasterio.open(run.file(name)) as src:
        band = src.read(1, masked=True)
    return np.ma.filled(band[o::s, o::s].astype(np.float64), np.nan)


def _b64(raw: bytes) -> str:
    return base64.b64encode(raw).decode("ascii")


def packed(raw: bytes) -> str:
    """``raw`` compressed with zlib (RFC 1950, which the browser's
    ``DecompressionStream("deflate")`` reads) and encoded as base64 text."""
    return _b64(zlib.compress(raw, 6))


def _png_uri(rgba: np.ndarray) -> str:
    buf = io.BytesIO()
    imsave(buf, rgba, format="png", metadata={"Software": f"lidmelt {__version__}"})
    return "data:image/png;base64," + _b64(buf.getvalue())


def _hex(rgba: Any) -> str:
    r, g, b = (round(float(v) * 255) for v in rgba[:3])
    return f"#{r:02x}{g:02x}{b:02x}"


def layer_colours(values: np.ndarray, melt: np.ndarray | None, variable: str) -> dict[str, Any]:
    """The colours of one layer as the static maps draw them (:func:`._field.draw_data`): the
    RGBA image (uint8, nodata grey, no melting white) and its legend entries."""
    style = style_for(variable)
    no_melt = no_melt_cells(values, style, melt)
    shown = values
    if no_melt is not None and not style.zero_is_no_melt:
        shown = np.where(no_melt, np.nan, values)
    vmin, vmax, extend = field_limits(style, shown)
    if style.categorical:
        mesh, cmap, norm = encode_categories(values, style.classes)
        legend: dict[str, Any] = {
            "classes": [
                {"value": c.value, "color": c.color, "label": c.label} for c in style.classes
            ]
        }
    else:
        base = colormaps[style.cmap]
        mesh, cmap, norm = encode_classes(values, base, vmin, vmax, no_melt)
        stops = base(np.linspace(0.0, 1.0, GRADIENT_STOPS))
        legend = {
            "vmin": vmin,
            "vmax": vmax,
            "extend": extend,
            "gradient": [_hex(c) for c in stops],
        }
        if no_melt is not None:
            legend["no_melt"] = {"color": ZERO_COLOR, "label": style.no_melt_label}
    rgba = (cmap(norm(mesh)) * 255.0 + 0.5).astype(np.uint8)
    legend["nodata"] = NODATA_COLOR
    return {"rgba": rgba, "legend": legend, "no_melt": no_melt}


def layer_entry(run: RunDir, name: str, frame: GridFrame, melt: np.ndarray | None) -> dict:
    """One layer of the page: name, title, unit, image, legend, values (float32, base64)."""
    values = read_shown(run, name, frame)
    colours = layer_colours(values, melt, name)
    entry = run.summary.get("outputs", {}).get(name) or {}
    units = str(entry.get("units", ""))
    long_name = str(entry.get("long_name") or name)
    style = style_for(name)
    return {
        "name": name,
        "title": title_of(name, {"long_name": long_name}),
        "label": colorbar_label(title_of(name, {"long_name": long_name}), units),
        "units": "" if units in ("1", "") else unit_label(units),
        "image": _png_uri(colours["rgba"]),
        "legend": colours["legend"],
        "values": packed(values.astype("<f4").tobytes()),
        "no_melt": None
        if colours["no_melt"] is None
        else packed(np.packbits(colours["no_melt"].ravel(), bitorder="little").tobytes()),
        "no_melt_label": style.no_melt_label,
    }


def flag_entry(run: RunDir, frame: GridFrame) -> dict | None:
    """The validity flags at the shown cells (uint8, base64) and their meanings, or None."""
    flags = read_flags(run)  # from the GeoTIFF or the run's Zarr store
    if flags is None:
        return None
    o, s = frame.offset, frame.stride
    shown = np.ascontiguousarray(flags.values[o::s, o::s], dtype=np.uint8)
    meanings = {str(bit): str(text) for bit, text in sorted(flags.meanings.items())}
    return {"values": packed(shown.tobytes()), "nodata": int(flags.nodata), "meanings": meanings}


def grid_frame(run: RunDir, layers: int, budget: int = CELL_BUDGET) -> GridFrame:
    """The run's grid (from its first output) and the stride that fits the page."""
    name = run.outputs[0]
    if in_store(run.summary, name):
        da = run.open(name)
        (h, w), transform, crs = da.shape, da.rio.transform(), da.rio.crs
    else:
        import rasterio

        with rasterio.open(run.file(name)) as src:
            h, w, transform, crs = src.height, src.width, src.transform, src.crs
    return GridFrame(h, w, transform, crs, display_stride(h, w, layers, budget))


def frame_entry(frame: GridFrame) -> dict[str, Any]:
    """The grid facts the page needs: shown shape, stride, offset, transform, axis names."""
    geographic = bool(frame.crs is not None and frame.crs.is_geographic)
    t = frame.transform
    return {
        "rows": frame.shape[0],
        "cols": frame.shape[1],
        "height": frame.height,
        "width": frame.width,
        "stride": frame.stride,
        "offset": frame.offset,
        "transform": [t.a, t.b, t.c, t.d, t.e, t.f],
        "axes": ["lon", "lat"] if geographic else ["x", "y"],
        "axis_unit": "°" if geographic else " (CRS units)",
        "crs": "" if frame.crs is None else str(frame.crs.to_string()),
    }


def melt_of(run: RunDir, frame: GridFrame) -> np.ndarray | None:
    """The run's melt thickness at the shown cells (the no-melt classes), or None."""
    if "melt_thickness_km" not in run.outputs:
        return None
    return read_shown(run, "melt_thickness_km", frame)
