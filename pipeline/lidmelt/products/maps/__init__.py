"""Map figures of a run's variables (being split into style, layout, overlays and figure)."""

from lidmelt.products.maps.figure import *  # noqa: F403
from lidmelt.products.maps.figure import _encode_classes  # noqa: F401
