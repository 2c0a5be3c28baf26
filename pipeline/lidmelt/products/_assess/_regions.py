"""Which known features lie in which candidate region of ``lidmelt screen``.

The candidates are read from a screening result (``RUN_DIR/candidates.gpkg``, where ``lidmelt
screen`` writes by default, or the file given): polygons along the cells' edges, in the grid's
CRS, each with its ``rank`` and ``plume``. A feature inside the grid lies in the candidate whose
polygon contains its point (shapely's ``contains_xy``, in the candidates' CRS); a point on a
shared edge goes to the candidate of the lower rank. Every candidate lists its features (maybe
none), and the features in no candidate are listed too (those outside the grid are in none and
are named among them).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pyproj

from lidmelt.grids._features import FeaturePoints
from lidmelt.grids._rundir import RunDir
from lidmelt.grids._vector import read_polygons
from lidmelt.products._screening import CANDIDATES_NAME


@dataclass(frozen=True)
class CandidateFeatures:
    """``summary``: the assessment's ``candidates`` entry; ``of_feature``: per feature the rank
    of its candidate or None."""

    summary: dict[str, Any]
    of_feature: list[Any] = field(default_factory=list)


def _candidate_file(run: RunDir, given: str | os.PathLike[str] | None) -> Path | None:
    if given is not None:
        return Path(given)
    default = run.path / CANDIDATES_NAME
    return default if default.is_file() else None


def candidate_features(
    run: RunDir,
    fp: FeaturePoints,
    inside: np.ndarray,
    given: str | os.PathLike[str] | None = None,
) -> CandidateFeatures:
    """The features of each candidate region and those in none (module notes); without a
    candidates file (none given and none in the run), a note that says how to make one."""
    import shapely

    path = _candidate_file(run, given)
    if path is None:
        note = (
            f"no candidate regions: run 'lidmelt screen {run.shown_path} --min-melt-thickness KM' "
            "(it writes RUN_DIR/candidates.gpkg), or give --candidates FILE"
        )
        return CandidateFeatures({"file": None, "note": note}, [None] * len(fp))
    gdf = read_polygons(path, what="candidates")
    to = pyproj.Transformer.from_crs(fp.crs, pyproj.CRS.from_user_input(gdf.crs), always_xy=True)
    x, y = (np.asarray(v, float) for v in to.transform(fp.x, fp.y, errcheck=False))
    ranks = gdf["rank"].to_numpy() if "rank" in gdf.columns else np.arange(1, len(gdf) + 1)
    plumes = gdf["plume"].to_numpy() if "plume" in gdf.columns else [""] * len(gdf)
    of_feature: list[Any] = [None] * len(fp)
    regions = []
    for k in np.argsort(ranks, kind="stable"):
        hit = inside & shapely.contains_xy(gdf.geometry.iloc[k], x, y)
        members = [j for j in np.flatnonzero(hit) if of_feature[j] is None]
        for j in members:
            of_feature[j] = int(ranks[k])
        regions.append({
            "rank": int(ranks[k]), "plume": str(plumes[k] or ""), "n_features": len(members),
            "features": [str(fp.names[j]) for j in members],
        })  # fmt: skip
    none = [str(fp.names[j]) for j in range(len(fp)) if of_feature[j] is None]
    summary = {"file": str(path), "regions": regions, "n_in_no_candidate": len(none),
               "in_no_candidate": none}  # fmt: skip
    return CandidateFeatures(summary, of_feature)
