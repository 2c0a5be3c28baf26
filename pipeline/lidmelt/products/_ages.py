"""Dated volcanoes against a run's history: predicted and observed ages along hotspot tracks.

For each feature of a table (``lon``, ``lat``, ``age_ma`` and optionally ``age_error_ma``, one
standard error in Myr), at the cell that holds it (nearest cell centre):

- ``predicted_age_ma``: the time of the largest melt the thermal anomaly added there
  (``peak_anomaly_melt_time_ma`` of the run's history: when the plume passed beneath, or a
  little before, where the lid was thinner then; the time of the largest total melt would often
  be the ridge's, when the seafloor formed), given only within a melting swath (below);
- ``residual_myr`` = observed minus predicted, and ``residual_sigma`` = that over
  ``age_error_ma`` (empty without an error);
- ``peak_melt_thickness_km``, ``peak_anomaly_melt_thickness_km`` and ``melting_duration_myr``;
- ``in_melting_swath``: whether the melt the anomaly added there reached the run's threshold at
  some time (``melting_duration_myr`` > 0);
- its nearest track (``plume``), the distance to it and along it
  (:func:`lidmelt.products._tracks.place_on_tracks`).

A feature outside the grid is refused (naming the file and its rows), and so is a row without
a finite, non-negative age or with a non-positive error; nothing is written then.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from lidmelt._errors import InputError, RunDirError
from lidmelt._files import atomic_paths
from lidmelt.grids._rundir import RunDir
from lidmelt.grids._vector import check_points, describe_rows, read_points
from lidmelt.products._sampling import (
    as_run,
    check_not_input,
    check_output_path,
    load_variable,
    make_stencil,
    run_grid,
    table_with_coordinates,
)
from lidmelt.products._tracks import age_distance_figure, place_on_tracks, read_track_points

#: The history's variables sampled at each feature.
HISTORY_SAMPLED = (
    "peak_anomaly_melt_time_ma", "peak_melt_thickness_km", "peak_anomaly_melt_thickness_km",
    "melting_duration_myr",
)  # fmt: skip
#: The columns a feature table gains, in order.
AGE_COLUMNS = (
    "plume", "distance_to_track_km", "distance_along_track_km", "predicted_age_ma",
    "residual_myr", "residual_sigma", "peak_melt_thickness_km", "peak_anomaly_melt_thickness_km",
    "melting_duration_myr", "in_melting_swath",
)  # fmt: skip


def _numbers(frame: pd.DataFrame, column: str, source: str, *, positive: bool) -> np.ndarray:
    """A numeric column, every value finite and >= 0 (> 0 with ``positive``: an empty cell is
    NaN, no error given); else an error naming the rows."""
    text = frame[column].astype(str).str.strip()
    values = pd.to_numeric(text, errors="coerce").to_numpy(float)
    blank = (frame[column].isna() | text.isin(["", "nan", "None"])).to_numpy()
    empty = blank if positive else np.zeros(len(text), bool)
    with np.errstate(invalid="ignore"):
        bad = ~empty & (~np.isfinite(values) | (values <= 0 if positive else values < 0))
    if bad.any():
        rows = describe_rows(frame, np.flatnonzero(bad))
        what = "a number > 0 (one standard error, Myr)" if positive else "a number >= 0 (Ma)"
        msg = (
            f"{source}: column {column!r} is not {what} in {rows} (e.g. "
            f"{frame[column].iloc[int(np.flatnonzero(bad)[0])]!r}). Fix or remove those rows."
        )
        raise InputError(msg)
    return values


def _read_features(path: Path) -> tuple[Any, np.ndarray, np.ndarray]:
    """The features (a GeoDataFrame), their ages and errors (NaN where not given)."""
    gdf = read_points(path, what="feature")
    source = f"feature file {str(path)!r}"
    columns = {str(c).lower(): c for c in gdf.columns}
    if "age_ma" not in columns:
        msg = (
            f"{source} has no column 'age_ma' (it has {', '.join(map(str, gdf.columns))}); "
            "expected lon, lat, age_ma (Ma) and optionally age_error_ma (Myr, one standard "
            "error) for each dated feature."
        )
        raise InputError(msg)
    if columns["age_ma"] != "age_ma":
        gdf = gdf.rename(columns={columns["age_ma"]: "age_ma"})
    ages = _numbers(gdf, "age_ma", source, positive=False)
    errors = np.full(len(gdf), np.nan)
    if "age_error_ma" in columns:
        gdf = gdf.rename(columns={columns["age_error_ma"]: "age_error_ma"})
        errors = _numbers(gdf, "age_error_ma", source, positive=True)
    return gdf, ages, errors


def _check_history(run: RunDir) -> None:
    missing = [n for n in HISTORY_SAMPLED if n not in run.outputs]
    if missing:
        msg = (
            f"run directory {str(run.shown_path)!r} has no history through time (no "
            f"{', '.join(missing)}): it was not run with a [motion] table. Add a [motion] "
            "table to the workflow (docs/workflow.md) and run it again."
        )
        raise RunDirError(msg)


def feature_ages(run: RunDir | str | os.PathLike[str], features: str | os.PathLike[str]):
    """The feature table with :data:`AGE_COLUMNS` (module notes) and the run's track points.

    Returns ``(table, points)``: a pandas DataFrame (the file's columns, then the new ones) and
    the track points (:func:`lidmelt.products._tracks.read_track_points`).
    """
    run = as_run(run)
    _check_history(run)
    points = read_track_points(run)
    path = Path(features)
    gdf, ages, errors = _read_features(path)
    x, y = check_points(gdf, source=f"feature file {str(path)!r}")
    grid = run_grid(run)
    stencil = make_stencil(grid, *grid.to_grid_xy(x, y, gdf.crs), method="nearest")
    if not stencil.inside.all():
        outside = describe_rows(gdf, np.flatnonzero(~stencil.inside))
        msg = (
            f"feature file {str(path)!r}: {outside} lie(s) outside the run's grid (bounds "
            f"{tuple(round(b, 4) for b in grid.bounds)}); every feature must lie on the grid "
            "to be compared with its history. Remove those rows or run a larger grid."
        )
        raise InputError(msg)
    frame = table_with_coordinates(gdf)
    sampled = {n: load_variable(run, n, grid).ravel()[stencil.nearest] for n in HISTORY_SAMPLED}
    lon, lat = _lonlat(gdf, x, y)
    placed = place_on_tracks(points, lon, lat)
    swath = sampled["melting_duration_myr"] > 0
    predicted = np.where(swath, sampled["peak_anomaly_melt_time_ma"], np.nan)
    residual = ages - predicted
    new = {
        "plume": placed.plume,
        "distance_to_track_km": placed.distance_km,
        "distance_along_track_km": placed.along_km,
        "predicted_age_ma": predicted,
        "residual_myr": residual,
        "residual_sigma": residual / errors,
        "peak_melt_thickness_km": sampled["peak_melt_thickness_km"],
        "peak_anomaly_melt_thickness_km": sampled["peak_anomaly_melt_thickness_km"],
        "melting_duration_myr": sampled["melting_duration_myr"],
        "in_melting_swath": swath,
    }
    frame = frame.drop(columns=[c for c in AGE_COLUMNS if c in frame.columns])
    for name in AGE_COLUMNS:
        frame[name] = new[name]
    return frame, points


def _lonlat(gdf, x, y) -> tuple[np.ndarray, np.ndarray]:
    import pyproj

    from lidmelt.grids._grid import lonlat_from

    if pyproj.CRS.from_user_input(gdf.crs).is_geographic:
        return np.asarray(x, float), np.asarray(y, float)
    return lonlat_from(gdf.crs, x, y)


def write_ages(
    run: RunDir | str | os.PathLike[str],
    features: str | os.PathLike[str],
    output: str | os.PathLike[str],
    *,
    figure: str | os.PathLike[str] | None = None,
) -> tuple[pd.DataFrame, Path, Path]:
    """Write the feature table (CSV) and the age-distance figure (PNG; default beside the
    table, same name) atomically, after every check; return (table, csv, png)."""
    out = check_output_path(output, (".csv",), what="feature ages")
    png = Path(figure) if figure is not None else out.with_suffix(".png")
    check_output_path(png, (".png",), what="age-distance figure")
    run = as_run(run)
    for path, what in ((out, "feature ages"), (png, "age-distance figure")):
        check_not_input(path, features, run.path, what=what)
    frame, points = feature_ages(run, features)
    plumes = [p for p in dict.fromkeys(frame["plume"]) if p]
    shown = frame[np.isfinite(frame["distance_along_track_km"].to_numpy(float))]
    fig = age_distance_figure(points, shown, plumes=plumes or None)
    with atomic_paths(out, png) as (csv_tmp, png_tmp):
        frame.to_csv(csv_tmp, index=False)
        fig.savefig(png_tmp, dpi=150, format="png")
    return frame, out, png
