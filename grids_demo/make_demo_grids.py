"""Make the demo inputs of the INVENTED Veyra Basin (no real place, no real data).

Run from the project root:

    .venv/bin/python grids_demo/make_demo_grids.py

It writes, next to itself:

* ``plate_age_ma.tif``          plate age (Ma), float32 GeoTIFF, EPSG:4326, 0.1 degree, nodata NaN
* ``background_anomaly_k.nc``   a broad, weak thermal anomaly (K), CF-1.8 NetCDF, 0.25 degree
* ``stations.csv``, ``track.csv``, ``boxes.geojson``   invented cruise stations, track, boxes
* ``known_seamounts.csv``       invented "known" seamounts, to score the demo maps against

and prints the plume centres of the invented hotspot chain with the seafloor age beneath each
(those centres are listed in README.md; they are not a grid). The script is deterministic
(fixed seed); every file says it is invented. Each file is written to a temporary name in this
folder and renamed when complete.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import rasterio
import xarray as xr
from rasterio.crs import CRS
from rasterio.transform import from_origin

HERE = Path(__file__).resolve().parent
SEED = 20260101
SCENARIO = "INVENTED demo scenario: the Veyra Basin is not a real place; these are not real data"
SOURCE = "grids_demo/make_demo_grids.py (lidmelt)"

# Age grid: cell edges, 0.1 degree cells.
WEST, EAST, SOUTH, NORTH = -50.0, -10.0, -20.0, 10.0
RES = 0.1
KM_PER_DEGREE = 111.195  # mean-Earth-radius degree (6371.0 km x pi / 180), common practice
HALF_RATE_KM_MA = 23.5  # invented half-spreading rate, km/Ma (= mm/yr)

# Ridge segments between fracture zones (south to north): latitude band and ridge longitude
# at the band's centre; each segment is slightly oblique (degrees of longitude per degree).
SEGMENTS = [
    {"lat": (-90.0, -11.3), "ridge_lon": -45.8, "obliquity": 0.04},
    {"lat": (-11.3, -3.6), "ridge_lon": -44.2, "obliquity": -0.03},
    {"lat": (-3.6, 2.8), "ridge_lon": -46.6, "obliquity": 0.05},
    {"lat": (2.8, 90.0), "ridge_lon": -45.0, "obliquity": -0.02},
]

# The invented hotspot chain (not a grid; listed in README.md). radius_km is the Gaussian's
# e-folding half-width, excess(d) = peak_excess_k * exp(-(d / radius_km)^2) at geodesic
# distance d (the "gaussian" of lidmelt.grids.anomaly).
PLUMES = [
    {"name": "Ardent", "longitude": -40.5, "latitude": -6.0, "radius_km": 250.0,
     "peak_excess_k": 280.0, "shape": "gaussian"},
    {"name": "Brisa", "longitude": -34.0, "latitude": -3.0, "radius_km": 200.0,
     "peak_excess_k": 230.0, "shape": "gaussian"},
    {"name": "Corvel", "longitude": -27.5, "latitude": 0.5, "radius_km": 180.0,
     "peak_excess_k": 190.0, "shape": "gaussian"},
    {"name": "Dunmar", "longitude": -20.5, "latitude": 4.5, "radius_km": 150.0,
     "peak_excess_k": 150.0, "shape": "gaussian"},
]  # fmt: skip

# Broad swell for the NetCDF: a smooth cos^2 cap, exactly zero beyond its radius.
SWELL = {"longitude": -30.0, "latitude": -1.0, "radius_km": 1100.0, "peak_k": 40.0}
# NetCDF grid: 0.25 degree cell centres on a slightly larger extent than the age grid.
NC_WEST, NC_EAST, NC_SOUTH, NC_NORTH, NC_RES = -52.0, -8.0, -22.0, 12.0, 0.25

STATIONS = [
    ("VB01", "Ardent summit", -40.5, -6.0),
    ("VB02", "Brisa summit", -34.0, -3.0),
    ("VB03", "Corvel summit", -27.5, 0.5),
    ("VB04", "Dunmar summit", -20.5, 4.5),
    ("VB05", "Brisa-Corvel saddle", -30.8, -1.2),
    ("VB06", "Central ridge crest", -44.2, -8.0),
    ("VB07", "Western flank", -48.5, 5.0),
    ("VB08", "Old abyssal plain", -16.0, -12.0),
    ("VB09", "Margin shelf (nodata)", -11.5, 0.0),
    ("VB10", "Outside the grid", -55.0, 0.0),
    ("VB11", "Fracture zone trough", -30.0, 2.9),
    ("VB12", "Southern swell flank", -33.0, -12.0),
]

TRACK = [(-38.0, 2.0), (-35.0, -6.0), (-30.0, 4.0), (-26.0, -4.0), (-21.0, 8.0)]

BOXES = [
    ("Ardent survey", [(-42.5, -8.0), (-38.5, -8.0), (-38.5, -4.0), (-42.5, -4.0)]),
    ("Corvel survey", [(-30.0, -2.0), (-25.0, -2.0), (-25.0, 3.0), (-30.0, 3.0)]),
    ("Margin transect", [(-17.0, -16.0), (-11.0, -16.0), (-11.0, -9.0), (-17.0, -9.0)]),
    ("Southern ridge", [(-48.0, -17.0), (-44.0, -18.0), (-42.5, -14.5), (-45.0, -12.0),
                        (-48.5, -13.5)]),
]  # fmt: skip


def margin_longitude(lat: np.ndarray) -> np.ndarray:
    """Longitude of the invented continental margin; land (nodata) lies east of it."""
    return -13.0 - 1.2 * np.sin((lat + 20.0) / 30.0 * math.pi)


def ridge_longitude(lat: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Ridge-axis longitude for each latitude: oblique segments with a small smooth wobble."""
    out = np.full(lat.shape, np.nan)
    for seg in SEGMENTS:
        lo, hi = seg["lat"]
        band = (lat >= lo) & (lat < hi)
        mid = 0.5 * (max(lo, SOUTH) + min(hi, NORTH))
        wobble = np.convolve(rng.normal(0.0, 0.03, band.sum() + 20), np.ones(21) / 21, "valid")
        out[band] = seg["ridge_lon"] + seg["obliquity"] * (lat[band] - mid) + wobble
    return out


def plate_age(lon: np.ndarray, lat: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Age (Ma) on the grid of cell centres; NaN east of the margin."""
    ridge = ridge_longitude(lat, rng)[:, None]
    distance_km = np.abs(lon[None, :] - ridge) * KM_PER_DEGREE * np.cos(np.radians(lat))[:, None]
    age = distance_km / HALF_RATE_KM_MA
    age[lon[None, :] > margin_longitude(lat)[:, None]] = np.nan
    return age.astype(np.float32)


def great_circle_km(lon, lat, lon0, lat0):
    """Haversine distance on a sphere of radius 6371 km (common practice)."""
    p, p0 = np.radians(lat), math.radians(lat0)
    dl = np.radians(lon - lon0)
    h = np.sin((p - p0) / 2) ** 2 + np.cos(p) * math.cos(p0) * np.sin(dl / 2) ** 2
    return 2 * 6371.0 * np.arcsin(np.sqrt(h))


def swell_anomaly(lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """The broad swell (K): peak * cos^2(pi r / 2R) for r < R, zero beyond."""
    r = great_circle_km(lon[None, :], lat[:, None], SWELL["longitude"], SWELL["latitude"])
    cap = np.where(r < SWELL["radius_km"], np.cos(0.5 * math.pi * r / SWELL["radius_km"]) ** 2, 0.0)
    return (SWELL["peak_k"] * cap).astype(np.float32)


def write_age_tif(age: np.ndarray, path: Path) -> None:
    transform = from_origin(WEST, NORTH, RES, RES)
    tmp = path.with_name(path.name + ".tmp")
    profile = {
        "driver": "GTiff",
        "height": age.shape[0],
        "width": age.shape[1],
        "count": 1,
        "dtype": "float32",
        "crs": CRS.from_epsg(4326),
        "transform": transform,
        "nodata": np.nan,
        "tiled": True,
        "blockxsize": 256,
        "blockysize": 256,
        "compress": "DEFLATE",
        "predictor": 3,
    }
    with rasterio.open(tmp, "w", **profile) as dst:
        dst.write(age, 1)
        dst.set_band_description(1, "plate_age_ma")
        dst.units = ("Ma",)
        dst.update_tags(
            units="Ma",
            long_name="plate age (seafloor age)",
            scenario=SCENARIO,
            source=SOURCE,
            seed=str(SEED),
            half_spreading_rate_km_per_ma=str(HALF_RATE_KM_MA),
        )
        dst.update_tags(1, units="Ma", long_name="plate age (seafloor age)")
    tmp.replace(path)


LAT_ATTRS = {"units": "degrees_north", "standard_name": "latitude", "axis": "Y"}
LON_ATTRS = {"units": "degrees_east", "standard_name": "longitude", "axis": "X"}


def write_anomaly_nc(path: Path) -> None:
    lon = np.arange(NC_WEST + NC_RES / 2, NC_EAST, NC_RES)
    lat = np.arange(NC_SOUTH + NC_RES / 2, NC_NORTH, NC_RES)  # ascending, as CF files often are
    values = swell_anomaly(lon, lat)
    ds = xr.Dataset(
        {
            "thermal_anomaly": (
                ("lat", "lon"),
                values,
                {
                    "units": "K",
                    "long_name": "mantle thermal anomaly (excess potential temperature)",
                    "grid_mapping": "crs",
                    "comment": "INVENTED broad swell; zero outside its radius",
                },
            ),
            "crs": (
                (),
                np.int32(0),
                {
                    "grid_mapping_name": "latitude_longitude",
                    "longitude_of_prime_meridian": 0.0,
                    "semi_major_axis": 6378137.0,
                    "inverse_flattening": 298.257223563,
                    "crs_wkt": CRS.from_epsg(4326).to_wkt(),
                },
            ),
        },
        coords={"lat": ("lat", lat, LAT_ATTRS), "lon": ("lon", lon, LON_ATTRS)},
        attrs={
            "Conventions": "CF-1.8",
            "title": "Veyra Basin background thermal anomaly (INVENTED)",
            "institution": "none: invented demo data for lidmelt",
            "source": SOURCE,
            "comment": (
                f"{SCENARIO}. A cos^2 cap of {SWELL['peak_k']:g} K peak, radius "
                f"{SWELL['radius_km']:g} km, centred at lon {SWELL['longitude']:g}, lat "
                f"{SWELL['latitude']:g}; exactly zero elsewhere."
            ),
        },
    )
    encoding = {
        "thermal_anomaly": {"dtype": "float32", "zlib": True, "complevel": 4, "_FillValue": None},
        "lat": {"_FillValue": None},
        "lon": {"_FillValue": None},
    }
    tmp = path.with_name(path.name + ".tmp")
    ds.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=encoding)
    tmp.replace(path)


def write_csv(path: Path, header: list[str], rows: list[tuple]) -> None:
    tmp = path.with_name(path.name + ".tmp")
    with tmp.open("w", newline="", encoding="utf-8") as f:
        writer = csv.writer(f)
        writer.writerow(header)
        writer.writerows(rows)
    tmp.replace(path)


def write_boxes(path: Path) -> None:
    features = []
    for name, ring in BOXES:
        closed = [list(p) for p in ring] + [list(ring[0])]  # counter-clockwise (RFC 7946)
        features.append(
            {
                "type": "Feature",
                "properties": {"name": name},
                "geometry": {"type": "Polygon", "coordinates": [closed]},
            }
        )
    doc = {
        "type": "FeatureCollection",
        "name": "veyra_survey_boxes",
        "description": f"{SCENARIO}. Longitude/latitude, EPSG:4326 (RFC 7946).",
        "features": features,
    }
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(doc, indent=1) + "\n", encoding="utf-8")
    tmp.replace(path)


#: Seed of the invented known seamounts (their own, so the grids above do not change).
SEAMOUNT_SEED = 20260222
#: Invented seamounts per plume (near its centre, within about one radius) and elsewhere.
SEAMOUNTS_NEAR = {"Ardent": 5, "Brisa": 4, "Corvel": 3, "Dunmar": 2}
SEAMOUNTS_ELSEWHERE = 6


def known_seamounts(age: np.ndarray) -> list[tuple]:
    """INVENTED known seamounts: some near the plumes (a Gaussian scatter of 0.6 radius about
    each centre), some scattered over the rest of the ocean (more than 3 radii from every
    plume), one on the nodata margin and one west of the grid (to show that such features are
    counted and named, not dropped)."""
    rng = np.random.default_rng(SEAMOUNT_SEED)
    rows = []
    for p in PLUMES:
        for _ in range(SEAMOUNTS_NEAR[p["name"]]):
            sd = 0.6 * p["radius_km"] / KM_PER_DEGREE
            lon = p["longitude"] + rng.normal(0.0, sd) / math.cos(math.radians(p["latitude"]))
            rows.append((lon, p["latitude"] + rng.normal(0.0, sd), f"near {p['name']}"))
    while len(rows) < sum(SEAMOUNTS_NEAR.values()) + SEAMOUNTS_ELSEWHERE:
        lon, lat = rng.uniform(WEST + 1, EAST - 1), rng.uniform(SOUTH + 1, NORTH - 1)
        far = all(
            great_circle_km(lon, lat, p["longitude"], p["latitude"]) > 3 * p["radius_km"]
            for p in PLUMES
        )
        if far and np.isfinite(sample(age, lon, lat)):
            rows.append((lon, lat, "away from the plumes"))
    rows += [(-11.2, -5.0, "on the nodata margin"), (-52.5, -2.0, "west of the grid")]
    return [
        (f"KS{k + 1:02d}", f"Veyra seamount {k + 1}", round(float(lon), 3), round(float(lat), 3),
         setting)
        for k, (lon, lat, setting) in enumerate(rows)
    ]  # fmt: skip


def sample(age: np.ndarray, lon: float, lat: float) -> float:
    """Age of the cell containing (lon, lat); NaN outside the grid."""
    col = math.floor((lon - WEST) / RES)
    row = math.floor((NORTH - lat) / RES)
    if 0 <= row < age.shape[0] and 0 <= col < age.shape[1]:
        return float(age[row, col])
    return math.nan


def write_seamounts(age: np.ndarray) -> None:
    """Write ``known_seamounts.csv`` (INVENTED; see :func:`known_seamounts`)."""
    header = ["id", "name", "longitude", "latitude", "setting"]
    write_csv(HERE / "known_seamounts.csv", header, known_seamounts(age))


def main() -> None:
    rng = np.random.default_rng(SEED)
    lon = np.arange(round((EAST - WEST) / RES)) * RES + WEST + RES / 2
    lat = NORTH - RES / 2 - np.arange(round((NORTH - SOUTH) / RES)) * RES  # north to south
    age = plate_age(lon, lat, rng)

    write_age_tif(age, HERE / "plate_age_ma.tif")
    write_anomaly_nc(HERE / "background_anomaly_k.nc")
    write_csv(HERE / "stations.csv", ["id", "name", "longitude", "latitude"], STATIONS)
    write_csv(HERE / "track.csv", ["longitude", "latitude"], TRACK)
    write_boxes(HERE / "boxes.geojson")
    write_seamounts(age)

    print(
        f"plate_age_ma.tif: {age.shape[1]} x {age.shape[0]} cells of {RES} deg, "
        f"lon {WEST}..{EAST}, lat {SOUTH}..{NORTH}; age {np.nanmin(age):.2f}-"
        f"{np.nanmax(age):.1f} Ma; {np.isnan(age).mean():.1%} nodata"
    )
    print("| name | longitude | latitude | radius_km | peak_excess_k | shape | age beneath (Ma) |")
    print("|---|---|---|---|---|---|---|")
    for p in PLUMES:
        a = sample(age, p["longitude"], p["latitude"])
        print(
            f"| {p['name']} | {p['longitude']} | {p['latitude']} | {p['radius_km']:g} | "
            f"{p['peak_excess_k']:g} | {p['shape']} | {a:.0f} |"
        )
    for sid, name, x, y in STATIONS:
        print(f"  station {sid} {name}: age {sample(age, x, y):.1f} Ma")
    for f in sorted(HERE.iterdir()):
        if f.suffix in {".tif", ".nc", ".csv", ".geojson"}:
            print(f"  {f.name}: {f.stat().st_size / 1024:.1f} KiB")


if __name__ == "__main__":
    main()
