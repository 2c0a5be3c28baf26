"""Plate motion over the plumes: finite rotations, hotspot tracks and melting through time.

:mod:`~lidmelt.motion._rotations` holds the finite rotations (pure math),
:mod:`~lidmelt.motion._plan` the times, each plate's rotations and each plume's track,
:mod:`~lidmelt.motion._history` the reduction of one chunk over the time steps,
:mod:`~lidmelt.motion._tracks` the track points and their files, and
:mod:`~lidmelt.motion._stage` runs it all as an extra stage of :func:`lidmelt._engine.run_basin`
(``run_basin(cfg, extra_stages=motion_stages(cfg))``).
"""

from lidmelt.motion._rotations import RotationHistory, finite_rotation
from lidmelt.motion._stage import motion_stages

__all__ = [
    "RotationHistory",
    "finite_rotation",
    "motion_stages",
]
