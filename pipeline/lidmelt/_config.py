"""The run configuration: :class:`RunConfig` and its frozen tables.

A :class:`RunConfig` is what :func:`lidmelt.workflow.load_workflow` returns after reading and
validating a workflow file; the engine, the products and the report read it. Every table is a
frozen, hashable dataclass (safe to share between threads, to cache and to pickle), and
:meth:`RunConfig.to_dict` gives the JSON provenance record. This module imports only the
standard library and :mod:`lidmelt._variables` (the registry of the inputs' and outputs' names,
units and accepted ranges), so that every stage can type against it.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from lidmelt import _variables as variables
from lidmelt._config_tables import (
    AssessOptions,
    EnsembleOptions,
    MotionOptions,
)

#: Output variables a run can write, in the order a run writes them.
OUTPUT_VARIABLES: tuple[str, ...] = tuple(variables.OUTPUTS)
#: Output variables written when ``[outputs]`` does not list them and no optional input is
#: given (the registry's ``default`` outputs; see :func:`lidmelt._variables.default_outputs`).
DEFAULT_OUTPUT_VARIABLES: tuple[str, ...] = variables.DEFAULT_OUTPUTS
#: Crust density [kg m^-3] of the crustal thickness output: 2900 kg/m3, common practice for
#: oceanic crust (the melt density of Katz et al. 2003 Table 2, from memory).
DEFAULT_CRUST_DENSITY_KG_M3 = 2900.0
#: Accepted crust density, kg m^-3 (common practice: any rock; outside is a unit slip).
CRUST_DENSITY_RANGE_KG_M3: tuple[float, float] = (2000.0, 3500.0)
#: The inputs a workflow can name under ``[inputs.<name>]`` (the registry's ``workflow_key``).
INPUT_NAMES: tuple[str, ...] = tuple(v.workflow_key for v in variables.INPUTS.values())
#: Unit of each input's grid values and constant, by workflow name.
INPUT_UNITS: dict[str, str] = {v.workflow_key: v.units for v in variables.INPUTS.values()}
#: How an input grid is resampled onto the target grid (the choices of ``lidmelt.grids._align``).
RESAMPLING_METHODS: tuple[str, ...] = ("bilinear", "nearest", "cubic", "average")
#: How melting is evaluated: interpolate a precomputed lookup table, or integrate each column.
METHODS: tuple[str, ...] = ("table", "direct")
#: The rules for the top of melting of a lid from plate age (lidmelt.physics._geotherm, where
#: they are defined; the default there and here agree, tests/test_geotherm.py).
TOP_OF_MELTING_RULES: tuple[str, ...] = ("geotherm", "isotherm")
#: Plume shapes (the shapes of ``lidmelt.grids._anomaly.Plume``).
PLUME_SHAPES: tuple[str, ...] = ("gaussian", "cosine", "top-hat")
#: Accepted ambient potential temperature, degrees C. Published ambient values run from about
#: 1280 C (McKenzie & Bickle 1988) to about 1450 C (from memory); 1350 C is the present MORB
#: source (Herzberg, Condie & Korenaga 2010). Outside 1000-2000 C the value is almost certainly
#: a unit slip (kelvin, or a plume's total Tp), so it is rejected; the bounds are common practice.
AMBIENT_TP_RANGE_C: tuple[float, float] = (1000.0, 2000.0)
#: Accepted lid isotherm, degrees C, exclusive bounds (common practice: above the surface and
#: below any cooling model's mantle temperature).
LID_ISOTHERM_RANGE_C: tuple[float, float] = (0.0, 1600.0)
#: Smallest chunk side, cells (smaller cost more in overhead than they save; common practice).
MIN_CHUNK_SIZE = 64
#: The most plumes a workflow may have, inline and catalogue rows together (hotspot catalogues
#: hold tens to hundreds, common practice); their cost is bounded by ``compute.max_cells``.
MAX_PLUMES = 10_000
#: Default of ``compute.max_cells``: the largest grid a run accepts (cells). 500 million cells
#: are 2 GB per float32 output before compression; a global 1 arc-minute grid has 233 million.
DEFAULT_MAX_CELLS = 500_000_000


class Parameters(Mapping[str, Any]):
    """A read-only, hashable mapping of model parameter overrides (name -> value).

    Use it like a dict: ``get_model(name, **cfg.model.parameters)``.
    """

    __slots__ = ("_items",)

    def __init__(self, items: Mapping[str, Any] | None = None) -> None:
        self._items: tuple[tuple[str, Any], ...] = tuple(sorted((items or {}).items()))

    def __getitem__(self, key: str) -> Any:
        for name, value in self._items:
            if name == key:
                return value
        raise KeyError(key)

    def __iter__(self) -> Iterator[str]:
        return (name for name, _ in self._items)

    def __len__(self) -> int:
        return len(self._items)

    def __hash__(self) -> int:
        return hash(self._items)

    def __eq__(self, other: object) -> bool:
        if isinstance(other, Mapping):
            return dict(self) == dict(other)
        return NotImplemented

    def __repr__(self) -> str:
        return f"Parameters({dict(self._items)!r})"

    def __getstate__(self) -> tuple[tuple[str, Any], ...]:
        return self._items

    def __setstate__(self, state: tuple[tuple[str, Any], ...]) -> None:
        self._items = state


@dataclass(frozen=True, kw_only=True)
class RunOptions:
    """The ``[run]`` table.

    Parameters
    ----------
    name : str
        Run name; the default output folder is ``runs/<name>``.
    output_dir : Path
        Absolute output folder (the ``-o`` option, else ``run.output_dir``, else
        ``runs/<name>``; relative paths are relative to the current working directory).
    netcdf : bool
        Also write one CF NetCDF file of all variables.
    maps : bool
        Draw the map figures.
    report : bool
        Write the run report.
    """

    name: str
    output_dir: Path
    netcdf: bool = False
    maps: bool = True
    report: bool = True


@dataclass(frozen=True, kw_only=True)
class GridSpec:
    """The ``[grid]`` table: the target grid, either like an input or by extent and resolution.

    Parameters
    ----------
    like : str or None
        Name of an input (with a ``path``) whose grid is the target grid.
    extent : tuple of 4 float or None
        ``(west, east, south, north)`` in the units of ``crs`` (degrees for EPSG:4326).
    resolution : float or None
        Cell size in the units of ``crs``.
    crs : str or None
        The target CRS (any string pyproj reads); ``"EPSG:4326"`` when ``extent`` is given
        without it, None with ``like`` (the input's CRS is used).
    """

    like: str | None = None
    extent: tuple[float, float, float, float] | None = None
    resolution: float | None = None
    crs: str | None = None


@dataclass(frozen=True, kw_only=True)
class PlumeSpec:
    """One plume of ``[[inputs.thermal_anomaly.plumes]]``.

    Parameters
    ----------
    longitude, latitude : float
        Plume centre, degrees east and north (EPSG:4326 whatever the grid CRS).
    radius_km : float
        Plume radius r, km (> 0).
    peak_excess_k : float
        Excess temperature A at the centre, K.
    shape : str
        One of :data:`PLUME_SHAPES`, as defined by ``lidmelt.grids._anomaly.Plume`` at geodesic
        distance d: ``"gaussian"`` A exp(-(d/r)^2), ``"cosine"`` A cos^2(pi d / 2r) for d < r,
        ``"top-hat"`` A for d <= r.
    name : str or None
        An optional label.
    peak_upwelling_mm_yr : float or None
        Solid upwelling velocity at the centre, mm/yr, spread with the same shape and radius
        (added to ``[inputs.upwelling]``); None: the plume adds no upwelling.
    """

    longitude: float
    latitude: float
    radius_km: float
    peak_excess_k: float
    shape: str = "gaussian"
    name: str | None = None
    peak_upwelling_mm_yr: float | None = None

    def plume_fields(self) -> dict[str, Any]:
        """The keyword arguments of ``lidmelt.grids._anomaly.Plume`` (the shape and excess).

        The grid stage builds its plume with ``Plume(**spec.plume_fields())``.
        """
        skip = ("name", "peak_upwelling_mm_yr")
        return {
            f.name: getattr(self, f.name) for f in dataclasses.fields(self) if f.name not in skip
        }

    def upwelling_fields(self) -> dict[str, Any] | None:
        """:meth:`plume_fields` with the peak upwelling (mm/yr) as the peak; None without it.

        The plume's shape function is the same whatever the unit of its peak, so the grid stage
        spreads the upwelling with ``Plume(**spec.upwelling_fields())``.
        """
        if self.peak_upwelling_mm_yr is None:
            return None
        return {**self.plume_fields(), "peak_excess_k": self.peak_upwelling_mm_yr}


@dataclass(frozen=True, kw_only=True)
class InputSpec:
    """One ``[inputs.<name>]`` table.

    Parameters
    ----------
    name : str
        One of :data:`INPUT_NAMES`; values are in ``INPUT_UNITS[name]``.
    path : Path or None
        Absolute path of the grid file (GeoTIFF or NetCDF), resolved against the workflow
        file's folder.
    path_as_written : str or None
        The path as written in the workflow (or by ``--set``).
    variable : str or None
        NetCDF variable name (None: the file's only data variable).
    resampling : str
        How the grid is resampled onto the target grid; one of :data:`RESAMPLING_METHODS`.
    constant : float or None
        A uniform value. For ``thermal_anomaly`` it is added to the grid and plumes
        (default 0.0); for the other inputs it replaces the grid (give one or the other).
    plumes : tuple of PlumeSpec
        Plumes added to the thermal anomaly (``thermal_anomaly`` only): the inline
        ``[[plumes]]`` tables, then the rows of ``plumes_file``.
    crs, x_name, y_name : str or None
        The CRS of a grid file that states none; the names of its x and y coordinates.
    file_units : str or None
        The ``units`` key: the unit of the file's values, overriding the file's label;
        converted to :attr:`units` (the property ``units`` is the unit the input expects).
    scale, offset : float or None
        Values become ``value * scale + offset`` (before the unit conversion).
    nodata : float or None
        A value of the file that marks missing data.
    dlnvs_dt_per_k : float or None
        ``thermal_anomaly`` only: the grid holds shear-velocity anomalies in percent, turned
        into kelvin through this d ln Vs / dT (1/K, negative; no default).
    reference : str
        ``lid_thickness`` only: ``"seafloor"`` (default) or ``"sea_level"``, where the lid
        depth is measured from.
    bathymetry : Path or None
        ``lid_thickness`` only: an elevation grid (m, negative below sea level) giving the
        water depth for ``reference = "sea_level"``.
    plumes_file : str or None
        ``thermal_anomaly`` only: the plume catalogue as written in the workflow.
    """

    name: str
    path: Path | None = None
    path_as_written: str | None = None
    variable: str | None = None
    resampling: str = "bilinear"
    constant: float | None = None
    plumes: tuple[PlumeSpec, ...] = ()
    crs: str | None = None
    x_name: str | None = None
    y_name: str | None = None
    file_units: str | None = None
    scale: float | None = None
    offset: float | None = None
    nodata: float | None = None
    dlnvs_dt_per_k: float | None = None
    reference: str = "seafloor"
    bathymetry: Path | None = None
    plumes_file: str | None = None

    @property
    def units(self) -> str:
        """Unit of the values (``Ma``, ``km``, ``K`` or ``wt%``)."""
        return INPUT_UNITS[self.name]


@dataclass(frozen=True, kw_only=True)
class Inputs:
    """The ``[inputs]`` table. ``thermal_anomaly`` and ``water`` always exist (default: the
    constant 0.0); at least one of ``plate_age`` and ``lid_thickness`` is given. Where both are
    given, the lid grid is used where it has values and the age-derived lid elsewhere."""

    plate_age: InputSpec | None
    lid_thickness: InputSpec | None
    thermal_anomaly: InputSpec
    water: InputSpec
    upwelling: InputSpec | None = None

    def __getitem__(self, name: str) -> InputSpec | None:
        if name not in INPUT_NAMES:
            raise KeyError(name)
        return getattr(self, name)

    def given(self) -> dict[str, InputSpec]:
        """The inputs that are set, by name, in the order of :data:`INPUT_NAMES`."""
        return {n: s for n in INPUT_NAMES if (s := getattr(self, n)) is not None}

    def available(self) -> tuple[str, ...]:
        """The inputs a run will have: those set, and ``upwelling`` when a plume gives it."""
        names = tuple(self.given())
        plumes = self.thermal_anomaly.plumes
        if "upwelling" not in names and any(p.peak_upwelling_mm_yr is not None for p in plumes):
            names += ("upwelling",)
        return names


@dataclass(frozen=True, kw_only=True)
class ModelOptions:
    """The ``[model]`` table: the melting model and the mantle it melts.

    Parameters
    ----------
    name : str
        Melting model name (see ``lidmelt.physics._melting.get_model``).
    ambient_potential_temperature_c : float
        Ambient mantle potential temperature, degrees C (default 1350 °C, the present MORB
        source of Herzberg, Condie & Korenaga 2010).
    min_top_of_melting_km : float
        Melting stops at the deeper of the lid base and this depth, km (default 7, the base of
        normal oceanic crust, 7.1 ± 0.8 km in White, McKenzie & O'Nions 1992; from memory).
    crust_density_kg_m3 : float
        Density of the crust in the crustal thickness output H rho_s / rho_c, kg m^-3 (default
        :data:`DEFAULT_CRUST_DENSITY_KG_M3`).
    parameters : Parameters
        Overrides of the model's named parameters.
    """

    name: str = "katz2003"
    ambient_potential_temperature_c: float = 1350.0
    min_top_of_melting_km: float = 7.0
    crust_density_kg_m3: float = DEFAULT_CRUST_DENSITY_KG_M3
    parameters: Parameters = field(default_factory=Parameters)


@dataclass(frozen=True, kw_only=True)
class LithosphereOptions:
    """The ``[lithosphere]`` table: the lid from plate age.

    Parameters
    ----------
    cooling : str
        Cooling model name (see ``lidmelt.physics._cooling.get_cooling_model``).
    lid_isotherm_c : float
        With ``top_of_melting = "isotherm"``: the lid base's isotherm, degrees C (default 1100
        °C, common practice), below the cooling model's mantle temperature.
    top_of_melting : str
        :data:`TOP_OF_MELTING_RULES`: ``"geotherm"`` (default; melting stops at the cooling
        model's geotherm at the cell's age, whose mantle side is the column's own isentrope) or
        ``"isotherm"`` (at the lid isotherm).
    parameters : Parameters
        Overrides of the cooling model's parameters.
    """

    cooling: str = "half-space"
    lid_isotherm_c: float = 1100.0
    top_of_melting: str = "geotherm"
    parameters: Parameters = field(default_factory=Parameters)


@dataclass(frozen=True, kw_only=True)
class ComputeOptions:
    """The ``[compute]`` table.

    Parameters
    ----------
    chunk_size : int
        Cells per chunk side (>= :data:`MIN_CHUNK_SIZE`; a multiple of the GeoTIFF writer's
        512-cell tiles writes fastest).
    workers : int
        Threads (>= 1).
    method : str
        One of :data:`METHODS`: ``"table"`` (interpolate a precomputed lookup table) or
        ``"direct"`` (integrate each column).
    scheduler : str or None
        Address of a dask.distributed scheduler (``"tcp://host:port"``) whose workers compute
        the whole run (:mod:`lidmelt._cluster`); None: the ``LIDMELT_SCHEDULER`` environment
        variable, else local threads.
    max_cells : int
        The largest grid (width x height) a run accepts; raise it for a bigger grid.
    """

    chunk_size: int = 1024
    workers: int = 2
    method: str = "table"
    scheduler: str | None = None
    max_cells: int = DEFAULT_MAX_CELLS


@dataclass(frozen=True, kw_only=True)
class OutputOptions:
    """The ``[outputs]`` table: which variables to write (default DEFAULT_OUTPUT_VARIABLES, plus
    the outputs that need an optional input when the workflow gives it), and whether the
    GeoTIFFs get the Cloud-Optimized layout (a second pass over every file; off by default,
    see docs/workflow.md), whether the run writes its Zarr store ``lidmelt.zarr``, where
    (``zarr_url``: an fsspec folder URL that gets a new store per run; None: in the run
    folder) and whether it writes the GeoTIFFs (``geotiff = false`` needs ``zarr = true``)."""

    variables: tuple[str, ...] = DEFAULT_OUTPUT_VARIABLES
    cloud_optimized: bool = False
    zarr: bool = False
    zarr_url: str | None = None
    geotiff: bool = True


@dataclass(frozen=True, kw_only=True)
class RunConfig:
    """One validated run configuration, as read from a workflow file.

    Parameters
    ----------
    workflow_path : Path
        Absolute path of the workflow file.
    text : str
        The workflow file's text as read (before overrides).
    overrides : tuple of str
        The ``--set KEY=VALUE`` items applied, in order.
    run, grid, inputs, model, lithosphere, compute, outputs
        The validated tables.
    ensemble : EnsembleOptions or None
        The ``[ensemble]`` table, if the workflow has one.
    motion : MotionOptions or None
        The ``[motion]`` table, if the workflow has one.
    assess : AssessOptions or None
        The ``[assess]`` table, if the workflow has one.
    """

    workflow_path: Path
    text: str
    overrides: tuple[str, ...]
    run: RunOptions
    grid: GridSpec
    inputs: Inputs
    model: ModelOptions
    lithosphere: LithosphereOptions
    compute: ComputeOptions
    outputs: OutputOptions
    ensemble: EnsembleOptions | None = None
    motion: MotionOptions | None = None
    assess: AssessOptions | None = None

    def to_dict(self) -> dict[str, Any]:
        """A JSON-serialisable dict of the whole configuration, for provenance."""
        return _jsonable(self)


def _jsonable(obj: Any) -> Any:
    """``obj`` with dataclasses and mappings as dicts, paths as strings, tuples as lists."""
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {
            f.name: _jsonable(getattr(obj, f.name))
            for f in dataclasses.fields(obj)
            if f.metadata.get("record", True)
        }
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    return obj
