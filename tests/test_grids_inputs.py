"""Tests of the per-input options of issue 13: text grids, crs/x_name/y_name, units, scale,
offset, nodata and the shear-velocity scaling (lidmelt.grids._io.open_input, grids.textgrid,
grids.units).

Every round trip writes an analytic field, f(x, y) = 0.5 x + 2 y + 10 (defined here), at cell
centres and checks the values read back at the same centres (exact up to float rounding).
"""

from __future__ import annotations

import logging
from types import SimpleNamespace

import numpy as np
import numpy.testing as npt
import pytest
import xarray as xr

from lidmelt._errors import GridError, InputError
from lidmelt.grids._io import open_grid, open_input
from lidmelt.grids._units import dlnvs_to_kelvin, unit_factor


def f(x, y):
    return 0.5 * x + 2.0 * y + 10.0


def spec(path, **keys):
    fields = dict.fromkeys(
        ("variable", "crs", "x_name", "y_name", "file_units", "scale", "offset", "nodata")
    )
    fields["dlnvs_dt_per_k"] = None
    fields.update(keys)
    return SimpleNamespace(name="plate_age", path=path, **fields)


def xyz_lines(xs, ys, sep=" "):
    pts = [(x, y) for y in ys for x in xs]
    rng = np.random.default_rng(1)
    return [sep.join(f"{v:g}" for v in (x, y, f(x, y))) for x, y in rng.permutation(pts)]


@pytest.mark.parametrize("sep", [" ", ",", "\t", " ; "])
def test_text_grid_round_trip(tmp_path, sep):
    xs, ys = np.arange(-10.5, 10.0, 1.0), np.arange(20.5, 30.0, 1.0)
    path = tmp_path / "g.xyz"
    path.write_text("# shuffled lines\n" + "\n".join(xyz_lines(xs, ys, sep)) + "\n")
    da = open_grid(path, name="age", crs="EPSG:4326")
    assert da.shape == (ys.size, xs.size)
    npt.assert_allclose(da["x"], xs)
    npt.assert_allclose(da["y"], ys[::-1])  # north up
    # check value: f at each cell centre, the value written there
    npt.assert_allclose(da.values, f(da["x"].values[None, :], da["y"].values[:, None]))
    assert da.rio.crs.to_epsg() == 4326


def test_text_grid_header_any_column_order_and_holes(tmp_path):
    xs, ys = np.arange(0.5, 5.0, 1.0), np.arange(0.5, 4.0, 1.0)
    lines = [f"{f(x, y):g},{y:g},{x:g}" for y in ys for x in xs][:-1]  # one node missing
    path = tmp_path / "g.csv"
    path.write_text("age,latitude,longitude\n" + "\n".join(lines))
    da = open_grid(path, name="age")  # lon/lat names: EPSG:4326 stated
    assert da.rio.crs.to_epsg() == 4326
    assert np.isnan(da.values[0, -1])  # the missing node (north-east corner) is nodata
    # check value: f at cell centre (0.5, 0.5), the value written there
    assert float(da.sel(x=0.5, y=0.5)) == f(0.5, 0.5)


def test_text_grid_errors(tmp_path):
    xs, ys = np.arange(0.5, 5.0, 1.0), np.arange(0.5, 4.0, 1.0)
    path = tmp_path / "g.xyz"
    path.write_text("\n".join(xyz_lines(xs, ys)))
    with pytest.raises(GridError, match=r"has no CRS.*input key crs"):
        open_grid(path, name="age")
    path.write_text("\n".join([*xyz_lines(xs, ys), "2.8 1.5 3"]))
    with pytest.raises(GridError, match=r"not on a regular grid: x = 2.8 .*Resample"):
        open_grid(path, name="age", crs="EPSG:4326")
    path.write_text("\n".join([*xyz_lines(xs, ys), "2.5 1.5 3"]))
    with pytest.raises(GridError, match=r"gives the node x=2.5, y=1.5 twice"):
        open_grid(path, name="age", crs="EPSG:4326")
    path.write_text("0 0 1\n1 0 x\n")
    with pytest.raises(InputError, match=r"not 3 numbers"):
        open_grid(path, name="age", crs="EPSG:4326")


def test_a_text_grid_spanning_a_huge_lattice_is_refused_by_its_size_first(tmp_path):
    # five points whose median step (1e-5) and span (18 x 20 degrees) make a lattice of
    # 1 800 001 x 2 000 001 = 3.6e12 nodes (an identity of the lattice rule above)
    import tracemalloc

    path = tmp_path / "g.xyz"
    path.write_text(
        "lon lat age\n0 0 1\n0.00001 0.00001 2\n0.00002 0.00002 3\n0.00003 0.00003 4\n18 20 5\n"
    )
    tracemalloc.start()
    with pytest.raises(GridError) as refused:
        open_grid(path, name="age")
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    message = str(refused.value)
    assert f"text grid '{path}' for 'age'" in message
    assert "its 5 points span a lattice of 1,800,001 x 2,000,001 = 3.6e+12 nodes" in message
    assert "more than the 100,000,000 a text grid may have" in message
    assert "Convert it to a GeoTIFF or NetCDF grid" in message
    assert peak < 50e6  # refused before any lattice-sized allocation (bytes)


def test_a_text_grid_file_too_large_is_refused_before_it_is_read(tmp_path, monkeypatch):
    import lidmelt.grids._textgrid as textgrid

    monkeypatch.setattr(textgrid, "MAX_TEXT_GRID_BYTES", 100)
    path = tmp_path / "g.xyz"
    path.write_text("\n".join(xyz_lines(np.arange(0.5, 9.0), np.arange(0.5, 9.0))))
    with pytest.raises(InputError, match=r"g.xyz' for 'age' has [0-9,]+ bytes, more than the 100"):
        open_grid(path, name="age", crs="EPSG:4326")


def xyz_netcdf(path, units="Myr"):
    """A NetCDF with x/y coordinates, variable z and no CRS attributes (the issue's case)."""
    x, y = np.arange(100.5, 110.0, 1.0), np.arange(-20.5, -10.0, 1.0)
    z = f(x[None, :], y[:, None])
    ds = xr.Dataset({"z": (("y", "x"), z, {"units": units})}, coords={"x": x, "y": y})
    ds.to_netcdf(path)
    return x, y, z


def test_netcdf_without_crs_takes_the_crs_key(tmp_path):
    path = tmp_path / "age.nc"
    x, y, _ = xyz_netcdf(path)
    with pytest.raises(GridError, match=r"no CRS.*input key crs"):
        open_input(spec(path), name="plate_age_ma", units_expected="Ma")
    da = open_input(spec(path, crs="EPSG:4326"), name="plate_age_ma", units_expected="Ma")
    assert da.rio.crs.to_epsg() == 4326
    assert da.attrs["units"] == "Ma"
    # check value: f at the cell centres, as written
    npt.assert_allclose(da.values, f(x[None, :], y[::-1, None]))


def test_x_name_y_name(tmp_path):
    x, y = np.arange(0.5, 4.0, 1.0), np.arange(0.5, 3.0, 1.0)
    ds = xr.Dataset({"z": (("northing", "easting"), f(x[None, :], y[:, None]))})
    ds = ds.assign_coords(easting=x, northing=y)
    path = tmp_path / "odd.nc"
    ds.to_netcdf(path)
    with pytest.raises(GridError):
        open_grid(path, name="age", crs="EPSG:3031")
    da = open_grid(path, name="age", crs="EPSG:3031", x_name="easting", y_name="northing")
    npt.assert_allclose(da["x"], x)
    # check value: f at (1.5, 0.5), as written
    assert float(da.sel(x=1.5, y=0.5)) == f(1.5, 0.5)
    with pytest.raises(GridError, match=r"y_name = 'north' .*give two of its dimension names"):
        open_grid(path, name="age", crs="EPSG:3031", x_name="easting", y_name="north")


def test_crs_key_contradicting_the_file(tmp_path):
    path = tmp_path / "g.csv"
    path.write_text("lon,lat,v\n0.5,0.5,1\n1.5,0.5,2\n0.5,1.5,3\n1.5,1.5,4\n")
    with pytest.raises(GridError, match=r"states the CRS .*crs = 'EPSG:3031'.*Remove the crs"):
        open_grid(path, name="age", crs="EPSG:3031")


@pytest.mark.parametrize(
    ("units", "factor"),
    [
        ("yr", 1e-6),
        ("years", 1e-6),
        ("ka", 1e-3),
        ("Myr", 1.0),
        # check value: the Julian year, 365.25 d x 86400 s (IAU), times 1e6 for a Ma
        ("s", 1 / 3.15576e13),
    ],
)
def test_units_converted_to_the_expected_unit(tmp_path, units, factor, caplog):
    path = tmp_path / "age.nc"
    _, _, z = xyz_netcdf(path, units=units)
    with caplog.at_level(logging.INFO, logger="lidmelt.grids._io"):
        da = open_input(spec(path, crs="EPSG:4326"), name="plate_age_ma", units_expected="Ma")
    npt.assert_allclose(da.values, z[::-1] * factor, rtol=1e-12)
    if factor != 1.0:
        assert f"{units} -> Ma" in caplog.text or "-> Ma" in caplog.text


def test_unknown_unit_lists_the_known_ones(tmp_path):
    path = tmp_path / "age.nc"
    xyz_netcdf(path, units="fortnights")
    with pytest.raises(GridError, match=r"'fortnights'.*Known units for this input: Ma, ka"):
        open_input(spec(path, crs="EPSG:4326"), name="plate_age_ma", units_expected="Ma")
    with pytest.raises(GridError, match=r"inputs.plate_age"):
        open_input(spec(path, crs="EPSG:4326"), name="plate_age_ma", units_expected="Ma")


def test_units_key_scale_offset_nodata(tmp_path):
    path = tmp_path / "lid.nc"
    x, y = np.arange(0.5, 4.0, 1.0), np.arange(0.5, 3.0, 1.0)
    z = f(x[None, :], y[:, None])
    z[-1, 0] = -9999.0  # the north-west node: a nodata marker
    xr.Dataset({"z": (("y", "x"), z)}, coords={"x": x, "y": y}).to_netcdf(path)
    raw = open_grid(path, name="lid", crs="EPSG:4326").values
    nodata = -9999.0
    keys = {"crs": "EPSG:4326", "file_units": "m", "scale": 2.0, "offset": 100.0, "nodata": nodata}
    da = open_input(spec(path, **keys), name="lid_thickness_km", units_expected="km")
    # check value: (value * 2 + 100) m in km, by the definition of the keys
    expected = (raw * 2.0 + 100.0) * 1e-3
    expected[0, 0] = np.nan
    npt.assert_allclose(da.values, expected, rtol=1e-12)
    assert "m -> km" in da.attrs["conversion"]


def test_vs_anomaly_to_kelvin(tmp_path):
    x, y = np.arange(0.5, 3.0, 1.0), np.arange(0.5, 3.0, 1.0)
    vs = np.full((y.size, x.size), -1.5)
    ds = xr.Dataset({"dvs": (("lat", "lon"), vs, {"units": "percent"})}, {"lon": x, "lat": y})
    path = tmp_path / "vs.nc"
    ds.to_netcdf(path)
    s = spec(path, dlnvs_dt_per_k=-1.5e-4)
    s.name = "thermal_anomaly"
    da = open_input(s, name="thermal_anomaly_k", units_expected="K")
    # check value: dT = (dVs/Vs) / (dlnVs/dT) = -0.015 / -1.5e-4 = 100 K (linear scaling)
    npt.assert_allclose(da.values, 100.0)
    with pytest.raises(GridError, match=r"dlnvs_dt_per_k = 0.0002; expected a negative"):
        dlnvs_to_kelvin(2e-4)


def test_unit_factor_table():
    # check values: SI prefixes; 1 ppm = 1e-4 wt%; a mass fraction of 1 is 100 wt%
    assert unit_factor("metres", "km", where="x") == 1e-3
    assert unit_factor("ppm", "wt%", where="x") == 1e-4
    assert unit_factor("fraction", "wt%", where="x") == 100.0
    assert unit_factor("degC", "K", where="x") == 1.0
    with pytest.raises(GridError, match=r"Known units for this input: km, m, cm"):
        unit_factor("ppm", "km", where="x")
