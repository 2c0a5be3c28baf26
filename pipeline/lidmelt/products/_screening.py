"""Screening a finished run for candidate volcanic regions.

:func:`screen` finds the connected groups of cells whose melt reaches a threshold and turns them
into ranked candidate polygons; :func:`write_candidates` writes them as a GeoPackage and a
GeoJSON twin. ``lidmelt screen`` is the command-line form.

Screening
---------
The basis says which melt a cell must reach: ``"anomaly"`` (default) the melt the thermal
anomaly adds, ``anomaly_melt_thickness_km`` (melt thickness minus that of ambient mantle beneath
the same lid and water), so that young seafloor where ambient mantle melts beneath a thin lid (as
at a spreading ridge) is not taken for an intraplate candidate; ``"total"`` the whole
``melt_thickness_km``. ``min_age_ma`` leaves out cells of younger plate age (the run's
``plate_age_ma`` input).

Cells whose melting regime says "no melting" (nothing melts, or the melt fraction at the top
stays below the least that can be extracted: docs/physics.md) are never candidate cells.
Candidate regions are groups of cells with the basis's melt >= the threshold that touch along
an edge or at a corner (8-connectivity; on a global geographic grid also across the antimeridian
seam), whose area is at least ``min_area_km2``. Each becomes a (Multi)Polygon along its cells'
edges, with the statistics columns of :mod:`lidmelt.products._regions` (``area_km2`` is the area
of the region's cells, equal to that of its polygon, which follows the cell edges; the optional
columns appear where the run has their variable: anomaly melt volume, plate-age range, flagged
fraction, melt production) except ``deep_melt_share``, which for a candidate is the share
of its ANOMALY melt volume made beyond the model's calibrated pressure (capped at 1; NaN
without that output: :meth:`~lidmelt.products._regions.Zones.candidate_stats`), plus ``rank``
(1 = largest melt volume of the basis: ``anomaly_melt_volume_km3`` or ``melt_volume_km3``),
``plume``, ``plume_match`` and ``centroid_lon``/``centroid_lat`` (WGS84 degrees: the
area-weighted mean position of its cells on the sphere).

Probability screening
---------------------
An ensemble run (docs/workflow.md, ``[ensemble]``) has probability maps
(:mod:`lidmelt.products._ensemble`): ``melt_probability_<basis>_ge_<T>km``, the probability that
a member's melt of the basis reaches T km. The screen's ``basis`` chooses the map too: with
``min_probability`` P a cell is a candidate cell when the probability of the screen's own basis
(``probability``: default the run's probability of melting of that basis, the first of its
thresholds; a number T picks ``melt_probability_<basis>_ge_<T>km``) is >= P; with a melt
threshold too, a cell must pass both. A run whose probability maps are of another basis, or not
of the threshold asked for, is refused with a :class:`~lidmelt._errors.RunDirError` naming both;
so is an ensemble run of an earlier lidmelt (``melt_probability``: any melt, no basis). The
regions, ranking (by the basis's melt volume of the run's own outputs) and plume matching are as
above. Each candidate of a run with a probability map of the basis gets ``probability_basis``,
``probability_threshold_km`` (what the probability is of), ``mean_probability`` (area-weighted
mean over its cells), ``max_probability`` and ``likely_area_km2`` (area of its cells with
probability >= 0.5, more likely than not to melt). A run without any probability map is refused
with a :class:`~lidmelt._errors.RunDirError` that says how to run an ensemble.

Ensemble candidates
-------------------
:func:`ensemble_candidates` screens the deterministic outputs of an ensemble run while it is
being written (the basis ``"anomaly"``, ``min_melt_thickness_km`` = ``[ensemble]
candidate_min_melt_km``, no least area: the candidates ``lidmelt screen RUN --min-melt-thickness
T`` lists, in the same order) and hands the largest ``[ensemble] candidates`` of them to the
ensemble (:mod:`lidmelt.ensemble._candidates`), which keeps each one's melt volume per member.

Plumes
------
Each candidate is linked to a plume of the run's workflow (``summary.json`` inputs ->
``thermal_anomaly_k`` -> ``plumes``; a plume without a name is called ``plume N`` after its
place in the workflow, from 1): the plume whose centre lies in a cell of the region
(``plume_match`` "centre inside"; several such plumes are joined with ", "), else the plume
nearest to the region among those whose centre lies within their ``radius_km`` of the region's
nearest cell centre (WGS84 geodesic distance; "within radius"), else none (``plume`` "",
``plume_match`` "none").
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from lidmelt._errors import InputError, RunDirError
from lidmelt._variables import OUTPUTS, PROBABILITY_BASES, parse_ensemble_name
from lidmelt.ensemble._candidates import Candidates
from lidmelt.grids import _rundir as rundir
from lidmelt.grids._area import row_areas_km2
from lidmelt.grids._grid import WGS84
from lidmelt.grids._rundir import RunDir
from lidmelt.products import _ensemble as ens
from lidmelt.products import _sampling as smp
from lidmelt.products._regions import ANOMALY_MELT_VARIABLE, GEOD, Zones

if TYPE_CHECKING:
    import geopandas as gpd
    import shapely

#: Where ``lidmelt screen`` writes its candidates by default, in the run directory (outside its
#: manifest), and where the report and ``lidmelt assess`` look for them.
CANDIDATES_NAME = "candidates.gpkg"

#: Extra columns of a screening result.
CANDIDATE_COLUMNS = ("rank", "plume", "plume_match", "centroid_lon", "centroid_lat")

#: Columns of a candidate from a probability map: what it is of, then its statistics.
_PROBABILITY_COLUMNS = ("probability_basis", "probability_threshold_km",
                        *ens.PROBABILITY_STATISTICS)  # fmt: skip

#: Screening bases: the melt a candidate cell must reach (the registry's probability bases).
BASES = tuple(PROBABILITY_BASES)

#: The volume column that ranks the candidates of each basis.
BASIS_VOLUME = {"anomaly": "anomaly_melt_volume_km3", "total": "melt_volume_km3"}

#: Values of ``plume_match``: how a candidate's plume was found.
PLUME_MATCHES = ("centre inside", "within radius", "none")


def _label(mask: np.ndarray, *, periodic: bool) -> tuple[np.ndarray, int]:
    """Label 8-connected groups of True cells (joined across the seam when ``periodic``)."""
    from scipy import ndimage

    labels, n = ndimage.label(mask, structure=np.ones((3, 3), dtype=bool))
    if not periodic or n == 0 or mask.shape[1] < 2:
        return labels, n
    parent = np.arange(n + 1)

    def find(a: int) -> int:
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    left, right = labels[:, 0], labels[:, -1]
    height = mask.shape[0]
    for i in np.flatnonzero(left):
        for j in (i - 1, i, i + 1):
            if 0 <= j < height and right[j]:
                a, b = find(int(left[i])), find(int(right[j]))
                if a != b:
                    parent[max(a, b)] = min(a, b)
    roots = np.array([find(k) for k in range(n + 1)])
    _, relabel = np.unique(roots, return_inverse=True)
    return relabel[labels].astype(labels.dtype), int(relabel.max())


def _component_polygons(
    labels: np.ndarray, keep: np.ndarray, transform: Any
) -> dict[int, shapely.Geometry]:
    """Polygons (along cell edges, grid CRS) of the kept labels."""
    import shapely
    from rasterio.features import shapes

    kept = np.where(np.isin(labels, keep), labels, 0).astype(np.int32)
    pieces: dict[int, list[shapely.Geometry]] = {}
    for geom, value in shapes(kept, mask=kept > 0, transform=transform, connectivity=4):
        pieces.setdefault(int(value), []).append(shapely.geometry.shape(geom))
    out = {}
    for label, parts in pieces.items():
        g = parts[0] if len(parts) == 1 else shapely.union_all(parts)
        if not g.is_valid:
            g = shapely.make_valid(g)
        out[label] = g
    return out


def _as_float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def screen(
    run: RunDir | str | os.PathLike[str],
    *,
    min_melt_thickness_km: float | None = None,
    min_probability: float | None = None,
    probability: str | float | None = None,
    min_area_km2: float = 0.0,
    basis: str = "anomaly",
    min_age_ma: float | None = None,
) -> gpd.GeoDataFrame:
    """Find candidate regions: connected groups of cells that melt at least a threshold.

    Parameters
    ----------
    run : RunDir or path
        A run directory written by ``lidmelt run``.
    min_melt_thickness_km : float, optional
        A cell is a candidate cell when the basis's melt thickness >= this. Units: km; > 0.
        Give this, ``min_probability`` or both (a cell then passes both).
    min_probability : float, optional
        An ensemble run: a cell is a candidate cell when its probability (the map chosen by
        ``probability``) >= this. Dimensionless; 0 < P <= 1.
    probability : str or float, optional
        The probability map of ``basis``: None the run's own; a number T (km)
        ``melt_probability_<basis>_ge_<T>km``; or its name. Needs ``min_probability``.
    min_area_km2 : float
        Smallest area of a candidate region. Units: km^2; >= 0.
    basis : {"anomaly", "total"}
        ``"anomaly"``: the melt the thermal anomaly adds (``anomaly_melt_thickness_km``);
        ``"total"``: ``melt_thickness_km``.
    min_age_ma : float, optional
        Leave out cells whose plate age is below this (or unknown). Units: Ma; >= 0. Needs a
        run with a plate age.

    Returns
    -------
    geopandas.GeoDataFrame
        One row per candidate in the grid's CRS, ordered by the basis's melt volume (``rank``
        1 = largest): ``rank``, ``plume``, ``plume_match``, the statistics columns of the
        module notes, ``centroid_lon``, ``centroid_lat`` (WGS84 degrees), and (Multi)Polygon
        geometries along the cells' edges; with a probability map of the basis (screened, or
        the run's probability of melting) also ``probability_basis``,
        ``probability_threshold_km``, ``mean_probability``, ``max_probability`` and
        ``likely_area_km2`` (module notes). Empty (with these columns) when no region
        qualifies. ``attrs["lidmelt_basis"]`` holds the basis, ``attrs["lidmelt_probability"]``
        the probability map ("" without one).

    Raises
    ------
    lidmelt._errors.InputError
        If no threshold is given, a threshold is not a positive number (a probability not in
        (0, 1], the area or age negative), the basis is unknown, or ``min_age_ma`` is given
        for a run without a plate age.
    lidmelt._errors.RunDirError
        If ``run`` is not a run directory, has no melt_thickness_km, (basis ``"anomaly"``) no
        anomaly_melt_thickness_km, or (``min_probability``) no probability map of the basis and
        threshold (naming those it has).
    """
    limits = (min_melt_thickness_km, min_area_km2, min_probability, probability)
    thr, min_area, p_min = _check_thresholds(*limits)
    _check_basis(basis)
    run = smp.as_run(run)
    zones = Zones.load(run)
    grid = zones.grid
    values = _basis_values(zones, basis, run=run)
    prob_name, prob = _probability(run, grid, probability, basis, screening=p_min is not None)
    mask = np.ones(values.shape, dtype=bool) & _passing(values, thr) & _passing(prob, p_min)
    mask &= _melting(run, grid)
    if min_age_ma is not None:
        mask &= _old_enough(zones, min_age_ma, run=run)
    labels, n = _label(mask, periodic=grid.is_periodic)
    volume = BASIS_VOLUME[basis]
    records = _candidate_records(zones, labels, n, min_area, volume=volume, probability=prob)
    _match_plumes(records, labels, zones, run_plumes(run))
    polygons = _component_polygons(labels, np.array([r["label"] for r in records]), grid.affine)
    stats = [*zones.candidate_columns, *_what_probability(records, basis, prob_name)]
    out = _candidate_frame(records, stats, polygons, grid.pyproj_crs)
    out.attrs["lidmelt_basis"] = basis
    out.attrs["lidmelt_probability"] = prob_name
    return out


def _what_probability(records: list[dict[str, Any]], basis: str, name: str) -> tuple[str, ...]:
    """With a probability map ``name`` (else ""), give each record the probability's basis and
    threshold; return the probability columns (none without a map)."""
    if not name:
        return ()
    threshold = parse_ensemble_name(name).threshold_km
    for record in records:
        record.update(probability_basis=basis, probability_threshold_km=threshold)
    return _PROBABILITY_COLUMNS


def _candidate_frame(
    records: list[dict[str, Any]], stats: list[str], polygons: dict[int, Any], crs: Any
) -> gpd.GeoDataFrame:
    """The ranked candidates as a GeoDataFrame with the columns of :func:`screen`."""
    import geopandas as gpd

    columns = ["rank", "plume", "plume_match", *stats, "centroid_lon", "centroid_lat"]
    frame = pd.DataFrame(records, columns=["label", *columns[1:]])
    frame.insert(0, "rank", np.arange(1, len(frame) + 1, dtype="int64"))
    frame["n_cells"] = frame["n_cells"].astype("int64")
    frame[["plume", "plume_match"]] = frame[["plume", "plume_match"]].astype(object)
    geoms = [polygons[label] for label in frame["label"]]
    frame = frame.drop(columns="label")
    return gpd.GeoDataFrame(frame, geometry=gpd.GeoSeries(geoms, crs=crs), crs=crs)


def _check_thresholds(
    min_melt_thickness_km: Any, min_area_km2: Any, min_probability: Any, probability: Any
) -> tuple[float | None, float, float | None]:
    """The screening thresholds as floats (None: not given), or InputError."""
    if min_melt_thickness_km is None and min_probability is None:
        msg = (
            "screening needs a threshold: give --min-melt-thickness KM (the least melt "
            "thickness of a candidate cell, in km) or, for an ensemble run, --min-probability "
            "P (the least probability of melting, 0 < P <= 1), or both."
        )
        raise InputError(msg)
    if probability is not None and min_probability is None:
        msg = (
            f"--probability-of {probability!r} chooses the probability map to screen but no "
            "--min-probability P was given; add --min-probability (0 < P <= 1), e.g. 0.5."
        )
        raise InputError(msg)
    p_min = None if min_probability is None else _as_float(min_probability)
    if p_min is not None and not (np.isfinite(p_min) and 0 < p_min <= 1):
        msg = (
            f"--min-probability {min_probability!r} is not a probability in (0, 1]; expected "
            "the least fraction of ensemble members that melt in a candidate cell, e.g. 0.5 "
            "(more likely than not) or 0.9."
        )
        raise InputError(msg)
    thr = None if min_melt_thickness_km is None else _as_float(min_melt_thickness_km)
    if thr is not None and not (np.isfinite(thr) and thr > 0):
        msg = (
            f"--min-melt-thickness {min_melt_thickness_km!r} km is not a positive thickness; "
            "expected the least melt thickness of a candidate cell in km, e.g. 1.0 (use a "
            "small value such as 0.01 to take every melting cell)."
        )
        raise InputError(msg)
    min_area = _as_float(min_area_km2)
    if not (np.isfinite(min_area) and min_area >= 0):
        msg = (
            f"--min-area {min_area_km2!r} km^2 is not a non-negative area; expected the "
            "smallest candidate area in km^2, e.g. 5000 (0 keeps every region)."
        )
        raise InputError(msg)
    return thr, min_area, p_min


#: The regime class of cells that do not melt (the registry's).
_NO_MELTING = next(c.value for c in OUTPUTS["melting_regime"].classes if c.key == "no_melting")


def _melting(run: RunDir, grid: Any) -> np.ndarray | bool:
    """Cells whose melting regime is not "no melting" (a column below the least extracted
    melt fraction does not count, docs/physics.md); True everywhere without a regime grid."""
    if "melting_regime" not in run.outputs:
        return True
    regime = smp.load_variable(run, "melting_regime", grid)
    with np.errstate(invalid="ignore"):
        return np.isfinite(regime) & (regime != _NO_MELTING)


def _passing(values: np.ndarray | None, least: float | None) -> np.ndarray | bool:
    """Cells whose value is at least ``least`` (True everywhere when ``least`` is None)."""
    if least is None:
        return True
    with np.errstate(invalid="ignore"):
        return np.isfinite(values) & (values >= least)


def _probability(
    run: RunDir, grid: Any, probability: Any, basis: str, *, screening: bool
) -> tuple[str, np.ndarray | None]:
    """The probability map of ``basis`` screened (or, when not screening, the run's
    probability of melting of that basis if it has one) and its values; ``("", None)``
    without one."""
    if screening:
        name = ens.probability_grid(run, probability, basis)
    else:
        name = ens.run_probability(run, basis)
    if name is None:
        return "", None
    return name, smp.load_variable(run, name, grid)


def _check_basis(basis: Any) -> None:
    if basis not in BASES:
        msg = (
            f"screening basis {basis!r} is not known; expected one of {', '.join(BASES)}: "
            "'anomaly' (the melt the thermal anomaly adds, default) or 'total' (all melt)."
        )
        raise InputError(msg)


def _basis_values(zones: Zones, basis: str, *, run: RunDir) -> np.ndarray:
    """The melt thickness grid the basis screens (km)."""
    if basis == "total":
        return zones.melt
    if zones.anomaly_melt is None:
        msg = (
            f"run directory {str(run.path)!r} has no anomaly_melt_thickness_km output (it was "
            "written by an earlier lidmelt); screening on the anomaly basis (the default) needs "
            "the melt the thermal anomaly adds. Run 'lidmelt run' again with this version, or "
            "screen the total melt with --basis total (basis='total')."
        )
        raise RunDirError(msg)
    return zones.anomaly_melt


def _old_enough(zones: Zones, min_age_ma: Any, *, run: RunDir) -> np.ndarray:
    """Cells whose plate age is at least ``min_age_ma`` (unknown ages are left out)."""
    age = _as_float(min_age_ma)
    if not (np.isfinite(age) and age >= 0):
        msg = (
            f"--min-age {min_age_ma!r} Ma is not a non-negative plate age; expected the "
            "youngest seafloor to keep, in Ma (million years), e.g. 20."
        )
        raise InputError(msg)
    if zones.plate_age is None:
        msg = (
            f"--min-age {age:g} Ma needs the run's plate age, but {str(run.path)!r} has no "
            "input_plate_age_ma (its lid came from a lid-thickness grid or a constant). Drop "
            "--min-age, or run 'lidmelt run' with a plate-age grid ([inputs.plate_age])."
        )
        raise InputError(msg)
    with np.errstate(invalid="ignore"):
        return np.isfinite(zones.plate_age) & (zones.plate_age >= age)


def _candidate_records(
    zones: Zones,
    labels: np.ndarray,
    n: int,
    min_area: float,
    *,
    volume: str,
    probability: np.ndarray | None = None,
) -> list[dict[str, Any]]:
    """Statistics and centroid of each labelled region of at least ``min_area`` km^2, ordered
    by the ``volume`` column (then area, then label); each keeps its cells' flat indices.
    With a ``probability`` grid, each also gets its probability statistics."""
    flat_labels = labels.ravel()
    cells = np.flatnonzero(flat_labels)
    order = np.argsort(flat_labels[cells], kind="stable")
    cells = cells[order]
    bounds = np.searchsorted(flat_labels[cells], np.arange(1, n + 2))
    records: list[dict[str, Any]] = []
    for label in range(1, n + 1):
        flat = cells[bounds[label - 1] : bounds[label]]
        stats = zones.candidate_stats(flat)
        if stats["data_area_km2"] < min_area:
            continue
        if probability is not None:
            stats.update(ens.probability_statistics(probability, flat, zones.areas(flat)))
        lon, lat = zones.centroid_lonlat(flat)
        if zones.grid.is_geographic:  # the grid's own longitude convention (0..360 stays so)
            lon = float(zones.grid.wrap_x(np.array(lon)))
        records.append(
            {
                "label": label,
                "area_km2": stats["data_area_km2"],
                **stats,
                "centroid_lon": lon,
                "centroid_lat": lat,
                "cells": flat,
            }
        )
    records.sort(key=lambda r: (-r[volume], -r["area_km2"], r["label"]))
    return records


def run_plumes(run: RunDir | dict[str, Any]) -> list[dict[str, Any]]:
    """The workflow plumes of a run (``summary.json``, or the run's input provenance as a
    dict), each with a ``name`` ("plume N" when the workflow gave none); plumes lacking a
    centre or radius are skipped."""
    inputs = run if isinstance(run, dict) else run.summary.get("inputs")
    entry = (inputs or {}).get("thermal_anomaly_k") or {}
    plumes = []
    for k, p in enumerate(entry.get("plumes") or [], start=1):
        try:
            lon, lat = float(p["longitude"]), float(p["latitude"])
            radius = float(p["radius_km"])
        except (KeyError, TypeError, ValueError):
            continue
        name = str(p.get("name") or f"plume {k}")
        plumes.append({"name": name, "longitude": lon, "latitude": lat, "radius_km": radius})
    return plumes


def _match_plumes(
    records: list[dict[str, Any]], labels: np.ndarray, zones: Zones, plumes: list[dict[str, Any]]
) -> None:
    """Set ``plume`` and ``plume_match`` of each record (rule in the module notes)."""
    grid = zones.grid
    inside_label = np.zeros(len(plumes), dtype=np.int64)
    if plumes:
        lon = np.array([p["longitude"] for p in plumes])
        lat = np.array([p["latitude"] for p in plumes])
        gx, gy = grid.to_grid_xy(lon, lat, WGS84)
        stencil = smp.make_stencil(grid, gx, gy, method="nearest")
        inside_label = np.where(stencil.inside, labels.ravel()[stencil.nearest], 0)
    edge = _edge_cells(labels > 0)
    for record in records:
        cells, label = record.pop("cells"), record["label"]
        names = [p["name"] for p, at in zip(plumes, inside_label, strict=True) if at == label]
        if names:
            record["plume"], record["plume_match"] = ", ".join(names), PLUME_MATCHES[0]
            continue
        record["plume"], record["plume_match"] = "", PLUME_MATCHES[2]
        border = cells[edge.ravel()[cells]]
        rows, cols = np.divmod(border, grid.width)
        clon, clat = grid.cell_centres_lonlat(rows, cols)
        best = math.inf
        for p in plumes:
            _, _, dist_m = GEOD.inv(
                np.full(clon.shape, p["longitude"]), np.full(clat.shape, p["latitude"]), clon, clat
            )
            dist_km = float(np.min(dist_m)) / 1000.0 if np.size(dist_m) else math.inf
            if dist_km <= p["radius_km"] and dist_km < best:
                best = dist_km
                record["plume"], record["plume_match"] = p["name"], PLUME_MATCHES[1]


def _edge_cells(mask: np.ndarray) -> np.ndarray:
    """Cells of ``mask`` with a 4-neighbour outside it (or on the grid's edge): the cells where
    the geodesic distance from an outside point to the region is smallest."""
    from scipy import ndimage

    return mask & ~ndimage.binary_erosion(mask, border_value=0)


#: The fields of a screening record an ensemble candidate keeps in the summary.
_ENSEMBLE_FIELDS = ("rank", "plume", "plume_match", "n_cells", "area_km2", "melt_volume_km3",
                    "anomaly_melt_volume_km3", "centroid_lon", "centroid_lat")  # fmt: skip


def _staged_grid(run_dir: Path, name: str) -> np.ndarray:
    """A run's output GeoTIFF as float64 with NaN nodata (read before the run is sealed)."""
    import rasterio

    with rasterio.open(run_dir / rundir.output_file(name)) as src:
        return src.read(1, masked=True).astype(np.float64).filled(np.nan)


def ensemble_candidates(context: Any) -> Candidates:
    """The candidates of an ensemble's deterministic run (module notes, Ensemble candidates).

    ``context`` is the ensemble stage's :class:`lidmelt._engine.StageContext`: the outputs are in
    its (staging) ``run_dir``, the plumes in its inputs' provenance. A run that does not write
    melt_thickness_km and anomaly_melt_thickness_km has no candidates (the summary says why).
    """
    cfg, grid = context.cfg, context.target
    threshold = float(cfg.ensemble.candidate_min_melt_km)
    screening = {"basis": "anomaly", "min_melt_thickness_km": threshold, "min_area_km2": 0.0}
    wanted = (smp.REFERENCE_VARIABLE, ANOMALY_MELT_VARIABLE)
    missing = [n for n in wanted if n not in cfg.outputs.variables]
    if missing:
        note = f"no candidates: the run does not write {', '.join(missing)} (outputs.variables)"
        return Candidates(np.zeros((0, 0), np.int32), (), {**screening, "found": 0, "note": note})
    melt, anomaly = (_staged_grid(context.run_dir, n) for n in wanted)
    zones = Zones(grid=grid, melt=melt, onset=None, anomaly=None, anomaly_melt=anomaly,
                  row_areas=row_areas_km2(grid) if grid.is_geographic else None)  # fmt: skip
    mask = np.asarray(_passing(anomaly, threshold))
    if "melting_regime" in cfg.outputs.variables:  # as screen: "no melting" cells never count
        regime = _staged_grid(context.run_dir, "melting_regime")
        mask = mask & np.isfinite(regime) & (regime != _NO_MELTING)
    labels, n = _label(mask, periodic=grid.is_periodic)
    records = _candidate_records(zones, labels, n, 0.0, volume=BASIS_VOLUME["anomaly"])
    kept = records[: int(cfg.ensemble.candidates)]
    _match_plumes(kept, labels, zones, run_plumes(context.inputs.provenance))
    ranks = np.zeros(n + 1, np.min_scalar_type(len(kept)))  # uint8 for up to 255 candidates
    for rank, record in enumerate(kept, start=1):
        ranks[record["label"]] = rank
        record["rank"] = rank
    out = tuple({k: _json_value(record[k]) for k in _ENSEMBLE_FIELDS} for record in kept)
    return Candidates(ranks[labels], out, {**screening, "found": len(records)})


def _json_value(value: Any) -> Any:
    """A plain Python value (numpy scalars converted)."""
    return value.item() if isinstance(value, np.generic) else value
