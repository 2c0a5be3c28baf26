"""The ensemble stage's part for known features (``[assess]``): where they lie, each member's
score after the chunk pass, the summary entry and the weighted probability map.

The method is in :mod:`lidmelt.ensemble._posterior`. The members' melting indicators where they
differ are kept between the chunk pass and the weights as packed bits in a folder beside the
staged run (in the staging root, removed with it): one ``.npz`` per chunk, 2 bits per member
and such cell. Then each chunk's weighted probability is the unweighted map read back from its
finished GeoTIFF with those cells weighted. Keeping them costs a write and a read of the bits;
the alternative, a second pass over the behavioural members, costs their kernel once more
(``benchmarks/bench_assess.py`` measures both sides).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._errors import InputError
from lidmelt.ensemble._posterior import (
    effective_members,
    weighted_distributions,
    weighted_probability,
)
from lidmelt.ensemble._score import NBINS, binned_scores
from lidmelt.grids._features import FeaturePoints, nearest_cells, read_feature_points
from lidmelt.grids._grid import Grid


@dataclass(frozen=True, eq=False)
class FeatureCells:
    """The known features of ``[assess]`` on the run's grid: ``points`` as read, ``inside``
    (bool per feature) and ``flat`` (the cell of each feature inside, in ``points``' order)."""

    points: FeaturePoints
    inside: np.ndarray
    flat: np.ndarray

    @property
    def count(self) -> int:
        return int(self.inside.sum())


def locate(options: Any, grid: Grid) -> FeatureCells:
    """Read ``[assess] features`` and place them on ``grid``; an InputError naming the file
    when every feature lies outside the grid."""
    points = read_feature_points(options.features, crs=options.crs)
    gx, gy = grid.to_grid_xy(points.x, points.y, points.crs)
    inside, flat = nearest_cells(grid, gx, gy)
    if not inside.any():
        bounds = ", ".join(f"{v:.6g}" for v in grid.bounds)
        msg = (
            f"all {len(points)} features of {points.source} (assess.features) lie outside the "
            f"run's grid (bounds {bounds}); expected known features of this basin. Check the "
            "file, its CRS and its longitude/latitude columns."
        )
        raise InputError(msg)
    return FeatureCells(points, inside, flat[inside])


def feature_blocks(cells: FeatureCells | None, chunks: tuple, width: int) -> list[list]:
    """Per chunk (row i, column j of ``chunks``: a dask array's (rows, cols)) the ids of the
    features inside it and their flat indices in it; Nones without features."""
    rows, cols = (np.cumsum((0, *c)) for c in chunks)
    out = [[None] * (len(cols) - 1) for _ in range(len(rows) - 1)]
    if cells is None:
        return out
    r, c = np.divmod(cells.flat, width)
    i = np.searchsorted(rows, r, side="right") - 1
    j = np.searchsorted(cols, c, side="right") - 1
    for a in range(len(rows) - 1):
        for b in range(len(cols) - 1):
            ids = np.flatnonzero((i == a) & (j == b))
            local = (r[ids] - rows[a]) * (cols[b + 1] - cols[b]) + (c[ids] - cols[b])
            out[a][b] = (ids, local)
    return out


def member_scores(sums: dict[str, np.ndarray], members: int) -> dict[str, np.ndarray]:
    """Each member's ``auc``, its ``auc_bound`` and ``features_scored`` from the combined
    sums (NaN AUC for a member with no feature on a cell where it has a value)."""
    hist = sums["score_bins"].reshape(members, NBINS)
    values = sums["feature_values"]
    auc, bound, scored = np.full(members, np.nan), np.full(members, np.nan), np.zeros(members)
    for m in range(members):
        ok = np.isfinite(values[m])
        scored[m] = ok.sum()
        if ok.any() and hist[m].sum() > 0:
            s = binned_scores(hist[m], values[m, ok])
            auc[m], bound[m] = s.auc, s.bound
    return {"auc": auc, "auc_bound": bound, "features_scored": scored.astype(np.int64)}


def _stats(values: np.ndarray) -> dict[str, Any]:
    ok = values[np.isfinite(values)]
    if not ok.size:
        return {"members": 0}
    return {"members": int(ok.size), "min": float(ok.min()), "mean": float(ok.mean()),
            "max": float(ok.max())}  # fmt: skip


def assessment_entry(ens, options, cells: FeatureCells, scores, weights, basis_variable: str):
    """The summary's ``"assessment"`` entry of the ensemble."""
    behavioural = int((weights > 0).sum())
    return {
        "features_file": str(options.features),
        "n_features": len(cells.points),
        "n_features_inside": cells.count,
        "features_outside_grid": [str(n) for n in cells.points.names[~cells.inside]],
        "member_variable": basis_variable,
        "auc": _stats(scores["auc"]),
        "largest_auc_bound": _finite_max(scores["auc_bound"]),
        "likelihood": {
            "measure": "((AUC - rejection_auc) / (1 - rejection_auc))^shape for AUC > "
            "rejection_auc, else 0; rescaled to sum to 1",
            "rejection_auc": options.rejection_auc,
            "shape": options.likelihood_shape,
            "method": "GLUE (Beven & Binley 1992, Hydrological Processes 6, 279-298)",
        },
        "behavioural_members": behavioural,
        "effective_members": effective_members(weights),
        "distributions": weighted_distributions(ens.vary, ens.samples, weights)
        if behavioural else [],
        "percentile_definition": "weighted mid-point interpolation (equal weights: Hyndman & "
        "Fan 1996 definition 5)",
    }  # fmt: skip


def _finite_max(values: np.ndarray) -> float | None:
    ok = values[np.isfinite(values)]
    return float(ok.max()) if ok.size else None


def write_weighted(out, probability_path: Path, masks: dict, weights: np.ndarray, chunks):
    """Write the weighted probability (``out``: a GeoTiffSet of one item) row of chunks by row
    of chunks: the unweighted map read back from ``probability_path`` with the cells of each
    chunk's ``masks[(i, j)]`` file weighted."""
    import rasterio
    from rasterio.windows import Window

    rows, cols = (np.cumsum((0, *c)) for c in chunks)
    with rasterio.open(probability_path) as src:
        for i in range(len(rows) - 1):
            height = int(rows[i + 1] - rows[i])
            band = src.read(1, window=Window(0, int(rows[i]), src.width, height))
            for j in range(len(cols) - 1):
                part = band[:, cols[j] : cols[j + 1]]
                band[:, cols[j] : cols[j + 1]] = weighted_probability(part, masks[i, j], weights)
            out.write_rows(int(rows[i]), [band.astype(np.float32)])


def masks_size(masks: dict) -> int:
    """Bytes of the kept mask files."""
    return int(sum(Path(p).stat().st_size for p in masks.values()))
