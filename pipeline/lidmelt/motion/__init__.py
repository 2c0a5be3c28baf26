"""Plate motion over the plumes: finite rotations, hotspot tracks and melting through time.

:mod:`~lidmelt.motion.rotations` holds the finite rotations (pure math),
:mod:`~lidmelt.motion.plan` the times, each plate's rotations and each plume's track,
:mod:`~lidmelt.motion.history` the reduction of one chunk over the time steps,
:mod:`~lidmelt.motion.tracks` the track points and their files, and
:mod:`~lidmelt.motion.stage` runs it all as an extra stage of :func:`lidmelt.engine.run_basin`
(``run_basin(cfg, extra_stages=motion_stages(cfg))``).
"""

from lidmelt.motion.rotations import RotationHistory, finite_rotation
from lidmelt.motion.stage import motion_stages
from lidmelt.motion.tracks import TRACK_COLUMNS, TRACK_POINTS_FILE, TRACKS_GEOJSON, TRACKS_GPKG

__all__ = [
    "TRACKS_GEOJSON",
    "TRACKS_GPKG",
    "TRACK_COLUMNS",
    "TRACK_POINTS_FILE",
    "RotationHistory",
    "finite_rotation",
    "motion_stages",
]
