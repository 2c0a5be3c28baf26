"""The parameter object of a conductive cooling model of oceanic lithosphere.

:class:`CoolingModel` is frozen and validated; the named, cited instances and the functions of
age that use them are in :mod:`lidmelt.physics._cooling`.
"""

from __future__ import annotations

import dataclasses
import math
import numbers
from dataclasses import dataclass

from lidmelt._errors import ModelError
from lidmelt.physics._registry import quoted, suggest

_KINDS = ("half-space", "plate")

# Open ranges low < value < high of some fields, and the rule the message states.
_OPEN_RANGES = {
    "diffusivity_m2_s": (
        0.0,
        1e-4,
        "must be in (0, 1e-4) m^2/s (rocks are about 1e-6). If you have mm^2/s, multiply by 1e-6.",
    ),
    "conductivity_w_m_k": (0.0, 100.0, "must be in (0, 100) W/m/K (mantle rocks are about 3)."),
    "expansivity_k": (
        0.0,
        1e-3,
        "must be in (0, 1e-3) per K (mantle rocks are about 3e-5). If you have 1e-5 units, "
        "multiply by 1e-5.",
    ),
}

#: The numeric fields: the parameters recorded for provenance (:meth:`CoolingModel.parameters`).
NUMERIC_FIELDS = (
    "plate_thickness_km",
    "mantle_temperature_c",
    "surface_temperature_c",
    "diffusivity_m2_s",
    "conductivity_w_m_k",
    "expansivity_k",
    "mantle_density_kg_m3",
    "water_density_kg_m3",
    "ridge_depth_m",
)


@dataclass(frozen=True, kw_only=True)
class CoolingModel:
    """A conductive cooling model of oceanic lithosphere; frozen, with its source.

    Change a value with ``dataclasses.replace(model, ...)`` or
    ``get_cooling_model(name, **overrides)``; the copy is validated again.

    Parameters
    ----------
    name : str
        Short name used in workflow files and provenance, e.g. ``"gdh1"``.
    kind : {"half-space", "plate"}
        Half-space cooling (no base) or a plate of fixed thickness whose base is held at the
        mantle temperature.
    plate_thickness_km : float or None
        Plate thickness a. Units: km. ``None`` for a half-space; required (> 0) for a plate.
    mantle_temperature_c : float
        Mantle (initial and basal) temperature Tm. Units: deg C. This is the cooling model's
        own Tm, not the melting potential temperature: GDH1 uses 1450 C (Stein & Stein 1992),
        while a melting column uses Tp of 1300-1350 C plus an adiabat.
    surface_temperature_c : float
        Seafloor temperature T0. Units: deg C. 0 in all the named models.
    diffusivity_m2_s : float
        Thermal diffusivity kappa. Units: m^2 s^-1 (rocks are about 1e-6).
    conductivity_w_m_k : float
        Thermal conductivity k, used for the heat flow. Units: W m^-1 K^-1.
    expansivity_k : float
        Volumetric thermal expansion coefficient alpha, used for the subsidence. Units: K^-1.
    mantle_density_kg_m3 : float
        Mantle density rho_m at Tm. Units: kg m^-3.
    water_density_kg_m3 : float
        Seawater density rho_w. Units: kg m^-3. Must be below the mantle density.
    ridge_depth_m : float
        Seafloor depth at age 0 below sea level, d_r. Units: m.
    reference : str
        Citation for the values (author, year, table/equation), stored verbatim in outputs.
    sources : dict of str, optional
        The source of each parameter ("author year, table/eq", "from memory" where not checked,
        "user override" for values replaced by :func:`get_cooling_model`). Not compared or
        hashed: two models with the same values are equal.

    Raises
    ------
    ModelError
        If a field has the wrong type or lies outside its physical range.
    """

    name: str
    kind: str
    plate_thickness_km: float | None
    mantle_temperature_c: float
    surface_temperature_c: float = 0.0
    diffusivity_m2_s: float
    conductivity_w_m_k: float
    expansivity_k: float
    mantle_density_kg_m3: float
    water_density_kg_m3: float
    ridge_depth_m: float
    reference: str
    sources: dict[str, str] = dataclasses.field(
        default_factory=dict, compare=False, hash=False, repr=False
    )

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.strip():
            msg = f"Cooling model name={self.name!r} must be a non-empty string, e.g. 'my-plate'."
            raise ModelError(msg)
        if not isinstance(self.reference, str):
            msg = (
                f"Cooling model {self.name!r}: reference={self.reference!r} must be a string "
                "citing the source of the values (author, year, table or equation)."
            )
            raise ModelError(msg)
        if not isinstance(self.sources, dict):
            msg = (
                f"Cooling model {self.name!r}: sources={self.sources!r} must be a dict of "
                "parameter name -> source (author, year, table or equation)."
            )
            raise ModelError(msg)
        if self.kind not in _KINDS:
            hint = suggest(str(self.kind), _KINDS)
            msg = (
                f"Cooling model {self.name!r}: kind={self.kind!r} is not known; expected one of "
                f"{quoted(_KINDS)}.{hint}"
            )
            raise ModelError(msg)
        for field in NUMERIC_FIELDS:
            value = getattr(self, field)
            if field == "plate_thickness_km" and value is None:
                continue
            if isinstance(value, bool) or not isinstance(value, numbers.Real):
                msg = (
                    f"Cooling model {self.name!r}: {field}={value!r} must be a real number "
                    f"(got {type(value).__name__}); give it as a float in the units of its name."
                )
                raise ModelError(msg)
            if not math.isfinite(value):
                msg = (
                    f"Cooling model {self.name!r}: {field}={value!r} must be finite; give a real "
                    "value in the units of its name."
                )
                raise ModelError(msg)
            object.__setattr__(self, field, float(value))
        self._check_ranges()

    def _check_ranges(self) -> None:
        name = self.name
        if self.kind == "plate":
            if self.plate_thickness_km is None:
                msg = (
                    f"Cooling model {name!r} is a plate but plate_thickness_km is None; give the "
                    "plate thickness in km (GDH1 uses 95, Parsons & Sclater 1977 use 125), or "
                    "set kind='half-space'."
                )
                raise ModelError(msg)
            if not 0.0 < self.plate_thickness_km <= 1000.0:
                msg = (
                    f"Cooling model {name!r}: plate_thickness_km={self.plate_thickness_km!r} must "
                    "be in (0, 1000] km (oceanic plate models use 90-130 km). If you have metres, "
                    "divide by 1000."
                )
                raise ModelError(msg)
        elif self.plate_thickness_km is not None:
            msg = (
                f"Cooling model {name!r} is a half-space but plate_thickness_km="
                f"{self.plate_thickness_km!r}; set plate_thickness_km=None, or set kind='plate' "
                "to use a plate of that thickness."
            )
            raise ModelError(msg)
        if not -273.15 < self.surface_temperature_c < self.mantle_temperature_c:
            msg = (
                f"Cooling model {name!r}: need -273.15 < surface_temperature_c < "
                f"mantle_temperature_c (deg C), got surface {self.surface_temperature_c!r} and "
                f"mantle {self.mantle_temperature_c!r}. Temperatures are in deg C: subtract "
                "273.15 from kelvin values."
            )
            raise ModelError(msg)
        for field, (low, high, rule) in _OPEN_RANGES.items():
            value = getattr(self, field)
            if not low < value < high:
                msg = f"Cooling model {name!r}: {field}={value!r} {rule}"
                raise ModelError(msg)
        if not 0.0 < self.water_density_kg_m3 < self.mantle_density_kg_m3:
            msg = (
                f"Cooling model {name!r}: need 0 < water_density_kg_m3 < mantle_density_kg_m3, "
                f"got water {self.water_density_kg_m3!r} and mantle "
                f"{self.mantle_density_kg_m3!r} kg/m^3 (typical: 1000-1030 and 3300-3330). If you "
                "have g/cm^3, multiply by 1000."
            )
            raise ModelError(msg)
        if not 0.0 <= self.ridge_depth_m <= 11000.0:
            msg = (
                f"Cooling model {name!r}: ridge_depth_m={self.ridge_depth_m!r} must be in "
                "[0, 11000] m below sea level (ridges are about 2500-2600 m). If you have km, "
                "multiply by 1000; depths are positive downwards."
            )
            raise ModelError(msg)

    def parameters(self) -> dict[str, float | None]:
        """The numeric fields as a plain dict, for provenance.

        Returns
        -------
        dict
            ``{field name: value}`` for every numeric field, units as in the names.
            ``plate_thickness_km`` is ``None`` for a half-space (kept so the keys are the same
            for every model).
        """
        return {field: getattr(self, field) for field in NUMERIC_FIELDS}
