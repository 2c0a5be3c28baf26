"""Errors about a run's inputs name the workflow key and the file (lidmelt._run_inputs).

The basin is the tests' tiny invented one (tests/runkit.py: 24 x 36 cells of 0.25 degrees west
of 30 W, one plume); damaged files are made here by overwriting bytes in the middle of a valid
compressed file. Check values: the keys and paths the test wrote, the registry's accepted range
of the water input (lidmelt._variables) and the model's own saturation (its method).
"""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
import xarray as xr
from rasterio.transform import from_origin

from lidmelt.cli import main
from lidmelt.physics import get_model
from runkit import basin


def _damage(path, *, span=3000):
    """Overwrite ``span`` bytes in the middle of ``path`` (its compressed tiles or chunks)."""
    data = bytearray(path.read_bytes())
    middle = len(data) // 2
    data[middle : middle + span] = b"\xab" * span
    path.write_bytes(bytes(data))


def _age_geotiff(path):
    """A tiled, compressed plate-age GeoTIFF on the basin's extent (10 x finer)."""
    age = np.tile(np.linspace(1.0, 100.0, 360, dtype="float32"), (240, 1))
    profile = {"driver": "GTiff", "height": 240, "width": 360, "count": 1, "dtype": "float32"}
    profile.update(crs="EPSG:4326", transform=from_origin(-30, 10, 0.025, 0.025), nodata=np.nan)
    profile.update(tiled=True, blockxsize=128, blockysize=128, compress="deflate")
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(age, 1)
    return path


def _workflow(tmp_path, old, new, extra=""):
    wf = basin(tmp_path / "b", extra=extra)
    wf.write_text(wf.read_text(encoding="utf-8").replace(old, new), encoding="utf-8")
    return wf


def _run_error(wf, tmp_path, capsys):
    code = main(["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"])
    err = capsys.readouterr().err
    assert code == 1, err
    assert not (tmp_path / "out").exists()  # nothing under the final name
    return err


def test_geotiff_with_corrupt_tiles_names_the_file_and_the_key(tmp_path, capsys):
    wf = _workflow(tmp_path, 'path = "age.tif"', 'path = "damaged.tif"')
    _damage(_age_geotiff(tmp_path / "b" / "damaged.tif"))
    err = _run_error(wf, tmp_path, capsys)
    assert "inputs.plate_age" in err
    assert str(tmp_path / "b" / "damaged.tif") in err
    assert "a raster file could not be read or written" not in err


def test_netcdf_with_corrupt_chunks_names_the_file_and_the_key(tmp_path, capsys):
    wf = _workflow(
        tmp_path, 'path = "age.tif"', 'path = "damaged.nc"\nvariable = "age"\ncrs = "EPSG:4326"'
    )
    lon = -30 + 0.025 * (np.arange(360) + 0.5)
    lat = 10 - 0.025 * (np.arange(240) + 0.5)
    age = np.tile(np.linspace(1.0, 100.0, 360, dtype="float32"), (240, 1))
    ds = xr.Dataset({"age": (("lat", "lon"), age, {"units": "Ma"})}, {"lat": lat, "lon": lon})
    path = tmp_path / "b" / "damaged.nc"
    ds.to_netcdf(path, encoding={"age": {"zlib": True, "chunksizes": (60, 60)}})
    _damage(path)
    err = _run_error(wf, tmp_path, capsys)
    assert "inputs.plate_age" in err
    assert str(path) in err


def test_input_that_misses_the_grid_names_the_file(tmp_path, capsys):
    wf = _workflow(
        tmp_path, "[inputs.thermal_anomaly]\n", '[inputs.thermal_anomaly]\npath = "far.tif"\n'
    )
    profile = {"driver": "GTiff", "height": 24, "width": 36, "count": 1, "dtype": "float32"}
    profile.update(crs="EPSG:4326", transform=from_origin(100, 10, 0.25, 0.25), nodata=np.nan)
    with rasterio.open(tmp_path / "b" / "far.tif", "w", **profile) as dst:  # 100-109 E
        dst.write(np.full((24, 36), 100.0, "float32"), 1)
    err = _run_error(wf, tmp_path, capsys)
    assert "inputs.thermal_anomaly" in err
    assert str(tmp_path / "b" / "far.tif") in err
    assert "does not overlap" in err


def test_oversized_like_grid_names_the_file(tmp_path, capsys):
    wf = _workflow(tmp_path, "chunk_size = 64", "chunk_size = 64\nmax_cells = 100")
    err = _run_error(wf, tmp_path, capsys)
    assert "grid.like = 'plate_age'" in err
    assert str(tmp_path / "b" / "age.tif") in err
    assert "36 x 24 = 864 cells" in err  # the basin's grid (tests/runkit.py)


def test_water_above_saturation_everywhere_is_an_error_not_an_empty_run(tmp_path, capsys):
    """Water 0.5 wt% is inside the registry's 0-5 wt% but above what the katz2003 source holds
    at any pressure up to its calibrated 7 GPa (0.456 wt%, the model's own method): no cell can
    be computed, which used to give exit 0 with every output NaN."""
    model = get_model("katz2003")
    assert float(model.water_saturated_bulk_wt_pct(7.0)) < 0.5  # the premise, from the model
    wf = _workflow(tmp_path, "[inputs.water]\nconstant = 0.0", "[inputs.water]\nconstant = 0.5")
    err = _run_error(wf, tmp_path, capsys)
    assert "none of the 864 cells with data can be evaluated" in err  # the basin's 24 x 36
    assert "inputs.water (set in the workflow): the constant 0.5 wt%, accepted 0 to 5 wt%" in err
    assert f"{float(model.water_saturated_bulk_wt_pct(7.0)):.3g} wt% at 7 GPa" in err
    assert f"inputs.plate_age (file {str(tmp_path / 'b' / 'age.tif')!r})" in err


def test_a_run_with_good_inputs_is_not_refused(tmp_path, capsys):
    wf = basin(tmp_path / "b")
    assert main(["run", str(wf), "-o", str(tmp_path / "out"), "--quiet"]) == 0, (
        capsys.readouterr().err
    )


@pytest.mark.parametrize("water", [0.5])
def test_water_grid_above_saturation_names_its_file(tmp_path, capsys, water):
    wf = _workflow(tmp_path, "[inputs.water]\nconstant = 0.0", '[inputs.water]\npath = "w.tif"')
    profile = {"driver": "GTiff", "height": 24, "width": 36, "count": 1, "dtype": "float32"}
    profile.update(crs="EPSG:4326", transform=from_origin(-30, 10, 0.25, 0.25), nodata=np.nan)
    with rasterio.open(tmp_path / "b" / "w.tif", "w", **profile) as dst:
        dst.write(np.full((24, 36), water, "float32"), 1)
    err = _run_error(wf, tmp_path, capsys)
    assert f"inputs.water (file {str(tmp_path / 'b' / 'w.tif')!r}): values 0.5 to 0.5 wt%" in err
