"""Melting models: named, frozen, cited parameter sets with vectorized melting laws.

A melting model gives, at pressure ``P`` (GPa) and source water content (wt% of the bulk
source), the temperature (deg C) at which the source holds a melt mass fraction ``F``:
:meth:`MeltingModel.temperature_c`. Because that is explicit in ``F`` for every model here, the
isentropic column (:mod:`lidmelt.physics._column`) solves for ``F`` rather than for ``T``, and
the implicit hydrous melt fraction needs no nested iteration. :meth:`MeltingModel.melt_fraction`
is the inverse, solved by bracketing.

Each model also carries the thermodynamic constants of its isentrope (specific heat, entropy of
melting, expansivities and densities) and the lithostatic pressure-depth conversion, so that
every number a run produces follows from the parameters stored with it.

References
----------
.. [Katz2003] Katz, R. F., Spiegelman, M. & Langmuir, C. H. (2003). A new parameterization of
   hydrous mantle melting. Geochem. Geophys. Geosyst. 4(9), 1073, doi:10.1029/2002GC000433.
.. [MB1988] McKenzie, D. & Bickle, M. J. (1988). The volume and composition of melt generated
   by extension of the lithosphere. J. Petrology 29, 625-679.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np

from lidmelt._errors import ModelError
from lidmelt.physics._highpressure import at_fraction_of_interval, continued_solidus_liquidus
from lidmelt.physics._pressure import UPPER_MANTLE_FLOOR_GPA, DepthPressure, depth_pressure
from lidmelt.physics._registry import lookup
from lidmelt.physics._sources import KATZ_SOURCES, MB1988_SOURCES

GPA = 1.0e9  # Pa per GPa (definition)


def _bisect_increasing(func, lo, hi, target, *, iterations=60):
    """Solve ``func(x) = target`` for x in [lo, hi] elementwise, func increasing; vectorized."""
    lo = np.array(lo, dtype=float, copy=True)
    hi = np.array(hi, dtype=float, copy=True)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        above = func(mid) > target
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    return 0.5 * (lo + hi)


#: Ranges a parameter of :class:`MeltingModel` may take (inclusive). Sanity bounds, not
#: published values. The pressures stay within 22.5 GPa, the deepest experiment of the
#: published solidus that continues every model (Herzberg, Raterron & Zhang 2000); the others
#: span about an order of magnitude around the published values (common practice).
SANE_RANGES: dict[str, tuple[float, float]] = {
    "max_onset_pressure_gpa": (1.0, 22.5),
    "calibrated_max_pressure_gpa": (0.5, 22.5),
    "specific_heat_j_kg_k": (100.0, 10000.0),
    "entropy_of_melting_j_kg_k": (10.0, 10000.0),
    "solid_expansivity_k": (0.0, 1e-3),
    "melt_expansivity_k": (0.0, 1e-3),
    "solid_density_kg_m3": (1000.0, 10000.0),
    "melt_density_kg_m3": (1000.0, 10000.0),
    "lithostatic_density_kg_m3": (1000.0, 10000.0),
    "gravity_m_s2": (1.0, 30.0),
}


@dataclass(frozen=True, kw_only=True)
class MeltingModel:
    """Common fields of a melting model. SI units unless a suffix says otherwise.

    Parameters
    ----------
    name : str
        Registry name, e.g. ``"katz2003"``.
    specific_heat_j_kg_k : float
        Specific heat c_p of solid and melt. Units: J kg^-1 K^-1.
    entropy_of_melting_j_kg_k : float
        Entropy change on melting Delta S. Units: J kg^-1 K^-1.
    solid_expansivity_k, melt_expansivity_k : float
        Thermal expansivities alpha_s, alpha_f. Units: K^-1.
    solid_density_kg_m3, melt_density_kg_m3 : float
        Densities rho_s, rho_f used in the isentrope. Units: kg m^-3.
    lithostatic_density_kg_m3, gravity_m_s2 : float
        The constant rho g of the depth-pressure relation above 7.25 GPa (PREM below;
        :mod:`lidmelt.physics._pressure`). Defaults 3300 kg m^-3, 9.81 m s^-2: common practice.
    max_onset_pressure_gpa : float
        The upper mantle's floor, the deepest onset [GPa]: an isentrope still above the solidus
        there melts from there (flagged). Default 13.35 GPa, PREM's pressure at its 400 km
        discontinuity (Dziewonski & Anderson 1981, Table II; :mod:`lidmelt.physics._pressure`).
    calibrated_max_pressure_gpa : float
        Where the melting law's experiments end; beyond it the phase boundaries are continued
        (:meth:`continued_pressure`) and outputs resting on them are flagged. Units: GPa.
    reference : str
        Citation of the parameter set.
    sources : dict of str to str
        The source of each field's value (author, year, table or equation), or "user override".
    """

    name: str
    specific_heat_j_kg_k: float
    entropy_of_melting_j_kg_k: float
    solid_expansivity_k: float
    melt_expansivity_k: float
    solid_density_kg_m3: float
    melt_density_kg_m3: float
    lithostatic_density_kg_m3: float = 3300.0
    gravity_m_s2: float = 9.81
    max_onset_pressure_gpa: float = UPPER_MANTLE_FLOOR_GPA
    calibrated_max_pressure_gpa: float = 7.0
    reference: str = ""
    sources: dict[str, str] = field(default_factory=dict, compare=False, hash=False, repr=False)

    hydrous: ClassVar[bool] = False
    #: Fields that identify the model; :func:`get_model` overrides may not change them.
    FIXED_FIELDS: ClassVar[tuple[str, ...]] = ("name", "reference")

    def __post_init__(self) -> None:
        for f in dataclasses.fields(self):
            if f.type not in ("float", float):
                continue
            value = getattr(self, f.name)
            if isinstance(value, bool | np.bool_):
                msg = (
                    f"model parameter {f.name}={value!r} is a boolean (true/false); it must be "
                    "a number (SI units as its suffix says). Check the workflow's "
                    "[model.parameters]."
                )
                raise ModelError(msg)
            try:
                number = float(value)
            except (TypeError, ValueError):
                msg = (
                    f"model parameter {f.name}={value!r} must be a number (SI units as its "
                    "suffix says). Check the override in the workflow's [model.parameters]."
                )
                raise ModelError(msg) from None
            if not np.isfinite(number):
                msg = f"model parameter {f.name}={value!r} must be a finite number."
                raise ModelError(msg)
            object.__setattr__(self, f.name, number)
        positive = (
            "specific_heat_j_kg_k",
            "entropy_of_melting_j_kg_k",
            "solid_density_kg_m3",
            "melt_density_kg_m3",
            "lithostatic_density_kg_m3",
            "gravity_m_s2",
            "max_onset_pressure_gpa",
            "calibrated_max_pressure_gpa",
        )
        for key in positive:
            value = getattr(self, key)
            if not value > 0:
                msg = (
                    f"model parameter {key}={value!r} must be > 0 (SI units as its suffix "
                    "says). Check the override in the workflow's [model.parameters]."
                )
                raise ModelError(msg)
        self._check_sane_ranges()

    def _check_sane_ranges(self) -> None:
        """Each parameter within :data:`SANE_RANGES`, and the calibration within the search."""
        for key, (lo, hi) in SANE_RANGES.items():
            value = getattr(self, key)
            if not lo <= value <= hi:
                msg = (
                    f"model parameter {key}={value!r} is outside the range this model can "
                    f"use, {lo:g} to {hi:g} (SI units as its suffix says). Use a value in "
                    "that range in the workflow's [model.parameters]."
                )
                raise ModelError(msg)
        if self.calibrated_max_pressure_gpa > self.max_onset_pressure_gpa:
            msg = (
                f"model parameter calibrated_max_pressure_gpa={self.calibrated_max_pressure_gpa!r}"
                f" exceeds max_onset_pressure_gpa={self.max_onset_pressure_gpa!r} GPa; the "
                "calibrated range must lie within the searched one. Lower it or raise the other."
            )
            raise ModelError(msg)

    # -- parameters ---------------------------------------------------------------------------
    def parameters(self) -> dict[str, float]:
        """All numeric parameters by name (for provenance and the table cache key)."""
        skip = {"name", "reference", "sources"}
        return {
            f.name: float(getattr(self, f.name))
            for f in dataclasses.fields(self)
            if f.name not in skip
        }

    def describe(self) -> str:
        """A short text with every parameter, its value and its source."""
        lines = [f"{self.name}: {self.reference}"]
        for key, value in self.parameters().items():
            src = self.sources.get(key, "")
            lines.append(f"  {key} = {value:g}" + (f"  [{src}]" if src else ""))
        return "\n".join(lines)

    # -- pressure and the solid isentrope ------------------------------------------------------
    @property
    def depth_pressure(self) -> DepthPressure:
        """The depth-pressure relation of this model's density and gravity
        (:mod:`lidmelt.physics._pressure`: constant rho g above 7.25 GPa, PREM below)."""
        return depth_pressure(self.lithostatic_density_kg_m3, self.gravity_m_s2)

    def depth_km(self, pressure_gpa, load_km=0.0):
        """Depth below the seafloor [km] of pressure ``pressure_gpa``: Z(P) - ``load_km``, the
        water load's rock-equivalent depth (:func:`lidmelt.physics._pressure.water_load_km`)."""
        return self.depth_pressure.depth_km(pressure_gpa) - load_km

    def pressure_gpa(self, depth_km, load_km=0.0):
        """Pressure [GPa] at ``depth_km`` below the seafloor beneath a water load ``load_km``."""
        return self.depth_pressure.pressure_gpa(np.asarray(depth_km) + load_km)

    @property
    def adiabat_coefficient_per_gpa(self) -> float:
        """alpha_s / (rho_s c_p) in GPa^-1: the solid isentrope is T = Tp exp(coef * P), T in K.

        Follows from ds = c_p dT/T - (alpha_s/rho_s) dP = 0, the entropy balance of Katz et al.
        2003 (eq. 20 [from memory]) with F = 0 [derived; docs/physics.md, section "Isentropic
        decompression melting"].
        """
        return (
            self.solid_expansivity_k / (self.solid_density_kg_m3 * self.specific_heat_j_kg_k) * GPA
        )

    def solid_adiabat_c(self, potential_temperature_c, pressure_gpa):
        """Temperature [deg C] on the solid isentrope of potential temperature Tp at ``P``."""
        tp_k = np.asarray(potential_temperature_c) + 273.15
        return tp_k * np.exp(self.adiabat_coefficient_per_gpa * np.asarray(pressure_gpa)) - 273.15

    # -- the melting law (model specific) --------------------------------------------------------
    def pressure_terms(self, pressure_gpa, water_wt_pct=0.0) -> tuple:
        """Quantities of the melting law that depend on P and water only (reused while F varies).

        Beyond ``calibrated_max_pressure_gpa`` they follow :meth:`continued_pressure`.
        """
        raise NotImplementedError

    def continued_pressure(self, pressure_gpa) -> tuple:
        """min(P, P_c), and where P exceeds P_c (None where no P does: the law is unchanged).

        Beyond the calibrated pressure P_c the dry solidus and liquidus follow published
        high-pressure peridotite curves joined at P_c, and every other boundary keeps its
        fraction of the melting interval (:meth:`continue_boundaries`); the pressure-dependent
        melting parameters (Katz R_cpx, hence F_cpx-out, and the water saturation X_sat) are held
        at their P_c values (docs/physics.md, section "Beyond the calibrated pressure").
        """
        p = np.asarray(pressure_gpa, float)
        pc = self.calibrated_max_pressure_gpa
        if not np.any(p > pc):
            return p, None
        return np.minimum(p, pc), p > pc

    def continue_boundaries(self, pressure_gpa, beyond, solidus_c, liquidus_c, *inner_c):
        """The boundaries (evaluated at min(P, P_c)) continued where ``beyond``.

        Solidus and liquidus: the shapes of :mod:`lidmelt.physics._highpressure` (Herzberg,
        Raterron & Zhang 2000 solidus; a peridotite batch-melting liquidus), each shifted to
        the model's value at P_c. ``inner_c``: boundaries held at their fraction of the
        solidus-liquidus interval at P_c. Returns (solidus, liquidus, *inner) [deg C].
        """
        pc = self.calibrated_max_pressure_gpa
        with np.errstate(invalid="ignore"):  # P = 0 (log) is never beyond P_c
            sol, liq = continued_solidus_liquidus(pressure_gpa, pc, solidus_c, liquidus_c)
            inner = [at_fraction_of_interval(t, solidus_c, liquidus_c, sol, liq) for t in inner_c]
        return tuple(
            np.where(beyond, new, old)
            for new, old in zip((sol, liq, *inner), (solidus_c, liquidus_c, *inner_c), strict=True)
        )

    def temperature_from_terms(self, terms: tuple, melt_fraction):
        """T [deg C] at melt fraction F, given :meth:`pressure_terms` of the same P and water."""
        raise NotImplementedError

    def temperature_c(self, pressure_gpa, melt_fraction, water_wt_pct=0.0):
        """Temperature [deg C] at which the source holds melt fraction F at pressure P."""
        p, f, w = np.broadcast_arrays(
            np.asarray(pressure_gpa, float),
            np.asarray(melt_fraction, float),
            np.asarray(water_wt_pct, float),
        )
        return self.temperature_from_terms(self.pressure_terms(p, w), f)

    def solidus_c(self, pressure_gpa, water_wt_pct=0.0):
        """(Water-depressed) solidus [deg C]: :meth:`temperature_c` at F = 0."""
        return self.temperature_c(
            pressure_gpa, np.zeros_like(np.asarray(pressure_gpa, float)), water_wt_pct
        )

    def liquidus_c(self, pressure_gpa, water_wt_pct=0.0):
        """(Water-depressed) liquidus [deg C]: :meth:`temperature_c` at F = 1."""
        return self.temperature_c(
            pressure_gpa, np.ones_like(np.asarray(pressure_gpa, float)), water_wt_pct
        )

    def melt_fraction(self, pressure_gpa, temperature_c, water_wt_pct=0.0):
        """Equilibrium melt mass fraction F in [0, 1] at P [GPa], T [deg C] (batch melting).

        Solved by bisection on F, since :meth:`temperature_c` increases with F.
        """
        p, t, w = np.broadcast_arrays(
            np.asarray(pressure_gpa, float),
            np.asarray(temperature_c, float),
            np.asarray(water_wt_pct, float),
        )
        f = _bisect_increasing(
            lambda x: self.temperature_c(p, x, w), np.zeros(p.shape), np.ones(p.shape), t
        )
        f = np.where(t <= self.temperature_c(p, 0.0, w), 0.0, f)
        f = np.where(t >= self.temperature_c(p, 1.0, w), 1.0, f)
        return np.where(np.isnan(t) | np.isnan(p) | np.isnan(w), np.nan, f)

    def water_saturated_bulk_wt_pct(self, pressure_gpa):
        """Bulk water [wt%] above which the source holds free water at P (inf if anhydrous law)."""
        return np.full_like(np.asarray(pressure_gpa, float), np.inf)


@dataclass(frozen=True, kw_only=True)
class KatzModel(MeltingModel):
    """Katz, Spiegelman & Langmuir (2003) parameterization of dry and hydrous peridotite melting.

    Temperatures in deg C, pressures in GPa, water in wt%. All constants are from Table 2 of
    [Katz2003]_, verified (secondary) against a geodynamics code's parameter header that quotes
    the table, except where a field's source says [from memory].

    Notes
    -----
    Anhydrous law ([Katz2003]_ eqs. 3-10; forms from memory, branch structure verified
    secondary)::

        T_sol = A1 + A2 P + A3 P^2          T_lherz = B1 + B2 P + B3 P^2
        T_liq = C1 + C2 P + C3 P^2          R_cpx = r0 + r1 P
        F_cpx-out = M_cpx / R_cpx
        T_cpx-out = F_cpx-out^(1/beta1) (T_lherz - T_sol) + T_sol
        F = ((T - T_sol)/(T_lherz - T_sol))^beta1                             T <= T_cpx-out
        F = F_cpx-out + (1 - F_cpx-out) ((T - T_cpx-out)/(T_liq - T_cpx-out))^beta2

    Water lowers every branch by Delta T = K X^gamma with X = min(X_bulk/(D + F(1 - D)), X_sat)
    and X_sat = chi1 P^lambda + chi2 P (batch partitioning, [Katz2003]_ section 2.3; forms from
    memory, the capped F-dependent shift verified secondary). Inverted for T at given F, both
    branches are explicit, so this class returns T(P, F).
    """

    solidus_a1_c: float = 1085.7
    solidus_a2_c_gpa: float = 132.9
    solidus_a3_c_gpa2: float = -5.1
    lherzolite_liquidus_b1_c: float = 1475.0
    lherzolite_liquidus_b2_c_gpa: float = 80.0
    lherzolite_liquidus_b3_c_gpa2: float = -3.2
    liquidus_c1_c: float = 1780.0
    liquidus_c2_c_gpa: float = 45.0
    liquidus_c3_c_gpa2: float = -2.0
    cpx_reaction_r0: float = 0.5
    cpx_reaction_r1_gpa: float = 0.08
    beta1: float = 1.5
    beta2: float = 1.5
    cpx_mass_fraction: float = 0.17
    water_depression_k_c: float = 43.0
    water_depression_gamma: float = 0.75
    water_partition_coefficient: float = 0.01
    saturation_chi1_wt_pct: float = 12.0
    saturation_chi2_wt_pct_gpa: float = 1.0
    saturation_lambda: float = 0.6

    hydrous: ClassVar[bool] = True

    def __post_init__(self) -> None:
        super().__post_init__()
        checks = {
            "cpx_mass_fraction": (0.0, 1.0),
            "water_partition_coefficient": (0.0, 1.0),
            "beta1": (0.0, np.inf),
            "beta2": (0.0, np.inf),
            "water_depression_gamma": (0.0, np.inf),
        }
        for key, (lo, hi) in checks.items():
            value = getattr(self, key)
            if not lo < value <= hi:
                msg = (
                    f"Katz (2003) parameter {key}={value!r} is outside ({lo}, {hi}]. "
                    "Table 2 of Katz et al. (2003) gives the published value."
                )
                raise ModelError(msg)

    def saturation_wt_pct(self, pressure_gpa):
        """Water saturation of the melt X_sat = chi1 P^lambda + chi2 P [wt%] ([Katz2003]_ eq 17)."""
        p = np.maximum(np.asarray(pressure_gpa, float), 0.0)
        return (
            self.saturation_chi1_wt_pct * p**self.saturation_lambda
            + self.saturation_chi2_wt_pct_gpa * p
        )

    def pressure_terms(self, pressure_gpa, water_wt_pct=0.0) -> tuple:
        """T_sol, T_lherz, T_liq, F_cpx-out, T_cpx-out, X_sat and bulk water at P.

        Beyond the calibrated pressure the law is continued (:meth:`continued_pressure`).
        """
        p, beyond = self.continued_pressure(pressure_gpa)
        t_sol = self.solidus_a1_c + self.solidus_a2_c_gpa * p + self.solidus_a3_c_gpa2 * p * p
        t_lherz = (
            self.lherzolite_liquidus_b1_c
            + self.lherzolite_liquidus_b2_c_gpa * p
            + self.lherzolite_liquidus_b3_c_gpa2 * p * p
        )
        t_liq = self.liquidus_c1_c + self.liquidus_c2_c_gpa * p + self.liquidus_c3_c_gpa2 * p * p
        f_cpx = np.minimum(
            self.cpx_mass_fraction / (self.cpx_reaction_r0 + self.cpx_reaction_r1_gpa * p), 1.0
        )
        t_cpx = f_cpx ** (1.0 / self.beta1) * (t_lherz - t_sol) + t_sol
        w = np.asarray(water_wt_pct, float)
        x_sat = self.saturation_wt_pct(p) if np.any(w) else None
        if beyond is not None:
            t_sol, t_liq, t_lherz, t_cpx = self.continue_boundaries(
                pressure_gpa, beyond, t_sol, t_liq, t_lherz, t_cpx
            )
        return t_sol, t_lherz, t_liq, f_cpx, t_cpx, x_sat, w

    def temperature_from_terms(self, terms: tuple, melt_fraction):
        """T(P, F, water) [deg C]: the inverse of [Katz2003]_ eqs. 3 and 9, lowered by water.

        Delta T = K X^gamma with X = min(X_bulk/(D + F(1 - D)), X_sat) ([Katz2003]_ eq. 16, 18).
        """
        t_sol, t_lherz, t_liq, f_cpx, t_cpx, x_sat, w = terms
        f = np.clip(melt_fraction, 0.0, 1.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            t_present = t_sol + f ** (1.0 / self.beta1) * (t_lherz - t_sol)
            reduced = np.clip((f - f_cpx) / (1.0 - f_cpx), 0.0, 1.0)
            t_free = t_cpx + reduced ** (1.0 / self.beta2) * (t_liq - t_cpx)
        t = np.where(f <= f_cpx, t_present, t_free)
        if x_sat is None:
            return t
        d = self.water_partition_coefficient
        x = np.minimum(w / (d + f * (1.0 - d)), x_sat)
        return t - self.water_depression_k_c * np.maximum(x, 0.0) ** self.water_depression_gamma

    def water_in_melt_wt_pct(self, pressure_gpa, melt_fraction, water_wt_pct):
        """Water in the melt X = min(X_bulk / (D + F (1 - D)), X_sat) [wt%] (batch, capped)."""
        d = self.water_partition_coefficient
        x = np.asarray(water_wt_pct, float) / (d + np.asarray(melt_fraction, float) * (1.0 - d))
        return np.minimum(x, self.saturation_wt_pct(self.continued_pressure(pressure_gpa)[0]))

    def water_saturated_bulk_wt_pct(self, pressure_gpa):
        """Bulk water [wt%] that saturates the solid source, D X_sat(P) [derived].

        Above it the source holds free water at P, outside the batch-partitioning model. X_sat is
        held at its calibrated-limit value deeper down (:meth:`continued_pressure`).
        """
        p, _ = self.continued_pressure(pressure_gpa)
        return self.water_partition_coefficient * self.saturation_wt_pct(p)


@dataclass(frozen=True, kw_only=True)
class McKenzieBickleModel(MeltingModel):
    """McKenzie & Bickle (1988) anhydrous melting of peridotite.

    Notes
    -----
    All forms and constants are [from memory] ([MB1988]_; the paper was not at hand)::

        P = (T_s - s0)/s1 + s2 exp[s3 (T_s - s0)]       (solidus, implicit in T_s)
        T_l = l0 + l1 P + l2 atan(P / l3)                (liquidus)
        T' = (T - (T_s + T_l)/2) / (T_l - T_s)
        F = 0.5 + T' + (T'^2 - 0.25)(a0 + a1 T')

    The thermodynamic constants of the isentrope are not verified (c_p = 1200 J/kg/K,
    alpha = 4e-5 /K, Delta S = 250 J/kg/K [from memory, low confidence]). The model is anhydrous: a
    source with water is outside it and is flagged invalid.
    """

    solidus_s0_c: float = 1100.0
    solidus_s1_c_gpa: float = 136.0
    solidus_s2_gpa: float = 4.968e-4
    solidus_s3_per_c: float = 1.2e-2
    liquidus_l0_c: float = 1736.2
    liquidus_l1_c_gpa: float = 4.343
    liquidus_l2_c: float = 180.0
    liquidus_l3_gpa: float = 2.2169
    fraction_a0: float = 0.4256
    fraction_a1: float = 2.988

    def solidus_dry_c(self, pressure_gpa):
        """Dry solidus T_s(P) [deg C]: x = T_s - s0 solves x/s1 + s2 exp(s3 x) = P (increasing,
        convex), by Newton's method from above (s1 P, ln(P/s2)/s3 bound x) [derived]."""
        p = np.asarray(pressure_gpa, float)
        s1, s2, s3 = self.solidus_s1_c_gpa, self.solidus_s2_gpa, self.solidus_s3_per_c
        with np.errstate(divide="ignore", invalid="ignore"):
            x = np.minimum(s1 * p, np.where(p > s2, np.log(p / s2) / s3, np.inf))
        for _ in range(100):
            e = s2 * np.exp(s3 * x)
            step = (x / s1 + e - p) / (1.0 / s1 + s3 * e)
            x = x - step
            if not np.any(np.abs(step) > 1e-9):
                break
        return self.solidus_s0_c + x

    def liquidus_dry_c(self, pressure_gpa):
        """Dry liquidus T_l(P) [deg C]."""
        p = np.asarray(pressure_gpa, float)
        return (
            self.liquidus_l0_c
            + self.liquidus_l1_c_gpa * p
            + self.liquidus_l2_c * np.arctan(p / self.liquidus_l3_gpa)
        )

    def melt_fraction_of_reduced(self, reduced_temperature):
        """F(T') = 0.5 + T' + (T'^2 - 0.25)(a0 + a1 T') ([MB1988]_, from memory)."""
        tr = np.asarray(reduced_temperature, float)
        return 0.5 + tr + (tr * tr - 0.25) * (self.fraction_a0 + self.fraction_a1 * tr)

    def _reduced_of_fraction(self, f):
        """Invert F(T') on [-0.5, 0.5] (monotone): a table guess, then Newton steps."""
        if "_grid" not in self.__dict__:  # made once per model (frozen: kept in __dict__)
            grid = np.linspace(-0.5, 0.5, 2001)
            self.__dict__["_grid"] = (grid, self.melt_fraction_of_reduced(grid))
        grid, fractions = self.__dict__["_grid"]
        tr = np.interp(f, fractions, grid)
        a0, a1 = self.fraction_a0, self.fraction_a1
        for _ in range(3):
            slope = 1.0 + 2.0 * tr * (a0 + a1 * tr) + a1 * (tr * tr - 0.25)
            tr = np.clip(tr - (self.melt_fraction_of_reduced(tr) - f) / slope, -0.5, 0.5)
        return tr

    def pressure_terms(self, pressure_gpa, water_wt_pct=0.0) -> tuple:
        """Dry solidus and liquidus at P, and the water (which must be zero).

        Beyond the calibrated pressure both are continued (:meth:`continued_pressure`).
        """
        p, beyond = self.continued_pressure(pressure_gpa)
        # the implicit solidus is solved once per distinct pressure (columns share the nodes)
        nodes, where = np.unique(p, return_inverse=True)
        t_s = self.solidus_dry_c(nodes)[where].reshape(p.shape)
        t_l = self.liquidus_dry_c(p)
        if beyond is not None:
            t_s, t_l = self.continue_boundaries(pressure_gpa, beyond, t_s, t_l)
        return t_s, t_l, np.asarray(water_wt_pct, float)

    def temperature_from_terms(self, terms: tuple, melt_fraction):
        """T(P, F) [deg C] = T' (T_l - T_s) + (T_s + T_l)/2; NaN where the source has water."""
        t_s, t_l, w = terms
        tr = self._reduced_of_fraction(np.clip(melt_fraction, 0.0, 1.0))
        t = tr * (t_l - t_s) + 0.5 * (t_s + t_l)
        return np.where(w > 0, np.nan, t) if np.any(w) else t


KATZ2003 = KatzModel(
    name="katz2003",
    specific_heat_j_kg_k=1000.0,
    entropy_of_melting_j_kg_k=300.0,
    solid_expansivity_k=40e-6,
    melt_expansivity_k=68e-6,
    solid_density_kg_m3=3300.0,
    melt_density_kg_m3=2900.0,
    reference=(
        "Katz, R. F., Spiegelman, M. & Langmuir, C. H. (2003), G-cubed 4(9) 1073, "
        "doi:10.1029/2002GC000433, Table 2"
    ),
    sources=KATZ_SOURCES,
)

MCKENZIE_BICKLE1988 = McKenzieBickleModel(
    name="mckenzie-bickle1988",
    specific_heat_j_kg_k=1200.0,
    entropy_of_melting_j_kg_k=250.0,
    solid_expansivity_k=4e-5,
    melt_expansivity_k=4e-5,
    solid_density_kg_m3=3300.0,
    melt_density_kg_m3=3300.0,
    calibrated_max_pressure_gpa=7.0,
    reference="McKenzie, D. & Bickle, M. J. (1988), J. Petrology 29, 625-679 (forms from memory)",
    sources=MB1988_SOURCES,
)

MODELS: dict[str, MeltingModel] = {m.name: m for m in (KATZ2003, MCKENZIE_BICKLE1988)}


def get_model(name: str | MeltingModel = "katz2003", **parameters: Any) -> MeltingModel:
    """Return the named melting model, with any parameters replaced.

    Parameters
    ----------
    name : str or MeltingModel
        A registry name (``"katz2003"``, ``"mckenzie-bickle1988"``; case and surrounding spaces
        are ignored) or a model object.
    **parameters
        Overrides of named fields, e.g. ``cpx_mass_fraction=0.15``. The variant keeps the name,
        its ``sources`` mark them "user override"; its values travel with every result.

    Returns
    -------
    MeltingModel
        The registered model, or a frozen copy with the overridden fields.

    Raises
    ------
    ModelError
        Unknown model or parameter name (the message suggests the nearest), or a bad value.
    """
    return lookup(name, MODELS, "melting model", MeltingModel, **parameters)
