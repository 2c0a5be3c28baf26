"""Depth and pressure: one home for the relation every part of lidmelt uses.

Depth is below the seafloor; the melting laws are in pressure. lidmelt maps them through the
rock-equivalent depth Z(P) = integral from 0 to P of dP' / (rho g), with

* rho g constant (the melting model's ``lithostatic_density_kg_m3`` and ``gravity_m_s2``, 3300
  kg/m3 and 9.81 m/s2 by default: common practice) down to the join pressure P_j, and
* PREM's rho(r) g(r) below it (Dziewonski & Anderson 1981), so that Z - Z(P_j) is PREM's depth
  difference between the pressures P_j and P.

P_j is where the default constant-density pressure meets PREM's pressure, P_PREM(z) =
3300 * 9.81 * z (at 224 km, 7.25 GPa [derived, tests/test_pressure.py]): there both agree
(within 1 % of each other from 175 to 270 km; above it PREM's pressure is lower, by more than 1 %
shallower than 175 km, because PREM's
top 24.4 km is a 3 km ocean and a two-layer continental crust, not an oceanic column; below it
PREM's transition-zone densities make PREM's pressure higher: 13.35 against 12.95 GPa at 400 km).
Every melting law's calibrated range (7 GPa) lies above P_j, so the calibrated results keep the
constant density bit for bit. With another density or gravity the constant part changes and the
PREM part is joined at the same P_j, continuously in Z.

The water above the seafloor loads the column: P_w = rho_water g d_w, so a cell's depth below the
seafloor is z = Z(P) - Z(P_w), and a melt thickness H = integral of F dZ does not depend on the
load (:func:`water_load_km` gives Z(P_w) for a water depth).

PREM
----
Density polynomials in the normalized radius x = r / 6371 km, g/cm3, per layer (Dziewonski &
Anderson 1981, Table 1) [verified (secondary): the coefficients as coded in a global seismic
wave-propagation code's PREM routine, and the density column of a mineral-physics library's
PREM table, which agree]. Gravity g(r) = G M(r) / r^2 from the enclosed mass (integrated
exactly, layer by layer); the pressure by integrating rho g from PREM's surface (its 3 km ocean
included) in 10 m steps. The result reproduces PREM's tabulated pressures (13.35 GPa at 400 km,
23.83 GPa at 670 km; Dziewonski & Anderson 1981, Table II, as listed in the same library's table)
within 0.1 % and the table's 0.01 GPa rounding (tests/test_pressure.py).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

GPA = 1.0e9
#: Gravitational constant [m3 kg-1 s-2] (CODATA 2018, from memory).
GRAVITATIONAL_CONSTANT = 6.67430e-11
EARTH_RADIUS_KM = 6371.0  # PREM's radius (Dziewonski & Anderson 1981)
#: lidmelt's default constant density and gravity (common practice, no single source).
DEFAULT_DENSITY_KG_M3 = 3300.0
DEFAULT_GRAVITY_M_S2 = 9.81
#: Density of seawater [kg/m3] for the water load (common practice, from memory).
SEAWATER_DENSITY_KG_M3 = 1030.0
#: The base of the upper mantle: PREM's discontinuity at 400 km depth (Dziewonski & Anderson
#: 1981) and its pressure there, 13.35 GPa (PREM Table II, as listed in a mineral-physics
#: library's PREM table [verified (secondary)]; this module's integration gives 13.36 GPa).
UPPER_MANTLE_FLOOR_KM = 400.0
UPPER_MANTLE_FLOOR_GPA = 13.35

#: PREM layers, shallowest first: (radius of the layer's top [km], density polynomial
#: coefficients a0, a1, ... in x = r / 6371 km [g/cm3]) (Dziewonski & Anderson 1981, Table 1).
PREM_LAYERS: tuple[tuple[float, tuple[float, ...]], ...] = (
    (6371.0, (1.020,)),  # ocean, 0-3 km
    (6368.0, (2.600,)),  # upper crust, 3-15 km
    (6356.0, (2.900,)),  # lower crust, 15-24.4 km
    (6346.6, (2.6910, 0.6924)),  # LID and LVZ, 24.4-220 km
    (6151.0, (7.1089, -3.8045)),  # 220-400 km
    (5971.0, (11.2494, -8.0298)),  # 400-600 km
    (5771.0, (5.3197, -1.4836)),  # 600-670 km
    (5701.0, (7.9565, -6.4761, 5.5283, -3.0807)),  # lower mantle, 670-2891 km
    (3480.0, (12.5815, -1.2638, -3.6426, -5.5281)),  # outer core
    (1221.5, (13.0885, 0.0, -8.8381)),  # inner core
)


def _layer_of(radius_km):
    """Index into :data:`PREM_LAYERS` of the layer holding each radius (top inclusive)."""
    tops = np.array([top for top, _ in PREM_LAYERS])
    r = np.asarray(radius_km, float)
    # a radius on a boundary belongs to the layer below it (the deeper)
    return np.clip(np.searchsorted(-tops, -r, side="right") - 1, 0, len(tops) - 1)


def prem_density_kg_m3(depth_km):
    """PREM density [kg/m3] at a depth below PREM's surface [km] (the layer below a boundary)."""
    r = EARTH_RADIUS_KM - np.asarray(depth_km, float)
    x = r / EARTH_RADIUS_KM
    idx = _layer_of(r)
    out = np.zeros(r.shape)
    for k, (_, coefs) in enumerate(PREM_LAYERS):
        poly = sum(c * x**n for n, c in enumerate(coefs))
        out = np.where(idx == k, poly, out)
    return out * 1000.0


def _shell_mass_kg(coefs, r1_km, r2_km):
    """Mass between radii r1 < r2 of a layer: 4 pi R^3 sum a_n (x2^(n+3) - x1^(n+3))/(n+3)."""
    x1, x2 = r1_km / EARTH_RADIUS_KM, r2_km / EARTH_RADIUS_KM
    total = sum(c * (x2 ** (n + 3) - x1 ** (n + 3)) / (n + 3) for n, c in enumerate(coefs))
    return 4.0 * np.pi * (EARTH_RADIUS_KM * 1e3) ** 3 * total * 1000.0


def _enclosed_mass_kg(radius_km):
    """Mass inside each radius [kg], exact for the PREM polynomials."""
    r = np.asarray(radius_km, float)
    out = np.zeros(r.shape)
    bottoms = [top for top, _ in PREM_LAYERS[1:]] + [0.0]
    for (top, coefs), bottom in zip(PREM_LAYERS, bottoms, strict=True):
        inner = np.clip(r, bottom, top)
        out += _shell_mass_kg(coefs, bottom, inner)
    return out


def prem_gravity_m_s2(depth_km):
    """Gravity [m/s2] at a depth below PREM's surface, G M(r) / r^2 from PREM's mass."""
    r_km = EARTH_RADIUS_KM - np.asarray(depth_km, float)
    return GRAVITATIONAL_CONSTANT * _enclosed_mass_kg(r_km) / (r_km * 1e3) ** 2


@lru_cache(maxsize=1)
def _prem_profile(max_depth_km: float = 1000.0, step_km: float = 0.01):
    """(depth [km], pressure [GPa]) of PREM from its surface: rho g integrated by trapezoids
    within each layer (the density jumps at layer boundaries are respected)."""
    depths, pressures, p0 = [], [], 0.0
    bottoms = [EARTH_RADIUS_KM - top for top, _ in PREM_LAYERS[1:]]
    tops = [0.0, *bottoms]
    for top, bottom in zip(tops, bottoms, strict=False):
        if top >= max_depth_km:
            break
        bottom = min(bottom, max_depth_km)
        d = np.linspace(top, bottom, max(int(np.ceil((bottom - top) / step_km)), 1) + 1)
        mid = 0.5 * (d[:-1] + d[1:])  # inside the layer: no boundary ambiguity
        rho_g = prem_density_kg_m3(mid) * prem_gravity_m_s2(mid)
        p = p0 + np.concatenate([[0.0], np.cumsum(rho_g * np.diff(d) * 1e3)]) / GPA
        depths.append(d)
        pressures.append(p)
        p0 = float(p[-1])
    return np.concatenate(depths), np.concatenate(pressures)


def prem_pressure_gpa(depth_km):
    """PREM's pressure [GPa] at a depth below its surface [km] (its ocean and crust included)."""
    d, p = _prem_profile()
    return np.interp(np.asarray(depth_km, float), d, p)


def _prem_depth_km(pressure_gpa):
    """The depth [km] below PREM's surface at which its pressure is P [GPa]."""
    d, p = _prem_profile()
    keep = np.concatenate([[True], np.diff(p) > 0])
    return np.interp(np.asarray(pressure_gpa, float), p[keep], d[keep])


def _join_gpa() -> float:
    """P_j: where the default constant-density pressure meets PREM's (searched 100-400 km)."""
    d, p = _prem_profile()
    sel = (d >= 100.0) & (d <= 400.0)
    gap = p[sel] - DEFAULT_DENSITY_KG_M3 * DEFAULT_GRAVITY_M_S2 * d[sel] * 1e3 / GPA
    k = int(np.flatnonzero(gap >= 0.0)[0])
    d0, d1, g0, g1 = d[sel][k - 1], d[sel][k], gap[k - 1], gap[k]
    depth = d0 + (d1 - d0) * (-g0) / (g1 - g0)
    return float(DEFAULT_DENSITY_KG_M3 * DEFAULT_GRAVITY_M_S2 * depth * 1e3 / GPA)


@dataclass(frozen=True)
class DepthPressure:
    """The relation Z(P) of one constant density and gravity (see the module doc).

    Beyond the join, Z is tabulated on pressure nodes ``node_step_gpa`` apart and linear
    between them (PREM's rho g is smooth within its layers); the nodes are also what the
    compiled kernel interpolates.
    """

    density_kg_m3: float
    gravity_m_s2: float
    node_step_gpa: float = 0.005
    max_gpa: float = 25.0
    nodes_gpa: np.ndarray = field(init=False, repr=False, compare=False)
    nodes_km: np.ndarray = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        pj = _join_gpa()
        n = int(np.ceil((self.max_gpa - pj) / self.node_step_gpa)) + 1
        p = pj + self.node_step_gpa * np.arange(n)
        z = self.join_km_of(pj) + _prem_depth_km(p) - float(_prem_depth_km(pj))
        # a far node continues the last slope (pressures past max_gpa extrapolate linearly)
        slope = (z[-1] - z[-2]) / (p[-1] - p[-2])
        p = np.append(p, p[-1] + 1e3)
        z = np.append(z, z[-1] + 1e3 * slope)
        object.__setattr__(self, "nodes_gpa", p)
        object.__setattr__(self, "nodes_km", z)

    def join_km_of(self, pj: float) -> float:
        """Z at the join pressure: the constant-density depth of P_j [km]."""
        return pj * GPA / (self.density_kg_m3 * self.gravity_m_s2) / 1e3

    @property
    def join_gpa(self) -> float:
        """P_j [GPa]: below it rho g is constant."""
        return float(self.nodes_gpa[0])

    @property
    def join_km(self) -> float:
        """Z(P_j) [km]."""
        return float(self.nodes_km[0])

    def depth_km(self, pressure_gpa):
        """Z(P) [km], the rock-equivalent depth of pressure P [GPa] (+inf stays +inf)."""
        p = np.asarray(pressure_gpa, float)
        lin = p * GPA / (self.density_kg_m3 * self.gravity_m_s2) / 1e3
        with np.errstate(invalid="ignore"):
            deep = (p > self.join_gpa) & (p < np.inf)
        if not np.any(deep):
            return lin
        return np.where(deep, np.interp(p, self.nodes_gpa, self.nodes_km), lin)

    def pressure_gpa(self, depth_km):
        """P(Z) [GPa], the inverse of :meth:`depth_km` (+inf stays +inf)."""
        z = np.asarray(depth_km, float)
        lin = z * 1e3 * self.density_kg_m3 * self.gravity_m_s2 / GPA
        with np.errstate(invalid="ignore"):
            deep = (z > self.join_km) & (z < np.inf)
        if not np.any(deep):
            return lin
        return np.where(deep, np.interp(z, self.nodes_km, self.nodes_gpa), lin)

    def step_km(self, deep_gpa, shallow_gpa, km_per_gpa):
        """Z(deep) - Z(shallow) [km]: (deep - shallow) * ``km_per_gpa`` above the join (the
        constant-density expression, bit for bit), the tabulated Z below it."""
        dz = (deep_gpa - shallow_gpa) * km_per_gpa
        if not np.any(deep_gpa > self.join_gpa):
            return dz
        exact = self.depth_km(deep_gpa) - self.depth_km(shallow_gpa)
        return np.where(deep_gpa > self.join_gpa, exact, dz)


@lru_cache(maxsize=16)
def depth_pressure(density_kg_m3: float, gravity_m_s2: float) -> DepthPressure:
    """The :class:`DepthPressure` of this density and gravity (made once, kept)."""
    return DepthPressure(float(density_kg_m3), float(gravity_m_s2))


def water_load_km(water_depth_m, density_kg_m3: float = DEFAULT_DENSITY_KG_M3):
    """Z(P_w) [km] of a water depth [m]: rho_water d_w / rho (P_w = rho_water g d_w lies far
    above the join, where Z = P / (rho g)); 0 where the depth is NaN or negative (land)."""
    d = np.asarray(water_depth_m, float)
    with np.errstate(invalid="ignore"):
        d = np.where(np.isfinite(d) & (d > 0.0), d, 0.0)
    return d * (SEAWATER_DENSITY_KG_M3 / float(density_kg_m3)) / 1e3
