"""The run's catalogue entry: a STAC Item, and for an ensemble a STAC Collection, in its folder.

A run folder gets ``stac_item.json``: a STAC Item (pystac) whose geometry and bbox are the
grid's footprint in WGS 84 (the grid's edges, densified and reprojected by rio-stac), whose
``datetime`` is the run's time (``created_utc`` of ``summary.json``) and whose properties carry
the run's provenance (lidmelt version, melting model, workflow, the inputs' SHA-256, the
summary's own checksum). It has one asset per file of the run, with an href relative to the
item, so the folder may move: every GeoTIFF (with the projection extension's ``proj:code`` or
``proj:wkt2``, ``proj:shape``, ``proj:transform`` and ``proj:bbox``, read from the file's header
by rio-stac, and the raster extension's band: data type, nodata, unit and the run's own
min/max/mean from the summary, so no grid is read again), the NetCDF, the summary, tracks,
candidates, the maps and the report (a Zarr store is one asset; a store at an fsspec URL,
``[outputs] zarr_url``, has that absolute URL as its href).

A run with an ``[ensemble]`` table also gets ``stac_collection.json``: a Collection that holds
the ensemble's layers (percentiles, probabilities, members without a value) and its tables as
collection assets, and links the run's Item (which links back with ``rel="collection"``): the
Item is the run, the Collection gathers what the members say about it.

Both are written last, into the staged run, after the figures: they list every file the run
wrote, so they are outside the manifest (:data:`lidmelt.grids._manifest.CATALOGUE_NAMES`), and
are swapped into place with the run. The Item refers to the sealed run through
``lidmelt:summary_sha256``. Product commands that redraw figures later do not rewrite them.
"""

from __future__ import annotations

import json
import math
import os
import tomllib
from collections.abc import Mapping
from datetime import datetime
from pathlib import Path
from typing import Any

import pystac
from pystac.extensions.projection import ProjectionExtension
from pystac.extensions.raster import DataType, RasterBand, RasterExtension, Statistics

from lidmelt._files import write_json_atomic
from lidmelt._variables import ensemble_variable
from lidmelt.grids._manifest import CATALOGUE_NAMES, COLLECTION_NAME, ITEM_NAME
from lidmelt.grids._objstore import store_url
from lidmelt.grids._rundir import SUMMARY_NAME, ZARR_NAME

#: Points added along each edge of the footprint before it is reprojected to WGS 84.
_DENSIFY = 20
#: Decimal places of the footprint's coordinates (about 1 cm).
_PRECISION = 7
#: The ensemble's settings a Collection summarises (keys of the summary's ``ensemble`` entry).
_ENSEMBLE_KEYS = (
    "members", "seed", "sampling", "thresholds_km", "percentiles", "percentile_definition",
    "outputs",
)  # fmt: skip
#: Media types by file suffix (the GeoTIFF's is rio-stac's).
_MEDIA = {
    ".nc": "application/netcdf",
    ".json": pystac.MediaType.JSON,
    ".geojson": pystac.MediaType.GEOJSON,
    ".gpkg": "application/geopackage+sqlite3",
    ".csv": "text/csv",
    ".png": pystac.MediaType.PNG,
    ".pdf": pystac.MediaType.PDF,
    ".html": pystac.MediaType.HTML,
    ".zarr": "application/vnd+zarr",
}


def run_files(run_dir: str | Path) -> list[str]:
    """The files of a run folder (relative POSIX names), but the catalogue files themselves and
    hidden files (an atomic write's temporary file); a ``.zarr`` store counts as one file."""
    run_dir = Path(run_dir)
    names = []
    for root, dirs, files in os.walk(run_dir):
        rel_root = Path(root).relative_to(run_dir)
        stores = sorted(d for d in dirs if d.endswith(".zarr"))
        names += [(rel_root / d).as_posix() for d in stores]
        dirs[:] = sorted(d for d in dirs if d not in stores and not d.startswith("."))
        for name in sorted(files):
            rel = (rel_root / name).as_posix()
            if not name.startswith(".") and rel not in CATALOGUE_NAMES:
                names.append(rel)
    return sorted(names)


def write_run_catalogue(run_dir: str | Path) -> list[Path]:
    """Write the run's STAC Item (and for an ensemble its Collection) into ``run_dir``.

    Reads ``summary.json`` and every file's header (GeoTIFFs); returns the paths written.
    """
    run_dir = Path(run_dir)
    summary = json.loads((run_dir / SUMMARY_NAME).read_text(encoding="utf-8"))
    files = run_files(run_dir)
    item = run_item(run_dir, summary, files)
    written = []
    if summary.get("ensemble"):
        collection = ensemble_collection(run_dir, summary, item)
        item.collection_id = collection.id
        item.add_link(pystac.Link("collection", f"./{COLLECTION_NAME}", pystac.MediaType.JSON))
        doc = collection.to_dict(include_self_link=False, transform_hrefs=False)
        written.append(write_json_atomic(run_dir / COLLECTION_NAME, doc))
    doc = item.to_dict(include_self_link=False, transform_hrefs=False)
    written.insert(0, write_json_atomic(run_dir / ITEM_NAME, doc))
    return written


def run_item(run_dir: Path, summary: Mapping[str, Any], files: list[str]) -> pystac.Item:
    """The run's STAC Item: footprint, time, provenance, and one asset per file in ``files``."""
    footprint = _footprint(run_dir, summary)
    item = pystac.Item(
        id=run_dir.name,
        geometry=footprint["footprint"],
        bbox=footprint["bbox"],
        datetime=_run_time(summary),
        properties=_provenance(summary),
    )
    ProjectionExtension.add_to(item)
    RasterExtension.add_to(item)
    for rel in files:
        item.add_asset(rel, file_asset(run_dir, rel, summary))
    url = store_url(summary)
    if url is not None:  # a store at [outputs] zarr_url: its absolute URL, under the usual key
        title = "the run's Zarr store (every grid), outside the run folder"
        asset = pystac.Asset(href=url, title=title, media_type=_MEDIA[".zarr"], roles=["data"])
        item.add_asset(ZARR_NAME, asset)
    return item


def ensemble_collection(
    run_dir: Path, summary: Mapping[str, Any], item: pystac.Item
) -> pystac.Collection:
    """The Collection of an ensemble run: its layers and tables as assets, linking ``item``."""
    when = item.datetime
    collection = pystac.Collection(
        id=f"{run_dir.name}-ensemble",
        title=f"{run_dir.name}: ensemble layers",
        description=(
            "The layers of a lidmelt ensemble run (percentiles, probabilities, members "
            f"without a value) over the grid of the run's item {ITEM_NAME}."
        ),
        extent=pystac.Extent(
            pystac.SpatialExtent([item.bbox]), pystac.TemporalExtent([[when, when]])
        ),
        license="other",
        summaries=pystac.Summaries(_ensemble_summaries(summary.get("ensemble") or {})),
    )
    ProjectionExtension.add_to(collection)
    RasterExtension.add_to(collection)
    for key, asset in item.assets.items():
        if _is_ensemble_file(key):
            collection.add_asset(key, asset.clone())
    collection.add_link(pystac.Link("item", f"./{ITEM_NAME}", pystac.MediaType.GEOJSON))
    return collection


def _ensemble_summaries(entry: Mapping[str, Any]) -> dict[str, Any]:
    """The ensemble's settings (:data:`_ENSEMBLE_KEYS` of its summary entry) as collection
    summaries, each a list; the varied keys by name."""
    out: dict[str, Any] = {}
    for key in _ENSEMBLE_KEYS:
        value = entry.get(key)
        if isinstance(value, bool | int | float | str):
            out[f"lidmelt:ensemble_{key}"] = [value]
        elif isinstance(value, list) and all(isinstance(v, int | float | str) for v in value):
            out[f"lidmelt:ensemble_{key}"] = list(value)
    if isinstance(entry.get("vary"), dict):
        out["lidmelt:ensemble_varied"] = sorted(str(k) for k in entry["vary"])
    return out


def _is_ensemble_file(rel: str) -> bool:
    """An ensemble layer (a GeoTIFF of an ensemble variable) or an ensemble table."""
    path = Path(rel)
    if len(path.parts) != 1:
        return False
    if path.suffix == ".tif":
        return ensemble_variable(path.stem) is not None
    return path.name.startswith("ensemble_")


def file_asset(run_dir: Path, rel: str, summary: Mapping[str, Any]) -> pystac.Asset:
    """The asset of file ``rel``: media type, roles and title; a GeoTIFF's grid and band."""
    path = Path(rel)
    title, unit = _describe(path, summary)
    asset = pystac.Asset(
        href=rel, title=title, media_type=_MEDIA.get(path.suffix.lower()), roles=_roles(path)
    )
    if path.suffix.lower() == ".tif":
        _raster_fields(asset, run_dir / rel, unit=unit, stats=_statistics(path.stem, summary))
    return asset


def _roles(path: Path) -> list[str]:
    """The asset's roles (STAC's common roles where one fits)."""
    if path.parts[0] == "maps" or path.suffix.lower() == ".png":
        return ["overview", "visual"]
    if path.name == SUMMARY_NAME:
        return ["metadata"]
    if path.stem.startswith("report"):
        return ["metadata", "report"]
    if path.name.startswith("input_"):
        return ["data", "source"]
    if path.stem == "validity_flag":
        return ["data", "quality"]
    return ["data"]


def _describe(path: Path, summary: Mapping[str, Any]) -> tuple[str | None, str | None]:
    """A GeoTIFF's long name and unit as the summary records them (None for other files)."""
    if path.suffix.lower() != ".tif" or len(path.parts) != 1:
        return None, None
    stem = path.stem
    if stem.startswith("input_"):
        entry = (summary.get("inputs") or {}).get(stem.removeprefix("input_"))
    else:
        entry = (summary.get("outputs") or {}).get(stem)
    if stem == "validity_flag":
        return "validity bit flags (meanings in summary.json, validity_flag)", None
    if not isinstance(entry, dict):
        return None, None
    return entry.get("long_name"), entry.get("units") or None


def _statistics(name: str, summary: Mapping[str, Any]) -> dict[str, float] | None:
    """The run's min, max and mean of output ``name`` (``summary.json``), None without them."""
    stats = ((summary.get("statistics") or {}).get("variables") or {}).get(name)
    if not isinstance(stats, dict):
        return None
    keys = ("min", "max", "mean")
    if not all(isinstance(stats.get(k), int | float) for k in keys):
        return None
    return {k: float(stats[k]) for k in keys}


def _raster_fields(
    asset: pystac.Asset, path: Path, *, unit: str | None, stats: Mapping[str, float] | None
) -> None:
    """The projection and raster extension fields of a GeoTIFF asset, from its header."""
    import rasterio
    from rio_stac.stac import get_media_type, get_projection_info

    with rasterio.open(path) as src:
        info = get_projection_info(src)
        asset.media_type = str(get_media_type(src) or asset.media_type)
        dtype, nodata = src.dtypes[0], src.nodata
    proj = ProjectionExtension.ext(asset)
    proj.code = f"EPSG:{info['epsg']}" if info.get("epsg") else None
    proj.wkt2 = info.get("wkt2")
    proj.shape = [int(n) for n in info["shape"]]
    proj.transform = [float(v) for v in info["transform"]]
    proj.bbox = [float(v) for v in info["bbox"]]
    band = RasterBand.create(data_type=DataType(dtype), unit=unit)
    if nodata is not None:
        # the raster extension writes a NaN nodata as the string "nan" (JSON has no NaN)
        band.nodata = "nan" if math.isnan(nodata) else nodata
    if stats is not None:
        band.statistics = Statistics.create(
            minimum=stats["min"], maximum=stats["max"], mean=stats["mean"]
        )
    RasterExtension.ext(asset).bands = [band]


def _footprint(run_dir: Path, summary: Mapping[str, Any]) -> dict[str, Any]:
    """The grid's footprint and bbox in WGS 84 (rio-stac: the edges densified, reprojected)."""
    import rasterio
    from rio_stac.stac import get_dataset_geom

    grid = summary["grid"]
    # one cell spanning the whole grid (same corners, same bounds): no grid-sized memory
    whole = rasterio.Affine.scale(int(grid["width"]), int(grid["height"]))
    profile = {
        "driver": "MEM",
        "width": 1,
        "height": 1,
        "count": 1,
        "dtype": "uint8",
        "crs": rasterio.crs.CRS.from_wkt(grid["crs_wkt"]),
        "transform": rasterio.Affine(*grid["transform"][:6]) * whole,
    }
    with rasterio.MemoryFile() as mem, mem.open(**profile) as src:
        return _wrapped(get_dataset_geom(src, densify_pts=_DENSIFY, precision=_PRECISION))


def _wrapped(found: dict[str, Any]) -> dict[str, Any]:
    """A footprint with longitudes past 180 E (a grid in 0-360 longitudes) brought into
    -180..180 as RFC 7946 (sec. 5.2, 3.1.9) asks: a whole circle becomes -180..180; a grid that
    crosses the antimeridian gets a bbox with west > east and a MultiPolygon of its two sides."""
    from rio_stac.stac import bbox_to_geom

    west, south, east, north = found["bbox"]
    if east <= 180.0:
        return found
    if east - west >= 360.0:
        bbox = [-180.0, south, 180.0, north]
    elif west >= 180.0:
        bbox = [west - 360.0, south, east - 360.0, north]
    else:
        sides = [bbox_to_geom((west, south, 180.0, north)),
                 bbox_to_geom((-180.0, south, east - 360.0, north))]  # fmt: skip
        geom = {"type": "MultiPolygon", "coordinates": [g["coordinates"] for g in sides]}
        return {"bbox": [west, south, east - 360.0, north], "footprint": geom}
    return {"bbox": bbox, "footprint": bbox_to_geom(bbox)}


def _run_time(summary: Mapping[str, Any]) -> datetime:
    """The run's time: ``created_utc`` of its summary (UTC)."""
    return datetime.fromisoformat(str(summary["created_utc"]).replace("Z", "+00:00"))


def _provenance(summary: Mapping[str, Any]) -> dict[str, Any]:
    """The Item's properties: what made the run (names prefixed ``lidmelt:``)."""
    model = summary.get("model") or {}
    inputs = summary.get("inputs") or {}
    workflow_file = summary.get("workflow_file")
    props: dict[str, Any] = {
        "title": f"lidmelt run {_run_name(summary) or ''}".strip(),
        "description": "Predicted mantle melt productivity maps (lidmelt run).",
        "created": summary.get("created_utc"),
        "lidmelt:version": summary.get("lidmelt_version"),
        "lidmelt:melting_model": model.get("name"),
        "lidmelt:model_reference": model.get("reference"),
        "lidmelt:ambient_potential_temperature_c": summary.get("ambient_potential_temperature_c"),
        "lidmelt:method": summary.get("method"),
        "lidmelt:run_name": _run_name(summary),
        "lidmelt:workflow_file": Path(workflow_file).name if workflow_file else None,
        "lidmelt:workflow_overrides": list(summary.get("workflow_overrides") or []),
        "lidmelt:inputs": _input_hashes(inputs),
        "lidmelt:summary_sha256": summary.get("summary_sha256"),
    }
    if summary.get("ensemble"):
        props["lidmelt:ensemble"] = True
    return {k: v for k, v in props.items() if v is not None}


def _input_hashes(inputs: Mapping[str, Any]) -> dict[str, dict[str, str | None]]:
    """Each input's file name (no folder: the item may travel) and SHA-256 (null: a constant
    or plumes, no file)."""
    out = {}
    for name, entry in inputs.items():
        if isinstance(entry, dict):
            source = entry.get("source")
            out[name] = {"source": Path(source).name if source else None,
                         "sha256": entry.get("sha256")}  # fmt: skip
    return out


def _run_name(summary: Mapping[str, Any]) -> str | None:
    """``run.name`` of the workflow text the summary records, None where it has none."""
    try:
        run = tomllib.loads(str(summary.get("workflow") or "")).get("run") or {}
    except tomllib.TOMLDecodeError:
        return None
    name = run.get("name") if isinstance(run, dict) else None
    return str(name) if name is not None else None
