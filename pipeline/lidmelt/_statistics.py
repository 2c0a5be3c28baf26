"""The summary statistics of a run, band by band, and the warnings they raise.

:func:`band_parts` gives one record per chunk of a band of the kernel's stacked outputs (sums,
counts, minima, maxima and histograms, :func:`chunk_record`; one dask task per chunk, computed in
the same pass that stores the GeoTIFFs); :func:`summarize_bands` combines them into the
``statistics`` entry of ``summary.json``; :func:`ambient_melting_warnings` words the warning when
much of the grid melts at the ambient temperature. Variable names, units and the regime values are
those of :mod:`lidmelt._variables` and docs/physics.md ("Definitions").
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np

from lidmelt._variables import OUTPUTS

#: Warn when more than this fraction of the cells with data melt at the ambient temperature
#: (melting regimes 1 and 2): such a grid is dominated by ridge-like melting, not by its
#: anomalies (lidmelt's choice, common practice for a "most of the map" warning).
AMBIENT_MELT_WARN_FRACTION = 0.25
#: Histogram bins of the plate age (Ma) and the top of melting (km) of the cells where ambient
#: mantle melts, for their medians: 0.5 Ma and 0.5 km wide up to the inputs' accepted 400.
_HIST_BINS, _HIST_RANGE = 800, (0.0, 400.0)
#: The regime classes (lidmelt._variables), and those in which ambient mantle melts.
_REGIMES = tuple(c.value for c in OUTPUTS["melting_regime"].classes)
_AMBIENT = tuple(
    c.value
    for c in OUTPUTS["melting_regime"].classes
    if c.key in ("ambient_only", "ambient_and_anomaly")
)
_ADDED_AT = 4 + len(_REGIMES)  # the added-melt cells and their area follow the regime counts
#: melting, data, melting area, volume, cells per regime class, added-melt cells and area
_COUNTS = _ADDED_AT + 2
#: The output whose cells "with added melt" are counted (not below its ``negligible_below``).
_ADDED = "anomaly_melt_thickness_km"
_KM3_PER_MM_KM2 = 1e-6  # 1 mm x 1 km2 = 1e-6 km3 (definition)


def _index(name: str) -> int | None:
    return list(OUTPUTS).index(name) if name in OUTPUTS else None


def record_size(n_outputs: int, n_integrals: int, with_age: bool) -> int:
    """Length of one chunk's record (:func:`chunk_record`)."""
    return _COUNTS + n_integrals + 4 * n_outputs + _HIST_BINS * (2 if with_age else 1)


def chunk_record(
    block: np.ndarray,
    area: np.ndarray,
    age: np.ndarray | None,
    *,
    out_index: tuple[int, ...],
    integrals: tuple[int, ...],
) -> np.ndarray:
    """The statistics of one chunk of the kernel's stacked outputs as one float64 record.

    ``block`` is (layers, y, x) (:data:`lidmelt._variables.OUTPUTS` order, the flag last);
    ``area`` the cell areas (km2), (y, x) or one column (y, 1) of row areas; ``age`` the plate
    age (y, x) or None. The record holds, in order: the :data:`_COUNTS` counts and sums
    (melting cells, cells with data, melting area, melt volume, cells of each regime class,
    cells with added melt and their area), the area integral of each of ``integrals``, per
    ``out_index`` the minimum, maximum, sum and count of the cells with data (NaN minimum and
    maximum without any), then the histograms of the top of melting and (with ``age``) the
    plate age of the cells where ambient mantle melts (regimes 1 and 2). Counts are exact
    (float64 holds whole numbers up to 2**53).
    """
    thickness = block[0]
    regime = block[_index("melting_regime")]
    finite = np.isfinite(thickness)
    melting = thickness > 0
    ambient = np.isin(regime, _AMBIENT)
    rec = [
        np.count_nonzero(melting),
        np.count_nonzero(finite),
        _area_sum(melting, area),
        _area_integral(thickness, finite, area),
        *(np.count_nonzero(regime == v) for v in _REGIMES),
    ]
    added = added_melt(block[_index(_ADDED)])
    rec += [np.count_nonzero(added), _area_sum(added, area)]
    for k in integrals:
        layer = block[k]
        rec.append(_area_integral(layer, finite if k == 0 else np.isfinite(layer), area))
    for k in out_index:
        layer = block[k]
        values = layer[finite if k == 0 else np.isfinite(layer)]
        if values.size:
            rec += [values.min(), values.max(), values.sum(dtype=np.float64), values.size]
        else:
            rec += [np.nan, np.nan, 0.0, 0]
    top = block[_index("melting_top_km")][ambient]
    hists = [np.histogram(top, bins=_HIST_BINS, range=_HIST_RANGE)[0]]
    if age is not None:
        hists.append(np.histogram(age[ambient], bins=_HIST_BINS, range=_HIST_RANGE)[0])
    return np.concatenate([np.array(rec, dtype=np.float64), *hists])


def added_melt(anomaly_melt: np.ndarray) -> np.ndarray:
    """Cells with added melt: an anomaly melt thickness > 0 and not below the registry's
    least amount (:attr:`lidmelt._variables.Variable.negligible_below`; smaller values are
    counted as none, as the maps draw them)."""
    least = OUTPUTS[_ADDED].negligible_below
    with np.errstate(invalid="ignore"):
        return (anomaly_melt > 0) & (anomaly_melt >= least)


def _area_sum(mask: np.ndarray, area: np.ndarray) -> float:
    """Sum of the cell areas where ``mask`` (row by row when ``area`` is one column)."""
    if area.shape[-1] == 1 and mask.shape[-1] != 1:
        return float(area[:, 0] @ np.count_nonzero(mask, axis=1).astype(np.float64))
    return float(np.sum(np.broadcast_to(area, mask.shape), where=mask))


def _area_integral(layer: np.ndarray, finite: np.ndarray, area: np.ndarray) -> float:
    """Sum of ``layer`` x cell area over the ``finite`` cells (float64)."""
    if area.shape[-1] == 1 and layer.shape[-1] != 1:
        rows = np.add.reduce(layer, axis=1, dtype=np.float64, where=finite)
        return float(area[:, 0] @ rows)
    return float(np.sum(layer * np.broadcast_to(area, layer.shape), where=finite))


def _chunk_record_block(
    block, *arrays, area_rows=None, out_index, integrals, block_info=None
) -> np.ndarray:
    """:func:`chunk_record` as a dask block function: the record as a (size, 1, 1) block.

    ``arrays`` are the area block (unless ``area_rows``, the row areas of the whole grid as a
    numpy column, gives it) and the age block (if any).
    """
    arrays = list(arrays)
    if area_rows is None:
        area = arrays.pop(0)
    else:
        (r0, r1) = block_info[0]["array-location"][1]
        area = area_rows[r0:r1]
    age = arrays[0] if arrays else None
    rec = chunk_record(block, area, age, out_index=out_index, integrals=integrals)
    return rec[:, None, None]


def band_parts(rows: slice, *, stacked, area, age, out_index: list[int], integrals) -> list:
    """The statistics of one band: a dask array of one :func:`chunk_record` per chunk.

    ``stacked`` is the kernel's (layers, y, x) dask array; ``area`` the cell area (km2, dask)
    chunked like it, or a numpy column (y, 1) of the whole grid's row areas (a geographic grid,
    whose cells in a row are equal; not a node of the graph); ``integrals`` lists (stacked
    index) the outputs whose area integral is summed (melt thickness-like in km, production in
    mm/yr); ``age`` is the plate age (dask)
    or None. One task per chunk, computed in the same pass as the stores, where the chunk is
    in memory anyway.
    """
    import dask.array as dsa

    band = stacked[:, rows]
    column = isinstance(area, np.ndarray)  # row areas: no dask dependency, sliced per block
    arrays = [band] + ([] if column else [area[rows]]) + ([] if age is None else [age[rows]])
    size = record_size(len(out_index), len(integrals), age is not None)
    records = dsa.map_blocks(
        _chunk_record_block,
        *arrays,
        area_rows=area[rows] if column else None,
        out_index=tuple(out_index),
        integrals=tuple(integrals),
        dtype=np.float64,
        chunks=((size,), *((1,) * len(c) for c in band.chunks[1:])),
    )
    return [records]


def _median_of_histogram(counts: np.ndarray) -> float | None:
    """The median of values binned by :data:`_HIST_BINS` (bin centre), None without values."""
    total = counts.sum()
    if not total:
        return None
    k = int(np.searchsorted(np.cumsum(counts), 0.5 * total))
    width = (_HIST_RANGE[1] - _HIST_RANGE[0]) / _HIST_BINS
    return _HIST_RANGE[0] + (k + 0.5) * width


def summarize_bands(bands: list[list], *, names: list[str], integrals: list[str]) -> dict:
    """The ``statistics`` entry of the summary from the per-band records of :func:`band_parts`.

    Counts, the melting area (km2), the melt volume (km3, thickness x cell area), the cells per
    melting regime, the cells with added melt and their area (:func:`added_melt`) and the area
    integral of each of ``integrals`` (km3 for km, km3/yr for mm/yr) are sums over the chunks;
    per variable the minimum, maximum and mean over cells with data (None where no cell has
    data); ``ambient_melting`` describes the cells where ambient mantle melts (regimes 1 and
    2). The volumes come anomaly first:
    ``anomaly_melt_volume_km3`` (the area integral of the anomaly melt thickness, exact),
    ``ambient_melt_volume_km3`` = total - anomaly-added, i.e. the area integral of
    min(H, H_ambient), the melt ambient mantle would give beneath the same lid (the anomaly
    melt is max(H - H_ambient, 0), docs/physics.md), then ``melt_volume_km3``, the total.
    """
    # every chunk's record as a column, bands in order, chunks row by row within a band
    records = np.concatenate([np.reshape(band[0], (band[0].shape[0], -1)) for band in bands], 1)
    first = _COUNTS + len(integrals)
    hist_start = first + 4 * len(names)
    totals = records[:hist_start].sum(axis=1)
    hists = records[hist_start:].sum(axis=1).reshape(-1, _HIST_BINS)
    variables = {}
    for j, name in enumerate(names):
        col = records[first + 4 * j : first + 4 + 4 * j]
        count = totals[first + 4 * j + 3]
        with np.errstate(invalid="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # chunks without data: NaN
            low = float(np.nanmin(col[0])) if count else np.nan
            high = float(np.nanmax(col[1])) if count else np.nan
        mean = totals[first + 4 * j + 2] / count if count else np.nan
        stats = {"min": low, "max": high, "mean": mean}
        variables[name] = {k: float(v) if np.isfinite(v) else None for k, v in stats.items()}
    out: dict[str, Any] = {"data_cells": int(totals[1]), "melting_cells": int(totals[0])}
    out.update(_volumes(totals, integrals))
    out["melting_area_km2"] = float(totals[2])
    out["added_melt_cells"] = int(totals[_ADDED_AT])
    out["added_melt_area_km2"] = float(totals[_ADDED_AT + 1])
    out["regime_cells"] = {str(v): int(totals[4 + k]) for k, v in enumerate(_REGIMES)}
    ambient = sum(int(totals[4 + _REGIMES.index(v)]) for v in _AMBIENT)
    out["ambient_melting"] = {
        "cells": ambient,
        "fraction_of_data_cells": float(ambient / totals[1]) if totals[1] else None,
        "median_top_of_melting_km": _median_of_histogram(hists[0]),
        "median_plate_age_ma": _median_of_histogram(hists[1]) if len(hists) > 1 else None,
    }
    out["variables"] = variables
    return out


def _volumes(totals: np.ndarray, integrals: list[str]) -> dict[str, float]:
    """The area integrals: anomaly-added, ambient (total - anomaly-added) and total melt
    volume (km3) in that order, then the other integrals (production in km3/yr)."""
    out: dict[str, float] = {}
    for j, name in enumerate(integrals):
        if OUTPUTS[name].units == "mm/yr":
            total = totals[_COUNTS + j] * _KM3_PER_MM_KM2
            out[name.removesuffix("_mm_yr") + "_km3_yr"] = float(total)
        else:
            out[name.removesuffix("_thickness_km") + "_volume_km3"] = float(totals[_COUNTS + j])
    volume = float(totals[3])
    anomaly = out.pop("anomaly_melt_volume_km3", None)
    first = {} if anomaly is None else {"anomaly_melt_volume_km3": anomaly}
    if anomaly is not None:
        first["ambient_melt_volume_km3"] = volume - anomaly
    return {**first, "melt_volume_km3": volume, **out}


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
        "at the ambient potential temperature (melting regimes 1 and 2): there melting needs only "
        "upwelling, as at a spreading ridge, not a thermal anomaly. Likely cause: "
        + "; or ".join(causes)
        + ". Use anomaly_melt_thickness_km for the melt the anomalies add."
    ]
