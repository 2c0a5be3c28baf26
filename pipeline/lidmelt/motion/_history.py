"""Melting through time, one chunk at a time: every cell's column at every step, reduced at once.

Definitions (lidmelt's own; docs/workflow.md, ``[motion]``, says why):

- A cell is a point of today's plate. At time t its position in the plumes' frame is R(t)
  applied to its position today (:mod:`lidmelt.motion._rotations`).
- Its plate age then is today's age minus t; where that is negative the seafloor did not yet
  exist (the plume was beneath another plate or a ridge): the step gives the cell nothing.
- Its lid then is the cooling model's lid at the age then, through the same kernel as a
  single run (:func:`lidmelt._engine.evaluate_chunk`, with the water load of the age then).
- Its thermal anomaly then is each plume's profile (:func:`lidmelt.grids._anomaly.plume_profile`)
  at the great-circle distance, on a sphere of radius
  :data:`lidmelt.motion._rotations.EARTH_RADIUS_KM`, between the cell and the plume's track
  point of time t (equal to the distance between the cell's position then and the plume:
  rotations keep distances on the sphere), plus the workflow's anomaly grid and constant,
  which describe the mantle and so stay in the plumes' frame: the grid is sampled (bilinear,
  its edge values beyond its bounds) at the cell's position then. The water and the upwelling
  (a plume's upwelling around its track point) are treated the same way.
- The step at t = 0 is today's run itself: the same inputs, the WGS 84 geodesic distances of
  :func:`lidmelt.grids._anomaly.plume_anomaly` (the sphere's distances differ from them by up
  to about 0.5 %), so the history's present equals the run's outputs.
- Reductions over the steps (memory does not grow with their number): the largest melt
  thickness and the time it was reached (the most recent of equal values), the same for the
  melt the anomaly adds, the time during which the melt the anomaly adds was at least the
  threshold with a melt fraction at the top of melting of at least
  :data:`lidmelt.physics.EXTRACTION_MIN_MELT_FRACTION` (each step stands for the time within
  half a step of it, :func:`lidmelt.motion._plan.step_weights`), and with an upwelling input the
  time integral of the melt production (mm/yr x Myr = km: the melt thickness produced). The
  time of the largest melt is NaN where nothing melted; the time of the largest melt the
  anomaly added is NaN where that melt never reached the threshold (a few metres added beneath
  young seafloor by a plume's far tail have no time worth mapping).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from scipy.ndimage import map_coordinates
from scipy.spatial.transform import Rotation

from lidmelt._engine import ChunkInputs, KernelSettings, evaluate_chunk
from lidmelt._variables import HISTORY, OUTPUTS
from lidmelt.grids._grid import Grid
from lidmelt.motion._geometry import SHAPE_CODES, SampledField, add_plumes, sample_rotated
from lidmelt.motion._plan import DEFAULT_PLATE, PlumeTrack
from lidmelt.motion._rotations import EARTH_RADIUS_KM, unit_vectors
from lidmelt.physics._evaluate import EXTRACTION_MIN_MELT_FRACTION

_INDEX = {name: list(OUTPUTS).index(name) for name in OUTPUTS}


@dataclass(frozen=True, eq=False)
class FrameField:
    """A property of the mantle, fixed in the plumes' frame: a constant, or a grid on the run's
    grid (``values``, float32) sampled at positions (bilinear; beyond the grid its edge values,
    :func:`scipy.ndimage.map_coordinates` mode ``"nearest"``).

    A grid that departs from its ``baseline`` (its median) only inside a spherical cap (unit
    vector ``cap_centre``, cosine ``cap_cos`` of its radius, widened by a cell diagonal for the
    bilinear neighbours) is sampled only at positions inside the cap; everywhere else it is the
    baseline. A grid departing from its baseline on its border has no cap (``cap_cos`` -2).
    """

    constant: float
    values: np.ndarray | None = None
    baseline: float = 0.0
    cap_centre: np.ndarray | None = None
    cap_cos: float = -2.0

    @classmethod
    def from_grid(cls, grid: Grid, values: np.ndarray) -> FrameField:
        """The field of a grid on ``grid`` (its cap, if it has one)."""
        values = np.asarray(values, np.float32)
        finite = values[np.isfinite(values)]
        baseline = float(np.median(finite)) if finite.size else 0.0
        away = ~(values == baseline)
        border = np.concatenate([away[0], away[-1], away[:, 0], away[:, -1]])
        if not away.any():
            return cls(0.0, values, baseline, np.array([0.0, 0.0, 1.0]), 2.0)
        if border.any():
            return cls(0.0, values, baseline)
        rows, cols = np.nonzero(away)
        lon, lat = grid.lonlat_centres()
        units = unit_vectors(lon[rows, cols], lat[rows, cols])
        centre = units.sum(axis=0)
        if np.linalg.norm(centre) < 1e-9:
            return cls(0.0, values, baseline)
        centre /= np.linalg.norm(centre)
        dx, dy = grid.resolution
        step = np.radians(np.hypot(dx, dy)) if grid.is_geographic else np.pi  # no cap if not
        angle = float(np.arccos(np.clip(np.min(units @ centre), -1.0, 1.0))) + 2.0 * step
        cap_cos = float(np.cos(angle)) if angle < np.pi else -2.0
        return cls(0.0, values, baseline, centre, cap_cos)

    def at(
        self,
        grid: Grid,
        xyz: np.ndarray,
        rotation: Rotation,
        bounds: tuple | None = None,
        alive: np.ndarray | None = None,
    ) -> np.ndarray | float:
        """The field at the positions ``rotation`` gives the unit vectors ``xyz`` (n, 3); with
        ``bounds`` (a cap around them: unit centre, angle) a cap out of reach costs nothing;
        with ``alive`` (n, bool) cells not alive may get the baseline instead (on a geographic
        grid they do: the history's cells without seafloor then, which the kernel ignores)."""
        if self.values is None:
            return self.constant
        if self.cap_cos > 1.0:  # a grid equal to its baseline everywhere
            return self.baseline
        matrix = rotation.as_matrix()
        seen, cap_cos = np.zeros(3), -2.0
        if self.cap_centre is not None:
            seen, cap_cos = matrix.T @ self.cap_centre, self.cap_cos  # the cap on today's plate
            if bounds is not None and _apart(bounds, seen, np.arccos(max(cap_cos, -1.0))):
                return self.baseline
        if grid.is_geographic:  # one compiled loop over the cells (lidmelt.motion._geometry)
            a, _, c, _, e, f = grid.transform
            out = np.empty(len(xyz))
            alive = np.ones(len(xyz), bool) if alive is None else alive
            field = SampledField(self.values, np.array([a, c, e, f], float),
                                 float(grid.x_centre), seen, cap_cos, self.baseline)  # fmt: skip
            sample_rotated(xyz, alive, matrix, field, out)
            return out
        out = np.full(len(xyz), self.baseline)
        if self.cap_centre is not None:
            near = np.flatnonzero(xyz @ seen >= cap_cos)
            if not near.size:
                return self.baseline
            xyz = xyz[near]
        else:
            near = slice(None)
        # the positions then, row by row of the matrix (three products, no threaded gemm)
        x, y, z = (xyz @ row for row in matrix)
        # latitude from z alone (arcsin of a unit vector's z: within 1e-6 degree of the
        # arctangent form even at the poles, where a grid's bilinear weights do not need more)
        lon, lat = np.degrees(np.arctan2(y, x)), np.degrees(np.arcsin(np.clip(z, -1.0, 1.0)))
        row, col = grid.fractional_index(*grid.to_grid_xy(lon, lat, "EPSG:4326"))
        out[near] = map_coordinates(self.values, [row, col], order=1, mode="nearest",
                                    prefilter=False)  # fmt: skip
        return out


def history_layers(upwelling: bool) -> list[str]:
    """The history's outputs (:data:`lidmelt._variables.HISTORY`), in order; the time integral
    of the melt production only with an upwelling input."""
    return [n for n, v in HISTORY.items() if not v.needs or upwelling]


@dataclass(frozen=True, eq=False)
class HistoryPlan:
    """What every chunk of a history needs.

    ``scalars`` holds per kernel input (:func:`lidmelt._engine.kernel_arguments`) today's
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
    clock: dict[str, float] = field(default_factory=dict)  # the kernel's thread seconds
    #: today's outputs the reductions need, as the run wrote them (the step t = 0 read from
    #: them, not computed again); None: the step t = 0 goes through the kernel with today's
    #: input blocks
    today_files: dict[str, Path] | None = None


def _apart(bounds: tuple, point: np.ndarray, reach: float) -> bool:
    """Whether every cell within ``bounds`` (unit centre, angle) lies farther than ``reach``
    (radians) from the unit vector ``point``."""
    centre, angle = bounds
    return float(np.arccos(np.clip(centre @ point, -1.0, 1.0))) > reach + angle


def cells_cap(xyz: np.ndarray) -> tuple[np.ndarray, float]:
    """A cap holding the unit vectors ``xyz`` (n, 3): its unit centre and angle (radians)."""
    centre = xyz.sum(axis=0)
    norm = np.linalg.norm(centre)
    if norm < 1e-9:
        return np.array([0.0, 0.0, 1.0]), np.pi
    centre /= norm
    return centre, float(np.arccos(np.clip(np.min(xyz @ centre), -1.0, 1.0))) + 1e-9


def frame_inputs(
    plan: HistoryPlan,
    xyz: np.ndarray,
    plate: int,
    k: int,
    bounds: tuple | None = None,
    alive: np.ndarray | None = None,
) -> list:
    """The anomaly, water and upwelling (K, wt%, mm/yr) of cells ``xyz`` (n, 3) on ``plate`` at
    step ``k``: the mantle's fields at their positions then, plus the plumes around their track
    points on that plate; ``bounds`` (:func:`cells_cap` of ``xyz``) spares the plumes and
    fields out of reach; ``alive`` (n, bool; default all) the cells not alive (no seafloor
    then: the kernel gives them nothing whatever their inputs), which keep the fields'
    baselines."""
    rotation = plan.rotations[plate][k]
    n = xyz.shape[0]
    alive = np.ones(n, bool) if alive is None else alive
    at = {name: f.at(plan.grid, xyz, rotation, bounds, alive) for name, f in plan.fields.items()}
    anomaly = _writable(at["thermal_anomaly_k"], n)
    water = at["water_wt_pct"]
    up = _writable(at["upwelling_mm_yr"], n) if plan.upwelling else 0.0
    tracks = [t for t in plan.plumes if plate in t.tracks]
    if bounds is not None:
        tracks = [t for t in tracks if not _apart(bounds, t.tracks[plate][k], t.reach_rad)]
    if not tracks:
        return [anomaly, water, up]
    points = np.array([t.tracks[plate][k] for t in tracks])
    params = np.array([t.profile_params for t in tracks])
    if not plan.upwelling:
        params[:, 4] = 0.0
    shapes = np.array([SHAPE_CODES[t.plume.shape] for t in tracks], np.int64)
    # one compiled loop over the cells, every plume's distance and profile in it
    add_plumes(xyz, alive, points, params, shapes, EARTH_RADIUS_KM, anomaly,
               up if plan.upwelling else anomaly[:0])  # fmt: skip
    return [anomaly, water, up]


def _writable(value, n: int) -> np.ndarray:
    """``value`` (a number or an array of n) as a new float64 array of n."""
    if np.ndim(value):
        return np.asarray(value, float).copy()
    return np.full(n, float(value))


def _today(plan: HistoryPlan, blocks, shape) -> list:
    it = iter(blocks)
    vals = [next(it) if s is None else s for s in plan.scalars]
    vals[0] = np.broadcast_to(vals[0], shape)
    return vals


def _step_inputs(plan, today, xyz, groups, k, shape) -> list:
    """The kernel's inputs at step ``k`` > 0: age then (NaN before the seafloor formed), no lid
    grid, the frame inputs of each plate's cells (``groups``: plate id and its cells, a flat
    index array or None for all; NaN for cells without rotations)."""
    age = np.broadcast_to(np.asarray(today[0], float), shape) - plan.times[k]
    alive = age >= 0.0  # False where NaN: no seafloor then, no lid, nothing from the kernel
    age[~alive] = np.nan
    alive = alive.ravel()
    if len(groups) == 1 and groups[0][1] is None:
        values = frame_inputs(plan, xyz, groups[0][0], k, groups[0][2], alive)
        fields = [np.reshape(v, shape) if np.ndim(v) else v for v in values]
    else:
        fields = [np.full(shape, np.nan) for _ in range(3)]
        for plate, cells, bounds in groups:
            values = frame_inputs(plan, xyz[cells], plate, k, bounds, alive[cells])
            for out, value in zip(fields, values, strict=True):
                out.ravel()[cells] = value
    if not plan.upwelling:
        fields[2] = 0.0
    return [age, np.nan, *fields, np.nan]


def _plate_groups(plan: HistoryPlan, plates, xyz: np.ndarray) -> list[tuple]:
    """Each plate of the chunk with rotations, its cells (flat indices; None: every cell) and
    their cap (:func:`cells_cap`)."""
    if plates is None:
        return [(DEFAULT_PLATE, None, cells_cap(xyz))]
    flat = np.asarray(plates).ravel()
    known = np.isin(flat, list(plan.rotations))
    fallback = DEFAULT_PLATE if DEFAULT_PLATE in plan.rotations else None
    flat = np.where(known, flat, -2 if fallback is None else fallback)
    groups = []
    for plate in np.unique(flat):
        if plate in plan.rotations:
            cells = np.flatnonzero(flat == plate)
            groups.append((int(plate), cells, cells_cap(xyz[cells])))
    return groups


def reduce_history(plan: HistoryPlan, window: tuple[int, int, int, int], blocks, plates=None):
    """Every step of one chunk reduced (module notes): (n_layers, y, x) float32 in the order of
    :func:`history_layers`. ``window`` is (row0, row1, col0, col1) of the chunk in the grid;
    ``blocks`` today's kernel input blocks; ``plates`` the plate id of each cell, or None."""
    r0, r1, c0, c1 = window
    shape = (r1 - r0, c1 - c0)
    lon, lat = plan.grid.lonlat_centres(rows=slice(r0, r1), cols=slice(c0, c1))
    xyz = unit_vectors(lon, lat).reshape(-1, 3)
    groups = _plate_groups(plan, plates, xyz)
    today = _today(plan, blocks, shape)
    acc = _Reduction(shape, plan)
    for k, t in enumerate(plan.times):
        if k == 0 and plan.today_files is not None:
            out = _read_today(plan.today_files, window)
        elif k == 0:
            out = evaluate_chunk(ChunkInputs(*today), settings=plan.settings, clock=plan.clock)
        else:
            vals = _step_inputs(plan, today, xyz, groups, k, shape)
            out = evaluate_chunk(ChunkInputs(*vals), settings=plan.settings, check_inputs=False,
                                 clock=plan.clock)  # fmt: skip
        acc.add(out, float(t), float(plan.weights[k]))
    return acc.layers()


#: Today's outputs the reductions read (the last with an upwelling input).
TODAY_NEEDED = (
    "melt_thickness_km", "anomaly_melt_thickness_km", "max_melt_fraction", "melt_production_mm_yr",
)  # fmt: skip


def _read_today(files: dict[str, Path], window: tuple[int, int, int, int]) -> np.ndarray:
    """Today's outputs of one chunk from the run's files, in the kernel's rows (others NaN)."""
    import rasterio
    from rasterio.windows import Window

    r0, r1, c0, c1 = window
    out = np.full((len(OUTPUTS) + 1, r1 - r0, c1 - c0), np.nan, np.float32)
    for name, path in files.items():
        with rasterio.open(path) as src:
            out[_INDEX[name]] = src.read(1, window=Window(c0, r0, c1 - c0, r1 - r0))
    return out


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
