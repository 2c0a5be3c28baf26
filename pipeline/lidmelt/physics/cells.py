"""Every output variable of a run for arrays of cells: the column, the melt the anomaly adds,
the regime, crust and melt production (:func:`evaluate_cells`).

The column outputs and the excess to melt come from :mod:`lidmelt.physics.evaluate`
(:func:`~lidmelt.physics.evaluate.melt_column`, by the table or direct integration), on the
table path through the compiled kernel (:mod:`lidmelt.physics.kernel`) where numba imports;
the regime from :mod:`lidmelt.physics.regime`. Definitions: docs/physics.md, section
"Definitions lidmelt fixes".
"""

from __future__ import annotations

import numpy as np

from lidmelt.physics.column import DEFAULT_MIN_TOP_KM
from lidmelt.physics.evaluate import (
    EXTRACTION_MIN_MELT_FRACTION,
    OUTPUT_ROWS,
    excess_to_melt_k,
    melt_column,
)
from lidmelt.physics.kernel import compiled_cells, use_compiled
from lidmelt.physics.melting import MeltingModel, get_model
from lidmelt.physics.regime import LEAST_ANOMALY_MELT_KM, melting_regime
from lidmelt.physics.table import MeltTable, get_table

__all__ = ["evaluate_cells"]


def evaluate_cells(
    potential_temperature_c, lid_depth_km, water_wt_pct=0.0, *,
    ambient_potential_temperature_c: float, model: str | MeltingModel = "katz2003",
    method: str = "table", table: MeltTable | None = None, min_top_km: float = DEFAULT_MIN_TOP_KM,
    upwelling_mm_yr=None, crust_density_kg_m3: float = 2900.0, compiled: bool | None = None,
    clock: dict | None = None, out: np.ndarray | None = None, nodata: int | None = None,
    ambient_lid_depth_km=None, excess_k=None, water_load_km=0.0,
) -> dict[str, np.ndarray]:  # fmt: skip
    """Every output variable of :mod:`lidmelt.variables` and the ``"flag"``, for arrays of cells.

    Beside the column outputs of :func:`melt_column` (Tp = ambient + anomaly):

    * ``excess_to_melt_k``: :func:`excess_to_melt_k` at the ambient Tp, or ``excess_k`` where
      that is given and not NaN (the geotherm rule's, :mod:`lidmelt.physics.geotherm`).
    * ``anomaly_melt_thickness_km``: H(Tp) - H(ambient), never negative, the ambient column
      beneath the same lid (or ``ambient_lid_depth_km``, its own geotherm top, where given and
      not NaN) and water. H(ambient) is non-zero only where ambient mantle melts, that is where
      the excess to melt is negative, so the ambient column is evaluated only there.
    * ``melting_regime``: :func:`lidmelt.physics.regime.melting_regime` with
      :data:`EXTRACTION_MIN_MELT_FRACTION` and the registry's least anomaly melt. NaN where H is.
    * ``crustal_thickness_km``: H rho_s / rho_crust, rho_s the model's solid density.
    * ``melt_production_mm_yr`` (only with ``upwelling_mm_yr``): W F(top), the rock-equivalent
      melt volume per unit area and time leaving the top of a steady one-dimensional column
      (mass balance: solid flux rho_s W enters, a fraction F(top) of it leaves as melt).

    Definitions: docs/physics.md, "Definitions lidmelt fixes"; ``water_wt_pct`` may stay a scalar
    (the table's fast path). Returns arrays of the broadcast input shape. The table path runs in
    the compiled kernel (:mod:`lidmelt.physics.kernel`, float32) where numba imports and
    ``compiled`` is not False (True requires it); cells it leaves (outside the table, on the
    edge of the saturation flag) take numpy, counted in ``clock`` (a dict: ``cells``,
    ``numpy_cells``, ``numpy_s``). ``out``, float32 C-contiguous (len(:data:`OUTPUT_ROWS`), n),
    receives every output in that order (NaN where not given: production without upwelling);
    ``nodata``, a flag value, marks cells with a non-finite Tp or water or a NaN lid.
    ``water_load_km``: the water load above the seafloor (its rock-equivalent depth Z(P_w),
    :func:`lidmelt.physics.pressure.water_load_km`), a scalar or an array like the cells.
    """
    model = get_model(model)
    shape = np.broadcast_shapes(np.shape(potential_temperature_c), np.shape(lid_depth_km))
    common = {
        "ambient_potential_temperature_c": ambient_potential_temperature_c, "model": model,
        "method": method, "table": table, "min_top_km": min_top_km,
        "crust_density_kg_m3": crust_density_kg_m3,
        **{k: None if v is None else np.broadcast_to(np.asarray(v, float), shape)
           for k, v in (("ambient_lid", ambient_lid_depth_km), ("excess", excess_k))},
    }  # fmt: skip
    if method == "table" and use_compiled(compiled):
        tab = table if table is not None else get_table(model)
        common["table"] = tab
        tp = np.broadcast_to(np.asarray(potential_temperature_c, float), shape)
        lid = np.broadcast_to(np.asarray(lid_depth_km, float), shape)
        water = np.asarray(water_wt_pct, float)
        water = np.broadcast_to(water, shape) if water.ndim else water_wt_pct

        def numpy_path(t, d, w, up, zw, amb, ex):
            sub = {**common, "ambient_lid": amb, "excess": ex}
            return _numpy_cells(t, d, w, upwelling_mm_yr=up, water_load_km=zw, **sub)

        res = compiled_cells(
            tab, tp, lid, water, ambient=float(ambient_potential_temperature_c),
            min_top_km=min_top_km, upwelling=upwelling_mm_yr,
            crust_ratio=model.solid_density_kg_m3 / crust_density_kg_m3, clock=clock,
            numpy_path=numpy_path, out=out, nodata=nodata, ambient_lid=common["ambient_lid"],
            excess=common["excess"], min_fraction=EXTRACTION_MIN_MELT_FRACTION,
            load=water_load_km,
        )  # fmt: skip
        if res is not None:
            return res
    res = _numpy_cells(
        potential_temperature_c, lid_depth_km, water_wt_pct, upwelling_mm_yr=upwelling_mm_yr,
        water_load_km=water_load_km, **common,
    )  # fmt: skip
    return _into(res, out, nodata, potential_temperature_c, lid_depth_km, water_wt_pct)


def _into(res, out, nodata, tp, lid, water):
    """``res`` with ``nodata`` applied and, with ``out``, copied into its rows (numpy path)."""
    if nodata is not None:
        shape = res["flag"].shape
        with np.errstate(invalid="ignore"):
            missing = ~(
                np.isfinite(np.broadcast_to(tp, shape))
                & ~np.isnan(np.broadcast_to(lid, shape))
                & np.isfinite(np.broadcast_to(water, shape))
            )
        res = {k: np.where(missing, nodata if k == "flag" else np.nan, v) for k, v in res.items()}
        res["flag"] = res["flag"].astype(np.uint8)
    if out is None:
        return res
    for k, name in enumerate(OUTPUT_ROWS):
        out[k] = np.ravel(res[name]) if name in res else np.nan
    views = {name: out[k].reshape(res["flag"].shape) for k, name in enumerate(OUTPUT_ROWS)}
    return {**{n: v for n, v in views.items() if n in res}, "flag": res["flag"]}


def _numpy_cells(
    potential_temperature_c, lid_depth_km, water_wt_pct, *, ambient_potential_temperature_c,
    model, method, table, min_top_km, upwelling_mm_yr, crust_density_kg_m3, ambient_lid=None,
    excess=None, water_load_km=0.0,
):  # fmt: skip
    """:func:`evaluate_cells` by numpy (the table's numpy path or direct integration)."""
    model = get_model(model)
    shape = np.broadcast_shapes(np.shape(potential_temperature_c), np.shape(lid_depth_km))
    lid = np.broadcast_to(np.asarray(lid_depth_km, float), shape)
    load = np.broadcast_to(np.asarray(water_load_km, float), shape)
    common = {"model": model, "method": method, "table": table, "min_top_km": min_top_km}
    common["compiled"] = False
    out = melt_column(
        potential_temperature_c, lid, water_wt_pct, water_load_km=load, **common
    ).as_dict()
    ambient = float(ambient_potential_temperature_c)
    ex = excess_to_melt_k(
        lid, water_wt_pct, ambient_potential_temperature_c=ambient, model=model,
        min_top_km=min_top_km, water_load_km=load,
    )  # fmt: skip
    if excess is not None:
        ex = np.where(np.isnan(excess), ex, excess)
    out["excess_to_melt_k"] = ex
    h = out["melt_thickness_km"]
    with np.errstate(invalid="ignore"):
        ambient_melts = np.broadcast_to(ex < 0, h.shape)
    h_amb, f_amb = np.zeros(h.shape, h.dtype), np.zeros(h.shape, h.dtype)
    if ambient_melts.any():
        water = np.broadcast_to(np.asarray(water_wt_pct, float), h.shape)
        w_sel = water[ambient_melts] if np.ndim(water_wt_pct) else float(water_wt_pct)
        amb_lid = lid if ambient_lid is None else np.where(np.isnan(ambient_lid), lid, ambient_lid)
        amb = melt_column(
            ambient, amb_lid[ambient_melts], w_sel, water_load_km=load[ambient_melts], **common
        )
        h_amb[ambient_melts] = np.nan_to_num(amb.melt_thickness_km, nan=0.0)
        f_amb[ambient_melts] = np.nan_to_num(amb.max_melt_fraction, nan=0.0)
    with np.errstate(invalid="ignore"):
        out["anomaly_melt_thickness_km"] = np.maximum(h - h_amb, 0.0)
        out["melting_regime"] = melting_regime(
            h, out["max_melt_fraction"], h_amb, f_amb,
            min_fraction=EXTRACTION_MIN_MELT_FRACTION, least_anomaly_km=LEAST_ANOMALY_MELT_KM,
        )  # fmt: skip
        out["crustal_thickness_km"] = h * (model.solid_density_kg_m3 / crust_density_kg_m3)
        if upwelling_mm_yr is not None:
            out["melt_production_mm_yr"] = out["max_melt_fraction"] * np.asarray(
                upwelling_mm_yr, float
            )
    return out
