"""Write the INVENTED files of the "real data" example (workflows/real_data_example.toml).

Everything written here is invented: a world ocean with one made-up ridge, made-up hotspots and
made-up stations, in the file forms practitioners receive (not data; never use it as check
values). Files, in grids_demo/real_data/:

- ``age_gmt.nc``: a GMT-style NetCDF plate-age grid: global, gridline-registered at 2 degrees
  (nodes at 0 and 360 and at both poles), dimensions ``x``/``y`` with no CRS attributes, variable
  ``z`` in "Myr", global attribute ``node_offset = 0``; NaN over two invented continents.
- ``lid_below_sea_level_m.xyz``: a lithosphere model as x y value text (4-degree nodes, lines
  shuffled, values in metres below SEA LEVEL).
- ``hotspots.csv``: an invented hotspot catalogue (no shape column: gaussian by default).
- ``stations_dm.csv``: invented stations with coordinates in degrees and minutes.

Run from the project root: ``python grids_demo/make_real_data_example.py`` (deterministic).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import xarray as xr

OUT = Path(__file__).resolve().parent / "real_data"
RIDGE_LON = 200.0  # the invented ridge, degrees east
HALF_RATE_KM_MA = 30.0  # invented half spreading rate
KM_PER_DEG = 111.2  # one degree of a great circle, km (from memory)


def invented_age(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Age growing away from the invented ridge, capped at 180 Ma; NaN on two continents."""
    dist_deg = np.abs((lon - RIDGE_LON + 180.0) % 360.0 - 180.0)
    age = np.minimum(dist_deg * KM_PER_DEG * np.cos(np.radians(lat)) / HALF_RATE_KM_MA, 180.0)
    land = ((lon > 20) & (lon < 60) & (np.abs(lat) < 40)) | ((lon > 280) & (lon < 320) & (lat > 0))
    return np.where(land | (np.abs(lat) > 80), np.nan, age)


def write_age(path: Path) -> None:
    x = np.arange(0.0, 360.0 + 1.0, 2.0)
    y = np.arange(-90.0, 90.0 + 1.0, 2.0)
    z = invented_age(x[None, :], y[:, None]).astype(np.float32)
    ds = xr.Dataset({"z": (("y", "x"), z, {"units": "Myr", "long_name": "INVENTED age"})})
    ds = ds.assign_coords(x=("x", x), y=("y", y))
    ds.attrs.update(node_offset=0, title="INVENTED plate age (lidmelt example; not data)")
    ds.to_netcdf(path, encoding={"z": {"zlib": True, "_FillValue": np.float32(np.nan)}})


def write_lid(path: Path) -> None:
    """Lid base below sea level, m: water depth (about 2.6 km + 0.35 sqrt(age) km, invented)
    plus a lid of 10 sqrt(age) km (invented)."""
    lon = np.arange(0.0, 360.0, 4.0)
    lat = np.arange(-76.0, 77.0, 4.0)
    lo, la = np.meshgrid(lon, lat)
    age = invented_age(lo, la)
    depth_m = (2.6 + 0.35 * np.sqrt(age)) * 1000.0 + 10_000.0 * np.sqrt(age)
    rng = np.random.default_rng(20260113)
    order = rng.permutation(lo.size)
    rows = [
        f"{lo.flat[i]:g}\t{la.flat[i]:g}\t{depth_m.flat[i]:.1f}"
        for i in order
        if np.isfinite(depth_m.flat[i])
    ]
    path.write_text("# INVENTED lithosphere model\nlon\tlat\tlid_base_m\n" + "\n".join(rows) + "\n")


def write_catalogue(path: Path) -> None:
    rows = [
        ("Invented Alpha", 215.0, -18.0, 300.0, 180.0),
        ("Invented Beta", 240.5, 12.5, 250.0, 150.0),
        ("Invented Gamma", 170.0, 30.0, 200.0, 120.0),
    ]
    lines = ["name,longitude,latitude,radius_km,peak_excess_k"]
    lines += [",".join(str(v) for v in row) for row in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def write_stations(path: Path) -> None:
    lines = [
        "station,lat,lon",
        "INV-1,18°00.0'S,145°00.0'W",
        "INV-2,12 30.0 N,119 30.0 W",
        "INV-3,-6:00:00,170:00:00",
    ]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def main() -> None:
    OUT.mkdir(exist_ok=True)
    write_age(OUT / "age_gmt.nc")
    write_lid(OUT / "lid_below_sea_level_m.xyz")
    write_catalogue(OUT / "hotspots.csv")
    write_stations(OUT / "stations_dm.csv")
    for path in sorted(OUT.iterdir()):
        print(f"{path.name}: {path.stat().st_size} bytes")


if __name__ == "__main__":
    main()
