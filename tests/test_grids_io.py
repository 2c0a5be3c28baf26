"""Tests of lidmelt.grids._io: reading GeoTIFF and CF NetCDF grids.

Input files are written here with rasterio and xarray/netCDF4 directly (not with lidmelt's
writer), from fields defined in the tests; the check values are those fields, transformed by
the identity the reader must apply (scale/offset decoding, flipping, masking).
"""

from __future__ import annotations

import hashlib

import numpy as np
import numpy.testing as npt
import pytest
import rasterio
import xarray as xr
from pyproj import CRS
from rasterio.transform import from_origin

from lidmelt._errors import GridError, InputError
from lidmelt.grids._io import GRID_FORMATS, detect_format, normalise_units, open_grid, sha256_file


def smooth_field(lon, lat):
    """A smooth test field (K) defined here; its values are the check values."""
    return 10.0 * np.sin(np.radians(lon)) * np.cos(np.radians(lat)) + 0.1 * lat


def write_tif(path, data, *, transform, crs="EPSG:4326", nodata=None, dtype=None, **extra):
    data = np.asarray(data)
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        height=data.shape[0],
        width=data.shape[1],
        count=1,
        dtype=dtype or data.dtype,
        crs=crs,
        transform=transform,
        nodata=nodata,
    ) as dst:
        dst.write(data.astype(dtype or data.dtype), 1)
        if "description" in extra:
            dst.set_band_description(1, extra["description"])
        if "units" in extra:
            dst.units = (extra["units"],)
        if "scale" in extra:
            dst.scales = (extra["scale"],)
            dst.offsets = (extra["offset"],)
    return path


def cf_dataset(lat, lon, values, *, lat_name="lat", lon_name="lon", units=True, name="anomaly"):
    ds = xr.Dataset({name: ((lat_name, lon_name), values)}, coords={lat_name: lat, lon_name: lon})
    if units == "degrees":
        ds[lat_name].attrs["units"] = ds[lon_name].attrs["units"] = "degrees"
    elif units:
        ds[lat_name].attrs["units"] = "degrees_north"
        ds[lon_name].attrs["units"] = "degrees_east"
    ds[name].attrs.update(units="K", long_name="thermal anomaly")
    return ds


# ------------------------------------------------------------------------------ GeoTIFF


def test_geotiff_scale_offset_nodata_metadata(tmp_path):
    raw = np.arange(20, dtype="int16").reshape(4, 5)
    raw[1, 2] = -9999
    path = write_tif(
        tmp_path / "age.tif",
        raw,
        transform=from_origin(10.0, 50.0, 0.5, 0.5),
        nodata=-9999,
        description="plate age",
        units="Ma",
        scale=0.5,
        offset=2.0,
    )
    da = open_grid(path, name="plate_age_ma", units_expected="Myr")
    # check value: GDAL/CF decoding identity value = raw * scale + offset, nodata -> NaN
    expected = raw * 0.5 + 2.0
    expected = np.where(raw == -9999, np.nan, expected)
    npt.assert_array_equal(da.values, expected)
    assert da.dims == ("y", "x")
    assert da.dtype == np.float32  # int16 on disk: float32 holds it exactly
    assert da.name == "plate_age_ma"
    assert da.attrs == {"units": "Ma", "long_name": "plate age", "source": str(path)}
    assert da.encoding == {}
    assert CRS(da.rio.crs.to_wkt()).equals(CRS("EPSG:4326"))
    assert tuple(da.rio.transform())[:6] == (0.5, 0.0, 10.0, 0.0, -0.5, 50.0)
    npt.assert_allclose(da["x"], 10.25 + 0.5 * np.arange(5))  # cell centres
    npt.assert_allclose(da["y"], 49.75 - 0.5 * np.arange(4))


def test_geotiff_south_up_is_flipped(tmp_path):
    values = np.arange(12, dtype="float32").reshape(3, 4)
    # south-up: the first row is the southern one (transform e > 0)
    transform = rasterio.Affine(1.0, 0.0, 0.0, 0.0, 1.0, -3.0)
    path = write_tif(tmp_path / "s.tif", values, transform=transform)
    da = open_grid(path, name="s")
    npt.assert_array_equal(da.values, values[::-1])  # check value: rows reversed
    assert da.rio.transform().e == -1.0
    npt.assert_allclose(da["y"], [-0.5, -1.5, -2.5])


def test_geotiff_lazy_with_chunks(tmp_path):
    values = np.random.default_rng(0).random((40, 60)).astype("float32")
    path = write_tif(tmp_path / "c.tif", values, transform=from_origin(0, 40, 1, 1))
    da = open_grid(path, name="c", chunks={"y": 16, "x": 32})
    assert hasattr(da.data, "dask")
    assert da.data.chunksize == (16, 32)
    npt.assert_array_equal(da.values, values)
    assert da.attrs["long_name"] == "c"  # no band description: the name


def test_geotiff_projected_crs_kept(tmp_path):
    values = np.ones((3, 3), dtype="float32")
    path = write_tif(
        tmp_path / "m.tif", values, transform=from_origin(-1e5, 1e5, 5e4, 5e4), crs="EPSG:3857"
    )
    da = open_grid(path, name="m")
    assert CRS(da.rio.crs.to_wkt()).to_epsg() == 3857


def test_geotiff_without_crs(tmp_path):
    path = write_tif(
        tmp_path / "nocrs.tif",
        np.zeros((3, 3), "float32"),
        transform=from_origin(0, 3, 1, 1),
        crs=None,
    )
    with pytest.raises(GridError, match=r"has no CRS.*gdal_edit.*write_crs"):
        open_grid(path, name="x")


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match=r"does not exist"):
        open_grid(tmp_path / "nope.tif", name="x")


def test_corrupt_tif(tmp_path):
    path = tmp_path / "bad.tif"
    path.write_bytes(b"this is not a raster at all\x00\x01\x02" * 50)
    with pytest.raises(InputError, match=r"cannot read grid file .*bad\.tif.* re-export"):
        open_grid(path, name="bad")


def test_truncated_tif(tmp_path):
    values = np.random.default_rng(1).random((600, 600)).astype("float32")
    good = write_tif(tmp_path / "good.tif", values, transform=from_origin(0, 60, 0.1, 0.1))
    cut = tmp_path / "cut.tif"
    cut.write_bytes(good.read_bytes()[:2000])
    with pytest.raises(InputError, match=r"cannot read grid file"):
        open_grid(cut, name="cut")


def test_corrupt_netcdf(tmp_path):
    path = tmp_path / "bad.nc"
    path.write_bytes(b"CDF\x01" + b"\xff" * 300)  # netCDF magic, then garbage
    with pytest.raises(InputError, match=r"as NetCDF"):
        open_grid(path, name="bad")


def test_variable_option_on_geotiff(tmp_path):
    path = write_tif(
        tmp_path / "v.tif", np.zeros((2, 2), "float32"), transform=from_origin(0, 2, 1, 1)
    )
    with pytest.raises(GridError, match=r"not NetCDF"):
        open_grid(path, name="v", variable="age")


# ------------------------------------------------------------------------------ NetCDF


@pytest.mark.parametrize(
    ("lat_name", "lon_name", "units"),
    [
        ("lat", "lon", True),
        ("latitude", "longitude", False),
        ("y", "x", True),
        ("YC", "XC", True),
        ("lat", "lon", False),
        ("y", "x", "degrees"),  # plain 'degrees' on y/x axes
    ],
)
def test_netcdf_coordinate_names(tmp_path, lat_name, lon_name, units):
    lat = np.arange(-59.5, 60.0, 1.0)  # ascending latitude
    lon = np.arange(0.5, 360.0, 1.0)  # 0..360 longitudes
    values = smooth_field(lon[None, :], lat[:, None]).astype("float32")
    path = tmp_path / "a.nc"
    cf_dataset(lat, lon, values, lat_name=lat_name, lon_name=lon_name, units=units).to_netcdf(path)
    da = open_grid(path, name="thermal_anomaly_k", units_expected="K")
    assert da.dims == ("y", "x")
    # y descending, longitudes kept as 0..360
    npt.assert_allclose(da["y"], lat[::-1])
    npt.assert_allclose(da["x"], lon)
    # check value: the field we wrote, at the returned coordinates
    npt.assert_allclose(
        da.values,
        smooth_field(da["x"].values[None, :], da["y"].values[:, None]),
        rtol=1e-6,
        atol=1e-5,
    )
    assert CRS(da.rio.crs.to_wkt()).equals(CRS("EPSG:4326"))
    assert tuple(da.rio.transform())[:6] == pytest.approx((1.0, 0, 0.0, 0, -1.0, 60.0))
    assert da.attrs["units"] == "K"
    assert da.attrs["long_name"] == "thermal anomaly"


def test_netcdf_packed_int16_and_fill(tmp_path):
    lat = np.arange(0.5, 5.0, 1.0)
    lon = np.arange(-9.5, -4.0, 1.0)
    values = np.linspace(-20.0, 20.0, lat.size * lon.size).reshape(lat.size, lon.size)
    values[2, 3] = np.nan
    ds = cf_dataset(lat, lon, values)
    path = tmp_path / "packed.nc"
    ds.to_netcdf(
        path,
        encoding={
            "anomaly": {
                "dtype": "int16",
                "scale_factor": 0.01,
                "add_offset": 0.0,
                "_FillValue": -32768,
            }
        },
    )
    da = open_grid(path, name="a", chunks=2)
    assert hasattr(da.data, "dask")
    assert da.encoding == {}
    got = da.values[::-1]  # back to ascending latitude
    # check value: the field, quantised to the 0.01 packing step (CF scale_factor identity)
    npt.assert_allclose(got, values, atol=0.005 + 1e-6)
    assert np.isnan(got[2, 3])
    assert np.isnan(got).sum() == 1


def test_netcdf_time_step_squeezed_and_variable_choice(tmp_path):
    lat = np.arange(0.5, 4.0, 1.0)
    lon = np.arange(0.5, 6.0, 1.0)
    a = np.ones((1, lat.size, lon.size))
    ds = xr.Dataset(
        {
            "age": (("time", "lat", "lon"), a),
            "lid": (("lat", "lon"), 2 * a[0]),
            "series": (("time",), [1.0]),
        },
        coords={"time": [0.0], "lat": lat, "lon": lon},
    )
    path = tmp_path / "two.nc"
    ds.to_netcdf(path)
    with pytest.raises(GridError, match=r"2 \(age, lid\) 2-D gridded variables.*variable=NAME"):
        open_grid(path, name="x")
    da = open_grid(path, name="x", variable="age")
    assert da.dims == ("y", "x")
    npt.assert_array_equal(da.values, 1.0)
    npt.assert_array_equal(open_grid(path, name="x", variable="lid").values, 2.0)
    with pytest.raises(GridError, match=r"no data variable 'nope'.*age"):
        open_grid(path, name="x", variable="nope")
    with pytest.raises(GridError, match=r"dims \{'time': 1\}.*two spatial"):
        open_grid(path, name="x", variable="series")


def test_netcdf_three_d_rejected(tmp_path):
    ds = xr.Dataset(
        {"t": (("time", "lat", "lon"), np.zeros((3, 4, 5)))},
        coords={"time": [0.0, 1.0, 2.0], "lat": np.arange(4.0), "lon": np.arange(5.0)},
    )
    path = tmp_path / "3d.nc"
    ds.to_netcdf(path)
    with pytest.raises(GridError, match=r"no 2-D gridded variables"):
        open_grid(path, name="t")
    with pytest.raises(GridError, match=r"expected exactly two spatial dimensions"):
        open_grid(path, name="t", variable="t")


def test_netcdf_projected_with_grid_mapping(tmp_path):
    crs = CRS("EPSG:3857")
    x = np.arange(-2e5, 2e5, 5e4) + 2.5e4
    y = np.arange(-1e5, 1e5, 5e4) + 2.5e4
    ds = xr.Dataset(
        {"lid": (("y", "x"), np.ones((y.size, x.size)), {"units": "km", "grid_mapping": "crs"})},
        coords={"x": x, "y": y},
    )
    ds["x"].attrs["standard_name"] = "projection_x_coordinate"
    ds["y"].attrs["standard_name"] = "projection_y_coordinate"
    ds["crs"] = xr.DataArray(0, attrs=crs.to_cf())
    path = tmp_path / "proj.nc"
    ds.to_netcdf(path)
    da = open_grid(path, name="lid", units_expected="kilometres")
    assert CRS(da.rio.crs.to_wkt()).equals(crs)
    assert tuple(da.rio.transform())[:6] == pytest.approx((5e4, 0, -2e5, 0, -5e4, 1e5))
    assert da.attrs["units"] == "km"


def test_netcdf_projected_without_crs(tmp_path):
    ds = xr.Dataset(
        {"lid": (("y", "x"), np.ones((3, 4)))},
        coords={"x": np.arange(4) * 1e3, "y": np.arange(3) * 1e3},
    )
    path = tmp_path / "nocrs.nc"
    ds.to_netcdf(path)
    with pytest.raises(GridError, match=r"no CRS.*gdal_edit.*lat/lon"):
        open_grid(path, name="lid")


def test_netcdf_unrecognised_dims(tmp_path):
    ds = xr.Dataset({"v": (("row", "col"), np.ones((3, 4)))})
    path = tmp_path / "dims.nc"
    ds.to_netcdf(path)
    with pytest.raises(GridError, match=r"no 2-D gridded variables"):
        open_grid(path, name="v")


def test_netcdf_irregular_coordinates(tmp_path):
    lat = np.array([0.0, 1.0, 2.0, 4.0])
    lon = np.arange(5.0)
    path = tmp_path / "irr.nc"
    cf_dataset(lat, lon, np.zeros((4, 5))).to_netcdf(path)
    with pytest.raises(GridError, match=r"not evenly spaced"):
        open_grid(path, name="a")


def test_units_checks(tmp_path):
    lat = np.arange(0.5, 3.0, 1.0)
    lon = np.arange(0.5, 3.0, 1.0)
    ds = cf_dataset(lat, lon, np.zeros((3, 3)))
    ds["anomaly"].attrs["units"] = "m"
    path = tmp_path / "u.nc"
    ds.to_netcdf(path)
    with pytest.raises(GridError, match=r"has units 'm'; expected 'km'"):
        open_grid(path, name="lid", units_expected="km")
    del ds["anomaly"].attrs["units"]
    path2 = tmp_path / "nounits.nc"
    ds.to_netcdf(path2)
    assert open_grid(path2, name="lid", units_expected="km").attrs["units"] == "km"
    assert open_grid(path2, name="lid").attrs["units"] == ""


def test_normalise_units():
    # common spellings (CF/UDUNITS names and usual abbreviations)
    assert normalise_units("kilometers") == "km"
    assert normalise_units("Myr") == "Ma"
    assert normalise_units(" kelvin ") == "K"
    assert normalise_units("wt_pct") == "wt%"
    assert normalise_units("furlong") == "furlong"
    assert normalise_units("") is None


def test_sha256_file(tmp_path):
    path = tmp_path / "abc.txt"
    path.write_bytes(b"abc")
    # check value: FIPS 180-2, appendix B.1 (SHA-256 of "abc")
    assert sha256_file(path) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    big = tmp_path / "big.bin"
    big.write_bytes(bytes(range(256)) * 20000)  # > one 1 MiB read block
    assert sha256_file(big) == hashlib.sha256(big.read_bytes()).hexdigest()  # hashlib, one shot
    with pytest.raises(InputError, match=r"cannot read"):
        sha256_file(tmp_path / "missing")


def test_detect_format(tmp_path):
    # check values: the first bytes of netCDF classic/64-bit offset/CDF-5 files ("CDF" plus the
    # version byte; NetCDF Users Guide, "File Format Specifications") and the HDF5 signature
    # "\x89HDF\r\n\x1a\n" (HDF5 File Format Specification, "Format Signature"; from memory)
    assert GRID_FORMATS == ("netcdf", "text", "gdal")
    for magic in (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n"):
        (tmp_path / "f").write_bytes(magic + b"\x00" * 16)
        assert detect_format(tmp_path / "f") == "netcdf"
    cf_dataset([0.5, 1.5], [0.5, 1.5], np.zeros((2, 2))).to_netcdf(tmp_path / "g.nc")
    assert detect_format(tmp_path / "g.nc") == "netcdf"
    tif = write_tif(
        tmp_path / "g.tif", np.zeros((2, 2), "float32"), transform=from_origin(0, 2, 1, 1)
    )
    assert detect_format(tif) == "gdal"
    (tmp_path / "g.xyz").write_text("0 0 1\n")  # x y value text, by its suffix
    assert detect_format(tmp_path / "g.xyz") == "text"
    (tmp_path / "short").write_bytes(b"CD")  # shorter than any signature: left to GDAL
    assert detect_format(tmp_path / "short") == "gdal"
    with pytest.raises(InputError, match=r"grid file .*'dem'.* does not exist"):
        detect_format(tmp_path / "missing.tif", name="dem")
    with pytest.raises(InputError, match=r"is a folder, not a file"):
        detect_format(tmp_path)
