"""Tests of the issue-13 workflow keys: the real-data example, plume catalogues, the lid
reference and per-input file keys (lidmelt.workflow, grids.catalogue, grids.lidref)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from lidmelt._errors import InputError, WorkflowError
from lidmelt.grids._catalogue import read_plume_catalogue
from lidmelt.grids._lidref import lid_below_seafloor_km
from lidmelt.workflow import load_workflow

ROOT = Path(__file__).resolve().parents[1]


def test_real_data_example_loads():
    cfg = load_workflow(ROOT / "workflows" / "real_data_example.toml")
    age, lid, anomaly = cfg.inputs.plate_age, cfg.inputs.lid_thickness, cfg.inputs.thermal_anomaly
    assert (age.crs, age.file_units, age.variable) == ("EPSG:4326", "Myr", "z")
    assert (lid.reference, lid.file_units) == ("sea_level", "m")
    # check values: the rows of grids_demo/real_data/hotspots.csv (invented)
    assert [p.name for p in anomaly.plumes] == ["Invented Alpha", "Invented Beta", "Invented Gamma"]
    assert anomaly.plumes[0].shape == "gaussian"  # the documented default


def write_workflow(tmp_path, body):
    (tmp_path / "age.tif").write_bytes(b"")
    path = tmp_path / "w.toml"
    path.write_text("[grid]\nextent = [0, 10, 0, 10]\nresolution = 1.0\n" + body)
    return path


def test_plumes_file_inline_and_errors(tmp_path):
    (tmp_path / "hs.csv").write_text("name,lon,lat,radius_km,peak_excess_k\nA,10,5,200,100\n")
    body = (
        "[inputs.plate_age]\nconstant = 50.0\n[inputs.thermal_anomaly]\n"
        'plumes_file = "hs.csv"\n[[inputs.thermal_anomaly.plumes]]\nname = "B"\n'
        "longitude = 1.0\nlatitude = 2.0\nradius_km = 100.0\npeak_excess_k = 50.0\n"
    )
    cfg = load_workflow(write_workflow(tmp_path, body))
    assert [p.name for p in cfg.inputs.thermal_anomaly.plumes] == ["B", "A"]
    (tmp_path / "hs.csv").write_text("name,lon,lat,radius_km,peak_excess_k\nA,10,5,-2,100\n")
    with pytest.raises(WorkflowError, match=r"plumes_file.1.radius_km"):
        load_workflow(write_workflow(tmp_path, body))
    (tmp_path / "hs.csv").write_text("name,lon,lat,radius_km\nA,10,5,200\n")
    with pytest.raises(WorkflowError, match=r"plumes_file.*lacks the column\(s\) peak_excess_k"):
        load_workflow(write_workflow(tmp_path, body))


def test_plume_catalogue_geojson_in_another_crs(tmp_path):
    import geopandas as gpd
    from shapely.geometry import Point

    # a point at 10 E, 5 N, written in Web Mercator (EPSG:3857)
    gdf = gpd.GeoDataFrame(
        {"name": ["A"], "radius_km": [200.0], "peak_excess_k": [100.0], "shape": ["cosine"]},
        geometry=[Point(10.0, 5.0)],
        crs="EPSG:4326",
    ).to_crs("EPSG:3857")
    gdf.to_file(tmp_path / "hs.geojson", driver="GeoJSON")
    (row,) = read_plume_catalogue(tmp_path / "hs.geojson", key="k")
    # check values: the point's own longitude and latitude, back from EPSG:3857
    assert row["longitude"] == pytest.approx(10.0, abs=1e-9)
    assert row["latitude"] == pytest.approx(5.0, abs=1e-9)
    assert row["shape"] == "cosine"


def test_file_keys_need_a_path_and_reference_choices(tmp_path):
    body = '[inputs.plate_age]\nconstant = 50.0\ncrs = "EPSG:4326"\n'
    with pytest.raises(WorkflowError, match=r"sets crs but no path"):
        load_workflow(write_workflow(tmp_path, body))
    body = (
        "[inputs.plate_age]\nconstant = 50.0\n[inputs.lid_thickness]\nconstant = 60.0\n"
        'reference = "sea"\n'
    )
    with pytest.raises(WorkflowError, match=r"reference"):
        load_workflow(write_workflow(tmp_path, body))
    body = (
        '[inputs.plate_age]\nconstant = 50.0\n[inputs.thermal_anomaly]\nreference = "sea_level"\n'
    )
    with pytest.raises(WorkflowError, match=r"unknown key 'inputs.thermal_anomaly.reference'"):
        load_workflow(write_workflow(tmp_path, body))


def test_lid_below_seafloor():
    # check values: lid base 100 km below sea level under 4 km of water is 96 km below the
    # seafloor; a lid shallower than the water is 0 (the definition, docs/workflow.md)
    out = lid_below_seafloor_km(np.array([100.0, 3.0, np.nan]), np.array([4.0, 4.0, 4.0]))
    np.testing.assert_allclose(out, [96.0, 0.0, np.nan])


def test_lid_reference_needs_a_water_depth():
    from types import SimpleNamespace

    from lidmelt.grids._grid import Grid
    from lidmelt.grids._lidref import apply_lid_reference

    spec = SimpleNamespace(reference="sea_level", bathymetry=None)
    cfg = SimpleNamespace(inputs=SimpleNamespace(lid_thickness=spec))
    values = {"lid_thickness_km": 100.0}
    with pytest.raises(InputError, match=r"neither a bathymetry grid nor a plate age"):
        apply_lid_reference(
            cfg, values, {"lid_thickness_km": {}}, target=Grid.from_extent(0, 1, 0, 1, 1), chunks=64
        )
