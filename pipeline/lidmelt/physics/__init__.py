"""Pure numpy/scipy physics: melting models, the isentropic column, its table, cooling models.

Nothing in this subpackage reads or writes files, except the melting table's disk cache
(:mod:`lidmelt.physics._table`).

Attributes
----------
MODELS : dict of str to MeltingModel
    The published melting models by registry name (``"katz2003"``: Katz, Spiegelman &
    Langmuir 2003; ``"mckenzie-bickle1988"``: McKenzie & Bickle 1988).
COOLING_MODELS : mapping of str to CoolingModel
    The cooling models of oceanic lithosphere by name (``"half-space"``, ``"gdh1"``: Stein &
    Stein 1992, ``"ps77"``: Parsons & Sclater 1977), read-only.
FLAG_MEANINGS : dict of int to str
    What each bit of the ``flag`` output means (invalid input, no onset, beyond the
    calibrated pressure, water-saturated, the upper mantle's floor).
TOP_OF_MELTING_RULES : tuple of str
    The rules for where a column beneath a lid from plate age stops melting: ``"geotherm"``
    (the default: where it meets its plate's conductive geotherm) and ``"isotherm"`` (at the
    depth of the lid-base isotherm).
"""

from lidmelt.physics._cells import CellOptions, CellResult, evaluate_cells
from lidmelt.physics._column import column_profile
from lidmelt.physics._cooling import COOLING_MODELS, get_cooling_model, isotherm_depth_km
from lidmelt.physics._evaluate import ColumnResult, excess_to_melt_k, melt_column
from lidmelt.physics._flags import FLAG_MEANINGS
from lidmelt.physics._geotherm import TOP_OF_MELTING_RULES
from lidmelt.physics._kernel_records import Cells
from lidmelt.physics._melting import MODELS, MeltingModel, get_model
from lidmelt.physics._table import MeltTable, get_table

__all__ = [
    "COOLING_MODELS",
    "FLAG_MEANINGS",
    "MODELS",
    "TOP_OF_MELTING_RULES",
    "CellOptions",
    "CellResult",
    "Cells",
    "ColumnResult",
    "MeltTable",
    "MeltingModel",
    "column_profile",
    "evaluate_cells",
    "excess_to_melt_k",
    "get_cooling_model",
    "get_model",
    "get_table",
    "isotherm_depth_km",
    "melt_column",
]
