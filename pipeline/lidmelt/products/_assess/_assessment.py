"""How good is the map? A run's variable scored against known features.

:func:`assess` reads a run's variable V (default: the melt the thermal anomaly adds, or for an
ensemble run the probability of melting of its screening basis), places each known feature in
its cell (:mod:`lidmelt.grids._features`), and ranks the features' cells against every ocean
cell of the run with a value, weighted by cell area (:mod:`lidmelt.ensemble._score`): the AUC
with its 90 % interval over the features, the success-rate curve with its band, the weights of
evidence at a few thresholds (:mod:`._evidence`), the features in each candidate region of
``lidmelt screen`` and those in none (:mod:`._regions`). Features outside the grid or on a cell
without data are counted and listed with their reason, never dropped silently; a file whose
features all lie outside the grid, or none on a cell with data, is refused.

The grid is read in bands of rows (:data:`BAND_ROWS`) and kept as float32 (4 bytes a cell, the
ranking needs the features' values before the background), read once.
"""

from __future__ import annotations

import math
import os
from typing import Any

import numpy as np

from lidmelt._errors import InputError, RunDirError
from lidmelt._variables import DEFAULT_PROBABILITY_THRESHOLD_KM, legacy_message
from lidmelt._variables import PROBABILITY_BASES as _BASES
from lidmelt.ensemble._score import RESAMPLES, ExactRanks, interval, resample_counts
from lidmelt.grids._area import cell_area_km2, row_areas_km2
from lidmelt.grids._features import FeaturePoints, nearest_cells, read_feature_points
from lidmelt.grids._grid import Grid
from lidmelt.grids._rundir import RunDir
from lidmelt.grids._zarr import in_store, store_bands
from lidmelt.products import _ensemble as ens
from lidmelt.products import _sampling as smp
from lidmelt.products._assess._evidence import curve, weights_of_evidence
from lidmelt.products._assess._regions import candidate_features

#: Rows read at a time.
BAND_ROWS = 512
#: What became of each feature.
STATUSES = ("used", "outside_grid", "nodata")


def default_variable(run: RunDir) -> str:
    """The variable scored by default: an ensemble run's probability of melting of its
    screening basis, else the melt the thermal anomaly adds (``anomaly_melt_thickness_km``)."""
    probability = ens.run_probability(run) if ens.ensemble_entry(run) else None
    if probability is not None:
        return probability
    if _BASES["anomaly"] in run.outputs:
        return _BASES["anomaly"]
    msg = (
        f"run {str(run.shown_path)!r} has no anomaly_melt_thickness_km, the variable scored by "
        f"default; its outputs are {', '.join(run.outputs)}. Choose one with --variable V, "
        "or run the workflow again with the default outputs."
    )
    raise RunDirError(msg)


def default_thresholds(run: RunDir, variable: str, values: np.ndarray) -> tuple[list, float]:
    """The thresholds of V where the weights of evidence are given, and the screening one: a
    probability 0.1, 0.5 (more likely than not, the screening's), 0.9; a melt thickness 0.5,
    1 (the screening's default, ``candidate_min_melt_km``), 2 km; another variable the
    quartiles of the features' values (the median as the screening one)."""
    units = smp.units_of(run, [variable]).get(variable, "")
    if units == "1" and ens.variable_of(variable) is not None:
        return [0.1, ens.LIKELY, 0.9], ens.LIKELY
    if units == "km":
        t = DEFAULT_PROBABILITY_THRESHOLD_KM
        return [0.5 * t, t, 2.0 * t], t
    q = [float(v) for v in np.quantile(values, [0.25, 0.5, 0.75])] if values.size else [0.0]
    return sorted(set(q)), q[len(q) // 2]


def _check_variable(run: RunDir, variable: str) -> None:
    if variable not in run.outputs and (legacy := legacy_message(variable)):
        raise InputError(legacy)  # an earlier lidmelt's name: says what it is now
    if variable not in run.outputs:
        msg = (
            f"variable {variable!r} is not an output of run {str(run.shown_path)!r}; its outputs "
            f"are {', '.join(run.outputs)}. Give one of them with --variable."
        )
        raise InputError(msg)


def _areas(grid: Grid, rows: slice) -> np.ndarray:
    """The areas (km2) of the cells of ``rows``: a column of row areas on a geographic grid."""
    if grid.is_geographic:
        return row_areas_km2(grid)[rows, None]
    return np.asarray(cell_area_km2(grid).values[rows], np.float64)


def _read_bands(run: RunDir, variable: str, grid: Grid):
    """Yield ``(rows, block)``: the variable as float32 (NaN nodata), :data:`BAND_ROWS` rows
    at a time, from its GeoTIFF or the run's Zarr store."""
    import rasterio
    from rasterio.windows import Window

    if in_store(run.summary, variable):
        yield from store_bands(run.store(), variable, BAND_ROWS)
        return
    with rasterio.open(run.file(variable)) as src:
        if (src.height, src.width) != (grid.height, grid.width):
            msg = (
                f"{variable!r} in {str(run.shown_path)!r} has shape {(src.height, src.width)}, but "
                f"its summary.json gives a {grid.height} x {grid.width} grid: run 'lidmelt run' "
                "again."
            )
            raise RunDirError(msg)
        for row0 in range(0, grid.height, BAND_ROWS):
            rows = slice(row0, min(row0 + BAND_ROWS, grid.height))
            window = Window(0, row0, grid.width, rows.stop - row0)
            block = src.read(1, window=window, masked=True).astype(np.float32).filled(np.nan)
            yield rows, block


def _scan(run: RunDir, variable: str, grid: Grid, cells: np.ndarray, inside: np.ndarray):
    """The features' values (NaN outside the grid) and the variable's bands (float32, kept
    for the ranking, which needs the features' values first)."""
    values = np.full(cells.shape, np.nan)
    blocks = []
    for rows, block in _read_bands(run, variable, grid):
        here = inside & (cells >= rows.start * grid.width) & (cells < rows.stop * grid.width)
        values[here] = block.ravel()[cells[here] - rows.start * grid.width]
        blocks.append((rows, block))
    return values, blocks


def _background(blocks, grid: Grid, features: np.ndarray, thresholds: list[float]):
    """Ranks of ``features`` against the background of ``blocks``, the background's cell
    count and area, and the area at or above each threshold (km2)."""
    ranks = ExactRanks(features)
    cells, above = 0, np.zeros(len(thresholds))
    for rows, block in blocks:
        area = _areas(grid, rows)
        ranks.add(block, area)
        finite = np.isfinite(block)
        cells += int(finite.sum())
        for k, t in enumerate(thresholds):
            above[k] += float(np.broadcast_to(area, block.shape)[block >= np.float32(t)].sum())
    return ranks, cells, above


def _locate(fp: FeaturePoints, grid: Grid) -> tuple[np.ndarray, np.ndarray]:
    gx, gy = grid.to_grid_xy(fp.x, fp.y, fp.crs)
    return nearest_cells(grid, gx, gy)


def _refuse_unplaced(fp: FeaturePoints, run: RunDir, inside: np.ndarray, used: np.ndarray):
    """A file whose features all lie outside the grid, or none on a cell with data."""
    bounds = ", ".join(f"{v:.6g}" for v in smp.run_grid(run).bounds)
    if not inside.any():
        msg = (
            f"all {len(fp)} features of {fp.source} lie outside the grid of run "
            f"{str(run.shown_path)!r} (bounds {bounds} in the grid's CRS; e.g. {fp.names[0]} at "
            f"longitude {fp.lon[0]:.6g}, latitude {fp.lat[0]:.6g}). Give the features of this "
            "basin, or check the file's CRS and its longitude/latitude columns."
        )
        raise InputError(msg)
    if not used.any():
        msg = (
            f"none of the {int(inside.sum())} features of {fp.source} inside the grid of run "
            f"{str(run.shown_path)!r} lies on a cell with data (all on nodata, e.g. land or beyond "
            "the margin), so nothing can be scored. Give features on the run's ocean cells."
        )
        raise InputError(msg)


def _feature_list(fp, status, values, score, candidate) -> list[dict[str, Any]]:
    """One record per feature, in the file's order."""
    out = []
    for k in range(len(fp)):
        value = float(values[k]) if status[k] == "used" else None
        out.append({
            "name": str(fp.names[k]), "longitude": float(fp.lon[k]), "latitude": float(fp.lat[k]),
            "kind": str(fp.kind[k]), "status": str(status[k]), "value": value,
            "score": float(score[k]) if status[k] == "used" else None,
            "candidate": candidate[k],
        })  # fmt: skip
    return out


def _thresholds(thresholds, above_km2, area_km2, captured, n_used, cells, screening):
    out = []
    for t, a, c in zip(thresholds, above_km2, captured, strict=True):
        fraction = a / area_km2
        out.append({"value": float(t), "screening": bool(t == screening),
                    "captured": int(c), "captured_fraction": c / n_used,
                    "area_fraction": fraction,
                    **weights_of_evidence(int(c), n_used, fraction, cells)})  # fmt: skip
    return out


def _place(run: RunDir, variable: str, grid: Grid, fp: FeaturePoints):
    """The features on the grid: inside it, their values, the grid's blocks of ``variable``,
    those used (on a cell with data) and each feature's status."""
    _check_variable(run, variable)
    inside, cells = _locate(fp, grid)
    values, blocks = _scan(run, variable, grid, cells, inside)
    used = inside & np.isfinite(values)
    _refuse_unplaced(fp, run, inside, used)
    status = np.where(used, "used", np.where(inside, "nodata", "outside_grid"))
    return inside, values, blocks, used, status


def assess(
    run: RunDir | str | os.PathLike[str],
    features: FeaturePoints | str | os.PathLike[str],
    *,
    variable: str | None = None,
    thresholds: list[float] | None = None,
    candidates: str | os.PathLike[str] | None = None,
    seed: int = 0,
    crs: Any = None,
) -> dict[str, Any]:
    """Score the run's ``variable`` against known ``features`` (module notes).

    Parameters
    ----------
    run : RunDir or str or os.PathLike
        A finished run.
    features : FeaturePoints or str or os.PathLike
        The known features (seamounts, volcanoes): a CSV or vector file of points.
    variable : str, optional
        The output ranked (default: :func:`default_variable`).
    thresholds : list of float, optional
        Where weights of evidence are given (default: :func:`default_thresholds`).
    candidates : str or os.PathLike, optional
        Candidate regions (``lidmelt screen``) to count the features in.
    seed : int
        Seed of the bootstrap resamples of the 90 % interval.
    crs : optional
        The CRS of a feature table's coordinates (default WGS 84 degrees).

    Returns
    -------
    dict
        The assessment, ready for JSON (docs/assess.md lists its keys: ``auc``, ``curve``...).

    Raises
    ------
    InputError
        A bad feature file (missing, empty, no CRS, off every data cell) or unknown variable.
    RunDirError
        ``run`` is not a run directory.
    """
    run = smp.as_run(run)
    grid = smp.run_grid(run)
    fp = features if isinstance(features, FeaturePoints) else read_feature_points(features, crs=crs)
    variable = variable or default_variable(run)
    inside, values, blocks, used, status = _place(run, variable, grid, fp)
    if thresholds is None:
        thresholds, screening = default_thresholds(run, variable, values[used])
    else:
        thresholds, screening = sorted(float(t) for t in thresholds), math.nan
    ranks, n_cells, above = _background(blocks, grid, values[used], thresholds)
    del blocks
    scores = ranks.scores()
    counts = resample_counts(int(used.sum()), seed)
    auc_b = counts @ scores.scores.astype(np.float32) / used.sum()
    score_all = np.full(len(fp), np.nan)
    score_all[used] = scores.scores
    # compared in float32 like the grid's cells (_background): float64(float32(0.9)) < 0.9
    captured = [int((values[used].astype(np.float32) >= np.float32(t)).sum()) for t in thresholds]
    regions = candidate_features(run, fp, inside, candidates)
    n_used = int(used.sum())
    return {
        "lidmelt_assess": 1, "run": str(run.shown_path), "variable": variable,
        "units": smp.units_of(run, [variable])[variable], "features_file": fp.source,
        "n_features": len(fp), "n_features_used": n_used,
        "n_outside_grid": int((status == "outside_grid").sum()),
        "n_nodata": int((status == "nodata").sum()),
        "auc": scores.auc, "auc_ci90": interval(auc_b, n_used),
        "auc_method": _method(seed, n_used),
        "background": {"cells": n_cells, "area_km2": ranks.area,
                       "unit_cell_km2": ranks.area / n_cells},
        "curve": curve(scores, counts),
        "thresholds": _thresholds(thresholds, above, ranks.area, captured, n_used, n_cells,
                                  screening),
        "candidates": regions.summary,
        "not_used": [{"name": str(fp.names[k]), "longitude": float(fp.lon[k]),
                      "latitude": float(fp.lat[k]), "reason": str(status[k])}
                     for k in np.flatnonzero(~used)],
        "features": _feature_list(fp, status, values, score_all, regions.of_feature),
    }  # fmt: skip


def _method(seed: int, n: int) -> dict[str, Any]:
    from lidmelt.ensemble._score import expanded_levels

    return {
        "auc": "area-weighted probability that a feature's cell outranks a random ocean cell "
        "(cells with a value), ties counted half; = area under the success-rate curve",
        "interval": "expanded bootstrap percentile interval over the features (Hesterberg "
        "2015), linear between order statistics",
        "levels_percent": list(expanded_levels(n)),
        "resamples": RESAMPLES,
        "seed": seed,
        "features_as": "points: each feature counts once, in the cell that contains it (a "
        "polygon by a point inside it)",
        "unit_cell": "the mean area of the background cells (weights of evidence)",
    }
