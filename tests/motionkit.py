"""A synthetic plate moving over one plume, for the tests of melting through time.

The plate turns about the north pole at a constant angular velocity (``OMEGA`` deg/Myr), so a
plume on the equator has a track along the equator, and the plate's speed there is
omega R (R the sphere's radius). The fields are the tests' own invented values.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

#: The grid: 0.25 degree cells from 30 W to 10 E and 10 S to 10 N.
WEST, NORTH, RES, WIDTH, HEIGHT = -30.0, 10.0, 0.25, 160, 80
#: The plate's angular velocity about the north pole (deg/Myr) and the history (Ma).
OMEGA, MAX_AGE = 1.0, 20.0
#: The plume: on a cell centre's meridian (so its track point at every whole Myr is on one)
#: and 0.025 degree south of the row's centre (so no point lies on a cell edge).
PLUME = {"longitude": 0.125, "latitude": 0.1, "radius_km": 100.0, "peak_excess_k": 250.0}


def age_field(lon):
    """Today's plate age (Ma) at cell-centre longitudes (tests' own): young in the west, where
    the track reaches seafloor younger than its time, and old east of the plume, where the
    ambient mantle melts at no age then."""
    lon = np.asarray(lon, float)
    return np.where(lon <= 0.0, 2.0 + 0.5 * (lon + 30.0), 17.0 + 15.0 * lon)


def cell_lon() -> np.ndarray:
    return WEST + RES * (np.arange(WIDTH) + 0.5)


def cell_lat() -> np.ndarray:
    return NORTH - RES * (np.arange(HEIGHT) + 0.5)


def write_age(path: Path, ages=None) -> Path:
    import rasterio
    from rasterio.transform import from_origin

    ages = np.broadcast_to(age_field(cell_lon()) if ages is None else ages, (HEIGHT, WIDTH))
    with rasterio.open(
        path, "w", driver="GTiff", height=HEIGHT, width=WIDTH, count=1, dtype="float32",
        crs="EPSG:4326", transform=from_origin(WEST, NORTH, RES, RES), nodata=np.nan,
    ) as dst:  # fmt: skip
        dst.write(ages.astype("float32"), 1)
        dst.units = ("Ma",)
    return path


def rotations_text(omega: float = OMEGA, max_age: float = MAX_AGE) -> str:
    """One finite rotation about the north pole: omega x max_age degrees at max_age Ma."""
    return f"age_ma,pole_lat,pole_lon,angle_deg\n{max_age:g},90,0,{omega * max_age:g}\n"


def workflow(
    folder: Path, *, extra: str = "", motion: str = "", age=None, plume_keys: str = ""
) -> Path:
    """The synthetic basin's files and workflow in ``folder`` (``plume_keys``: more keys of the
    plume's table); return the workflow path."""
    folder.mkdir(parents=True, exist_ok=True)
    write_age(folder / "age.tif", age)
    (folder / "rotations.csv").write_text(rotations_text(), encoding="utf-8")
    plume = "\n".join(f"{k} = {v}" for k, v in PLUME.items())
    wf = folder / "basin.toml"
    wf.write_text(
        f"""
[run]
name = "moving"
maps = false
report = false
[grid]
like = "plate_age"
[inputs.plate_age]
path = "age.tif"
[[inputs.thermal_anomaly.plumes]]
name = "Solo"
{plume}
{plume_keys}
[compute]
chunk_size = 64
[lithosphere]
# the lid from the 1100 C isotherm: the checks compare the history with one column beneath the
# lid of the plate's age then (the geotherm rule's top depends on the column)
top_of_melting = "isotherm"
{extra}
[motion]
rotations = "rotations.csv"
max_age_ma = {MAX_AGE}
{motion}
""",
        encoding="utf-8",
    )
    return wf


def run(folder: Path, **kwargs):
    """Run the synthetic basin in-process; return the run directory."""
    from lidmelt._engine import run_basin
    from lidmelt.motion import motion_stages
    from lidmelt.workflow import load_workflow

    cfg = load_workflow(workflow(folder, **kwargs), output_dir=folder / "run")
    return run_basin(cfg, progress=False, extra_stages=motion_stages(cfg)).run_dir
