"""Oceanic lithosphere cooling models: half-space and plate (GDH1, Parsons & Sclater 1977).

The lid under an ocean basin is often taken as the depth of an isotherm in a conductive cooling
model of the plate, driven by the age of the seafloor. This module holds the models as frozen,
cited parameter objects (:class:`CoolingModel`) and four vectorized functions of age (and depth):

* :func:`temperature_c` -- temperature T(z, t) in deg C;
* :func:`isotherm_depth_km` -- depth of one isotherm, the lid base, in km below the seafloor;
* :func:`seafloor_depth_m` -- the model's seafloor depth below sea level, in m;
* :func:`heat_flow_mw_m2` -- surface heat flow, in mW m^-2.

All functions take ages in Ma and depths in km below the seafloor and broadcast over arrays of
any shape. They return float64 (a numpy scalar for scalar input). Inside, everything is SI.

Time: 1 Ma = 3.15576e13 s (the Julian year of 365.25 days; common practice).

Conventions at the edges of the domain
--------------------------------------
* A negative age (or depth) gives NaN, silently: the grid layer checks ranges and reports them.
  NaN in gives NaN out.
* Age 0 is the ridge axis: the temperature is the mantle temperature at every depth below the
  surface (the surface itself stays at the surface temperature), the isotherm depth is 0, the
  seafloor depth is the ridge depth, and the heat flow is ``inf`` (the models are singular
  there: q ~ t^-1/2).
* Ages beyond 300 Ma are allowed and are not clipped. The plate model approaches its steady,
  linear geotherm; the half-space keeps thickening as sqrt(t).
* In the plate model the temperature below the plate base (z > a) is the mantle temperature.

Plate-model evaluation
----------------------
The plate solution is summed as its Fourier series for tau = kappa t / a^2 >= 0.1 and as the
equivalent image (erfc) series below, which converges in three terms where the Fourier series
would need hundreds or thousands (:mod:`lidmelt.physics._plate`; docs/physics.md, section
"Lithosphere from plate age").

:func:`isotherm_depth_km` in the plate model interpolates a fine 1-D table of isotherm depth
against sqrt(age), built once per (model, isotherm) by bisection on the exact temperature
(about 40 ms) and cached. Against a direct root-find (scipy.optimize.brentq, 0-400 Ma) it is
within 2 cm for isotherms up to 0.9 Tm and within 0.3 m for an isotherm 1 K below Tm (the test
bound is 1 m). One numpy core evaluates some 80-90 million ages per second with either plate
model and about 400 million with the half-space (benchmarks/bench_cooling.py).
"""

from __future__ import annotations

import functools
import math
import numbers
import types
from typing import Any

import numpy as np
import numpy.typing as npt
from scipy import special

from lidmelt._errors import ModelError
from lidmelt.physics import _plate
from lidmelt.physics._cooling_model import CoolingModel
from lidmelt.physics._registry import lookup
from lidmelt.physics._sources import NOT_CHECKED

SECONDS_PER_MA: float = 3.15576e13
"""Seconds in one Ma, using the Julian year (365.25 d x 86400 s x 1e6; common practice)."""

#: 1 ucal cm^-2 s^-1 (one "heat flow unit") in mW m^-2: 4.1868 J/cal x 1e4 cm^2/m^2 x 1e-6 x 1e3.
_MW_M2_PER_HFU = 41.868


_SEAFLOOR_AT_0C = "common practice: seafloor at 0 deg C"

# --------------------------------------------------------------------------------------------
# Named models
# --------------------------------------------------------------------------------------------

HALF_SPACE = CoolingModel(
    name="half-space",
    kind="half-space",
    plate_thickness_km=None,
    mantle_temperature_c=1300.0,
    surface_temperature_c=0.0,
    diffusivity_m2_s=1.0e-6,
    conductivity_w_m_k=3.3,
    expansivity_k=3.0e-5,
    mantle_density_kg_m3=3300.0,
    water_density_kg_m3=1000.0,
    ridge_depth_m=2600.0,
    reference=(
        "Half-space cooling, Turcotte & Schubert, Geodynamics (2nd ed., 2002), sections 4.15-4.16 "
        f"and 4.23, with their textbook constants ({NOT_CHECKED}); ridge depth 2600 m as in "
        f"GDH1, Stein & Stein 1992 ({NOT_CHECKED})"
    ),
    sources={
        "plate_thickness_km": "none: a half-space has no base",
        **dict.fromkeys(
            ("mantle_temperature_c", "diffusivity_m2_s"),
            f"Turcotte & Schubert 2002, Geodynamics, section 4.15 ({NOT_CHECKED})",
        ),
        "surface_temperature_c": _SEAFLOOR_AT_0C,
        "conductivity_w_m_k": (
            f"Turcotte & Schubert 2002, Geodynamics, section 4.16 ({NOT_CHECKED})"
        ),
        **dict.fromkeys(
            ("expansivity_k", "mantle_density_kg_m3", "water_density_kg_m3"),
            f"Turcotte & Schubert 2002, Geodynamics, section 4.23 ({NOT_CHECKED})",
        ),
        "ridge_depth_m": f"Stein & Stein 1992, Nature 359, 123, GDH1 ({NOT_CHECKED})",
    },
)
"""Half-space cooling with the textbook constants of Turcotte & Schubert, *Geodynamics*.

T(z, t) = T0 + (Tm - T0) erf(z / (2 sqrt(kappa t))) (T&S section 4.15 [from memory]).
kappa = 1e-6 m^2/s, Tm = 1300 deg C, T0 = 0 deg C, k = 3.3 W/m/K, alpha = 3e-5 /K,
rho_m = 3300 and rho_w = 1000 kg/m^3: all [from memory] (Turcotte & Schubert 2002, sections
4.15-4.16 and 4.23). The ridge depth of 2600 m is GDH1's (Stein & Stein 1992 [from memory]).
With these values the thermal thickness (0.9 isotherm) is 13.0 km sqrt(t/Ma), the subsidence
355 m sqrt(t/Ma), and the heat flow 136 mW/m^2 at 10 Ma [derived; docs/physics.md, section
"Lithosphere from plate age"].
"""

_GDH1_HEAT_CAPACITY_J_KG_K = 1171.0  # Stein & Stein 1992, Nature 359, 123 [from memory]
_GDH1_MEMORY = f"Stein & Stein 1992, Nature 359, 123, GDH1 ({NOT_CHECKED})"
_GDH1_VERIFIED = "Stein & Stein 1992, Nature 359, 123 (verified secondary: Honda & Yuen 2004)"

GDH1 = CoolingModel(
    name="gdh1",
    kind="plate",
    plate_thickness_km=95.0,
    mantle_temperature_c=1450.0,
    surface_temperature_c=0.0,
    diffusivity_m2_s=3.138 / (3330.0 * _GDH1_HEAT_CAPACITY_J_KG_K),
    conductivity_w_m_k=3.138,
    expansivity_k=3.1e-5,
    mantle_density_kg_m3=3330.0,
    water_density_kg_m3=1000.0,
    ridge_depth_m=2600.0,
    reference=(
        "GDH1 plate model, Stein & Stein 1992, Nature 359, 123: a = 95 km, Tm = 1450 C [verified "
        "(secondary): Honda & Yuen 2004 abstract]; alpha = 3.1e-5 /K, k = 3.138 W/m/K, "
        f"cp = 1171 J/kg/K, rho_m = 3330, rho_w = 1000 kg/m^3, ridge depth 2600 m ({NOT_CHECKED}); "
        "kappa = k/(rho_m cp) [derived]"
    ),
    sources={
        **dict.fromkeys(("plate_thickness_km", "mantle_temperature_c"), _GDH1_VERIFIED),
        "surface_temperature_c": _SEAFLOOR_AT_0C,
        "diffusivity_m2_s": "derived: k / (rho_m c_p) with c_p = 1171 J/kg/K, Stein & Stein "
        f"1992 ({NOT_CHECKED})",
        **dict.fromkeys(
            (
                "conductivity_w_m_k",
                "expansivity_k",
                "mantle_density_kg_m3",
                "water_density_kg_m3",
                "ridge_depth_m",
            ),
            _GDH1_MEMORY,
        ),
    },
)
"""GDH1 (Stein & Stein 1992, Nature 359, 123).

Plate thickness a = 95 km and basal temperature Tm = 1450 deg C [verified (secondary): Honda &
Yuen 2004 abstract]. alpha = 3.1e-5 /K, k = 3.138 W/m/K, c_p = 1171 J/kg/K, rho_m = 3330 kg/m^3,
rho_w = 1000 kg/m^3 and ridge depth 2600 m are [from memory];
kappa = k / (rho_m c_p) = 8.047e-7 m^2/s [derived]. The parameters reproduce the coefficients of
the published GDH1 fits (365 m Ma^-1/2, 2473 m, 0.0278 /Ma, 510 and 48 mW/m^2) [derived;
docs/physics.md, section "Lithosphere from plate age"], which is strong evidence that the
remembered values are right.
"""

_PS77_DECAY_MA = 62.8  # thermal time a^2 / (pi^2 kappa) in the depth fit, PS77 abstract [verified]
_PS77_HEAT_FLOW_HFU = 11.3  # q = 11.3 t^-1/2 ucal cm^-2 s^-1, 0-120 Ma, PS77 abstract [verified]
_PS77_KAPPA = (125.0e3) ** 2 / (math.pi**2 * _PS77_DECAY_MA * SECONDS_PER_MA)

PS77 = CoolingModel(
    name="ps77",
    kind="plate",
    plate_thickness_km=125.0,
    mantle_temperature_c=1350.0,
    surface_temperature_c=0.0,
    diffusivity_m2_s=_PS77_KAPPA,
    conductivity_w_m_k=(
        _PS77_HEAT_FLOW_HFU
        * _MW_M2_PER_HFU
        * 1e-3
        * math.sqrt(math.pi * _PS77_KAPPA * SECONDS_PER_MA)
        / 1350.0
    ),
    expansivity_k=3.2e-5,
    mantle_density_kg_m3=3330.0,
    water_density_kg_m3=1000.0,
    ridge_depth_m=2500.0,
    reference=(
        "Plate model of Parsons & Sclater 1977, JGR 82, 803: a = 125 km, Tm = 1350 C, "
        "alpha = 3.2e-5 /K, ridge depth 2500 m [verified: abstract]; kappa from "
        "a^2/(pi^2 kappa) = 62.8 Ma and k from q = 11.3 t^-1/2 ucal/cm^2/s [derived]; "
        "rho_m = 3330, rho_w = 1000 kg/m^3 [assumption, from memory]"
    ),
    sources={
        **dict.fromkeys(
            ("plate_thickness_km", "mantle_temperature_c", "expansivity_k"),
            "Parsons & Sclater 1977, JGR 82, 803, abstract (verified)",
        ),
        "surface_temperature_c": _SEAFLOOR_AT_0C,
        "diffusivity_m2_s": "derived: a^2 / (pi^2 kappa) = 62.8 Ma, Parsons & Sclater 1977 "
        "abstract (verified)",
        "conductivity_w_m_k": "derived: q = 11.3 t^-1/2 ucal cm^-2 s^-1 = k Tm / sqrt(pi kappa t), "
        "Parsons & Sclater 1977 abstract (verified)",
        "mantle_density_kg_m3": "assumption (from memory)",
        "water_density_kg_m3": "common practice (from memory)",
        "ridge_depth_m": "Parsons & Sclater 1977 abstract: intercept of d = 2500 + 350 t^1/2 m "
        "(verified)",
    },
)
"""Parsons & Sclater (1977, JGR 82, 803) plate model.

Plate thickness 125 km, basal temperature 1350 deg C, alpha = 3.2e-5 /K [verified: abstract;
the paper gives +-10 km, +-275 deg C, +-1.1e-5]. Ridge depth 2500 m is the intercept of the
paper's fit d = 2500 + 350 t^1/2 m [verified: abstract]. kappa = 7.99e-7 m^2/s follows from the
decay time a^2 / (pi^2 kappa) = 62.8 Ma of the fit d = 6400 - 3200 exp(-t/62.8) [derived];
k = 3.12 W/m/K follows from the heat-flow fit q = 11.3 t^-1/2 ucal cm^-2 s^-1
(= 473 t^-1/2 mW/m^2) through q = k Tm / sqrt(pi kappa t) [derived]; it is close to the
0.0075 cal/cm/s/K (3.14 W/m/K) commonly used at the time [from memory]. rho_m = 3330 kg/m^3 is
an assumption [from memory] and rho_w = 1000 kg/m^3 [from memory].

With these values the old-age heat flow is k Tm / a = 33.7 mW/m^2 (0.80 HFU) [derived]; an
asymptote of 1.1 HFU that is sometimes quoted [from memory] cannot be reached by a single
125 km plate that also fits the 11.3 t^-1/2 law, so it is not used.
"""

COOLING_MODELS: types.MappingProxyType[str, CoolingModel] = types.MappingProxyType(
    {"half-space": HALF_SPACE, "gdh1": GDH1, "ps77": PS77}
)
"""The named cooling models, by name (read-only)."""


def get_cooling_model(name: str | CoolingModel, **overrides: Any) -> CoolingModel:
    """Return a named cooling model, optionally with some fields replaced.

    Parameters
    ----------
    name : str or CoolingModel
        One of ``COOLING_MODELS`` (``"half-space"``, ``"gdh1"``, ``"ps77"``); case and
        surrounding spaces are ignored. A model object is used as it is.
    **overrides
        Fields of :class:`CoolingModel` to replace, e.g. ``mantle_temperature_c=1350.0``. The
        copy is validated again, and its ``sources`` mark the replaced fields "user override".

    Returns
    -------
    CoolingModel
        The registered model, or a validated copy with the replaced fields.

    Raises
    ------
    ModelError
        If the name or an override field is unknown (the message lists the valid ones and
        suggests the nearest), or an override value is out of range.

    Examples
    --------
    >>> get_cooling_model("gdh1").plate_thickness_km
    95.0
    >>> get_cooling_model("GDH1", plate_thickness_km=100.0).plate_thickness_km
    100.0
    """
    return lookup(name, COOLING_MODELS, "cooling model", CoolingModel, **overrides)


# --------------------------------------------------------------------------------------------
# Public functions
# --------------------------------------------------------------------------------------------


def check_model(model: Any) -> CoolingModel:
    """Return ``model`` if it is a :class:`CoolingModel`, else raise ModelError (with a fix)."""
    if not isinstance(model, CoolingModel):
        hint = ""
        if isinstance(model, str):
            hint = f" Use model=get_cooling_model({model!r})."
        msg = (
            f"model must be a CoolingModel, got {type(model).__name__} {model!r}; pick one of "
            f"{', '.join(repr(n) for n in COOLING_MODELS)} with get_cooling_model(name).{hint}"
        )
        raise ModelError(msg)
    return model


def _as_float_array(x: npt.ArrayLike) -> np.ndarray:
    return np.asarray(x, dtype=np.float64)


def _tau_per_ma(model: CoolingModel) -> float:
    """kappa * (1 Ma) / a^2, the dimensionless age of 1 Ma in a plate model."""
    a_m = model.plate_thickness_km * 1e3
    return model.diffusivity_m2_s * SECONDS_PER_MA / (a_m * a_m)


def temperature_c(
    depth_km: npt.ArrayLike, age_ma: npt.ArrayLike, *, model: CoolingModel
) -> np.ndarray:
    """Temperature in the cooling lithosphere at a depth below the seafloor and an age.

    Parameters
    ----------
    depth_km : array_like
        Depth below the seafloor. Units: km. Negative gives NaN.
    age_ma : array_like
        Plate age. Units: Ma. Negative gives NaN. Broadcast against ``depth_km``.
    model : CoolingModel
        The cooling model (e.g. ``GDH1``).

    Returns
    -------
    numpy.ndarray
        Temperature, float64, the broadcast shape of the inputs. Units: deg C.

    Raises
    ------
    ModelError
        If ``model`` is not a :class:`CoolingModel`.

    Notes
    -----
    Half-space (Turcotte & Schubert 2002, Geodynamics, section 4.15 [from memory]):
    T = T0 + (Tm - T0) erf(z / (2 sqrt(kappa t))).

    Plate of thickness a (Parsons & Sclater 1977; McKenzie 1967 [forms from memory];
    docs/physics.md, section "Lithosphere from plate age"):
    T = T0 + (Tm - T0) [z/a + (2/pi) sum (1/n) exp(-n^2 pi^2 kappa t/a^2) sin(n pi z/a)] for
    0 <= z <= a and Tm below; evaluated by the equivalent image series at small ages (see the
    module docstring). At t = 0 the temperature is Tm below the surface.

    Examples
    --------
    >>> float(temperature_c(0.0, 50.0, model=GDH1))
    0.0
    >>> float(temperature_c(200.0, 50.0, model=GDH1))
    1450.0
    """
    model = check_model(model)
    z_km, t_ma = np.broadcast_arrays(_as_float_array(depth_km), _as_float_array(age_ma))
    shape = z_km.shape
    z_km = z_km.ravel()
    t_ma = t_ma.ravel()
    theta = np.full(z_km.shape, np.nan)
    valid = (z_km >= 0.0) & (t_ma >= 0.0)  # False for NaN
    at_ridge = valid & (t_ma == 0.0)
    theta[at_ridge] = np.where(z_km[at_ridge] > 0.0, 1.0, 0.0)
    cooling = valid & (t_ma > 0.0)
    z = z_km[cooling]
    t = t_ma[cooling]
    if model.kind == "half-space":
        scale = 0.5e3 / math.sqrt(model.diffusivity_m2_s * SECONDS_PER_MA)  # per (km / sqrt(Ma))
        theta[cooling] = special.erf(z * scale / np.sqrt(t))
    else:
        zeta = z / model.plate_thickness_km
        inside = zeta < 1.0
        th = np.ones_like(zeta)
        th[inside] = _plate.theta(zeta[inside], t[inside] * _tau_per_ma(model))
        theta[cooling] = th
    dt = model.mantle_temperature_c - model.surface_temperature_c
    out = model.surface_temperature_c + dt * theta
    return out.reshape(shape)[()]


def check_isotherm(isotherm_c: Any, model: CoolingModel) -> float:
    """Return the isotherm as a float, or raise if it is outside [T0, Tm)."""
    t0, tm = model.surface_temperature_c, model.mantle_temperature_c
    candidate = isotherm_c
    if isinstance(candidate, np.ndarray) and candidate.ndim == 0:
        candidate = candidate.item()
    is_number = isinstance(candidate, numbers.Real) and not isinstance(candidate, bool)
    value = float(candidate) if is_number else math.nan
    if not t0 <= value < tm:  # also rejects NaN and non-numbers
        msg = (
            f"Lid isotherm {isotherm_c!r} deg C is outside the valid range [{t0:g}, {tm:g}) deg C "
            f"of cooling model {model.name!r} (from the surface temperature up to, but not "
            f"including, the mantle temperature). Choose one number in that range (e.g. "
            f"{t0 + 0.75 * (tm - t0):g} deg C), or a model with a hotter mantle "
            f"(get_cooling_model({model.name!r}, mantle_temperature_c=...))."
        )
        raise ModelError(msg)
    return value


@functools.lru_cache(maxsize=64)
def _plate_isotherm_table(model: CoolingModel, isotherm_c: float) -> tuple[float, np.ndarray]:
    """Isotherm depth (km) on a uniform grid of sqrt(age / Ma); returns (1/step, depths).

    Cached per (model, isotherm); see :func:`lidmelt.physics._plate.isotherm_depth_table`.
    """
    dt = model.mantle_temperature_c - model.surface_temperature_c
    theta_star = (isotherm_c - model.surface_temperature_c) / dt
    return _plate.isotherm_depth_table(theta_star, _tau_per_ma(model), model.plate_thickness_km)


def isotherm_depth_km(
    isotherm_c: float, age_ma: npt.ArrayLike, *, model: CoolingModel
) -> np.ndarray:
    """Depth below the seafloor of one isotherm (the lid base) as a function of plate age.

    Parameters
    ----------
    isotherm_c : float
        The isotherm, one number in [surface_temperature_c, mantle_temperature_c) of the
        model. Units: deg C.
    age_ma : array_like
        Plate age, any shape. Units: Ma. Negative or NaN gives NaN; 0 gives 0; ages beyond
        300 Ma are allowed (the plate model saturates, the half-space keeps deepening).
    model : CoolingModel
        The cooling model.

    Returns
    -------
    numpy.ndarray
        Isotherm depth, float64, the shape of ``age_ma``. Units: km.

    Raises
    ------
    ModelError
        If the isotherm is not a number in the model's range, or ``model`` is not a
        :class:`CoolingModel`.

    Notes
    -----
    Half-space (Turcotte & Schubert 2002, Geodynamics, sections 4.15-4.16 [from memory]):
    z_T = 2 sqrt(kappa t) erfinv((T - T0) / (Tm - T0)).

    Plate: the root of T(z, t) = T_iso with the plate temperature of :func:`temperature_c`,
    tabulated once per (model, isotherm) on 4097 nodes uniform in sqrt(age) by bisection and
    interpolated linearly (error < 2 cm up to 0.9 Tm, < 0.3 m at Tm - 1 K; tested against a
    direct root-find within 1 m). It can
    never exceed the plate thickness; at old ages it tends to a (T - T0)/(Tm - T0) [derived from
    the steady linear geotherm].

    Examples
    --------
    >>> round(float(isotherm_depth_km(1170.0, 100.0, model=HALF_SPACE)), 1)  # 0.9 Tm
    130.7
    """
    model = check_model(model)
    iso = check_isotherm(isotherm_c, model)
    age = np.asarray(age_ma)
    shape = age.shape
    with np.errstate(invalid="ignore"):
        s = np.sqrt(age.reshape(-1), dtype=np.float64)  # NaN for negative ages
    if model.kind == "half-space":
        theta_star = (iso - model.surface_temperature_c) / (
            model.mantle_temperature_c - model.surface_temperature_c
        )
        km_per_sqrt_ma = 2e-3 * math.sqrt(model.diffusivity_m2_s * SECONDS_PER_MA)
        s *= km_per_sqrt_ma * float(special.erfinv(theta_star))
        return s.reshape(shape)[()]
    inv_step, depth = _plate_isotherm_table(model, iso)
    last = depth.size - 1
    s *= inv_step
    np.minimum(s, float(last), out=s)  # NaN stays NaN; old ages take the asymptote
    bad = np.isnan(s)
    np.copyto(s, 0.0, where=bad)
    i = s.astype(np.intp)
    np.minimum(i, last - 1, out=i)
    s -= i  # fraction within the step
    lower = np.take(depth, i)
    out = np.take(depth, i + 1)
    out -= lower
    out *= s
    out += lower
    np.copyto(out, np.nan, where=bad)
    return out.reshape(shape)[()]


def seafloor_depth_m(age_ma: npt.ArrayLike, *, model: CoolingModel) -> np.ndarray:
    """Seafloor depth below sea level predicted by the cooling model (water-loaded).

    Parameters
    ----------
    age_ma : array_like
        Plate age, any shape. Units: Ma. Negative or NaN gives NaN.
    model : CoolingModel

    Returns
    -------
    numpy.ndarray
        Depth below sea level, float64, positive down. Units: m.

    Notes
    -----
    Half-space (Turcotte & Schubert 2002, Geodynamics, section 4.23 [from memory]):
    w = d_r + 2 rho_m alpha (Tm - T0) sqrt(kappa t / pi) / (rho_m - rho_w).

    Plate (Parsons & Sclater 1977 [form from memory]):
    d = d_r + rho_m alpha (Tm - T0) a / (2 (rho_m - rho_w)) [1 - (8/pi^2) sum_{n odd}
    exp(-n^2 pi^2 kappa t / a^2) / n^2], with the image form at small ages.

    Examples
    --------
    >>> round(float(seafloor_depth_m(0.0, model=GDH1)))
    2600
    """
    model = check_model(model)
    t = _as_float_array(age_ma)
    dt = model.mantle_temperature_c - model.surface_temperature_c
    drho = model.mantle_density_kg_m3 - model.water_density_kg_m3
    out = np.full(t.shape, np.nan)
    ok = t >= 0.0
    if model.kind == "half-space":
        coef = (
            2.0
            * model.mantle_density_kg_m3
            * model.expansivity_k
            * dt
            * math.sqrt(model.diffusivity_m2_s * SECONDS_PER_MA / math.pi)
            / drho
        )
        out[ok] = model.ridge_depth_m + coef * np.sqrt(t[ok])
    else:
        limit = (
            model.mantle_density_kg_m3
            * model.expansivity_k
            * dt
            * model.plate_thickness_km
            * 1e3
            / (2.0 * drho)
        )
        frac = np.zeros(t.shape)
        pos = t > 0.0
        frac[pos] = _plate.subsidence_fraction(t[pos] * _tau_per_ma(model))
        out[ok] = model.ridge_depth_m + limit * frac[ok]
    return out[()]


def heat_flow_mw_m2(age_ma: npt.ArrayLike, *, model: CoolingModel) -> np.ndarray:
    """Surface heat flow predicted by the cooling model.

    Parameters
    ----------
    age_ma : array_like
        Plate age, any shape. Units: Ma. Negative or NaN gives NaN; 0 gives ``inf`` (the
        models are singular at the ridge, q ~ t^-1/2).
    model : CoolingModel

    Returns
    -------
    numpy.ndarray
        Heat flow, float64. Units: mW m^-2.

    Notes
    -----
    Half-space (Turcotte & Schubert 2002, Geodynamics, section 4.16 [from memory]):
    q = k (Tm - T0) / sqrt(pi kappa t).

    Plate (Parsons & Sclater 1977 [form from memory]):
    q = k (Tm - T0) / a [1 + 2 sum_n exp(-n^2 pi^2 kappa t / a^2)], with the equivalent
    (Poisson-summed) form at small ages.

    Examples
    --------
    >>> round(float(heat_flow_mw_m2(100.0, model=GDH1)), 1)
    53.9
    """
    model = check_model(model)
    t = _as_float_array(age_ma)
    dt = model.mantle_temperature_c - model.surface_temperature_c
    out = np.full(t.shape, np.nan)
    out[t == 0.0] = np.inf
    pos = t > 0.0
    if model.kind == "half-space":
        coef = (
            1e3
            * model.conductivity_w_m_k
            * dt
            / math.sqrt(math.pi * model.diffusivity_m2_s * SECONDS_PER_MA)
        )
        out[pos] = coef / np.sqrt(t[pos])
    else:
        q_inf = 1e3 * model.conductivity_w_m_k * dt / (model.plate_thickness_km * 1e3)
        out[pos] = q_inf * _plate.heat_flow_factor(t[pos] * _tau_per_ma(model))
    return out[()]
