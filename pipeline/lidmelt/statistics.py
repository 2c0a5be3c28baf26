"""The summary statistics of a run, band by band, and the warnings they raise.

:func:`band_parts` gives the dask sums, counts and histograms of one band of the kernel's stacked
outputs (computed in the same pass that stores the GeoTIFFs); :func:`summarize_bands` combines
them into the ``statistics`` entry of ``summary.json``; :func:`ambient_melting_warnings` words the
warning when much of the grid melts at the ambient temperature. Variable names, units and the
regime values are those of :mod:`lidmelt.variables` and docs/physics.md ("Definitions").
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np

from lidmelt.variables import OUTPUTS

__all__ = [
    "AMBIENT_MELT_WARN_FRACTION",
    "ambient_melting_warnings",
    "band_parts",
    "summarize_bands",
]

#: Warn when more than this fraction of the cells with data melt at the ambient temperature
#: (melting regime 1): such a grid is dominated by ridge-like melting, not by its anomalies
#: (lidmelt's choice, common practice for a "most of the map" warning).
AMBIENT_MELT_WARN_FRACTION = 0.25
#: Histogram bins of the plate age (Ma) and the top of melting (km) of regime-1 cells, for
#: their medians: 0.5 Ma and 0.5 km wide up to the inputs' accepted 400 (lidmelt.variables).
_HIST_BINS, _HIST_RANGE = 800, (0.0, 400.0)
_COUNTS = 7  # melting, data, melting area, volume, regime 0/1/2 counts
_KM3_PER_MM_KM2 = 1e-6  # 1 mm x 1 km2 = 1e-6 km3 (definition)


def _index(name: str) -> int | None:
    return list(OUTPUTS).index(name) if name in OUTPUTS else None


def band_parts(rows: slice, *, stacked, area, age, out_index: list[int], integrals) -> list:
    """Sums, counts, minima and maxima of one band, with the regime-1 histograms last.

    ``integrals`` lists (stacked index) of the outputs whose area integral is summed (melt
    thickness-like in km, production in mm/yr); ``age`` is the plate age (dask) or None.
    """
    import dask.array as dsa

    thickness, cell_area = stacked[0, rows], area[rows]
    regime = stacked[_index("melting_regime"), rows]
    melting = thickness > 0
    parts = [
        dsa.sum(melting),
        dsa.sum(dsa.isfinite(thickness)),
        dsa.sum(dsa.where(melting, cell_area, 0.0)),
        dsa.nansum(thickness * cell_area),
        *(dsa.sum(regime == value) for value in (0, 1, 2)),
    ]
    parts += [dsa.nansum(stacked[k, rows].astype(np.float64) * cell_area) for k in integrals]
    for k in out_index:
        band = stacked[k, rows]
        parts += [
            dsa.nanmin(band),
            dsa.nanmax(band),
            dsa.nansum(band.astype(np.float64)),
            dsa.sum(dsa.isfinite(band)),
        ]
    ambient = regime == 1
    top = stacked[_index("lid_depth_km"), rows]
    hists = [dsa.histogram(dsa.where(ambient, top, -1.0), bins=_HIST_BINS, range=_HIST_RANGE)[0]]
    if age is not None:
        band_age = dsa.where(ambient, age[rows], -1.0)
        hists.append(dsa.histogram(band_age, bins=_HIST_BINS, range=_HIST_RANGE)[0])
    return [*parts, hists]


def _median_of_histogram(counts: np.ndarray) -> float | None:
    """The median of values binned by :data:`_HIST_BINS` (bin centre), None without values."""
    total = counts.sum()
    if not total:
        return None
    k = int(np.searchsorted(np.cumsum(counts), 0.5 * total))
    width = (_HIST_RANGE[1] - _HIST_RANGE[0]) / _HIST_BINS
    return _HIST_RANGE[0] + (k + 0.5) * width


def summarize_bands(bands: list[list], *, names: list[str], integrals: list[str]) -> dict:
    """The ``statistics`` entry of the summary from the per-band parts of :func:`band_parts`.

    Counts, the melting area (km2), the melt volume (km3, thickness x cell area), the cells per
    melting regime and the area integral of each of ``integrals`` (km3 for km, km3/yr for
    mm/yr) are sums over bands; per variable the minimum, maximum and mean over cells with data
    (None where no cell has data); ``ambient_melting`` describes the regime-1 cells.
    """
    parts = np.array([band[:-1] for band in bands], dtype=float)  # (bands, values)
    hists = [sum(band[-1][j] for band in bands) for j in range(len(bands[0][-1]))]
    first = _COUNTS + len(integrals)
    variables = {}
    for j, name in enumerate(names):
        col = parts[:, first + 4 * j : first + 4 + 4 * j]
        count = col[:, 3].sum()
        with np.errstate(invalid="ignore"):
            low = float(np.nanmin(col[:, 0])) if count else np.nan
            high = float(np.nanmax(col[:, 1])) if count else np.nan
        mean = col[:, 2].sum() / count if count else np.nan
        stats = {"min": low, "max": high, "mean": mean}
        variables[name] = {k: v if np.isfinite(v) else None for k, v in stats.items()}
    totals = parts.sum(axis=0)
    out: dict[str, Any] = {
        "data_cells": int(totals[1]),
        "melting_cells": int(totals[0]),
        "melting_area_km2": totals[2],
        "melt_volume_km3": totals[3],
        "regime_cells": {str(v): int(totals[4 + v]) for v in (0, 1, 2)},
    }
    for j, name in enumerate(integrals):
        if OUTPUTS[name].units == "mm/yr":
            out[name.removesuffix("_mm_yr") + "_km3_yr"] = totals[_COUNTS + j] * _KM3_PER_MM_KM2
        else:
            out[name.removesuffix("_thickness_km") + "_volume_km3"] = totals[_COUNTS + j]
    out["ambient_melting"] = {
        "cells": int(totals[5]),
        "fraction_of_data_cells": totals[5] / totals[1] if totals[1] else None,
        "median_top_of_melting_km": _median_of_histogram(hists[0]),
        "median_plate_age_ma": _median_of_histogram(hists[1]) if len(hists) > 1 else None,
    }
    out["variables"] = variables
    return out


def ambient_melting_warnings(
    statistics: dict, *, ambient_c: float, issue: bool = False
) -> list[str]:
    """A warning when more than a quarter of the cells with data melt at the ambient Tp.

    Names the likely causes with the numbers that point to them: young seafloor (the median
    plate age of those cells), a thin lid (their median top of melting), a hot ambient Tp.
    With ``issue`` each is also issued as a :class:`UserWarning` (the command line prints them).
    """
    texts = _ambient_melting_texts(statistics, ambient_c)
    for text in texts if issue else ():
        warnings.warn(text, UserWarning, stacklevel=2)
    return texts


def _ambient_melting_texts(statistics: dict, ambient_c: float) -> list[str]:
    amb = statistics["ambient_melting"]
    frac = amb["fraction_of_data_cells"]
    if frac is None or frac <= AMBIENT_MELT_WARN_FRACTION:
        return []
    causes = []
    age, top = amb["median_plate_age_ma"], amb["median_top_of_melting_km"]
    if age is not None:
        causes.append(f"young seafloor (median plate age of those cells {age:.1f} Ma)")
    if top is not None:
        causes.append(
            f"a thin lid (their median top of melting {top:.1f} km; check the lid grid's units "
            "or the cooling model)"
        )
    causes.append(
        f"a hot ambient mantle (ambient Tp {ambient_c:g} C; published ambient values are about "
        "1280-1450 C and depend on the melting model)"
    )
    return [
        f"{amb['cells']} of {statistics['data_cells']} cells with data ({100 * frac:.0f} %) melt "
        "at the ambient potential temperature (melting regime 1): there melting needs only "
        "upwelling, as at a spreading ridge, not a thermal anomaly. Likely cause: "
        + "; or ".join(causes)
        + ". Use anomaly_melt_thickness_km for the melt the anomalies add."
    ]
