"""Pure numpy/scipy physics: melting models, the isentropic column, its table, cooling models.

Nothing in this subpackage reads or writes files, except the melting table's disk cache
(:mod:`lidmelt.physics.table`).

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

from lidmelt.physics._jitcache import cache_note as compiled_cache_note
from lidmelt.physics._jitcache import compiled_function
from lidmelt.physics.cells import evaluate_cells
from lidmelt.physics.column import column_profile
from lidmelt.physics.cooling import COOLING_MODELS, get_cooling_model, isotherm_depth_km
from lidmelt.physics.evaluate import (
    COLUMN_OUTPUTS,
    EXTRACTION_MIN_MELT_FRACTION,
    ColumnResult,
    excess_to_melt_k,
    melt_column,
)
from lidmelt.physics.flags import (
    FLAG_BEYOND_CALIBRATION,
    FLAG_INVALID_INPUT,
    FLAG_KEYS,
    FLAG_MEANINGS,
    FLAG_NO_ONSET,
    FLAG_UPPER_MANTLE_FLOOR,
    FLAG_WATER_SATURATED,
)
from lidmelt.physics.geotherm import DEFAULT_TOP_OF_MELTING, TOP_OF_MELTING_RULES, geotherm_tops
from lidmelt.physics.lidlookup import LidLookup, lid_lookup
from lidmelt.physics.melting import MODELS, MeltingModel, get_model
from lidmelt.physics.regime import (
    REGIME_AMBIENT_AND_ANOMALY,
    REGIME_AMBIENT_ONLY,
    REGIME_ANOMALY_ONLY,
    REGIME_NO_MELTING,
)
from lidmelt.physics.table import MeltTable, get_table

__all__ = [
    "COLUMN_OUTPUTS",
    "COOLING_MODELS",
    "DEFAULT_AMBIENT_TP_C",
    "DEFAULT_COOLING",
    "DEFAULT_LID_ISOTHERM_C",
    "DEFAULT_TOP_OF_MELTING",
    "EXTRACTION_MIN_MELT_FRACTION",
    "FLAG_BEYOND_CALIBRATION",
    "FLAG_INVALID_INPUT",
    "FLAG_KEYS",
    "FLAG_MEANINGS",
    "FLAG_NO_ONSET",
    "FLAG_UPPER_MANTLE_FLOOR",
    "FLAG_WATER_SATURATED",
    "MODELS",
    "REGIME_AMBIENT_AND_ANOMALY",
    "REGIME_AMBIENT_ONLY",
    "REGIME_ANOMALY_ONLY",
    "REGIME_NO_MELTING",
    "TOP_OF_MELTING_RULES",
    "ColumnResult",
    "LidLookup",
    "MeltTable",
    "MeltingModel",
    "column_profile",
    "compiled_cache_note",
    "compiled_function",
    "evaluate_cells",
    "excess_to_melt_k",
    "geotherm_tops",
    "get_cooling_model",
    "get_model",
    "get_table",
    "isotherm_depth_km",
    "lid_lookup",
    "melt_column",
]

#: Default lid-base isotherm [deg C]: 1100 C is a common choice for the base of the thermal
#: lithosphere (common practice, no single source). How much the choice matters depends on the
#: cooling model: at 100 Ma the 1100 C isotherm lies at 69 km in the GDH1 plate and 113 km in
#: the default half-space [derived; docs/physics.md, section "Lithosphere from plate age"].
DEFAULT_LID_ISOTHERM_C = 1100.0
#: Default cooling model: half-space cooling with Turcotte & Schubert constants.
DEFAULT_COOLING = "half-space"
#: Default ambient potential temperature [deg C] (Herzberg, Condie & Korenaga 2010, EPSL 292,
#: 79: 1350 C for the present MORB source).
DEFAULT_AMBIENT_TP_C = 1350.0
