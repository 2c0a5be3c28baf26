"""lidmelt: maps of predicted mantle melt productivity beneath oceanic lithosphere.

The one-column entry points are :func:`melt_column` and :func:`excess_to_melt_k`; a basin run
is :func:`lidmelt.workflow.load_workflow` then :func:`lidmelt.workflow.run_basin`, and a
finished run's products come from :mod:`lidmelt.products`. The public names are those in
``__all__`` of ``lidmelt`` and of its subpackages whose names have no leading underscore
(docs/api.md lists them); every module whose name starts with an underscore is private and may
change without notice.

Attributes
----------
__version__ : str
    The installed version (``"0+unknown"`` in a source tree that is not installed).
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("lidmelt")
except PackageNotFoundError:  # running from a source tree without installation
    __version__ = "0+unknown"

from lidmelt._errors import LidmeltError
from lidmelt.physics._evaluate import ColumnResult, excess_to_melt_k, melt_column
from lidmelt.physics._melting import get_model

__all__ = [
    "ColumnResult",
    "LidmeltError",
    "__version__",
    "excess_to_melt_k",
    "get_model",
    "melt_column",
]
