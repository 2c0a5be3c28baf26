"""Melting through time, one chunk at a time: every cell's column at every step, reduced at once.

Definitions (lidmelt's own; docs/workflow.md, ``[motion]``, says why):

- A cell is a point of today's plate. At time t its position in the plumes' frame is R(t)
  applied to its position today (:mod:`lidmelt.motion.rotations`).
- Its plate age then is today's age minus t; where that is negative the seafloor did not yet
  exist (the plume was beneath another plate or a ridge): the step gives the cell nothing.
- Its lid then is the cooling model's lid at the age then, through the same kernel as a
  single run (:func:`lidmelt.engine.evaluate_chunk`, with the water load of the age then).
- Its thermal anomaly then is each plume's profile (:func:`lidmelt.grids.anomaly.plume_profile`)
  at the great-circle distance, on a sphere of radius
  :data:`lidmelt.motion.rotations.EARTH_RADIUS_KM`, between the cell and the plume's track
  point of time t (equal to the distance between the cell's position then and the plume:
  rotations keep distances on the sphere), plus the workflow's anomaly grid and constant,
  which describe the mantle and so stay in the plumes' frame: the grid is sampled (bilinear,
  its edge values beyond its bounds) at the cell's position then. The water and the upwelling
  (a plume's upwelling around its track point) are treated the same way.
- The step at t = 0 is today's run itself: the same inputs, the WGS 84 geodesic distances of
  :func:`lidmelt.grids.anomaly.plume_anomaly` (the sphere's distances differ from them by up
  to about 0.5 %), so the history's present equals the run's outputs.
- Reductions over the steps (memory does not grow with their number): the largest melt
  thickness and the time it was reached (the most recent of equal values), the same for the
  melt the anomaly adds, the time during which the melt the anomaly adds was at least the
  threshold with a melt fraction at the top of melting of at least
  :data:`lidmelt.physics.EXTRACTION_MIN_MELT_FRACTION` (each step stands for the time within
  half a step of it, :func:`lidmelt.motion.plan.step_weights`), and with an upwelling input the
  time integral of the melt production (mm/yr x Myr = km: the melt thickness produced). The
  time of the largest melt is NaN where nothing melted; the time of the largest melt the
  anomaly added is NaN where that melt never reached the threshold (a few metres added beneath
  young seafloor by a plume's far tail have no time worth mapping).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy.ndimage import map_coordinates
from scipy.spatial.transform import Rotation

from lidmelt.engine import KernelSettings, evaluate_chunk
from lidmelt.grids.anomaly import plume_profile
from lidmelt.grids.grid import Grid
from lidmelt.motion.plan import DEFAULT_PLATE, PlumeTrack, reach_cosine
from lidmelt.motion.rotations import EARTH_RADIUS_KM, lonlat, unit_vectors
from lidmelt.physics import EXTRACTION_MIN_MELT_FRACTION
from lidmelt.variables import HISTORY, OUTPUTS

__all__ = ["FrameField", "HistoryPlan", "frame_inputs", "history_layers", "reduce_history"]

_INDEX = {name: list(OUTPUTS).index(name) for name in OUTPUTS}


@dataclass(frozen=True, eq=False)
class FrameField:
    """A property of the mantle, fixed in the plumes' frame: a constant, or a grid on the run's
    grid (``values``, float32) sampled at positions (bilinear; beyond the grid its edge values,
    :func:`scipy.ndimage.map_coordinates` mode ``"nearest"``)."""

    constant: float
    values: np.ndarray | None = None

    def at(self, grid: Grid, lon: np.ndarray, lat: np.ndarray) -> np.ndarray | float:
        """The field at longitudes and latitudes (degrees)."""
        if self.values is None:
            return self.constant
        gx, gy = grid.to_grid_xy(lon, lat, "EPSG:4326")
        row, col = grid.fractional_index(gx, gy)
        return map_coordinates(self.values, [row, col], order=1, mode="nearest", prefilter=False)


def history_layers(upwelling: bool) -> list[str]:
    """The history's outputs (:data:`lidmelt.variables.HISTORY`), in order; the time integral
    of the melt production only with an upwelling input."""
    return [n for n, v in HISTORY.items() if not v.needs or upwelling]


@dataclass(frozen=True, eq=False)
class HistoryPlan:
    """What every chunk of a history needs.

    ``scalars`` holds per kernel input (:func:`lidmelt.engine.kernel_arguments`) today's
    constant, or None where a block is passed; ``rotations`` per plate id R(t) at every time;
    ``fields`` the mantle's anomaly, water and upwelling (:class:`FrameField`) without the
    plumes.
    """

    settings: KernelSettings
    grid: Grid
    times: np.ndarray
    weights: np.ndarray
    rotations: dict[int, Rotation]
    plumes: tuple[PlumeTrack, ...]
    fields: dict[str, FrameField]
    scalars: tuple[Any, ...]
    threshold_km: float
    upwelling: bool


def frame_inputs(plan: HistoryPlan, xyz: np.ndarray, plate: int, k: int) -> list:
    """The anomaly, water and upwelling (K, wt%, mm/yr) of cells ``xyz`` (n, 3) on ``plate`` at
    step ``k``: the mantle's fields at their positions then, plus the plumes around their track
    points on that plate."""
    needs_position = any(f.values is not None for f in plan.fields.values())
    where = lonlat(plan.rotations[plate][k].apply(xyz)) if needs_position else (None, None)
    out = [plan.fields[n].at(plan.grid, *where) for n in ("thermal_anomaly_k", "water_wt_pct")]
    up = plan.fields["upwelling_mm_yr"].at(plan.grid, *where) if plan.upwelling else 0.0
    anomaly = np.broadcast_to(np.asarray(out[0], float), xyz.shape[:1]).copy()
    up = np.broadcast_to(np.asarray(up, float), xyz.shape[:1]).copy() if plan.upwelling else up
    for track in plan.plumes:
        if plate not in track.tracks:
            continue
        cos_d = xyz @ track.tracks[plate][k]
        near = cos_d >= reach_cosine(track.plume, EARTH_RADIUS_KM)
        if not near.any():
            continue
        dist = EARTH_RADIUS_KM * np.arccos(np.clip(cos_d[near], -1.0, 1.0))
        unit = plume_profile(dist, replace(track.plume, peak_excess_k=1.0))
        anomaly[near] += track.plume.peak_excess_k * unit
        if plan.upwelling and track.upwelling is not None:
            up[near] += track.upwelling * unit
    return [anomaly, out[1], up]


def _today(plan: HistoryPlan, blocks, shape) -> list:
    it = iter(blocks)
    vals = [next(it) if s is None else s for s in plan.scalars]
    vals[0] = np.broadcast_to(vals[0], shape)
    return vals


def _step_inputs(plan, today, xyz, plates, k, shape) -> list:
    """The kernel's inputs at step ``k`` > 0: age then (NaN before the seafloor formed), no lid
    grid, the frame inputs of each plate's cells (NaN for cells without rotations)."""
    age = np.asarray(today[0], float) - plan.times[k]
    age = np.where(age >= 0.0, age, np.nan)
    fields = [np.full(shape, np.nan) for _ in range(3)]
    for plate in np.unique(plates):
        if plate not in plan.rotations:
            continue
        mask = plates == plate
        values = frame_inputs(plan, xyz[mask.ravel()], int(plate), k)
        for field, value in zip(fields, values, strict=True):
            field[mask] = value
    if not plan.upwelling:
        fields[2] = 0.0
    return [age, np.nan, *fields, np.nan]


def reduce_history(plan: HistoryPlan, window: tuple[int, int, int, int], blocks, plates=None):
    """Every step of one chunk reduced (module notes): (n_layers, y, x) float32 in the order of
    :func:`history_layers`. ``window`` is (row0, row1, col0, col1) of the chunk in the grid;
    ``blocks`` today's kernel input blocks; ``plates`` the plate id of each cell, or None."""
    r0, r1, c0, c1 = window
    shape = (r1 - r0, c1 - c0)
    lon, lat = plan.grid.lonlat_centres(rows=slice(r0, r1), cols=slice(c0, c1))
    xyz = unit_vectors(lon, lat).reshape(-1, 3)
    if plates is None:
        plates = np.full(shape, DEFAULT_PLATE)
    else:
        known = np.isin(plates, list(plan.rotations))
        plates = np.where(known, plates, DEFAULT_PLATE if DEFAULT_PLATE in plan.rotations else -2)
    today = _today(plan, blocks, shape)
    acc = _Reduction(shape, plan)
    for k, t in enumerate(plan.times):
        if k == 0:
            out = evaluate_chunk(*today, settings=plan.settings)
        else:
            vals = _step_inputs(plan, today, xyz, plates, k, shape)
            out = evaluate_chunk(*vals, settings=plan.settings, check_inputs=False)
        acc.add(out, float(t), float(plan.weights[k]))
    return acc.layers()


class _Reduction:
    """The running reductions of one chunk over the steps (module notes)."""

    def __init__(self, shape, plan: HistoryPlan) -> None:
        nan = np.full(shape, np.nan)
        self.peak, self.peak_t, self.apeak, self.apeak_t = (nan.copy() for _ in range(4))
        self.duration, self.produced = np.zeros(shape), np.zeros(shape)
        self.valid = np.zeros(shape, bool)
        self.threshold = np.float32(plan.threshold_km)
        self.plan = plan

    def add(self, out: np.ndarray, t: float, weight: float) -> None:
        h = out[_INDEX["melt_thickness_km"]]
        a = out[_INDEX["anomaly_melt_thickness_km"]]
        ok = np.isfinite(h)
        self.valid |= ok
        for value, peak, when in ((h, self.peak, self.peak_t), (a, self.apeak, self.apeak_t)):
            with np.errstate(invalid="ignore"):
                better = np.isfinite(value) & ~(value <= peak)
            peak[better] = value[better]
            when[better] = t
        f = out[_INDEX["max_melt_fraction"]]
        with np.errstate(invalid="ignore"):
            melting = ok & (a >= self.threshold) & (f >= np.float32(EXTRACTION_MIN_MELT_FRACTION))
        self.duration += weight * melting
        if self.plan.upwelling:
            self.produced += weight * np.nan_to_num(out[_INDEX["melt_production_mm_yr"]])

    def layers(self) -> np.ndarray:
        pairs = ((self.peak, self.peak_t, 0.0), (self.apeak, self.apeak_t, self.threshold))
        for peak, when, least in pairs:
            when[~((peak > 0) & (peak >= least))] = np.nan
        layers = [self.peak, self.peak_t, self.apeak, self.apeak_t, self.duration]
        if self.plan.upwelling:
            layers.append(self.produced)  # mm/yr x Myr = km
        stack = np.stack(layers).astype(np.float32)
        stack[4:, ~self.valid] = np.nan
        return stack
