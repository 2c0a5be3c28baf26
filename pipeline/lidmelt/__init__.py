"""lidmelt: maps of predicted mantle melt productivity beneath oceanic lithosphere.

The one-column entry points are :func:`melt_column` and :func:`excess_to_melt_k`; basin runs go
through :mod:`lidmelt.workflow` and :mod:`lidmelt.engine`.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("lidmelt")
except PackageNotFoundError:  # running from a source tree without installation
    __version__ = "0+unknown"

from lidmelt.physics import excess_to_melt_k, get_model, melt_column

__all__ = ["__version__", "excess_to_melt_k", "get_model", "melt_column"]
