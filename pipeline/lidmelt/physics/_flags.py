"""The validity bit flags of a cell (``validity_flag.tif``, the ``flag`` of ``melt_column``).

Their meanings travel with every run (GeoTIFF tags, the NetCDF's CF ``flag_meanings``, the maps'
legends and the report), all read from :data:`FLAG_MEANINGS` and :data:`FLAG_KEYS`.
"""

from __future__ import annotations

import numpy as np

FLAG_INVALID_INPUT = 1  #: NaN input, negative lid, Tp below the surface solidus, or bad water
FLAG_NO_ONSET = 2  #: the isentrope does not meet the solidus within the model's search range
#: an output rests on the phase boundaries continued beyond the calibrated pressure: the onset,
#: or the top of melting (hence the excess to melt and any melt), is deeper than it
FLAG_BEYOND_CALIBRATION = 4
FLAG_WATER_SATURATED = 8  #: bulk water above what the solid source holds at the onset
#: the isentrope is above the solidus at the base of the upper mantle (PREM's 400 km
#: discontinuity): the onset is set there and the column melts from there
FLAG_UPPER_MANTLE_FLOOR = 16

FLAG_MEANINGS = {
    FLAG_INVALID_INPUT: "invalid input (NaN, negative lid, Tp below the surface solidus)",
    FLAG_NO_ONSET: "no solidus crossing within the model's pressure range",
    FLAG_BEYOND_CALIBRATION: (
        "onset or top of melting deeper than the model's calibrated pressure range (phase "
        "boundaries continued with published high-pressure shapes)"
    ),
    FLAG_WATER_SATURATED: "source water above saturation at the onset (free water)",
    FLAG_UPPER_MANTLE_FLOOR: (
        "isentrope above the solidus at the base of the upper mantle (PREM 400 km): onset set "
        "there, melt counted from there"
    ),
}
#: One word per flag bit, for CF ``flag_meanings`` (blank-separated words; CF conventions 1.8,
#: section 3.5 "Flags", from memory).
FLAG_KEYS = {
    FLAG_INVALID_INPUT: "invalid_input",
    FLAG_NO_ONSET: "no_solidus_crossing",
    FLAG_BEYOND_CALIBRATION: "beyond_calibration",
    FLAG_WATER_SATURATED: "water_saturated",
    FLAG_UPPER_MANTLE_FLOOR: "upper_mantle_floor",
}


def input_flags(model, potential_temperature_c, lid_depth_km, water_wt_pct):
    """FLAG_INVALID_INPUT where inputs are NaN, the lid negative, water negative (or, for an
    anhydrous model, non-zero), or Tp at or below the surface solidus. A lid of +inf is valid:
    the column meets its geotherm nowhere (:mod:`lidmelt.physics._geotherm`) and does not melt."""
    tp, lid, w = np.broadcast_arrays(
        np.asarray(potential_temperature_c, float),
        np.asarray(lid_depth_km, float),
        np.asarray(water_wt_pct, float),
    )
    with np.errstate(invalid="ignore"):
        bad = ~np.isfinite(tp) | np.isnan(lid) | ~np.isfinite(w) | (lid < 0) | (w < 0)
        if not model.hydrous:
            bad |= w > 0
        bad |= tp <= model.solidus_c(0.0, 0.0)
    return np.where(bad, FLAG_INVALID_INPUT, 0).astype(np.uint8)


def beyond_flags(model, onset_gpa, top_gpa):
    """FLAG_BEYOND_CALIBRATION where the onset or the top of melting is deeper than the
    calibrated pressure (an output then rests on the continued phase boundaries: the melt, or the
    excess to melt at the top), FLAG_UPPER_MANTLE_FLOOR where the onset is the floor."""
    with np.errstate(invalid="ignore"):
        cal = model.calibrated_max_pressure_gpa
        beyond = (onset_gpa > cal) | (top_gpa > cal)
        floor = onset_gpa >= model.max_onset_pressure_gpa - 1e-9
    return (beyond * np.uint8(FLAG_BEYOND_CALIBRATION)) | (
        floor * np.uint8(FLAG_UPPER_MANTLE_FLOOR)
    )


def saturation_onset_gpa(model, water: float) -> float:
    """Pressure below which ``water`` [wt%] saturates the solid source (0 if never)."""
    if water <= 0 or not model.hydrous:
        return 0.0
    p = np.linspace(0.0, model.max_onset_pressure_gpa, 13001)
    over = water > model.water_saturated_bulk_wt_pct(p)
    return float(p[np.argmin(over)]) if over.any() else 0.0
