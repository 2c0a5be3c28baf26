"""The melting regime of a cell: which mantle melts beneath its lid, in four classes.

The class values and their meanings are written once, in the registry
(:data:`lidmelt._variables.OUTPUTS` ``["melting_regime"].classes``); this module names the values
for the physics and applies the rule (docs/physics.md, "Definitions lidmelt fixes"):

* a column *melts* where H > 0 and its melt fraction at the top of melting reaches the least
  fraction that can be extracted (``min_fraction``, :data:`lidmelt.physics._evaluate.
  EXTRACTION_MIN_MELT_FRACTION`); below it the melt stays in the matrix;
* 0 the cell's column does not melt; 1 it melts and so does the ambient column beneath the
  same lid, and the anomaly adds less than the least anomaly melt (the registry's
  ``negligible_below`` of ``anomaly_melt_thickness_km``); 2 both melt and the anomaly adds at
  least that; 3 it melts and the ambient column does not (the anomaly alone makes it melt).
"""

from __future__ import annotations

import numpy as np

from lidmelt._variables import OUTPUTS

_VALUE = {c.key: c.value for c in OUTPUTS["melting_regime"].classes}
REGIME_NO_MELTING = _VALUE["no_melting"]
REGIME_AMBIENT_ONLY = _VALUE["ambient_only"]
REGIME_AMBIENT_AND_ANOMALY = _VALUE["ambient_and_anomaly"]
REGIME_ANOMALY_ONLY = _VALUE["anomaly_only"]
#: The least anomaly melt thickness [km] that counts as added melt (the registry's value).
LEAST_ANOMALY_MELT_KM = OUTPUTS["anomaly_melt_thickness_km"].negligible_below


def melting_regime(h, f, h_ambient, f_ambient, *, min_fraction: float, least_anomaly_km: float):
    """The regime class of each cell (NaN where H is NaN), from the cell's H [km] and F at its
    top, and those of its ambient column (0 where the ambient column is not computed)."""
    h, f, h_amb, f_amb = np.broadcast_arrays(*(np.asarray(v) for v in (h, f, h_ambient, f_ambient)))
    with np.errstate(invalid="ignore"):
        melts = (h > 0) & (f >= min_fraction)
        ambient = (h_amb > 0) & (f_amb >= min_fraction)
        adds = h - h_amb >= least_anomaly_km
        both = np.where(adds, REGIME_AMBIENT_AND_ANOMALY, REGIME_AMBIENT_ONLY)
        regime = np.where(ambient, both, REGIME_ANOMALY_ONLY)
        regime = np.where(melts, regime, REGIME_NO_MELTING)
    return np.where(np.isnan(h), np.nan, regime).astype(h.dtype)
