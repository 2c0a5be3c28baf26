"""An independent, per-column reference solution with scipy.integrate.solve_ivp.

This is the calculation a user would otherwise write by hand for one site: the isentropic
melting ODE in its differential form, with T as the state and the partial derivatives of
F(P, T) taken by central differences of :meth:`MeltingModel.melt_fraction`,

    dT/dP = (T / c_p) (abar - Delta S F_P) / (1 + T Delta S F_T / c_p)

(Katz et al. 2003, eq. 20 rearranged [from memory]; T in K, P in Pa), integrated from the onset to
the top of melting with an adaptive Runge-Kutta method, and H = integral of F dz by quadrature of
the dense output. It shares only the melting law and the constants with
:mod:`lidmelt.physics._column`, not the discretisation, so the tests use it as a cross-check and
the benchmark as the naive per-cell baseline. It is slow by design; do not use it for grids.
"""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_ivp, trapezoid

from lidmelt.physics._column import onset_pressure_gpa, top_of_melting_km
from lidmelt.physics._melting import GPA, MeltingModel, get_model


def solve_ivp_column(
    potential_temperature_c: float,
    lid_depth_km: float,
    water_wt_pct: float = 0.0,
    *,
    model: str | MeltingModel = "katz2003",
    min_top_km: float = 7.0,
    rtol: float = 1e-8,
) -> dict[str, float]:
    """Melt thickness [km], onset pressure [GPa] and F at the top of one column by solve_ivp."""
    model = get_model(model)
    tp, w = float(potential_temperature_c), float(water_wt_pct)
    p_on = float(onset_pressure_gpa(model, tp, w))
    top_p = float(model.pressure_gpa(top_of_melting_km(lid_depth_km, min_top_km)))
    if not np.isfinite(p_on) or p_on <= top_p:
        return {"melt_thickness_km": 0.0, "onset_pressure_gpa": p_on, "max_melt_fraction": 0.0}
    cp, ds = model.specific_heat_j_kg_k, model.entropy_of_melting_j_kg_k
    a_s = model.solid_expansivity_k / model.solid_density_kg_m3
    a_f = model.melt_expansivity_k / model.melt_density_kg_m3
    dp, dt = 1e-5, 1e-3  # GPa, K: central-difference steps

    def fraction(p, t_k):
        return float(model.melt_fraction(p, t_k - 273.15, w))

    def rhs(p, y):
        t_k = y[0]
        f = fraction(p, t_k)
        f_p = (fraction(p + dp, t_k) - fraction(max(p - dp, 0.0), t_k)) / (
            (p + dp - max(p - dp, 0.0)) * GPA
        )
        f_t = (fraction(p, t_k + dt) - fraction(p, t_k - dt)) / (2 * dt)
        abar = (1 - f) * a_s + f * a_f
        return [t_k / cp * (abar - ds * f_p) / (1 + t_k * ds * f_t / cp) * GPA]

    t0 = float(model.solid_adiabat_c(tp, p_on)) + 273.15
    sol = solve_ivp(
        rhs,
        (p_on, top_p),
        [t0],
        method="RK45",
        rtol=rtol,
        atol=1e-6,
        dense_output=True,
        max_step=0.05,
    )
    p = np.linspace(p_on, top_p, 2001)
    f = np.array([fraction(pp, tt) for pp, tt in zip(p, sol.sol(p)[0], strict=True)])
    km_per_gpa = float(model.depth_km(1.0))
    h = float(trapezoid(f, -p) * km_per_gpa)
    return {"melt_thickness_km": h, "onset_pressure_gpa": p_on, "max_melt_fraction": float(f[-1])}
