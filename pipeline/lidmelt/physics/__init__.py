"""Pure numpy/scipy physics: melting models, the isentropic column, its table, cooling models.

Nothing in this subpackage reads or writes files.
"""

from lidmelt.physics.column import (
    COLUMN_OUTPUTS,
    FLAG_BEYOND_CALIBRATION,
    FLAG_INVALID_INPUT,
    FLAG_MEANINGS,
    FLAG_NO_ONSET,
    FLAG_WATER_SATURATED,
    ColumnResult,
    column_profile,
    excess_to_melt_k,
    melt_column,
)
from lidmelt.physics.cooling import COOLING_MODELS, get_cooling_model, isotherm_depth_km
from lidmelt.physics.melting import MODELS, MeltingModel, get_model
from lidmelt.physics.table import MeltTable, get_table

#: Default lid-base isotherm [deg C]: 1100 C is a common choice for the base of the thermal
#: lithosphere (common practice, no single source; PHYSICS.md trap 12 shows how much it matters).
DEFAULT_LID_ISOTHERM_C = 1100.0
#: Default cooling model: half-space cooling with Turcotte & Schubert constants.
DEFAULT_COOLING = "half-space"
#: Default ambient potential temperature [deg C] (Herzberg, Condie & Korenaga 2010; PHYSICS.md 8).
DEFAULT_AMBIENT_TP_C = 1350.0
