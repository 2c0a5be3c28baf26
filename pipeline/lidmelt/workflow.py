"""Workflow files: the written-down options of a basin run.

A workflow file is TOML (read with the standard library's :mod:`tomllib`). It names the inputs
(plate age or lid thickness, thermal anomaly, water), the target grid, the melting and cooling
models, the compute options and the output variables. :func:`load_workflow` reads one, applies
``--set KEY=VALUE`` overrides, validates the whole tree and returns one frozen
:class:`RunConfig` with absolute paths. Every key, its unit and its default are documented in
``docs/workflow.md``; ``workflows/template.toml`` is a commented template.

Path rules
----------
- Input paths (``inputs.<name>.path``) are relative to the folder of the workflow file.
- The output folder (``run.output_dir``, or ``-o``) is relative to the current working
  directory; its default is ``runs/<run.name>``.

Every problem raises :class:`lidmelt.errors.WorkflowError` with a message that names the file and
the dotted key, says what was expected (with the unit) and how to fix it.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import re
import tomllib
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from lidmelt.errors import LidmeltError, WorkflowError

__all__ = [
    "AMBIENT_TP_RANGE_C",
    "INPUT_NAMES",
    "INPUT_UNITS",
    "METHODS",
    "MIN_CHUNK_SIZE",
    "OUTPUT_VARIABLES",
    "PLUME_SHAPES",
    "RESAMPLING_METHODS",
    "ComputeOptions",
    "GridSpec",
    "InputSpec",
    "Inputs",
    "LithosphereOptions",
    "ModelOptions",
    "OutputOptions",
    "Parameters",
    "PlumeSpec",
    "RunConfig",
    "RunOptions",
    "load_workflow",
    "validate_models",
]

#: Output variables a run can write, in the order a run writes them (all by default).
OUTPUT_VARIABLES: tuple[str, ...] = (
    "melt_thickness_km",
    "onset_depth_km",
    "onset_pressure_gpa",
    "lid_depth_km",
    "max_melt_fraction",
    "mean_melt_pressure_gpa",
    "excess_to_melt_k",
)
#: The inputs a workflow can name under ``[inputs.<name>]``.
INPUT_NAMES: tuple[str, ...] = ("plate_age", "lid_thickness", "thermal_anomaly", "water")
#: Unit of each input's grid values and constant.
INPUT_UNITS: dict[str, str] = {
    "plate_age": "Ma",
    "lid_thickness": "km",
    "thermal_anomaly": "K",
    "water": "wt%",
}
RESAMPLING_METHODS: tuple[str, ...] = ("bilinear", "nearest", "cubic", "average")
METHODS: tuple[str, ...] = ("table", "direct")
PLUME_SHAPES: tuple[str, ...] = ("gaussian", "cosine", "top-hat")
#: Accepted ambient potential temperature, degrees C. Published ambient values run from about
#: 1280 to 1450 C (PHYSICS.md section 4); outside 1000-2000 C the value is almost certainly a
#: unit slip (kelvin, or a plume's total Tp), so it is rejected. Bounds are common practice.
AMBIENT_TP_RANGE_C: tuple[float, float] = (1000.0, 2000.0)
MIN_CHUNK_SIZE = 64

# Physical ranges of the constants and plume fields (common practice; see the error messages).
_CONSTANT_RANGES: dict[str, tuple[float, float, str]] = {
    # name: (low, high, advice when outside)
    "plate_age": (
        0.0,
        400.0,
        "the oldest ocean floor is about 200 Ma (from memory); a value in years or seconds is "
        "rejected: divide years by 1e6, seconds by 3.156e13",
    ),
    "lid_thickness": (0.0, 400.0, "give the lid (lithosphere) thickness in km, not m"),
    "thermal_anomaly": (
        -1000.0,
        1000.0,
        "the anomaly is the excess over the ambient potential temperature, in K (plumes are "
        "typically 100-300 K); give the ambient value in model.ambient_potential_temperature_c",
    ),
    "water": (
        0.0,
        5.0,
        "water is in wt% of the bulk source (MORB sources hold about 0.01 wt%, from memory); "
        "from ppm, divide by 10000",
    ),
}
_PLUME_RANGES: dict[str, tuple[float, float, str, str]] = {
    "longitude": (-360.0, 360.0, "degrees", "give degrees east, -180 to 180 or 0 to 360"),
    "latitude": (
        -90.0,
        90.0,
        "degrees",
        "give degrees north, -90 to 90; were longitude and latitude swapped?",
    ),
    "radius_km": (0.0, 20000.0, "km", "give the plume radius in km, not m"),
    "peak_excess_k": (
        -1000.0,
        1000.0,
        "K",
        "give the excess over ambient in K (plumes are typically 100-300 K)",
    ),
}
_LID_ISOTHERM_RANGE_C = (0.0, 1600.0)

# ---------------------------------------------------------------------------------------------
# The schema: the keys allowed in each table. "*" marks a free table whose keys are validated by
# the model functions (see validate_models); "[]" marks an array of tables.
_INPUT_KEYS = ("path", "variable", "resampling", "constant")
_PLUME_KEYS = ("name", "longitude", "latitude", "radius_km", "peak_excess_k", "shape")
_SCHEMA: dict[str, tuple[str, ...]] = {
    "": ("run", "grid", "inputs", "model", "lithosphere", "compute", "outputs"),
    "run": ("name", "output_dir", "netcdf", "maps", "report"),
    "grid": ("like", "extent", "resolution", "crs"),
    "inputs": INPUT_NAMES,
    "inputs.plate_age": _INPUT_KEYS,
    "inputs.lid_thickness": _INPUT_KEYS,
    "inputs.thermal_anomaly": (*_INPUT_KEYS, "plumes"),
    "inputs.thermal_anomaly.plumes[]": _PLUME_KEYS,
    "inputs.water": _INPUT_KEYS,
    "model": ("name", "ambient_potential_temperature_c", "min_top_of_melting_km", "parameters"),
    "model.parameters": ("*",),
    "lithosphere": ("cooling", "lid_isotherm_c", "parameters"),
    "lithosphere.parameters": ("*",),
    "compute": ("chunk_size", "workers", "method"),
    "outputs": ("variables",),
}
_TABLES = {k for k in _SCHEMA if k and not k.endswith("[]")}


def _all_keys() -> list[str]:
    """Every valid dotted key (plumes written as ``...plumes.N.key``)."""
    keys = []
    for table, names in _SCHEMA.items():
        prefix = table.replace("[]", ".N")
        keys.extend(f"{prefix}.{n}" if prefix else n for n in names if n != "*")
    return keys


_ALL_KEYS = _all_keys()
_MISSING = object()


# ---------------------------------------------------------------------------------------------
# The run configuration


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
        One of :data:`PLUME_SHAPES`, as defined by :class:`lidmelt.grids.anomaly.Plume` at
        geodesic distance d: ``"gaussian"`` A exp(-(d/r)^2), ``"cosine"`` A cos^2(pi d / 2r)
        for d < r, ``"top-hat"`` A for d <= r.
    name : str or None
        An optional label.
    """

    longitude: float
    latitude: float
    radius_km: float
    peak_excess_k: float
    shape: str = "gaussian"
    name: str | None = None

    def as_plume(self) -> Any:
        """This plume as a :class:`lidmelt.grids.anomaly.Plume` (without the name)."""
        from lidmelt.grids.anomaly import Plume

        return Plume(
            longitude=self.longitude,
            latitude=self.latitude,
            radius_km=self.radius_km,
            peak_excess_k=self.peak_excess_k,
            shape=self.shape,
        )


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
        Plumes added to the thermal anomaly (``thermal_anomaly`` only).
    """

    name: str
    path: Path | None = None
    path_as_written: str | None = None
    variable: str | None = None
    resampling: str = "bilinear"
    constant: float | None = None
    plumes: tuple[PlumeSpec, ...] = ()

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

    def __getitem__(self, name: str) -> InputSpec | None:
        if name not in INPUT_NAMES:
            raise KeyError(name)
        return getattr(self, name)

    def given(self) -> dict[str, InputSpec]:
        """The inputs that are set, by name, in the order of :data:`INPUT_NAMES`."""
        return {n: s for n in INPUT_NAMES if (s := getattr(self, n)) is not None}


@dataclass(frozen=True, kw_only=True)
class ModelOptions:
    """The ``[model]`` table: the melting model.

    Parameters
    ----------
    name : str
        Melting model name (see ``lidmelt.physics.melting.get_model``).
    ambient_potential_temperature_c : float
        Ambient mantle potential temperature, degrees C (default 1350, Herzberg, Condie &
        Korenaga 2010; PHYSICS.md section 4).
    min_top_of_melting_km : float
        Melting stops at the deeper of the lid base and this depth, km (default 7, the base of
        normal oceanic crust; PHYSICS.md section 8).
    parameters : Parameters
        Overrides of the model's named parameters.
    """

    name: str = "katz2003"
    ambient_potential_temperature_c: float = 1350.0
    min_top_of_melting_km: float = 7.0
    parameters: Parameters = field(default_factory=Parameters)


@dataclass(frozen=True, kw_only=True)
class LithosphereOptions:
    """The ``[lithosphere]`` table: the lid from plate age.

    Parameters
    ----------
    cooling : str
        Cooling model name (see ``lidmelt.physics.cooling.get_cooling_model``).
    lid_isotherm_c : float
        The lid base is the depth of this isotherm, degrees C (default 1100; common practice,
        the isotherm used in PHYSICS.md trap 12).
    parameters : Parameters
        Overrides of the cooling model's parameters.
    """

    cooling: str = "half-space"
    lid_isotherm_c: float = 1100.0
    parameters: Parameters = field(default_factory=Parameters)


@dataclass(frozen=True, kw_only=True)
class ComputeOptions:
    """The ``[compute]`` table.

    Parameters
    ----------
    chunk_size : int
        Cells per chunk side (>= 64; a multiple of 512 writes fastest, GEOSTACK.md section 1).
    workers : int
        Threads (>= 1).
    method : str
        ``"table"`` (interpolate a precomputed lookup table) or ``"direct"`` (integrate each
        column).
    """

    chunk_size: int = 1024
    workers: int = 2
    method: str = "table"


@dataclass(frozen=True, kw_only=True)
class OutputOptions:
    """The ``[outputs]`` table: which variables to write (default all of OUTPUT_VARIABLES)."""

    variables: tuple[str, ...] = OUTPUT_VARIABLES


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

    def to_dict(self) -> dict[str, Any]:
        """A JSON-serialisable dict of the whole configuration, for provenance."""
        return _jsonable(self)


def _jsonable(obj: Any) -> Any:
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: _jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    return obj


# ---------------------------------------------------------------------------------------------
# Reading and validating


class _Context:
    """Where values come from, for error messages."""

    def __init__(self, source: str, set_keys: dict[str, str]) -> None:
        self.source = source
        self.set_keys = set_keys  # dotted key -> the --set item that wrote it

    def origin(self, key: str) -> str:
        """`` (from --set ITEM)`` when a --set item wrote this key or a parent table, else ''."""
        for set_key, item in self.set_keys.items():
            if key == set_key or key.startswith(set_key + "."):
                return f" (from --set {item})"
        return ""

    def where(self, key: str) -> str:
        """``'key' in file.toml``, plus the --set item that wrote it, if any."""
        return f"'{key}' in {self.source}{self.origin(key)}"


def _type_name(value: Any) -> str:
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int):
        return "a whole number"
    if isinstance(value, float):
        return "a decimal number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    return f"a {type(value).__name__}"


def _wrong_type(ctx: _Context, key: str, value: Any, expected: str, example: str) -> WorkflowError:
    return WorkflowError(
        f"{ctx.where(key)} is {value!r} ({_type_name(value)}); expected {expected}. "
        f"Write it like: {example}"
    )


def _leaf(key: str) -> str:
    return key.rsplit(".", 1)[-1]


def _number(ctx: _Context, key: str, value: Any, *, unit: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise _wrong_type(ctx, key, value, f"a number in {unit}", f"{_leaf(key)} = 1.0")
    if not math.isfinite(value):
        msg = f"{ctx.where(key)} is {value!r}; expected a finite number in {unit}."
        raise WorkflowError(msg)
    return float(value)


def _integer(ctx: _Context, key: str, value: Any, *, example: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise _wrong_type(
            ctx, key, value, "a whole number (no decimal point)", f"{_leaf(key)} = {example}"
        )
    return value


def _boolean(ctx: _Context, key: str, value: Any) -> bool:
    if not isinstance(value, bool):
        raise _wrong_type(ctx, key, value, "true or false (unquoted)", f"{_leaf(key)} = true")
    return value


def _string(ctx: _Context, key: str, value: Any, *, example: str) -> str:
    if not isinstance(value, str):
        raise _wrong_type(ctx, key, value, "a quoted string", f'{_leaf(key)} = "{example}"')
    if not value.strip():
        msg = f"{ctx.where(key)} is an empty string; expected {example!r} or similar."
        raise WorkflowError(msg)
    return value


def _choice(ctx: _Context, key: str, value: Any, choices: Sequence[str]) -> str:
    value = _string(ctx, key, value, example=choices[0])
    if value not in choices:
        near = difflib.get_close_matches(value, choices, n=1)
        hint = f" Did you mean {near[0]!r}?" if near else ""
        msg = (
            f"{ctx.where(key)} is {value!r}, which is not known; expected one of "
            f"{', '.join(repr(c) for c in choices)}.{hint}"
        )
        raise WorkflowError(msg)
    return value


def _in_range(
    ctx: _Context, key: str, value: Any, low: float, high: float, unit: str, advice: str
) -> float:
    """``value`` as a float if it is a number within [low, high] (in ``unit``), else raise."""
    number = _number(ctx, key, value, unit=unit)
    if not low <= number <= high:
        msg = (
            f"{ctx.where(key)} is {number:g} {unit}, outside the accepted range "
            f"{low:g} to {high:g} {unit}; {advice}"
        )
        if not msg.endswith(("?", ".")):
            msg += "."
        raise WorkflowError(msg)
    return number


def _table(ctx: _Context, key: str, value: Any) -> dict[str, Any]:
    if not isinstance(value, dict):
        raise _wrong_type(ctx, key, value, "a table", f"[{key}] on a line of its own")
    return value


def _check_unknown_keys(ctx: _Context, tree: dict[str, Any]) -> None:
    """Raise on the first key that the schema does not know, suggesting the nearest one."""

    def visit(table: dict[str, Any], schema_key: str, dotted: str) -> None:
        allowed = _SCHEMA[schema_key]
        if allowed == ("*",):
            return
        for name, value in table.items():
            key = f"{dotted}.{name}" if dotted else name
            if name not in allowed:
                raise _unknown_key(ctx, key, allowed)
            child = f"{schema_key}.{name}" if schema_key else name
            if child in _TABLES and isinstance(value, dict):
                visit(value, child, key)
            elif f"{child}[]" in _SCHEMA and isinstance(value, list):
                for i, item in enumerate(value, start=1):
                    if isinstance(item, dict):
                        visit(item, f"{child}[]", f"{key}.{i}")

    visit(tree, "", "")


def _unknown_key(ctx: _Context, key: str, allowed: Sequence[str]) -> WorkflowError:
    prefix, _, leaf = key.rpartition(".")
    near = [f"{prefix}.{n}" if prefix else n for n in difflib.get_close_matches(leaf, allowed, n=1)]
    if not near:  # the right name in the wrong table?
        near = [k for k in _ALL_KEYS if _leaf(k) == leaf][:1]
    if near:
        hint = f"did you mean '{near[0]}'?"
        if ".N." in near[0]:
            hint += " (N: the plume number, counted from 1)"
    else:
        table = f"[{prefix}]" if prefix else "the top level"
        hint = f"valid keys in {table}: {', '.join(allowed)}. See docs/workflow.md."
    return WorkflowError(f"unknown key '{key}' in {ctx.source}{ctx.origin(key)}; {hint}")


def _read_input(ctx: _Context, name: str, table: dict[str, Any], base_dir: Path) -> InputSpec:
    prefix = f"inputs.{name}"
    unit = INPUT_UNITS[name]
    low, high, advice = _CONSTANT_RANGES[name]
    path = written = variable = None
    if "path" in table:
        written = _string(ctx, f"{prefix}.path", table["path"], example="grids/my_grid.tif")
        path = (base_dir / Path(written).expanduser()).resolve()
        if not path.is_file():
            state = "is a folder, not a file" if path.is_dir() else "does not exist"
            msg = (
                f"input file for {ctx.where(prefix + '.path')} {state}: written {written!r}, "
                f"resolved to '{path}'. Input paths are relative to the workflow file's folder "
                f"({base_dir}); fix the path or give an absolute one."
            )
            raise WorkflowError(msg)
    if "variable" in table:
        variable = _string(ctx, f"{prefix}.variable", table["variable"], example="age")
        if path is None:
            msg = (
                f"{ctx.where(prefix + '.variable')} is set but {prefix}.path is not; the "
                "variable names a NetCDF variable of the grid file. Add the path or remove it."
            )
            raise WorkflowError(msg)
        if path.suffix.lower() in (".tif", ".tiff"):
            msg = (
                f"{ctx.where(prefix + '.variable')} is {variable!r} but the file {written!r} is "
                "a GeoTIFF, which has one band and no variables; remove 'variable' (it is for "
                "NetCDF files only)."
            )
            raise WorkflowError(msg)
    resampling = "bilinear"
    if "resampling" in table:
        resampling = _choice(ctx, f"{prefix}.resampling", table["resampling"], RESAMPLING_METHODS)
    constant = 0.0 if name == "thermal_anomaly" else None
    if "constant" in table:
        constant = _in_range(ctx, f"{prefix}.constant", table["constant"], low, high, unit, advice)
        if path is not None and name != "thermal_anomaly":
            msg = (
                f"{ctx.where(prefix)} has both 'path' and 'constant'; expected one of them "
                f"(a grid, or one value in {unit}). Remove one."
            )
            raise WorkflowError(msg)
    plumes: tuple[PlumeSpec, ...] = ()
    if "plumes" in table:
        plumes = _read_plumes(ctx, f"{prefix}.plumes", table["plumes"])
    if path is None and constant is None:
        msg = (
            f"{ctx.where(prefix)} gives neither 'path' nor 'constant'; expected a grid file "
            f'(path = "grid.tif", values in {unit}) or one value (constant = ..., in {unit}).'
        )
        raise WorkflowError(msg)
    return InputSpec(
        name=name,
        path=path,
        path_as_written=written,
        variable=variable,
        resampling=resampling,
        constant=constant,
        plumes=plumes,
    )


def _read_plumes(ctx: _Context, key: str, value: Any) -> tuple[PlumeSpec, ...]:
    if not isinstance(value, list):
        raise _wrong_type(
            ctx, key, value, "an array of tables", f"[[{key}]] above each plume's keys"
        )
    plumes = []
    for i, item in enumerate(value, start=1):
        pkey = f"{key}.{i}"
        if not isinstance(item, dict):
            raise _wrong_type(ctx, pkey, item, "a table of plume fields", f"[[{key}]]")
        for required in ("longitude", "latitude", "radius_km", "peak_excess_k"):
            if required not in item:
                msg = (
                    f"{ctx.where(pkey)} (plume {i}) lacks '{required}'; every plume needs "
                    "longitude and latitude (degrees), radius_km (km) and peak_excess_k (K)."
                )
                raise WorkflowError(msg)
        values = {
            field: _in_range(ctx, f"{pkey}.{field}", item[field], *bounds)
            for field, bounds in _PLUME_RANGES.items()
        }
        if not values["radius_km"] > 0:
            msg = (
                f"{ctx.where(pkey + '.radius_km')} is {values['radius_km']:g} km; expected a "
                "radius > 0 km (plume heads are typically a few hundred km across)."
            )
            raise WorkflowError(msg)
        shape = "gaussian"
        if "shape" in item:
            shape = _choice(ctx, f"{pkey}.shape", item["shape"], PLUME_SHAPES)
        name = None
        if "name" in item:
            name = _string(ctx, f"{pkey}.name", item["name"], example="plume A")
        spec = PlumeSpec(shape=shape, name=name, **values)
        try:
            spec.as_plume()  # the anomaly builder's own checks
        except LidmeltError as exc:
            msg = f"{ctx.where(pkey)} (plume {i}) is not valid: {exc}"
            raise WorkflowError(msg) from exc
        plumes.append(spec)
    return tuple(plumes)


def _read_parameters(ctx: _Context, key: str, value: Any) -> Parameters:
    table = _table(ctx, key, value)
    for name, v in table.items():
        if isinstance(v, dict | list):
            raise _wrong_type(
                ctx, f"{key}.{name}", v, "a single value (a number)", f"{name} = 0.15"
            )
        if isinstance(v, float) and not math.isfinite(v):
            msg = f"{ctx.where(f'{key}.{name}')} is {v!r}; expected a finite number."
            raise WorkflowError(msg)
    return Parameters(table)


def _read_grid(ctx: _Context, table: dict[str, Any], inputs: Inputs) -> GridSpec:
    has = {k for k in ("like", "extent", "resolution", "crs") if k in table}
    if "like" in has and has & {"extent", "resolution", "crs"}:
        others = ", ".join(sorted(has - {"like"}))
        msg = (
            f"{ctx.where('grid')} gives both 'like' and {others}; expected EITHER like = "
            '"<input name>" OR extent + resolution (+ crs). Remove one of them.'
        )
        raise WorkflowError(msg)
    if "like" in has:
        like = _string(ctx, "grid.like", table["like"], example="plate_age")
        given = {n: s for n, s in inputs.given().items() if s.path is not None}
        if like not in given:
            choices = ", ".join(repr(n) for n in given) or "none: no input has a path"
            msg = (
                f"{ctx.where('grid.like')} is {like!r}, which is not an input with a grid file; "
                f"expected the name of an [inputs.<name>] table that has a 'path' ({choices}). "
                "Or give extent and resolution instead."
            )
            raise WorkflowError(msg)
        return GridSpec(like=like)
    if not has:
        msg = (
            f"{ctx.where('grid')} is missing; a run needs a target grid. Add [grid] with "
            'like = "plate_age" (the grid of an input) or extent = [west, east, south, north] '
            "and resolution (in the grid CRS units; degrees for EPSG:4326)."
        )
        raise WorkflowError(msg)
    if "extent" not in has or "resolution" not in has:
        lacking = "extent" if "extent" not in has else "resolution"
        msg = (
            f"{ctx.where('grid')} lacks '{lacking}'; expected both extent = [west, east, "
            "south, north] and resolution (in the grid CRS units, degrees for EPSG:4326), or "
            'like = "<input name>" instead.'
        )
        raise WorkflowError(msg)
    crs = "EPSG:4326"
    if "crs" in has:
        crs = _string(ctx, "grid.crs", table["crs"], example="EPSG:4326")
    crs_obj = _parse_crs(ctx, crs)
    extent_raw = table["extent"]
    example = "extent = [-40.0, -10.0, -25.0, 5.0]"
    if not isinstance(extent_raw, list) or len(extent_raw) != 4:
        raise _wrong_type(
            ctx,
            "grid.extent",
            extent_raw,
            "an array of 4 numbers [west, east, south, north]",
            example,
        )
    unit = "degrees" if crs_obj.is_geographic else "grid CRS units"
    west, east, south, north = (_number(ctx, "grid.extent", v, unit=unit) for v in extent_raw)
    if not (west < east and south < north):
        msg = (
            f"{ctx.where('grid.extent')} is {extent_raw!r}; expected [west, east, south, north] "
            "with west < east and south < north. For a grid across the antimeridian use "
            "longitudes 0 to 360 (e.g. [170.0, 200.0, ...])."
        )
        raise WorkflowError(msg)
    if crs_obj.is_geographic and (
        not -90.0 <= south <= 90.0 or not -90.0 <= north <= 90.0
        or not -180.0 <= west <= 360.0 or not -180.0 <= east <= 360.0
        or east - west > 360.0
    ):  # fmt: skip
        msg = (
            f"{ctx.where('grid.extent')} is {extent_raw!r}; for a geographic CRS ({crs}) the "
            "latitudes must lie in -90 to 90 degrees and the longitudes in -180 to 360 degrees, "
            "spanning at most 360. Check the order: [west, east, south, north]."
        )
        raise WorkflowError(msg)
    resolution = _number(ctx, "grid.resolution", table["resolution"], unit=unit)
    if not 0 < resolution <= min(east - west, north - south):
        msg = (
            f"{ctx.where('grid.resolution')} is {resolution:g} {unit}; expected a cell size "
            f"> 0 and no larger than the extent ({min(east - west, north - south):g} {unit})."
        )
        raise WorkflowError(msg)
    from lidmelt.grids.align import TargetGrid

    try:  # the grid builder's own checks (a whole number of cells, a usable CRS)
        TargetGrid.from_extent(west, east, south, north, resolution, crs=crs)
    except LidmeltError as exc:
        msg = (
            f"{ctx.where('grid.extent')} = {extent_raw!r} with grid.resolution = "
            f"{resolution:g} does not make a grid: {exc}"
        )
        raise WorkflowError(msg) from exc
    return GridSpec(extent=(west, east, south, north), resolution=resolution, crs=crs)


def _parse_crs(ctx: _Context, crs: str) -> Any:
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    try:
        return CRS.from_user_input(crs)
    except CRSError as exc:
        msg = (
            f"{ctx.where('grid.crs')} is {crs!r}, which is not a readable CRS ({exc}); expected "
            'an authority code such as "EPSG:4326" (longitude/latitude) or a WKT/PROJ string.'
        )
        raise WorkflowError(msg) from exc


def _validate(
    ctx: _Context,
    tree: dict[str, Any],
    *,
    workflow_path: Path,
    text: str,
    overrides: tuple[str, ...],
    output_dir: str | Path | None,
) -> RunConfig:
    """Check the whole (overridden) tree and build the RunConfig."""
    _check_unknown_keys(ctx, tree)
    tables = {name: _table(ctx, name, tree.get(name, {})) for name in _SCHEMA[""]}
    inputs = _read_inputs(ctx, tables["inputs"], workflow_path.parent)
    return RunConfig(
        workflow_path=workflow_path,
        text=text,
        overrides=overrides,
        run=_read_run(ctx, tables["run"], workflow_path, output_dir),
        grid=_read_grid(ctx, tables["grid"], inputs),
        inputs=inputs,
        model=_read_model(ctx, tables["model"]),
        lithosphere=_read_lithosphere(ctx, tables["lithosphere"]),
        compute=_read_compute(ctx, tables["compute"]),
        outputs=_read_outputs(ctx, tables["outputs"]),
    )


def _read_inputs(ctx: _Context, table: dict[str, Any], base_dir: Path) -> Inputs:
    specs: dict[str, InputSpec | None] = dict.fromkeys(INPUT_NAMES)
    for name in INPUT_NAMES:
        if name in table:
            sub = _table(ctx, f"inputs.{name}", table[name])
            specs[name] = _read_input(ctx, name, sub, base_dir)
    if specs["plate_age"] is None and specs["lid_thickness"] is None:
        msg = (
            f"{ctx.where('inputs')} names neither 'plate_age' nor 'lid_thickness'; a run needs "
            "one of them to place the lid. Add [inputs.plate_age] with the path of a plate age "
            "grid (Ma), or [inputs.lid_thickness] with a lid thickness grid (km)."
        )
        raise WorkflowError(msg)
    for name in ("thermal_anomaly", "water"):
        if specs[name] is None:
            specs[name] = InputSpec(name=name, constant=0.0)
    return Inputs(**specs)  # type: ignore[arg-type]


def _read_run(
    ctx: _Context, run: dict[str, Any], workflow_path: Path, output_dir: str | Path | None
) -> RunOptions:
    name = workflow_path.stem
    if "name" in run:
        name = _string(ctx, "run.name", run["name"], example="my_basin")
    if not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.-]*", name):
        msg = (
            f"{ctx.where('run.name')} is {name!r}; expected a folder-safe name (letters, "
            "digits, '_', '-', '.'; no spaces or slashes), e.g. name = \"north_basin\"."
        )
        raise WorkflowError(msg)
    if output_dir is not None:
        out = Path(output_dir)
    elif "output_dir" in run:
        out = Path(_string(ctx, "run.output_dir", run["output_dir"], example="runs/demo"))
    else:
        out = Path("runs") / name
    out = out.expanduser().resolve()  # relative to the current working directory
    if out.exists() and not out.is_dir():
        key = "-o" if output_dir is not None else "run.output_dir"
        msg = (
            f"the output folder '{out}' ({key}) is an existing file, not a folder; expected a "
            "folder path (it is created if missing). Choose another path."
        )
        raise WorkflowError(msg)
    flags = {k: _boolean(ctx, f"run.{k}", run[k]) for k in ("netcdf", "maps", "report") if k in run}
    return RunOptions(name=name, output_dir=out, **flags)


def _read_model(ctx: _Context, model: dict[str, Any]) -> ModelOptions:
    kw: dict[str, Any] = {}
    if "name" in model:
        kw["name"] = _string(ctx, "model.name", model["name"], example="katz2003")
    key = "model.ambient_potential_temperature_c"
    if (tp := model.get("ambient_potential_temperature_c", _MISSING)) is not _MISSING:
        advice = (
            "published ambient values are about 1280-1450 °C and depend on the melting model "
            "(docs/workflow.md); from kelvin, subtract 273.15"
        )
        kw["ambient_potential_temperature_c"] = _in_range(
            ctx, key, tp, *AMBIENT_TP_RANGE_C, "°C", advice
        )
    key = "model.min_top_of_melting_km"
    if (depth := model.get("min_top_of_melting_km", _MISSING)) is not _MISSING:
        depth = _number(ctx, key, depth, unit="km")
        if depth < 0:
            msg = (
                f"{ctx.where(key)} is {depth:g} km; expected a depth >= 0 km below the "
                "seafloor (default 7.0, the base of normal oceanic crust)."
            )
            raise WorkflowError(msg)
        kw["min_top_of_melting_km"] = depth
    if "parameters" in model:
        kw["parameters"] = _read_parameters(ctx, "model.parameters", model["parameters"])
    return ModelOptions(**kw)


def _read_lithosphere(ctx: _Context, litho: dict[str, Any]) -> LithosphereOptions:
    kw: dict[str, Any] = {}
    if "cooling" in litho:
        kw["cooling"] = _string(ctx, "lithosphere.cooling", litho["cooling"], example="gdh1")
    key = "lithosphere.lid_isotherm_c"
    if (iso := litho.get("lid_isotherm_c", _MISSING)) is not _MISSING:
        iso = _number(ctx, key, iso, unit="°C")
        low, high = _LID_ISOTHERM_RANGE_C
        if not low < iso < high:
            msg = (
                f"{ctx.where(key)} is {iso:g} °C; expected an isotherm between {low:g} and "
                f"{high:g} °C, below the cooling model's mantle temperature (default 1100 °C)."
            )
            raise WorkflowError(msg)
        kw["lid_isotherm_c"] = iso
    if "parameters" in litho:
        kw["parameters"] = _read_parameters(ctx, "lithosphere.parameters", litho["parameters"])
    return LithosphereOptions(**kw)


def _read_compute(ctx: _Context, comp: dict[str, Any]) -> ComputeOptions:
    kw: dict[str, Any] = {}
    if "chunk_size" in comp:
        size = _integer(ctx, "compute.chunk_size", comp["chunk_size"], example="1024")
        if size < MIN_CHUNK_SIZE:
            msg = (
                f"{ctx.where('compute.chunk_size')} is {size} cells; expected at least "
                f"{MIN_CHUNK_SIZE} cells per chunk side (smaller chunks cost more in overhead "
                "than they save). Use 512 or 1024."
            )
            raise WorkflowError(msg)
        kw["chunk_size"] = size
    if "workers" in comp:
        workers = _integer(ctx, "compute.workers", comp["workers"], example="2")
        if workers < 1:
            msg = (
                f"{ctx.where('compute.workers')} is {workers}; expected at least 1 thread "
                "(more than the number of cores does not help)."
            )
            raise WorkflowError(msg)
        kw["workers"] = workers
    if "method" in comp:
        kw["method"] = _choice(ctx, "compute.method", comp["method"], METHODS)
    return ComputeOptions(**kw)


def _read_outputs(ctx: _Context, table: dict[str, Any]) -> OutputOptions:
    if "variables" not in table:
        return OutputOptions()
    key = "outputs.variables"
    names = table["variables"]
    if not isinstance(names, list) or not names:
        example = 'variables = ["melt_thickness_km", "onset_depth_km"]'
        raise _wrong_type(ctx, key, names, "a non-empty array of variable names", example)
    chosen: list[str] = []
    for value in names:
        name = _choice(ctx, key, value, OUTPUT_VARIABLES)
        if name in chosen:
            msg = f"{ctx.where(key)} lists {name!r} twice; list each variable once."
            raise WorkflowError(msg)
        chosen.append(name)
    return OutputOptions(variables=tuple(chosen))


# ---------------------------------------------------------------------------------------------
# --set overrides


def _parse_value(text: str) -> Any:
    """A --set VALUE as a TOML value, falling back to the plain string."""
    try:
        parsed = tomllib.loads(f"v = {text}")
    except tomllib.TOMLDecodeError:
        return text
    if set(parsed) != {"v"}:  # e.g. a value with a newline and a second key
        return text
    return parsed["v"]


def _apply_override(ctx: _Context, tree: dict[str, Any], item: str) -> None:
    key, sep, raw = item.partition("=")
    key = key.strip()
    parts = key.split(".")
    if not sep or not key or any(not p.strip() for p in parts):
        msg = (
            f"--set {item!r} is not KEY=VALUE; expected a dotted key into the workflow, e.g. "
            "--set model.ambient_potential_temperature_c=1400 or --set inputs.water.constant=0.01."
        )
        raise WorkflowError(msg)
    parts = [p.strip() for p in parts]
    node: Any = tree
    for depth, part in enumerate(parts[:-1]):
        here = ".".join(parts[: depth + 1])
        if isinstance(node, list):
            node = node[_list_index(ctx, node, part, here, item)]
        else:
            node = node.setdefault(part, {})
        if not isinstance(node, dict | list):
            msg = (
                f"--set {item}: '{here}' in {ctx.source} is a value ({node!r}), not a table, "
                f"so '{key}' cannot be set. Check the key against docs/workflow.md."
            )
            raise WorkflowError(msg)
    last = parts[-1]
    if isinstance(node, list):
        node[_list_index(ctx, node, last, key, item)] = _parse_value(raw.strip())
    else:
        node[last] = _parse_value(raw.strip())
    ctx.set_keys[key] = item


def _list_index(ctx: _Context, node: list[Any], part: str, here: str, item: str) -> int:
    if not part.isdigit() or not 1 <= int(part) <= len(node):
        msg = (
            f"--set {item}: '{here}' needs an item number from 1 to {len(node)} (the array "
            f"in {ctx.source} has {len(node)} items, counted from 1), e.g. "
            "inputs.thermal_anomaly.plumes.1.radius_km=300."
        )
        raise WorkflowError(msg)
    return int(part) - 1


# ---------------------------------------------------------------------------------------------
# Public API


def load_workflow(
    path: str | Path,
    *,
    overrides: Sequence[str] = (),
    output_dir: str | Path | None = None,
) -> RunConfig:
    """Read, override and validate a workflow file.

    Parameters
    ----------
    path : str or Path
        The workflow file (TOML). Input paths in it are relative to its folder.
    overrides : sequence of str
        ``KEY=VALUE`` items (the ``--set`` options), applied in order before validation.
        KEY is a dotted key into the TOML tree (``model.parameters.cpx_mass_fraction``; array
        items are counted from 1: ``inputs.thermal_anomaly.plumes.1.radius_km``). VALUE is
        read as a TOML value (``1400``, ``0.01``, ``true``, ``"gdh1"``, ``[1, 2]``) and taken
        as a plain string if it is not one.
    output_dir : str or Path, optional
        The ``-o`` option: the output folder, overriding ``run.output_dir``; relative to the
        current working directory.

    Returns
    -------
    RunConfig
        The validated configuration with absolute paths.

    Raises
    ------
    WorkflowError
        If the file cannot be read or parsed, has an unknown key, a value of the wrong type or
        out of range, misses a required input or grid, names an input file that does not exist,
        or names an unknown model or model parameter.
    """
    given = Path(path)
    workflow_path = given.expanduser().resolve()
    source = str(given)
    if not workflow_path.is_file():
        state = "is a folder" if workflow_path.is_dir() else "does not exist"
        msg = (
            f"workflow file {source!r} {state} (resolved to '{workflow_path}'); expected a TOML "
            "workflow file. Copy workflows/template.toml to start one."
        )
        raise WorkflowError(msg)
    try:
        text = workflow_path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        msg = f"workflow file {source!r} cannot be read as UTF-8 text ({exc}); save it as UTF-8."
        raise WorkflowError(msg) from exc
    try:
        tree = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = (
            f"workflow file {source!r} is not valid TOML: {exc}. Check that line (strings need "
            'quotes: name = "demo"; tables are written [model]; see docs/workflow.md).'
        )
        raise WorkflowError(msg) from exc
    ctx = _Context(source, {})
    items = tuple(overrides)
    for item in items:
        _apply_override(ctx, tree, item)
    cfg = _validate(
        ctx, tree, workflow_path=workflow_path, text=text, overrides=items, output_dir=output_dir
    )
    validate_models(cfg)
    return cfg


def validate_models(cfg: RunConfig) -> None:
    """Check the melting and cooling models, their parameter overrides and the lid isotherm.

    Calls ``lidmelt.physics.melting.get_model(name, **parameters)``,
    ``lidmelt.physics.cooling.get_cooling_model(name, **parameters)`` and
    ``lidmelt.physics.cooling.isotherm_depth_km`` (which checks that the lid isotherm lies below
    the cooling model's mantle temperature). They raise :class:`lidmelt.errors.ModelError` for
    an unknown model or parameter or a bad value; that error is re-raised as a WorkflowError
    that names the file and the key.

    Parameters
    ----------
    cfg : RunConfig
        The configuration to check.

    Raises
    ------
    WorkflowError
        If a model, one of its parameters or the lid isotherm is not valid.
    """
    from lidmelt.physics.cooling import get_cooling_model, isotherm_depth_km
    from lidmelt.physics.melting import get_model

    model, litho = cfg.model, cfg.lithosphere
    checks: list[tuple[str, Any, Any]] = [  # (key, value, the call that checks it)
        ("model.name", model.name, lambda: get_model(model.name)),
        (
            "model.parameters",
            dict(model.parameters),
            lambda: get_model(model.name, **model.parameters),
        ),
        ("lithosphere.cooling", litho.cooling, lambda: get_cooling_model(litho.cooling)),
        (
            "lithosphere.parameters",
            dict(litho.parameters),
            lambda: get_cooling_model(litho.cooling, **litho.parameters),
        ),
        (
            "lithosphere.lid_isotherm_c",
            litho.lid_isotherm_c,
            lambda: isotherm_depth_km(
                litho.lid_isotherm_c,
                0.0,
                model=get_cooling_model(litho.cooling, **litho.parameters),
            ),
        ),
    ]
    for key, value, check in checks:
        try:
            check()
        except LidmeltError as exc:
            sets = [
                item for item in cfg.overrides if item.partition("=")[0].strip().startswith(key)
            ]
            origin = f" (with --set {', '.join(sets)})" if sets else ""
            msg = f"'{key}' = {value!r} in {cfg.workflow_path.name}{origin} is not valid: {exc}"
            raise WorkflowError(msg) from exc
