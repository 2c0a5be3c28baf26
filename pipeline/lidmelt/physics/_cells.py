"""Every output variable of a run for arrays of cells: the column, the melt the anomaly adds,
the regime, crust and melt production (:func:`evaluate_cells`).

The column outputs and the excess to melt come from :mod:`lidmelt.physics._evaluate`
(:func:`~lidmelt.physics._evaluate.melt_column`, by the table or direct integration), on the
table path through the compiled kernel (:mod:`lidmelt.physics._kernel`) where numba imports;
the regime from :mod:`lidmelt.physics._regime`. Definitions: docs/physics.md, section
"Definitions lidmelt fixes".
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from lidmelt._errors import ModelError
from lidmelt.physics._column import DEFAULT_MIN_TOP_KM
from lidmelt.physics._evaluate import EXTRACTION_MIN_MELT_FRACTION, excess_to_melt_k, melt_column
from lidmelt.physics._kernel import ROWS as OUTPUT_ROWS
from lidmelt.physics._kernel import compiled_cells, use_compiled
from lidmelt.physics._kernel_records import Cells, KernelCall, KernelTimings
from lidmelt.physics._melting import MeltingModel, get_model
from lidmelt.physics._regime import LEAST_ANOMALY_MELT_KM, melting_regime
from lidmelt.physics._table import MeltTable, get_table


@dataclass(frozen=True, kw_only=True)
class CellOptions:
    """The settings of :func:`evaluate_cells` (the same for every cell).

    Parameters
    ----------
    ambient_potential_temperature_c : float
        The ambient mantle [deg C] (Tp = ambient + anomaly).
    model : str or MeltingModel
        A registry name or model object.
    method : {"table", "direct"}
        The melting table (direct integration where it cannot serve a cell), or direct.
    table : MeltTable, optional
        The table to use (default: the model's cached table).
    min_top_km : float
        The minimum top of melting [km] (the crust's base).
    crust_density_kg_m3 : float
        The crust's density [kg m^-3].
    compiled : bool, optional
        The table path by the compiled kernel (True; numba required), by numpy (False), or
        compiled where numba imports (None).
    nodata : int, optional
        A flag value for cells with a non-finite Tp or water or a NaN lid (every output NaN);
        None for none.
    """

    ambient_potential_temperature_c: float
    model: str | MeltingModel = "katz2003"
    method: str = "table"
    table: MeltTable | None = None
    min_top_km: float = DEFAULT_MIN_TOP_KM
    crust_density_kg_m3: float = 2900.0
    compiled: bool | None = None
    nodata: int | None = None


@dataclass(frozen=True, eq=False)
class CellResult:
    """What :func:`evaluate_cells` returns.

    Parameters
    ----------
    outputs : dict of str to numpy.ndarray
        The outputs by name: arrays of the cells' shape and the dtype the caller chose.
    flag : numpy.ndarray of uint8
        The bit flags (``FLAG_MEANINGS``).
    timings : KernelTimings
        The compiled kernel's timings: the cells it left to the numpy path and their seconds
        (zeros on the numpy path).
    """

    outputs: dict[str, np.ndarray]
    flag: np.ndarray
    timings: KernelTimings

    def as_dict(self) -> dict[str, np.ndarray]:
        """The outputs and the ``"flag"`` by name."""
        return {**self.outputs, "flag": self.flag}


def evaluate_cells(cells: Cells, options: CellOptions, *, dtype, out=None) -> CellResult:
    """Every output variable of :mod:`lidmelt._variables` and the flag, for arrays of cells.

    Beside the column outputs of :func:`melt_column` (Tp = ambient + anomaly):

    * ``excess_to_melt_k``: :func:`excess_to_melt_k` at the ambient Tp, or ``cells.excess_k``
      where that is given and not NaN (the geotherm rule's, :mod:`lidmelt.physics._geotherm`).
    * ``anomaly_melt_thickness_km``: H(Tp) - H(ambient), never negative, the ambient column
      beneath the same lid (or ``cells.ambient_lid_depth_km``, its own geotherm top, where given
      and not NaN) and water. H(ambient) is non-zero only where ambient mantle melts, that is
      where the excess to melt is negative, so the ambient column is evaluated only there.
    * ``melting_regime``: :func:`lidmelt.physics._regime.melting_regime` with
      :data:`EXTRACTION_MIN_MELT_FRACTION` and the registry's least anomaly melt. NaN where H is.
    * ``crustal_thickness_km``: H rho_s / rho_crust, rho_s the model's solid density.
    * ``melt_production_mm_yr`` (only with ``cells.upwelling_mm_yr``): W F(top), the
      rock-equivalent melt volume per unit area and time leaving the top of a steady
      one-dimensional column (mass balance: solid flux rho_s W enters, a fraction F(top) of it
      leaves as melt).

    Definitions: docs/physics.md, "Definitions lidmelt fixes". The table path runs in the
    compiled kernel (:mod:`lidmelt.physics._kernel`) where ``options.compiled`` allows; the
    cells it leaves (outside the table, on the edge of the saturation flag) take numpy.

    Parameters
    ----------
    cells : Cells
        The cells' inputs (the water may stay a scalar: the table's fast path).
    options : CellOptions
        The settings shared by every cell.
    dtype : numpy.dtype
        The outputs' dtype (float32 or float64). The compiled kernel stores float32 (far finer
        than the table's error), so float64 holds those values widened.
    out : numpy.ndarray, optional
        Of ``dtype``, C-contiguous (len(:data:`OUTPUT_ROWS`), n): receives every output in that
        order (NaN where not given: production without upwelling); the outputs are views of it.

    Returns
    -------
    CellResult
        The outputs by name, the flag and the kernel's timings.

    Raises
    ------
    ModelError
        If ``out`` is not of ``dtype``, or the model or an option is invalid.
    """
    dtype = np.dtype(dtype)
    if out is not None and out.dtype != dtype:
        msg = f"out has dtype {out.dtype}, but dtype {dtype} was asked; pass out of that dtype."
        raise ModelError(msg)
    model = get_model(options.model)
    shape = np.broadcast_shapes(np.shape(cells.potential_temperature_c),
                                np.shape(cells.lid_depth_km))  # fmt: skip
    given = {k: None if v is None else np.broadcast_to(np.asarray(v, float), shape)
             for k, v in (("ambient_lid_depth_km", cells.ambient_lid_depth_km),
                          ("excess_k", cells.excess_k))}  # fmt: skip
    cells = replace(cells, **given)
    res = None
    if options.method == "table" and use_compiled(options.compiled):
        res = _compiled(cells, options, model, shape, out)
    if res is None:
        res = _numpy(cells, options, model, out), KernelTimings()
    outputs, timings = res
    flag = outputs.pop("flag")
    outputs = {k: np.asarray(v).astype(dtype, copy=False) for k, v in outputs.items()}
    return CellResult(outputs, flag, timings)


def _compiled(cells: Cells, options: CellOptions, model, shape, out):
    """The table path by the compiled kernel (its cells left by :func:`_numpy_outputs`):
    (outputs and flag by name, timings), or None where the kernel cannot serve the call."""
    tab = options.table if options.table is not None else get_table(model)
    water = np.asarray(cells.water_wt_pct, float)
    broadcast = replace(
        cells,
        potential_temperature_c=np.broadcast_to(
            np.asarray(cells.potential_temperature_c, float), shape
        ),
        lid_depth_km=np.broadcast_to(np.asarray(cells.lid_depth_km, float), shape),
        water_wt_pct=np.broadcast_to(water, shape) if water.ndim else cells.water_wt_pct,
    )
    call = KernelCall(
        ambient_c=float(options.ambient_potential_temperature_c), min_top_km=options.min_top_km,
        crust_ratio=model.solid_density_kg_m3 / options.crust_density_kg_m3,
        nodata=options.nodata, min_fraction=EXTRACTION_MIN_MELT_FRACTION,
    )  # fmt: skip
    numpy_options = replace(options, table=tab)
    return compiled_cells(
        tab, broadcast, call, out=out,
        numpy_path=lambda sub: _numpy_outputs(sub, numpy_options, model),
    )  # fmt: skip


def _numpy(cells: Cells, options: CellOptions, model, out):
    """Every output by numpy (the table's numpy path or direct integration), ``nodata`` applied
    and, with ``out``, copied into its rows."""
    res = _numpy_outputs(cells, options, model)
    tp, lid, water = cells.potential_temperature_c, cells.lid_depth_km, cells.water_wt_pct
    if options.nodata is not None:
        shape = res["flag"].shape
        with np.errstate(invalid="ignore"):
            missing = ~(
                np.isfinite(np.broadcast_to(tp, shape))
                & ~np.isnan(np.broadcast_to(lid, shape))
                & np.isfinite(np.broadcast_to(water, shape))
            )
        res = {
            k: np.where(missing, options.nodata if k == "flag" else np.nan, v)
            for k, v in res.items()
        }
        res["flag"] = res["flag"].astype(np.uint8)
    if out is None:
        return res
    for k, name in enumerate(OUTPUT_ROWS):
        out[k] = np.ravel(res[name]) if name in res else np.nan
    views = {name: out[k].reshape(res["flag"].shape) for k, name in enumerate(OUTPUT_ROWS)}
    return {**{n: v for n, v in views.items() if n in res}, "flag": res["flag"]}


def _numpy_outputs(cells: Cells, options: CellOptions, model) -> dict[str, np.ndarray]:
    """Every output and the flag by numpy, as :func:`melt_column` returns them."""
    tp, water = cells.potential_temperature_c, cells.water_wt_pct
    shape = np.broadcast_shapes(np.shape(tp), np.shape(cells.lid_depth_km))
    lid = np.broadcast_to(np.asarray(cells.lid_depth_km, float), shape)
    load = np.broadcast_to(np.asarray(cells.water_load_km, float), shape)
    common = {"model": model, "method": options.method, "table": options.table,
              "min_top_km": options.min_top_km, "compiled": False}  # fmt: skip
    out = melt_column(tp, lid, water, water_load_km=load, **common).as_dict()
    ambient = float(options.ambient_potential_temperature_c)
    ex = excess_to_melt_k(
        lid, water, ambient_potential_temperature_c=ambient, model=model,
        min_top_km=options.min_top_km, water_load_km=load,
    )  # fmt: skip
    if cells.excess_k is not None:
        ex = np.where(np.isnan(cells.excess_k), ex, cells.excess_k)
    out["excess_to_melt_k"] = ex
    h = out["melt_thickness_km"]
    with np.errstate(invalid="ignore"):
        ambient_melts = np.broadcast_to(ex < 0, h.shape)
    h_amb, f_amb = np.zeros(h.shape, h.dtype), np.zeros(h.shape, h.dtype)
    if ambient_melts.any():
        w_all = np.broadcast_to(np.asarray(water, float), h.shape)
        w_sel = w_all[ambient_melts] if np.ndim(water) else float(water)
        given = cells.ambient_lid_depth_km
        amb_lid = lid if given is None else np.where(np.isnan(given), lid, given)
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
        out["crustal_thickness_km"] = h * (model.solid_density_kg_m3 / options.crust_density_kg_m3)
        if cells.upwelling_mm_yr is not None:
            out["melt_production_mm_yr"] = out["max_melt_fraction"] * np.asarray(
                cells.upwelling_mm_yr, float
            )
    return out
