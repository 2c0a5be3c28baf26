"""Peridotite phase boundaries beyond a melting model's calibrated pressure (published shapes).

The Katz et al. (2003) and McKenzie & Bickle (1988) laws are fits to experiments up to about
7 GPa. Deeper, lidmelt continues each model's dry solidus and liquidus with the *shape* of
published high-pressure peridotite melting curves, joined continuously at the model's calibrated
limit P_c by shifting each curve by the model's offset there (docs/physics.md, section "Beyond
the calibrated pressure"):

    T_sol(P) = T_sol,model(P_c) + S(P) - S(P_c),   T_liq(P) = T_liq,model(P_c) + L(P) - L(P_c),

and holds every intermediate boundary of the model (the Katz lherzolite liquidus and T_cpx-out;
McKenzie & Bickle's reduced temperature is one already) at the fractional position within the
solidus-liquidus interval that it has at P_c (:func:`at_fraction_of_interval`).

Sources
-------
* Solidus shape S(P) = 1086 - 5.7 P + 390 ln P (deg C, GPa), the anhydrous solidus of peridotite
  KLB-1 from 2.7 to 22.5 GPa, +-68 deg C (2 sigma): Herzberg, Raterron & Zhang (2000), "New
  experimental observations on the anhydrous solidus for peridotite KLB-1", G-cubed 1,
  2000GC000089, abstract [verified: the abstract, read in the journal's web copy].
* Liquidus shape L(P) = 2067.59 + 25.1327 P - 0.2455 P^2 (kelvin, GPa; below 22.76 GPa), the
  "batch melting liquidus" of natural peridotite fitted to the KLB-1 and PHN1611 liquidus
  experiments of Takahashi & Scarfe (1985), Takahashi (1986), Ito & Takahashi (1987), Herzberg
  et al. (1990), Takahashi et al. (1993), Trønnes & Frost (2002) and Fiquet et al. (2010)
  [verified (secondary): the fit and its data list as read in Ruedas (2018), solliq v1.3, an
  open-source compilation of solidus and liquidus parameterizations; the primary papers were
  not checked]. In deg C: 1794.44 + 25.1327 P - 0.2455 P^2.
"""

from __future__ import annotations

import numpy as np

#: Herzberg, Raterron & Zhang (2000) abstract: T = 1086 - 5.7 P + 390 ln P [deg C], 2.7-22.5 GPa.
SOLIDUS_SHAPE = {"c0_c": 1086.0, "c1_c_gpa": -5.7, "cln_c": 390.0, "uncertainty_2sigma_k": 68.0}
#: Peridotite batch-melting liquidus, 2067.59 + 25.1327 P - 0.2455 P^2 [K] (see module doc).
LIQUIDUS_SHAPE = {"c0_k": 2067.59, "c1_k_gpa": 25.1327, "c2_k_gpa2": -0.2455}


def solidus_shape_c(pressure_gpa):
    """Herzberg et al. (2000) anhydrous KLB-1 solidus [deg C] at P [GPa] (P > 0)."""
    p = np.asarray(pressure_gpa, float)
    s = SOLIDUS_SHAPE
    with np.errstate(divide="ignore", invalid="ignore"):
        return s["c0_c"] + s["c1_c_gpa"] * p + s["cln_c"] * np.log(p)


def liquidus_shape_c(pressure_gpa):
    """The peridotite batch-melting liquidus [deg C] at P [GPa] (see the module doc)."""
    p = np.asarray(pressure_gpa, float)
    s = LIQUIDUS_SHAPE
    return s["c0_k"] + s["c1_k_gpa"] * p + s["c2_k_gpa2"] * p * p - 273.15


def continued_solidus_liquidus(pressure_gpa, pc_gpa, solidus_pc_c, liquidus_pc_c):
    """Dry solidus and liquidus [deg C] beyond P_c: the published shapes, each shifted to meet
    the model's own boundary at P_c (continuous there; see the module doc)."""
    p = np.asarray(pressure_gpa, float)
    sol = solidus_pc_c + (solidus_shape_c(p) - float(solidus_shape_c(pc_gpa)))
    liq = liquidus_pc_c + (liquidus_shape_c(p) - float(liquidus_shape_c(pc_gpa)))
    return sol, liq


def at_fraction_of_interval(boundary_pc, solidus_pc, liquidus_pc, solidus, liquidus):
    """A boundary held at the fraction of the solidus-liquidus interval it has at P_c.

    T_b(P) = T_sol(P) + theta (T_liq(P) - T_sol(P)), theta = (T_b(P_c) - T_sol(P_c)) /
    (T_liq(P_c) - T_sol(P_c)) (lidmelt's choice: the melting interval keeps its calibrated
    internal shape while its ends follow the published curves).
    """
    theta = (boundary_pc - solidus_pc) / (liquidus_pc - solidus_pc)
    return solidus + theta * (liquidus - solidus)
