"""Tests of lidmelt.grids._write: GeoTIFF and CF NetCDF output.

Files are read back with rasterio and netCDF4 directly (independent readers) and with
lidmelt.grids._io.open_grid; the check values are the arrays written (round-trip identity).
"""

from __future__ import annotations

import json

import dask.array as dsa
import netCDF4
import numpy as np
import numpy.testing as npt
import pytest
import rasterio
import xarray as xr
from dask.callbacks import Callback
from pyproj import CRS

from lidmelt._errors import GridError, InputError
from lidmelt.grids import _write as write_module
from lidmelt.grids._geotiff import check_blocks, tile_aligned
from lidmelt.grids._grid import Grid
from lidmelt.grids._io import open_grid
from lidmelt.grids._store import GeoTiffItem, GeoTiffSet
from lidmelt.grids._write import write_geotiff, write_netcdf


def grid(target, values):
    tpl = target.template()
    return tpl.copy(data=np.asarray(values))


def ramp(target, dtype="float32"):
    values = np.arange(target.height * target.width, dtype="float64").reshape(target.shape)
    values = (values / values.size * 100.0).astype(dtype)
    values[0, 0] = np.nan
    values[-1, 3] = np.nan
    return values


def leftovers(folder, keep):
    return sorted(p.name for p in folder.iterdir() if p.name not in keep)


# ------------------------------------------------------------------------------ GeoTIFF


@pytest.mark.parametrize("cog", [True, False])
def test_geotiff_round_trip(tmp_path, cog):
    t = Grid.from_extent(-20, 10, -15, 5, 0.05)  # 400 x 600, more than one tile
    values = ramp(t)
    tags = {
        "model": "katz2003",
        "parameters": {"a": 1.5, "b": [1, 2]},
        "ambient_c": 1350.0,
        "count": np.int64(3),
    }
    path = write_geotiff(
        grid(t, values),
        tmp_path / "melt.tif",
        description="melt thickness",
        units="km",
        tags=tags,
        cog=cog,
    )
    assert path == tmp_path / "melt.tif"
    with rasterio.open(path) as src:
        npt.assert_array_equal(src.read(1), values)
        assert np.isnan(src.nodata)
        assert CRS(src.crs.to_wkt()).equals(CRS("EPSG:4326"))
        assert tuple(src.transform)[:6] == t.transform
        assert src.descriptions == ("melt thickness",)
        assert src.units == ("km",)
        got = src.tags()
        assert got["model"] == "katz2003"
        assert json.loads(got["parameters"]) == {"a": 1.5, "b": [1, 2]}
        assert json.loads(got["ambient_c"]) == 1350.0
        assert json.loads(got["count"]) == 3
        assert src.block_shapes == [(512, 512)]
        assert src.compression.name.lower() == "zstd"
        structure = src.tags(ns="IMAGE_STRUCTURE")
        assert structure["PREDICTOR"] == "3"
        assert (structure.get("LAYOUT") == "COG") is cog
        assert src.dtypes == ("float32",)
    back = open_grid(path, name="melt_thickness_km", units_expected="km")
    npt.assert_array_equal(back.values, values)
    assert back.attrs["long_name"] == "melt thickness"
    assert leftovers(tmp_path, {"melt.tif"}) == []


def test_geotiff_projected(tmp_path):
    t = Grid.from_extent(-1e6, 1e6, -5e5, 5e5, 1e4, crs="EPSG:3857")
    values = ramp(t, "float64")
    path = write_geotiff(
        grid(t, values),
        tmp_path / "p.tif",
        description="d",
        units="1",
        tags={},
        dtype="float64",
        cog=False,
    )
    with rasterio.open(path) as src:
        assert src.crs.to_epsg() == 3857
        assert tuple(src.transform)[:6] == t.transform
        npt.assert_array_equal(src.read(1), values)


def test_geotiff_dask_written_chunk_by_chunk(tmp_path):
    t = Grid.from_extent(0, 130, -55, 55, 0.1)  # 1100 x 1300
    values = ramp(t)
    # chunks not aligned with the 512 tiles: the writer rechunks to multiples of 512
    lazy = grid(t, values).chunk({"y": 300, "x": 700})
    sizes = []

    class Largest(Callback):
        def _posttask(self, key, result, dsk, state, id):
            if isinstance(result, np.ndarray):
                sizes.append(result.nbytes)

    with Largest():
        write_geotiff(lazy, tmp_path / "lazy.tif", description="d", units="K", tags={"k": "v"})
    whole = values.nbytes
    assert sizes
    assert max(sizes) <= whole / 2  # no task ever held the whole array
    with rasterio.open(tmp_path / "lazy.tif") as src:
        npt.assert_array_equal(src.read(1), values)
        assert src.tags()["k"] == "v"
    assert tile_aligned(lazy.data).chunksize == (512, 512)


def test_geotiff_batched_path_for_distributed(tmp_path, monkeypatch):
    """With a dask.distributed client active the blocks are computed in batches and written
    here; the path is forced with a stand-in client."""
    monkeypatch.setattr(write_module, "_distributed_client", lambda: object())
    t = Grid.from_extent(0, 60, 0, 60, 0.05)
    values = ramp(t)
    write_geotiff(
        grid(t, values).chunk(512),
        tmp_path / "b.tif",
        description="d",
        units="K",
        tags={},
        cog=False,
    )
    with rasterio.open(tmp_path / "b.tif") as src:
        npt.assert_array_equal(src.read(1), values)


def test_geotiff_uint8_flags(tmp_path):
    t = Grid.from_extent(0, 10, 0, 10, 0.5)
    flags = np.arange(400, dtype="float64").reshape(20, 20) % 8
    flags[2, 2] = np.nan
    path = write_geotiff(
        grid(t, flags),
        tmp_path / "validity_flag.tif",
        description="flags",
        units="1",
        tags={"bits": {"1": "no melting"}},
        dtype="uint8",
        nodata=255,
    )
    with rasterio.open(path) as src:
        raw = src.read(1)
        assert src.dtypes == ("uint8",)
        assert src.nodata == 255
        assert src.tags(ns="IMAGE_STRUCTURE")["PREDICTOR"] == "2"
    expected = np.where(np.isnan(flags), 255, flags).astype("uint8")
    npt.assert_array_equal(raw, expected)
    back = open_grid(path, name="flag")
    assert np.isnan(back.values[2, 2])
    npt.assert_array_equal(back.values[0], flags[0])


def test_geotiff_failures_leave_no_file(tmp_path):
    t = Grid.from_extent(0, 10, 0, 10, 0.5)
    old = tmp_path / "f.tif"
    old.write_bytes(b"previous content")
    bad = np.full(t.shape, 1.5)  # not whole numbers
    lazy_bad = grid(t, bad).chunk(5)
    with pytest.raises(GridError, match=r"do not fit uint8"):
        write_geotiff(lazy_bad, old, description="d", units="1", tags={}, dtype="uint8", nodata=255)
    assert old.read_bytes() == b"previous content"  # replaced only on success
    assert leftovers(tmp_path, {"f.tif"}) == []
    with pytest.raises(GridError, match=r"do not fit uint8"):
        write_geotiff(
            grid(t, np.full(t.shape, 300.0)),
            tmp_path / "g.tif",
            description="d",
            units="1",
            tags={},
            dtype="uint8",
            nodata=255,
        )
    assert leftovers(tmp_path, {"f.tif"}) == []


def test_geotiff_failure_in_one_of_many_chunks(tmp_path):
    """A block that fails while other dask threads still write: the error comes back, no file
    is left and nothing crashes (the file is closed only once no block is being written)."""
    t = Grid.from_extent(0, 120, 0, 80, 0.1)  # 800 x 1200: 6 tiles of 512
    values = np.zeros(t.shape)
    values[-1, -1] = 1.5  # not a whole number, in the last chunk
    for _ in range(3):
        with pytest.raises(GridError, match=r"do not fit uint8"):
            write_geotiff(
                grid(t, values).chunk(512),
                tmp_path / "f.tif",
                description="d",
                units="1",
                dtype="uint8",
                nodata=255,
            )
    assert list(tmp_path.iterdir()) == []


def test_geotiff_argument_errors(tmp_path):
    t = Grid.from_extent(0, 10, 0, 10, 0.5)
    da = grid(t, np.zeros(t.shape))
    kw = {"description": "d", "units": "1"}
    with pytest.raises(GridError, match=r"nodata=nan does not fit dtype 'uint8'.*255"):
        write_geotiff(da, tmp_path / "a.tif", tags={}, dtype="uint8", **kw)
    with pytest.raises(GridError, match=r"dtype='complex64' is not supported"):
        write_geotiff(da, tmp_path / "a.tif", tags={}, dtype="complex64", **kw)
    with pytest.raises(InputError, match=r"value of 'obj'.*cannot be written as JSON"):
        write_geotiff(da, tmp_path / "a.tif", tags={"obj": object()}, **kw)
    with pytest.raises(InputError, match=r"tag name 'a=b' is not valid"):
        write_geotiff(da, tmp_path / "a.tif", tags={"a=b": 1}, **kw)
    no_crs = xr.DataArray(
        np.zeros((2, 2)), dims=("y", "x"), coords={"y": [1.5, 0.5], "x": [0.5, 1.5]}
    )
    with pytest.raises(GridError, match=r"has no CRS"):
        write_geotiff(no_crs, tmp_path / "a.tif", tags={}, **kw)
    assert list(tmp_path.iterdir()) == []


# ------------------------------------------------------------------------------ NetCDF


def test_netcdf_geographic_cf(tmp_path):
    t = Grid.from_extent(-20, 10, -15, 5, 0.5)
    melt = grid(t, ramp(t)).assign_attrs(units="km", long_name="melt thickness")
    flags = grid(t, np.full(t.shape, 3, dtype="uint8")).assign_attrs(units="1", _FillValue=255)
    ds = xr.Dataset({"melt_thickness_km": melt, "validity_flag": flags})
    path = write_netcdf(
        ds, tmp_path / "lidmelt.nc", attrs={"title": "test run", "model": {"name": "katz2003"}}
    )
    with netCDF4.Dataset(path) as nc:
        assert nc.Conventions == "CF-1.8"
        assert nc.title == "test run"
        assert json.loads(nc.model) == {"name": "katz2003"}
        lat, lon = nc["lat"], nc["lon"]
        assert (lat.standard_name, lat.units) == ("latitude", "degrees_north")
        assert (lon.standard_name, lon.units) == ("longitude", "degrees_east")
        npt.assert_allclose(lat[:], t.template()["y"].values)
        v = nc["melt_thickness_km"]
        assert v.dimensions == ("lat", "lon")
        assert (v.units, v.long_name, v.grid_mapping) == ("km", "melt thickness", "crs")
        assert v.filters()["zlib"] is True
        npt.assert_array_equal(np.ma.filled(v[:], np.nan), ramp(t))
        f = nc["validity_flag"]
        assert f._FillValue == 255
        assert f.long_name == "validity_flag"
        assert CRS.from_wkt(nc["crs"].crs_wkt).equals(CRS("EPSG:4326"))
        assert nc["crs"].grid_mapping_name == "latitude_longitude"
    back = open_grid(path, variable="melt_thickness_km", name="m", units_expected="km")
    npt.assert_array_equal(back.values, ramp(t))
    assert tuple(back.rio.transform())[:6] == pytest.approx(t.transform)
    assert leftovers(tmp_path, {"lidmelt.nc"}) == []


def test_netcdf_projected_and_lazy(tmp_path):
    t = Grid.from_extent(-1e6, 1e6, -5e5, 5e5, 2.5e4, crs="EPSG:3857")
    da = grid(t, ramp(t)).assign_attrs(units="K").chunk(16).rename("excess_to_melt_k")
    path = write_netcdf(da, tmp_path / "p.nc", attrs={})
    with netCDF4.Dataset(path) as nc:
        x = nc["x"]
        assert (x.standard_name, x.units, x.axis) == ("projection_x_coordinate", "m", "X")
        assert nc["excess_to_melt_k"].dimensions == ("y", "x")
        crs = CRS.from_cf({k: nc["crs"].getncattr(k) for k in nc["crs"].ncattrs()})
        assert crs.equals(CRS("EPSG:3857"))
    back = open_grid(path, name="e")
    assert CRS(back.rio.crs.to_wkt()).equals(CRS("EPSG:3857"))
    npt.assert_array_equal(back.values, ramp(t))
    # GDAL reads the same grid (its netCDF driver uses the GeoTransform attribute)
    with rasterio.open(f"netcdf:{path}:excess_to_melt_k") as src:
        assert tuple(src.transform)[:6] == pytest.approx(t.transform)


def test_netcdf_errors(tmp_path):
    t = Grid.from_extent(0, 10, 0, 10, 1.0)
    no_units = xr.Dataset({"a": grid(t, np.zeros(t.shape))})
    with pytest.raises(InputError, match=r"'a' has no 'units'.*attrs\['units'\]"):
        write_netcdf(no_units, tmp_path / "x.nc", attrs={})
    other = Grid.from_extent(0, 10, 0, 10, 0.5)
    mixed = xr.Dataset({"a": grid(t, np.zeros(t.shape)).assign_attrs(units="K")})
    mixed["b"] = (
        grid(other, np.zeros(other.shape)).assign_attrs(units="K").rename({"y": "y2", "x": "x2"})
    )
    with pytest.raises(GridError, match=r"'b' has dims \('y2', 'x2'\)"):
        write_netcdf(mixed, tmp_path / "x.nc", attrs={})
    assert list(tmp_path.iterdir()) == []


def test_small_lazy_grid_with_chunks_below_a_tile(tmp_path):
    """A lazy grid smaller than one tile, in 5 x 5 chunks, is rechunked and written whole."""
    t = Grid.from_extent(0, 10, 0, 10, 1.0)
    data = dsa.ones(t.shape, chunks=5, dtype="float32")
    da = t.template().copy(data=data)
    write_geotiff(da, tmp_path / "o.tif", description="ones", units="1", tags={}, cog=False)
    with rasterio.open(tmp_path / "o.tif") as src:
        npt.assert_array_equal(src.read(1), 1.0)


# ------------------------------------------------------------------------------ GeoTiffSet


@pytest.mark.parametrize("cog", [True, False])
def test_geotiff_set_writes_every_file_in_one_pass(tmp_path, cog):
    t = Grid.from_extent(0, 60, 0, 40, 0.05)  # 800 x 1200: two bands of 512 rows
    values = ramp(t)
    lazy = grid(t, values).chunk(512)
    items = [
        GeoTiffItem(lazy, tmp_path / "out" / "a.tif", "melt", "km", {"run": {"n": 1}}),
        GeoTiffItem(lazy * 2, tmp_path / "out" / "b.tif", "twice", "km"),
        GeoTiffItem(grid(t, np.where(np.isnan(values), np.nan, 1.0)), tmp_path / "out" / "c.tif",
                    "flag", "1", dtype="uint8", nodata=255),
    ]  # fmt: skip
    bands = []  # (done, total) after each band
    with GeoTiffSet(items, cog=cog) as out:
        sums = out.compute(
            extra=lambda rows: [lazy[rows].sum()],
            band_rows=512,
            report=lambda k, n: bands.append((k, n)),
        )
    assert bands == [(1, 2), (2, 2)]
    # check values: the sum of each band of rows, computed here with numpy (NaN left out)
    npt.assert_allclose(
        [s[0] for s in sums], [np.nansum(values[:512]), np.nansum(values[512:])], rtol=1e-6
    )
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == ["a.tif", "b.tif", "c.tif"]
    with rasterio.open(tmp_path / "out" / "a.tif") as src:
        npt.assert_array_equal(src.read(1), values)
        assert src.descriptions == ("melt",)
        assert src.units == ("km",)
        assert json.loads(src.tags()["run"]) == {"n": 1}
    with rasterio.open(tmp_path / "out" / "b.tif") as src:
        npt.assert_array_equal(src.read(1), values * 2)
    with rasterio.open(tmp_path / "out" / "c.tif") as src:
        assert src.nodata == 255
        assert src.read(1)[0, 0] == 255
        assert src.read(1)[0, 1] == 1


@pytest.mark.parametrize("cog", [False, True])
def test_check_blocks_finds_a_cut_off_file(tmp_path, cog):
    """A whole GeoTIFF passes; one cut one byte short of its last block, or empty, is an
    OSError naming it (the COG's header comes first, so there the block check finds it)."""
    t = Grid.from_extent(0, 60, 0, 40, 0.05)
    path = write_geotiff(grid(t, ramp(t)), tmp_path / "r.tif", description="ramp", units="1",
                         cog=cog)  # fmt: skip
    check_blocks(path)
    with rasterio.open(path) as src:  # where the block data end (GDAL's TIFF block metadata)
        end = max(
            int(src.get_tag_item(f"BLOCK_OFFSET_{c}_{r}", "TIFF", bidx=1))
            + int(src.get_tag_item(f"BLOCK_SIZE_{c}_{r}", "TIFF", bidx=1))
            for r in range(2)
            for c in range(3)
        )
    whole = path.read_bytes()
    assert end <= len(whole)
    path.write_bytes(whole[: end - 1])
    with pytest.raises(OSError, match="missing" if cog else r"r\.tif"):
        check_blocks(path)
    path.write_bytes(b"")
    with pytest.raises(OSError, match="empty") as err:
        check_blocks(path)
    assert err.value.filename == str(path)


def test_geotiff_set_error_writes_no_file(tmp_path):
    t = Grid.from_extent(0, 10, 0, 10, 0.5)
    old = tmp_path / "a.tif"
    old.write_bytes(b"previous content")
    good = GeoTiffItem(grid(t, np.zeros(t.shape)).chunk(5), old, "a", "1")
    bad = GeoTiffItem(grid(t, np.full(t.shape, 1.5)).chunk(5), tmp_path / "b.tif", "b", "1",
                      dtype="uint8", nodata=255)  # fmt: skip
    with pytest.raises(GridError, match=r"do not fit uint8"), GeoTiffSet([good, bad]) as out:
        out.compute()
    assert old.read_bytes() == b"previous content"  # replaced only when every file succeeds
    assert leftovers(tmp_path, {"a.tif"}) == []

    def stopped_after_compute():
        with GeoTiffSet([good]) as out:
            out.compute()
            raise RuntimeError("stop")  # an error in the caller's block after the data are stored

    with pytest.raises(RuntimeError, match="stop"):
        stopped_after_compute()
    assert old.read_bytes() == b"previous content"
    assert leftovers(tmp_path, {"a.tif"}) == []
