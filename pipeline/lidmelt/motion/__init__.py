"""Plate motion over the plumes: finite rotations, hotspot tracks and melting through time.

:mod:`~lidmelt.motion.rotations` holds the finite rotations (pure math).
"""

from lidmelt.motion.rotations import RotationHistory, finite_rotation

__all__ = ["RotationHistory", "finite_rotation"]
