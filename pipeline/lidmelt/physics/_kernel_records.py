"""The records of the compiled melting kernel (:mod:`lidmelt.physics._kernel`): its scalars
(:class:`KernelParameters`), the cells a call evaluates (:class:`Cells`), the settings of one
call (:class:`KernelCall`) and what it measured (:class:`KernelTimings`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np


class KernelParameters(NamedTuple):
    """The compiled kernel's scalars, read by name (every field a float).

    A named tuple of floats: numba passes it by value, as one tuple of doubles whose fields it
    reads at offsets fixed when compiling (no array lookup by index); it needs no reference
    counting (the kernel's loop is compiled without it) and is immutable, so the per-call
    fields are set on a copy (:meth:`_replace`). The fields from ``min_top_km`` on are
    set per call by :func:`lidmelt.physics._kernel.evaluate_compiled`; the others come from the
    table and the water content (:func:`~lidmelt.physics._kernel_arrays.kernel_arrays`).
    """

    onset_tp0_c: float  #: Tp [deg C] of the first node of the onset index's Tp grid
    onset_inv_tp_step: float  #: 1 / :data:`~lidmelt.physics._kernel_arrays.TP_INDEX_STEP_K`
    onset_step_gpa: float  #: the onset curve's pressure step [GPa] (``ONSET_STEP_GPA``)
    tp_min_c: float  #: the table's first Tp node [deg C]
    inv_tp_step: float  #: 1 / the table's Tp step [1/K]
    inv_pressure_step: float  #: 1 / the table's top-pressure step [1/GPa]
    calibrated_max_gpa: float  #: the model's calibrated pressure P_c [GPa]
    water_u: float  #: one water content's coordinate u = water^0.75 (0: none)
    curve_inv_water_step: float  #: 1 / the water curves' u step (0: one water content)
    table_inv_water_step: float  #: 1 / the table's u step (0 with one water node)
    surface_solidus_c: float  #: the dry solidus at P = 0 [deg C]
    gpa_per_km: float  #: pressure of 1 km of rock above the PREM join [GPa]
    top_max_gpa: float  #: the table's deepest top of melting [GPa]
    max_onset_gpa: float  #: the deepest onset searched (the upper mantle's floor) [GPa]
    water_max_wt_pct: float  #: the table's largest water content [wt%]
    hydrous: float  #: 1.0 for a hydrous model, else 0.0
    tp_max_c: float  #: the table's last Tp node [deg C]
    join_gpa: float  #: pressure of the join of constant rho g and PREM [GPa]
    join_km: float  #: depth of that join [km]
    inv_node_step: float  #: 1 / the pressure step of the PREM depth nodes [1/GPa]
    deep_tp_node: float  #: the first Tp node of the deep columns
    deep_inv_water_step: float  #: 1 / the deep columns' u step (0: one water content)
    rough_inv_water_step: float  #: 1 / the rough intervals' u step (0: one water content)
    min_top_km: float  #: the minimum top of melting [km] (per call)
    ambient_c: float  #: ambient Tp [deg C], NaN for none (per call)
    crust_ratio: float  #: solid over crust density (per call)
    nodata: float  #: flag value of a cell without data, NaN for none (per call)
    min_fraction: float  #: the regime's least extracted melt fraction (per call)
    least_anomaly_km: float  #: the regime's least anomaly melt [km] (per call)


#: The per-call fields of :class:`KernelParameters` before a call sets them.
CALL_FIELDS = {
    "min_top_km": np.nan, "ambient_c": np.nan, "crust_ratio": np.nan, "nodata": np.nan,
    "min_fraction": np.nan, "least_anomaly_km": np.nan,
}  # fmt: skip


@dataclass(frozen=True)
class Cells:
    """The inputs of cells: each a float or an array; the arrays broadcast together.

    Parameters
    ----------
    potential_temperature_c : float or array_like
        Potential temperature of the mantle [deg C] (ambient plus anomaly).
    lid_depth_km : float or array_like
        Depth of the lid base below the seafloor [km].
    water_wt_pct : float or array_like
        Water in the bulk source [wt%] (a scalar keeps the table's fast path).
    upwelling_mm_yr : float or array_like, optional
        Upwelling rate [mm/yr]; None: no melt production.
    water_load_km : float or array_like
        The water above the seafloor as its rock-equivalent depth Z(P_w) [km]
        (:func:`lidmelt.physics._pressure.water_load_km`).
    ambient_lid_depth_km, excess_k : array_like, optional
        The ambient column's own top [km] and the excess to melt [K] where not NaN (the
        geotherm rule, :mod:`lidmelt.physics._geotherm`); None where the lid is the top.
    """

    potential_temperature_c: Any
    lid_depth_km: Any
    water_wt_pct: Any = 0.0
    upwelling_mm_yr: Any = None
    water_load_km: Any = 0.0
    ambient_lid_depth_km: Any = None
    excess_k: Any = None

    def select(self, mask) -> Cells:
        """The cells where the 1-D boolean ``mask`` is True (floats and None stay as they are;
        every array is 1-D like ``mask``)."""

        def pick(v):
            return v[mask] if np.ndim(v) else v

        return Cells(*(pick(getattr(self, name)) for name in self.__dataclass_fields__))


@dataclass(frozen=True, kw_only=True)
class KernelCall:
    """The settings of one call of the kernel (the per-call :class:`KernelParameters`).

    ``ambient_c`` [deg C] NaN: no ambient column; ``crust_ratio``: solid over crust density;
    ``nodata``: the flag of a cell with a non-finite Tp or water or a NaN lid (every output
    NaN), None for none; ``min_fraction``: the regime's least extracted melt fraction.
    """

    ambient_c: float
    min_top_km: float
    crust_ratio: float
    nodata: int | None = None
    min_fraction: float = 0.0


@dataclass(frozen=True)
class KernelTimings:
    """The cells of a call, those left to the numpy path and the seconds they took there."""

    cells: int = 0
    numpy_cells: int = 0
    numpy_s: float = 0.0
