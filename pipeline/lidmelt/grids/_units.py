"""Unit conversions of input grids: from the unit a file holds to the unit the input expects.

The unit an input expects is its entry in the variable registry
(:attr:`lidmelt._variables.Variable.units`: ``Ma``, ``km``, ``K``, ``wt%``). A grid in another
unit of the same quantity is multiplied by the factor below; any other unit is an error that
lists the known ones. Nothing is guessed from the values.

Factors: the Julian year of 365.25 days (IAU; 1 yr = 31 557 600 s) for ages in seconds; SI
prefixes otherwise. Temperature *differences* in degC equal those in K. Water: 1 ppm (by mass)
= 1e-4 wt%, a mass fraction of 1 = 100 wt%.
"""

from __future__ import annotations

from lidmelt._errors import GridError

_SECONDS_PER_MA = 365.25 * 86400.0 * 1e6

# Spellings of each unit, compared after lower-casing and stripping (common practice).
_SPELLINGS: dict[str, tuple[str, ...]] = {
    "Ma": ("ma", "myr", "my", "m.y.", "million years", "million_years", "myrs"),
    "ka": ("ka", "kyr", "kyrs", "thousand years"),
    "Ga": ("ga", "gyr", "gyrs"),
    "yr": ("yr", "yrs", "a", "year", "years", "annum"),
    "s": ("s", "sec", "second", "seconds"),
    "km": ("km", "kilometer", "kilometers", "kilometre", "kilometres"),
    "m": ("m", "meter", "meters", "metre", "metres"),
    "cm": ("cm", "centimeter", "centimeters", "centimetre", "centimetres"),
    "K": ("k", "kelvin", "kelvins", "degk", "deg_k", "degrees_k"),
    "degC": ("degc", "deg_c", "°c", "celsius", "degrees_c", "degree_celsius", "degrees_celsius"),
    "mK": ("mk", "millikelvin"),
    "wt%": ("wt%", "wt.%", "wt %", "wt_pct", "weight percent", "weight_percent"),
    "ppm": ("ppm", "ppmw", "ug/g", "µg/g", "mg/kg"),
    "1": ("1", "dimensionless", "fraction", "unitless", "g/g", "kg/kg"),
    "%": ("%", "percent", "pct"),
}

#: For each expected unit, the units converted to it and the factor that multiplies the values.
UNIT_FACTORS: dict[str, dict[str, float]] = {
    "Ma": {"Ma": 1.0, "ka": 1e-3, "Ga": 1e3, "yr": 1e-6, "s": 1.0 / _SECONDS_PER_MA},
    "km": {"km": 1.0, "m": 1e-3, "cm": 1e-5},
    "K": {"K": 1.0, "degC": 1.0, "mK": 1e-3},
    "wt%": {"wt%": 1.0, "ppm": 1e-4, "1": 100.0},
    "m": {"m": 1.0, "km": 1e3, "cm": 1e-2},
}


def canonical_unit(units: str | None) -> str | None:
    """lidmelt's spelling of a unit (a key of the tables above), the stripped text if unknown."""
    if units is None or not str(units).strip():
        return None
    low = str(units).strip().lower()
    return next((c for c, names in _SPELLINGS.items() if low in names), str(units).strip())


def unit_factor(found: str, expected: str, *, where: str) -> float:
    """The factor that turns values in ``found`` into ``expected``.

    Parameters
    ----------
    found, expected : str
        Unit labels (any spelling of :data:`UNIT_FACTORS`).
    where : str
        The file and key, for the message.

    Raises
    ------
    GridError
        If ``found`` is not a unit of the same quantity as ``expected``; the message lists the
        units that can be converted.
    """
    target = canonical_unit(expected) or expected
    source = canonical_unit(found)
    table = UNIT_FACTORS.get(target, {target: 1.0})
    if source in table:
        return table[source]
    known = ", ".join(table)
    msg = (
        f"{where} is in units {found!r}, which lidmelt cannot convert to {expected!r}. Known "
        f"units for this input: {known}. Give the right one with the input key units (e.g. "
        f'units = "{next(iter(table))}"), or convert the file.'
    )
    raise GridError(msg)


def dlnvs_to_kelvin(dlnvs_dt_per_k: float) -> float:
    """The factor from a shear-velocity anomaly in percent to a temperature anomaly in K.

    ``dT = (dVs/Vs) / (d ln Vs / dT)`` with ``dVs/Vs = percent / 100``, a linear scaling
    (e.g. Karato 1993, Geophys. Res. Lett. 20, 1623-1626, who gives d ln Vs / dT in the upper
    mantle of about -1e-4 to -2e-4 per K with anelasticity; from memory).

    Raises
    ------
    GridError
        If the coefficient is not negative and finite (Vs drops as temperature rises).
    """
    value = float(dlnvs_dt_per_k)
    if not value < 0 or value != value or value < -1e-2:
        msg = (
            f"dlnvs_dt_per_k = {dlnvs_dt_per_k!r}; expected a negative coefficient in 1/K, "
            "about -1e-4 to -3e-4 in the upper mantle (from memory; see docs/workflow.md). "
            "Give it per kelvin, not per 100 K or in percent."
        )
        raise GridError(msg)
    return 0.01 / value
