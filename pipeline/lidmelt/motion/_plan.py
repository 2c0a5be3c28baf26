"""What a history needs before the grid is touched: its times, each plate's rotations, each
plume's position and hotspot track at every time (docs/workflow.md, ``[motion]``).

The plumes are fixed in the plumes' frame, or drift along great circles between the rows of the
drift table (:func:`lidmelt.motion._rotations.slerp_positions`). A plume's track on a plate is
R(t)^-1 applied to its position at t (:meth:`lidmelt.motion._rotations.RotationHistory.track`).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from lidmelt.grids._anomaly import Plume
from lidmelt.motion._rotations import (
    EARTH_RADIUS_KM,
    RotationHistory,
    slerp_positions,
    unit_vectors,
)

#: The key of the rotations that serve every cell without a plate id of its own.
DEFAULT_PLATE = -1


def history_times(motion) -> np.ndarray:
    """The times of the history (Ma): 0, step, 2 step, ..., max_age_ma."""
    steps = round(motion.max_age_ma / motion.step_ma)
    return np.arange(steps + 1) * motion.step_ma


def step_weights(times: np.ndarray) -> np.ndarray:
    """The time each step stands for (Myr): the time within half a step of it, within the
    history (the trapezoid rule; common practice), so a quantity held at every step sums to
    its value times max_age_ma."""
    if len(times) == 1:
        return np.ones(1)
    edges = np.concatenate([[times[0]], 0.5 * (times[1:] + times[:-1]), [times[-1]]])
    return np.diff(edges)


def histories(motion) -> dict[int, RotationHistory]:
    """Each plate's rotation history by plate id (:data:`DEFAULT_PLATE`: ``motion.rotations``)."""
    out = {}
    tables = [(DEFAULT_PLATE, motion.rotations)] if motion.rotations else []
    tables += [(plate, rows) for plate, _, rows in motion.plate_rotations]
    for plate, rows in tables:
        ages, lat, lon, angle = (np.array(c, float) for c in zip(*rows, strict=True))
        out[plate] = RotationHistory.from_rows(ages, lat, lon, angle)
    return out


def plume_positions(motion, name: str, plume, times) -> tuple[np.ndarray, np.ndarray]:
    """The plume's longitude and latitude at ``times`` (degrees): its drift, or fixed."""
    times = np.asarray(times, float)
    for drift_name, ages, lon, lat in motion.drift:
        if drift_name == name:
            return slerp_positions(ages, lon, lat, times)
    return np.full(times.shape, plume.longitude), np.full(times.shape, plume.latitude)


@dataclass(frozen=True, eq=False)
class PlumeTrack:
    """One plume through the history.

    ``plume`` is its thermal anomaly (shape, radius, peak excess); ``upwelling`` its peak
    upwelling (mm/yr) or None; ``lon``/``lat`` its position in the plumes' frame at each time;
    ``tracks`` per plate id the unit vectors (T, 3) of its track on that plate.
    """

    name: str
    plume: Plume
    upwelling: float | None
    lon: np.ndarray
    lat: np.ndarray
    tracks: dict[int, np.ndarray]

    @cached_property
    def reach_rad(self) -> float:
        """The angle (radians) of the plume's reach on the sphere of the rotations."""
        return self.plume.reach_km / EARTH_RADIUS_KM

    @cached_property
    def reach_cos(self) -> float:
        """The cosine of :attr:`reach_rad` (-1: a reach of half the circumference or more)."""
        return -1.0 if self.reach_rad >= np.pi else float(np.cos(self.reach_rad))

    @cached_property
    def profile_params(self) -> np.ndarray:
        """The plume's numbers for :func:`lidmelt.motion._geometry.add_plumes`: the cosine of
        its reach, its radius and reach (km), its peak excess (K) and upwelling (mm/yr, 0 for
        none)."""
        up = 0.0 if self.upwelling is None else float(self.upwelling)
        plume = self.plume
        return np.array([self.reach_cos, plume.radius_km, plume.reach_km, plume.peak_excess_k, up])

    def track_lonlat(self, plate: int) -> tuple[np.ndarray, np.ndarray]:
        """The track on ``plate`` as longitudes and latitudes (degrees)."""
        from lidmelt.motion._rotations import lonlat

        return lonlat(self.tracks[plate])


def build_tracks(cfg, times: np.ndarray, rotations: dict[int, RotationHistory]) -> tuple:
    """Every plume of ``cfg`` with its positions and its track on every plate."""
    out = []
    for i, spec in enumerate(cfg.inputs.thermal_anomaly.plumes, start=1):
        name = spec.name or f"plume {i}"
        lon, lat = plume_positions(cfg.motion, name, spec, times)
        tracks = {p: unit_vectors(*h.track(lon, lat, times)) for p, h in rotations.items()}
        out.append(
            PlumeTrack(name, Plume(**spec.plume_fields()), spec.peak_upwelling_mm_yr, lon, lat,
                       tracks)
        )  # fmt: skip
    return tuple(out)
