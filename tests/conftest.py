"""Shared test fixtures.

``make_run_dir`` writes a small synthetic run directory (the layout of DEVELOPERS.md) from
numpy arrays, so that product tests do not depend on a full ``lidmelt run``. The arrays a test
passes are its own invented fields; check values always come from an independent source.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest

# Never let a test reach the network: cartopy must not try to download Natural Earth data.
os.environ.setdefault("CARTOPY_DATA_DIR", str(Path(__file__).parent / "data" / "no-cartopy-data"))


def pytest_terminal_summary(terminalreporter):
    """Print the tallies the test files kept (runkit.TALLIES): no test has to run last."""
    import runkit

    for name, counts in runkit.TALLIES.items():
        terminalreporter.write_line(f"{name} tally: {counts}")


@pytest.fixture(autouse=True, scope="session")
def _table_cache(tmp_path_factory):
    """Build melting tables once per test session, in a private cache folder."""
    folder = tmp_path_factory.mktemp("lidmelt-cache")
    old = os.environ.get("LIDMELT_CACHE_DIR")
    os.environ["LIDMELT_CACHE_DIR"] = str(folder)
    yield folder
    if old is None:
        os.environ.pop("LIDMELT_CACHE_DIR", None)
    else:
        os.environ["LIDMELT_CACHE_DIR"] = old


UNITS = {
    "melt_thickness_km": "km",
    "anomaly_melt_thickness_km": "km",
    "onset_depth_km": "km",
    "onset_pressure_gpa": "GPa",
    "melting_top_km": "km",
    "max_melt_fraction": "1",
    "mean_melt_pressure_gpa": "GPa",
    "excess_to_melt_k": "K",
    "plate_age_ma": "Ma",
    "lid_thickness_km": "km",
    "thermal_anomaly_k": "K",
    "water_wt_pct": "wt%",
}
INPUT_NAMES = {"plate_age_ma", "lid_thickness_km", "thermal_anomaly_k", "water_wt_pct"}


def reseal(path, **changes):
    """Rewrite ``path``'s summary.json with ``changes`` and the manifest of the files now there
    (what a test that edits a run directory by hand must do: lidmelt refuses a folder whose
    files or summary differ from its manifest)."""
    from lidmelt.grids._rundir import SUMMARY_NAME, write_summary

    doc = json.loads((Path(path) / SUMMARY_NAME).read_text(encoding="utf-8"))
    doc.update(changes)
    return write_summary(path, doc)


def write_run_dir(path, fields, *, transform, crs="EPSG:4326", summary=None):
    """Write ``fields`` {name: 2-D array} as a run directory at ``path``; return the path.

    Output variables go to ``<name>.tif``, inputs (see INPUT_NAMES) to ``input_<name>.tif``.
    ``transform`` is an affine.Affine; ``summary`` entries override the defaults.
    """
    import rasterio
    from rasterio.crs import CRS

    from lidmelt.grids._rundir import write_summary

    path = Path(path)
    path.mkdir(parents=True, exist_ok=True)
    outputs, inputs = {}, {}
    first = next(iter(fields.values()))
    height, width = first.shape
    for name, values in fields.items():
        fname = f"input_{name}.tif" if name in INPUT_NAMES else f"{name}.tif"
        with rasterio.open(
            path / fname,
            "w",
            driver="GTiff",
            height=height,
            width=width,
            count=1,
            dtype="float32",
            crs=CRS.from_user_input(crs),
            transform=transform,
            nodata=np.nan,
        ) as dst:
            dst.write(np.asarray(values, dtype="float32"), 1)
            dst.set_band_description(1, name)
            dst.units = (UNITS.get(name, ""),)
        entry = {"file": fname, "units": UNITS.get(name, ""), "long_name": name}
        if name in INPUT_NAMES:
            inputs[name] = {**entry, "source": None, "sha256": None}
        else:
            outputs[name] = entry
    west, north = transform.c, transform.f
    east, south = west + transform.a * width, north + transform.e * height
    doc = {
        "lidmelt_run": 1,
        "lidmelt_version": "test",
        "created_utc": "2026-01-01T00:00:00Z",
        "grid": {
            "crs_wkt": CRS.from_user_input(crs).to_wkt(),
            "transform": list(transform)[:6],
            "width": width,
            "height": height,
            "bounds": [west, south, east, north],
        },
        "model": {"name": "katz2003", "parameters": {}, "reference": "test"},
        "ambient_potential_temperature_c": 1350.0,
        "cooling": None,
        "min_top_of_melting_km": 7.0,
        "inputs": inputs,
        "outputs": outputs,
        "statistics": {},
        "workflow": "",
    }
    doc.update(summary or {})
    write_summary(path, doc)  # sealed: the manifest of the files written above
    return path


def write_flag_grid(path, flags, *, transform, crs="EPSG:4326"):
    """Write ``flags`` (uint8 bit flags, 255 = no data) as ``path/validity_flag.tif``."""
    import rasterio

    with rasterio.open(
        Path(path) / "validity_flag.tif",
        "w",
        driver="GTiff",
        height=flags.shape[0],
        width=flags.shape[1],
        count=1,
        dtype="uint8",
        crs=crs,
        transform=transform,
        nodata=255,
    ) as dst:
        dst.write(np.asarray(flags, dtype="uint8"), 1)
    reseal(path)  # the flag grid joins the run's manifest
    return Path(path) / "validity_flag.tif"


@pytest.fixture
def make_flag_grid():
    """``make_flag_grid(run_path, flags, transform=...)`` writes a run's validity_flag.tif."""
    return write_flag_grid


@pytest.fixture
def make_run_dir(tmp_path):
    """Factory fixture: ``make_run_dir(fields, transform=..., crs=..., summary=...)``."""

    def factory(fields, *, transform, crs="EPSG:4326", summary=None, name="run"):
        return write_run_dir(tmp_path / name, fields, transform=transform, crs=crs, summary=summary)

    return factory


def write_validity_flag(path, flags):
    """Write ``flags`` (2-D ints; 255 = nodata) as the run's validity_flag.tif (uint8), on the
    grid of its summary.json, and add the summary's ``validity_flag`` entry."""
    import rasterio
    from affine import Affine

    from lidmelt.grids._rundir import write_summary
    from lidmelt.physics import FLAG_MEANINGS

    path = Path(path)
    doc = json.loads((path / "summary.json").read_text(encoding="utf-8"))
    grid = doc["grid"]
    flags = np.asarray(flags, dtype=np.uint8)
    with rasterio.open(
        path / "validity_flag.tif",
        "w",
        driver="GTiff",
        height=grid["height"],
        width=grid["width"],
        count=1,
        dtype="uint8",
        crs=rasterio.crs.CRS.from_wkt(grid["crs_wkt"]),
        transform=Affine(*grid["transform"]),
        nodata=255,
    ) as dst:
        dst.write(flags, 1)
    doc["validity_flag"] = {
        "file": "validity_flag.tif",
        "nodata": 255,
        "meanings": {str(k): v for k, v in FLAG_MEANINGS.items()},
    }
    write_summary(path, doc)
    return path


@pytest.fixture
def add_validity_flag():
    """``add_validity_flag(run_path, flags)``: see :func:`write_validity_flag`."""
    return write_validity_flag
