"""Every run's STAC Item (and an ensemble's Collection) validates and describes the run.

Check values: the STAC 1.1.0 JSON schemas (item, collection, the GeoJSON Feature and Geometry
they refer to) and the projection v2.0.0 and raster v1.1.0 extension schemas, vendored in
tests/data/stac-schemas (tests/data/stac-schemas/SOURCES.md: where each came from, Apache-2.0);
validated offline through a local ``referencing`` registry that maps the schemas' URLs to those
files and refuses any other URL. The footprint is checked against pyproj's own transform of the
grid's edges, the rasters' fields against rasterio's reading of each file's header, the
statistics against the run's summary.json (independent readers, not the code under test).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import jsonschema
import numpy as np
import pytest
import rasterio
import referencing
import referencing.exceptions
import referencing.jsonschema
from affine import Affine
from pyproj import Transformer

from lidmelt.cli import main
from lidmelt.grids._manifest import CATALOGUE_NAMES
from lidmelt.grids._rundir import open_run
from lidmelt.grids._stac import run_files, write_run_catalogue
from runkit import basin

SCHEMAS = Path(__file__).parent / "data" / "stac-schemas"
CORE = "https://schemas.stacspec.org/v1.1.0/"
#: The URL of each vendored schema file (the URL its publisher serves it at: SOURCES.md).
URLS = {
    **{
        f"{CORE}{name}-spec/json-schema/{name}.json": f"stac-spec/v1.1.0/{name}.json"
        for name in ("item", "catalog", "collection")
    },
    **{
        f"{CORE}item-spec/json-schema/{name}.json": f"stac-spec/v1.1.0/{name}.json"
        for name in (
            "bands",
            "basics",
            "common",
            "data-values",
            "datetime",
            "instrument",
            "licensing",
            "provider",
        )
    },
    "https://geojson.org/schema/Feature.json": "geojson/Feature.json",
    "https://geojson.org/schema/Geometry.json": "geojson/Geometry.json",
    "https://stac-extensions.github.io/projection/v2.0.0/schema.json": (
        "projection/v2.0.0/schema.json"
    ),
    "https://stac-extensions.github.io/raster/v1.1.0/schema.json": "raster/v1.1.0/schema.json",
}
#: The asset the probes break.
ASSET = "assets/melt_thickness_km.tif"
ENSEMBLE = """
[ensemble]
members = 4
seed = 3
thresholds_km = [0.5]
[ensemble.vary]
"model.ambient_potential_temperature_c" = {normal = [1350.0, 25.0]}
"""


def _refuse_network(uri: str):
    """The registry's fallback: no schema is fetched; an unknown URL is an error."""
    raise referencing.exceptions.NoSuchResource(ref=uri)


def registry() -> referencing.Registry:
    """The vendored schemas under their URLs (draft 7, as they declare)."""
    resources = []
    for url, rel in URLS.items():
        doc = json.loads((SCHEMAS / rel).read_text(encoding="utf-8"))
        resources.append((url, referencing.jsonschema.DRAFT7.create_resource(doc)))
    return referencing.Registry(retrieve=_refuse_network).with_resources(resources)


def stac_errors(doc: dict) -> list[str]:
    """Every schema violation (and every branch's, for a oneOf) of a STAC Item or Collection:
    its core schema and the schema of each extension it declares (STAC's own rule)."""
    core = {"Feature": "item", "Collection": "collection"}[doc["type"]]
    urls = [f"{CORE}{core}-spec/json-schema/{core}.json", *doc.get("stac_extensions", [])]
    reg = registry()
    errors = []
    for url in urls:
        schema = reg.contents(url)
        validator = jsonschema.Draft7Validator(
            schema, registry=reg, format_checker=jsonschema.Draft7Validator.FORMAT_CHECKER
        )
        for error in validator.iter_errors(doc):
            errors += [f"{url}: {message}" for message in _messages(error)]
    return errors


def _messages(error: jsonschema.ValidationError) -> list[str]:
    """An error's message and those of the branches it tried (a oneOf's), with their paths."""
    where = "/".join(str(p) for p in error.absolute_path)
    out = [f"{where}: {error.message}"]
    for sub in error.context or ():
        out += _messages(sub)
    return out


@pytest.fixture(scope="module")
def ensemble_run(tmp_path_factory):
    """A tiny invented basin (runkit.basin) run as a 4-member ensemble, with its figures."""
    folder = tmp_path_factory.mktemp("stac")
    wf = basin(folder / "in", extra=ENSEMBLE, maps=True)
    out = folder / "run"
    assert main(["run", str(wf), "-o", str(out), "--quiet"]) == 0
    return out


def _load(path: Path) -> dict:
    return json.loads(path.read_text(encoding="utf-8"))


def test_vendored_schemas_are_the_ones_pystac_declares(ensemble_run):
    item = _load(ensemble_run / "stac_item.json")
    assert item["stac_version"] == "1.1.0"  # the vendored core schemas' version
    assert set(item["stac_extensions"]) <= set(URLS)


def test_run_item_and_collection_validate(ensemble_run):
    item = _load(ensemble_run / "stac_item.json")
    collection = _load(ensemble_run / "stac_collection.json")
    assert stac_errors(item) == []
    assert stac_errors(collection) == []


@pytest.mark.parametrize(
    ("where", "value", "expected"),
    [
        # not in UTC with its zone (STAC: RFC 3339 in UTC)
        ("datetime", "2026-12-05 19:00:00", "properties/datetime: '2026-12-05 19:00:00' does not"),
        ("datetime", None, "'start_datetime' is a required property"),  # null needs a range
        ("proj:shape", "24 x 36", f"{ASSET}/proj:shape: '24 x 36' is not of type 'array'"),
        ("proj:transform", [1.0, 0.0], f"{ASSET}/proj:transform: [1.0, 0.0] is too short"),
        ("data_type", "float", f"{ASSET}/raster:bands/0/data_type: 'float' is not one of"),
    ],
)
def test_a_broken_item_fails_validation(ensemble_run, where, value, expected):
    """The probe: the validation is not a rubber stamp."""
    item = _load(ensemble_run / "stac_item.json")
    asset = item["assets"][ASSET.split("/")[1]]
    if where == "datetime":
        item["properties"]["datetime"] = value
    elif where == "data_type":
        asset["raster:bands"][0]["data_type"] = value
    else:
        asset[where] = value
    errors = stac_errors(item)
    assert any(expected in e for e in errors), errors


def test_an_unknown_schema_url_is_refused_not_fetched(ensemble_run):
    item = _load(ensemble_run / "stac_item.json")
    item["stac_extensions"].append("https://stac-extensions.github.io/eo/v1.1.0/schema.json")
    with pytest.raises(referencing.exceptions.NoSuchResource):
        stac_errors(item)


def test_item_has_one_asset_per_file_with_relative_hrefs(ensemble_run):
    item = _load(ensemble_run / "stac_item.json")
    on_disk = sorted(
        p.relative_to(ensemble_run).as_posix()
        for p in ensemble_run.rglob("*")
        if p.is_file() and p.name not in CATALOGUE_NAMES
    )
    assert sorted(item["assets"]) == on_disk
    for key, asset in item["assets"].items():
        assert asset["href"] == key  # relative to the item, beside it
    # what the issue names: rasters, NetCDF, summary, report, maps
    assert {"melt_thickness_km.tif", "lidmelt.nc", "summary.json", "report.html"} <= set(on_disk)
    assert any(name.startswith("maps/") for name in on_disk)
    media = {k: a.get("type") for k, a in item["assets"].items()}
    assert media["melt_thickness_km.tif"] == "image/tiff; application=geotiff"
    assert media["lidmelt.nc"] == "application/netcdf"
    assert media["summary.json"] == "application/json"


def test_raster_assets_match_their_geotiff_headers(ensemble_run):
    item = _load(ensemble_run / "stac_item.json")
    summary = _load(ensemble_run / "summary.json")
    tifs = [k for k in item["assets"] if k.endswith(".tif")]
    assert len(tifs) >= 10
    for key in tifs:
        asset = item["assets"][key]
        with rasterio.open(ensemble_run / key) as src:
            assert asset["proj:code"] == f"EPSG:{src.crs.to_epsg()}", key
            assert asset["proj:shape"] == [src.height, src.width], key
            assert asset["proj:transform"] == pytest.approx(list(src.transform)), key
            assert asset["proj:bbox"] == pytest.approx(list(src.bounds)), key
            band = asset["raster:bands"][0]
            assert band["data_type"] == src.dtypes[0], key
            nodata = "nan" if np.isnan(src.nodata) else src.nodata
            assert band["nodata"] == nodata, key
        stem = key.removesuffix(".tif")
        entry = summary["outputs"].get(stem) or summary["inputs"].get(stem.removeprefix("input_"))
        if stem == "validity_flag":
            assert band["data_type"] == "uint8"
            assert band["nodata"] == 255  # FLAG_NODATA, docs: nodata 255
            continue
        assert band.get("unit") == (entry["units"] or None), key
        stats = summary["statistics"]["variables"].get(stem)
        if stats and stats.get("min") is not None:
            assert band["statistics"] == pytest.approx(
                {"minimum": stats["min"], "maximum": stats["max"], "mean": stats["mean"]}
            ), key


def test_item_time_footprint_and_provenance(ensemble_run):
    item = _load(ensemble_run / "stac_item.json")
    summary = _load(ensemble_run / "summary.json")
    assert item["properties"]["datetime"] == summary["created_utc"]
    # runkit.write_age: 24 x 36 cells of 0.25 deg from (-30 E, 10 N), in EPSG:4326
    assert item["bbox"] == pytest.approx([-30.0, 4.0, -21.0, 10.0])
    ring = np.array(item["geometry"]["coordinates"][0])
    assert ring.min(axis=0) == pytest.approx([-30.0, 4.0])
    assert ring.max(axis=0) == pytest.approx([-21.0, 10.0])
    props = item["properties"]
    assert props["lidmelt:melting_model"] == summary["model"]["name"]
    assert props["lidmelt:version"] == summary["lidmelt_version"]
    assert props["lidmelt:run_name"] == "tiny"  # runkit.basin's [run] name
    assert props["lidmelt:summary_sha256"] == summary["summary_sha256"]
    assert (
        props["lidmelt:inputs"]["plate_age_ma"]["sha256"]
        == (summary["inputs"]["plate_age_ma"]["sha256"])
    )


def test_collection_holds_the_ensemble_layers_and_links_the_item(ensemble_run):
    item = _load(ensemble_run / "stac_item.json")
    collection = _load(ensemble_run / "stac_collection.json")
    layers = sorted(
        p.name
        for p in ensemble_run.glob("*.tif")
        if "_p10" in p.name or "_p50" in p.name or "_p90" in p.name or "probability" in p.name
    )
    assert layers  # the ensemble wrote percentiles and a probability
    assert set(layers) <= set(collection["assets"])
    assert "melt_thickness_km.tif" not in collection["assets"]  # the deterministic run's
    assert item["collection"] == collection["id"]
    links = {(link["rel"], link["href"]) for link in collection["links"]}
    assert ("item", "./stac_item.json") in links
    assert ("collection", "./stac_collection.json") in {
        (link["rel"], link["href"]) for link in item["links"]
    }
    assert collection["extent"]["spatial"]["bbox"] == [item["bbox"]]
    assert collection["summaries"]["lidmelt:ensemble_members"] == [4]  # ENSEMBLE above


def test_catalogue_is_outside_the_manifest_and_the_run_still_opens(ensemble_run, tmp_path):
    summary = _load(ensemble_run / "summary.json")
    assert not CATALOGUE_NAMES & set(summary["manifest"]["files"])
    moved = tmp_path / "elsewhere"
    shutil.copytree(ensemble_run, moved)  # the folder moves: hrefs still resolve
    open_run(moved)
    item = _load(moved / "stac_item.json")
    for asset in item["assets"].values():
        assert (moved / "stac_item.json").parent.joinpath(asset["href"]).is_file()


def test_projected_grid_footprint_is_reprojected_to_wgs84(make_run_dir):
    """A grid in UTM zone 33N (EPSG:32633): the item's bbox is the WGS 84 envelope of the
    grid's edges, as pyproj transforms them (its transform_bounds with densified edges)."""
    transform = Affine(10_000.0, 0.0, 300_000.0, 0.0, -10_000.0, 5_500_000.0)
    values = np.linspace(0.0, 5.0, 30 * 40, dtype=np.float32).reshape(30, 40)
    run = make_run_dir({"melt_thickness_km": values}, transform=transform, crs="EPSG:32633")
    write_run_catalogue(run)
    item = _load(run / "stac_item.json")
    assert stac_errors(item) == []
    west, north = 300_000.0, 5_500_000.0
    east, south = west + 40 * 10_000.0, north - 30 * 10_000.0
    expected = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True).transform_bounds(
        west, south, east, north, densify_pts=200
    )
    assert item["bbox"] == pytest.approx(list(expected), abs=1e-3)
    asset = item["assets"]["melt_thickness_km.tif"]
    assert asset["proj:code"] == "EPSG:32633"
    assert asset["proj:bbox"] == pytest.approx([west, south, east, north])
    assert "collection" not in item  # no ensemble, no collection
    assert not (run / "stac_collection.json").exists()


def test_run_files_skip_temporaries_and_count_a_store_once(tmp_path):
    (tmp_path / "maps").mkdir()
    (tmp_path / "maps" / "a.png").write_bytes(b"x")
    (tmp_path / ".summary.json.tmp-1").write_bytes(b"x")  # an atomic write's temporary
    (tmp_path / "stac_item.json").write_text("{}")
    store = tmp_path / "lidmelt.zarr" / "melt_thickness_km" / "c"
    store.mkdir(parents=True)
    (store / "0").write_bytes(b"x")
    assert run_files(tmp_path) == ["lidmelt.zarr", "maps/a.png"]


def test_a_resealed_run_keeps_the_catalogue_outside_its_manifest(ensemble_run, tmp_path):
    """A run resealed after the Item was written (conftest.reseal, as a test that edits a run
    does) does not take the Item into its manifest: the Item lists the sealed summary."""
    from conftest import reseal

    copy = tmp_path / "run"
    shutil.copytree(ensemble_run, copy)
    reseal(copy)
    files = _load(copy / "summary.json")["manifest"]["files"]
    assert "summary.json" not in files
    assert not CATALOGUE_NAMES & set(files), sorted(files)
    assert "melt_thickness_km.tif" in files


@pytest.mark.parametrize(
    ("west", "width", "bbox", "parts"),
    [
        # RFC 7946 sec. 5.2: a bbox crossing the antimeridian has west > east (170 E to 170 W)
        (170.0, 20, [170.0, -10.0, -170.0, 10.0], 2),
        (0.0, 360, [-180.0, -10.0, 180.0, 10.0], 1),  # a whole circle in 0-360 longitudes
        (200.0, 20, [-160.0, -10.0, -140.0, 10.0], 1),  # 200-220 E is 160-140 W
    ],
)
def test_longitudes_past_180_are_wrapped(make_run_dir, west, width, bbox, parts):
    transform = Affine(1.0, 0.0, west, 0.0, -1.0, 10.0)
    values = np.ones((20, width), dtype=np.float32)
    run = make_run_dir({"melt_thickness_km": values}, transform=transform)
    write_run_catalogue(run)
    item = _load(run / "stac_item.json")
    assert stac_errors(item) == []
    assert item["bbox"] == pytest.approx(bbox)
    geometry = item["geometry"]
    polygons = geometry["coordinates"] if geometry["type"] == "MultiPolygon" else [0]
    assert len(polygons) == parts
    lons = np.asarray(geometry["coordinates"], dtype=float).reshape(-1, 2)[:, 0]
    assert lons.min() >= -180.0
    assert lons.max() <= 180.0
