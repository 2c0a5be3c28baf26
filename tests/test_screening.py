"""Tests of lidmelt.products._screening (``lidmelt screen``) on the anomaly and total bases.

The basin is the tests' own invention: an equal-area grid (EPSG:6933, 20 km cells) with a
spreading ridge on its west edge, plate age rising 1 Ma per 25 km away from it, ambient melt
(2 km) on the young flank (age < 15 Ma) and two plumes, Alpha and Beta, adding uniform melt
in geodesic disks on old seafloor. Check values come from these constructed fields, from the
documented screening rules, and from the equal-area property: every cell has 400 km^2 (to
rtol 1.5e-5, the projection's own round-off as in tests/test_regions.py). Geodesic distances
come from pyproj.Geod (WGS84).
"""

from __future__ import annotations

import json

import numpy as np
import pyproj
import pytest
import shapely
from affine import Affine

from conftest import reseal
from lidmelt._errors import InputError, RunDirError
from lidmelt.cli import main
from lidmelt.products._regions import region_statistics
from lidmelt.products._screening import screen

CELL_KM2 = 400.0  # 20 km x 20 km cells of an equal-area grid
T = Affine(20_000.0, 0, 0.0, 0, -20_000.0, 1_000_000.0)  # 100 rows x 150 columns
SHAPE = (100, 150)
GEOD = pyproj.Geod(ellps="WGS84")
TO_LONLAT = pyproj.Transformer.from_crs(6933, 4326, always_xy=True)

# name, centre (grid metres), plume radius (km), radius of its melt disk (km), anomaly melt (km)
PLUMES = (
    ("Alpha", (1_000_000.0, 200_000.0), 400.0, 250.0, 3.0),
    ("Beta", (2_200_000.0, -300_000.0), 300.0, 180.0, 2.0),
)
# W x F of the upwelling column beneath Alpha (invented): 40 mm/yr x 0.1 = 4 mm/yr.
UPWELLING_MM_YR, F_TOP = 40.0, 0.1


def centres():
    x = T.c + T.a * (np.arange(SHAPE[1]) + 0.5)
    y = T.f + T.e * (np.arange(SHAPE[0]) + 0.5)
    return np.meshgrid(x, y)


def geodesic_km(x0, y0, lon, lat):
    """pyproj.Geod distance (km) from grid point (x0, y0) to lon/lat points."""
    lon0, lat0 = TO_LONLAT.transform(x0, y0)
    _, _, d = GEOD.inv(np.full(lon.shape, lon0), np.full(lat.shape, lat0), lon, lat)
    return d / 1000.0


def plume_summary(run, plumes):
    """Add ``plumes`` [(name, (x, y), radius_km)] to the run's summary as the workflow does."""
    doc = json.loads((run / "summary.json").read_text(encoding="utf-8"))
    entries = []
    for name, (px, py), radius in plumes:
        lon, lat = TO_LONLAT.transform(px, py)
        entries.append(
            {
                "name": name,
                "longitude": lon,
                "latitude": lat,
                "radius_km": radius,
                "peak_excess_k": 200.0,
                "shape": "gaussian",
            }
        )
    doc["inputs"]["thermal_anomaly_k"] = {"file": None, "units": "K", "plumes": entries}
    reseal(run, **doc)  # lidmelt refuses a summary edited without its manifest


def f32(a):
    return np.asarray(a, dtype=np.float32).astype(float)


@pytest.fixture
def basin(make_run_dir, add_validity_flag):
    """The invented basin of the module notes; returns (run, masks and fields)."""
    x, y = centres()
    lon, lat = TO_LONLAT.transform(x, y)
    age = x / 25_000.0  # Ma, 1 Ma per 25 km from the ridge at x = 0
    flank = age < 15.0
    anomaly_melt = np.zeros(SHAPE)
    disks = {}
    for name, (px, py), _radius, melt_radius, melt in PLUMES:
        disks[name] = geodesic_km(px, py, lon, lat) < melt_radius
        anomaly_melt[disks[name]] = melt
    assert not (flank & (disks["Alpha"] | disks["Beta"])).any()  # plumes on old seafloor
    production = np.where(disks["Alpha"], UPWELLING_MM_YR * F_TOP, 0.0)
    run = make_run_dir(
        {
            "melt_thickness_km": np.where(flank, 2.0, 0.0) + anomaly_melt,
            "anomaly_melt_thickness_km": anomaly_melt,
            "melt_production_mm_yr": production,
            "plate_age_ma": age,
        },
        transform=T,
        crs="EPSG:6933",
    )
    flags = np.where(disks["Alpha"] & (x > 1_000_000.0), 4, 0)  # beyond calibration
    add_validity_flag(run, flags)
    plume_summary(run, [(n, c, r) for n, c, r, _, _ in PLUMES])
    return run, {"x": x, "age": f32(age), "flank": flank, "flags": flags, **disks}


# ---------------------------------------------------------------------------------------
# The anomaly basis (default)
# ---------------------------------------------------------------------------------------


def test_default_screening_finds_the_two_plumes_and_not_the_ridge_flank(basin):
    run, m = basin
    out = screen(run, min_melt_thickness_km=1.0)
    assert out.attrs["lidmelt_basis"] == "anomaly"
    assert list(out["plume"]) == ["Alpha", "Beta"]  # Alpha adds more melt: rank 1
    assert list(out["plume_match"]) == ["centre inside", "centre inside"]
    assert list(out["rank"]) == [1, 2]
    x, y = centres()
    for k, (name, melt) in enumerate((("Alpha", 3.0), ("Beta", 2.0))):
        row = out.iloc[k]
        disk = m[name]
        assert row["n_cells"] == disk.sum()
        np.testing.assert_array_equal(shapely.contains_xy(row.geometry, x, y), disk)
        # Volumes: constructed melt x cell count x 400 km^2 (equal area).
        np.testing.assert_allclose(
            row["anomaly_melt_volume_km3"], melt * CELL_KM2 * disk.sum(), rtol=1.5e-5
        )
        np.testing.assert_allclose(
            row["melt_volume_km3"], melt * CELL_KM2 * disk.sum(), rtol=1.5e-5
        )
        np.testing.assert_allclose(row["melting_area_km2"], CELL_KM2 * disk.sum(), rtol=1.5e-5)
        # Plate-age range: the constructed age field (as stored in float32) over the disk.
        assert row["min_plate_age_ma"] == m["age"][disk].min()
        assert row["max_plate_age_ma"] == m["age"][disk].max()
    # No candidate reaches the ridge flank.
    covered = np.zeros(SHAPE, dtype=bool)
    for geom in out.geometry:
        covered |= shapely.contains_xy(geom, x, y)
    assert not (covered & m["flank"]).any()


def test_candidate_flagged_fraction_is_exact(basin):
    """Alpha's cells east of its centre carry bit 4: fraction = their count / its cell count
    (the constructed flags); Beta has none."""
    run, m = basin
    out = screen(run, min_melt_thickness_km=1.0)
    alpha = m["Alpha"]
    expected = (alpha & (m["flags"] > 0)).sum() / alpha.sum()
    assert 0.3 < expected < 0.7  # precondition: a real fraction, not 0 or 1
    assert out.iloc[0]["flagged_fraction"] == pytest.approx(expected, rel=1e-12)
    assert out.iloc[1]["flagged_fraction"] == 0.0


def test_melt_production_total_is_w_times_f_times_area(basin):
    """Melt production W x F(top) (mass balance, PHYSICS definition): 40 mm/yr x 0.1 over
    Alpha's cells of 400 km^2, times 1e-6 km/mm, gives km^3/yr; Beta has no upwelling."""
    run, m = basin
    out = screen(run, min_melt_thickness_km=1.0)
    expected = UPWELLING_MM_YR * F_TOP * 1e-6 * CELL_KM2 * m["Alpha"].sum()
    np.testing.assert_allclose(out.iloc[0]["melt_production_km3_yr"], expected, rtol=1.5e-5)
    assert out.iloc[1]["melt_production_km3_yr"] == 0.0


def test_basin_without_anomaly_has_no_anomaly_candidate(make_run_dir):
    """Ambient melt only (anomaly melt 0 everywhere): nothing on the anomaly basis, the
    flank on the total basis."""
    x, _ = centres()
    flank = x / 25_000.0 < 15.0
    run = make_run_dir(
        {
            "melt_thickness_km": np.where(flank, 2.0, 0.0),
            "anomaly_melt_thickness_km": np.zeros(SHAPE),
        },
        transform=T,
        crs="EPSG:6933",
    )
    assert len(screen(run, min_melt_thickness_km=0.01)) == 0
    total = screen(run, min_melt_thickness_km=0.01, basis="total")
    assert len(total) == 1
    assert total.loc[0, "n_cells"] == flank.sum()


# ---------------------------------------------------------------------------------------
# The total basis and the plate-age limit
# ---------------------------------------------------------------------------------------


def test_total_basis_finds_the_ridge_flank_too(basin):
    run, m = basin
    out = screen(run, min_melt_thickness_km=1.0, basis="total")
    assert len(out) == 3
    # Ranked by total melt volume: the flank (2 km over 750,000 km^2) holds the most.
    first = out.iloc[0]
    assert first["n_cells"] == m["flank"].sum()
    assert (first["plume"], first["plume_match"]) == ("", "none")
    assert list(out["plume"][1:]) == ["Alpha", "Beta"]
    assert first["anomaly_melt_volume_km3"] == 0.0


def test_min_age_leaves_out_younger_cells(basin):
    run, m = basin
    # Total basis: the flank (< 15 Ma) goes, the plumes (older than 20 Ma) stay.
    out = screen(run, min_melt_thickness_km=1.0, basis="total", min_age_ma=20.0)
    assert list(out["plume"]) == ["Alpha", "Beta"]
    # 40 Ma cuts Alpha (ages around 40 Ma) at its centre meridian: only its older cells remain.
    out = screen(run, min_melt_thickness_km=1.0, min_age_ma=40.0)
    kept = m["Alpha"] & (m["age"] >= 40.0)
    row = out[out["plume"] == "Alpha"].iloc[0]
    assert row["n_cells"] == kept.sum()
    assert 0 < kept.sum() < m["Alpha"].sum()
    assert row["min_plate_age_ma"] >= 40.0


def test_plume_within_radius_and_none(make_run_dir):
    """A melt patch whose plume centre lies 100 km outside it, within the plume's 150 km
    radius, is linked 'within radius'; with a 50 km radius it is not linked (pyproj.Geod
    distances from the plume centre to the patch's nearest cell centre)."""
    x, y = centres()
    lon, lat = TO_LONLAT.transform(x, y)
    patch = (np.abs(x - 1_500_000.0) < 100_000.0) & (np.abs(y) < 100_000.0)
    melt = np.where(patch, 2.0, 0.0)
    run = make_run_dir(
        {"melt_thickness_km": melt, "anomaly_melt_thickness_km": melt},
        transform=T,
        crs="EPSG:6933",
    )
    centre = (1_700_000.0, 0.0)  # 100 km east of the patch's east edge
    nearest = geodesic_km(*centre, lon[patch], lat[patch]).min()
    assert 100.0 < nearest < 150.0  # precondition: within 150 km, beyond 50 km
    plume_summary(run, [("Near", centre, 150.0), ("Far", (200_000.0, 800_000.0), 150.0)])
    out = screen(run, min_melt_thickness_km=1.0)
    assert (out.loc[0, "plume"], out.loc[0, "plume_match"]) == ("Near", "within radius")
    plume_summary(run, [("Near", centre, 50.0)])
    out = screen(run, min_melt_thickness_km=1.0)
    assert (out.loc[0, "plume"], out.loc[0, "plume_match"]) == ("", "none")


def test_region_statistics_carry_production_and_flags(basin):
    """A polygon around Alpha: production and flagged fraction as for the candidate."""
    import geopandas as gpd

    run, m = basin
    box = shapely.box(600_000.0, -200_000.0, 1_400_000.0, 600_000.0)
    out = region_statistics(run, gpd.GeoDataFrame(geometry=[box], crs="EPSG:6933"))
    x, y = centres()
    inside = shapely.contains_xy(box, x, y)
    assert (m["Alpha"] <= inside).all()  # precondition: the box holds Alpha
    expected = UPWELLING_MM_YR * F_TOP * 1e-6 * CELL_KM2 * m["Alpha"].sum()
    np.testing.assert_allclose(out.loc[0, "melt_production_km3_yr"], expected, rtol=1.5e-5)
    flagged = ((m["flags"] > 0) & inside).sum() / inside.sum()
    assert out.loc[0, "flagged_fraction"] == pytest.approx(flagged, rel=1e-12)


# ---------------------------------------------------------------------------------------
# Errors and the command line
# ---------------------------------------------------------------------------------------


def test_errors(make_run_dir, basin):
    run, _ = basin
    old = make_run_dir(
        {"melt_thickness_km": np.ones(SHAPE)}, transform=T, crs="EPSG:6933", name="old"
    )
    with pytest.raises(RunDirError, match="--basis total"):
        screen(old, min_melt_thickness_km=1.0)
    with pytest.raises(InputError, match="input_plate_age_ma"):
        screen(old, min_melt_thickness_km=1.0, basis="total", min_age_ma=10.0)
    with pytest.raises(InputError, match="expected one of anomaly, total"):
        screen(run, min_melt_thickness_km=1.0, basis="ambient")
    with pytest.raises(InputError, match="not a non-negative plate age"):
        screen(run, min_melt_thickness_km=1.0, min_age_ma=-5.0)


def test_cli_screen_default_basis_and_min_age(basin, tmp_path, capsys):
    run, _ = basin
    out = tmp_path / "c.gpkg"
    assert main(["screen", str(run), "--min-melt-thickness", "1", "-o", str(out)]) == 0
    text = capsys.readouterr().out
    assert "Alpha" in text
    assert "Beta" in text
    assert "flagged_fraction" in text
    assert "2 candidate region(s) with anomaly melt thickness >= 1 km" in text
    args = ["screen", str(run), "--min-melt-thickness", "1", "--basis", "total", "-o", str(out)]
    assert main([*args, "--min-age", "20"]) == 0
    assert "2 candidate region(s) with melt thickness >= 1 km" in capsys.readouterr().out
    assert main(args) == 0
    assert "3 candidate region(s)" in capsys.readouterr().out


def test_cli_screen_writes_into_the_run_folder_where_the_report_finds_it(
    basin, tmp_path, capsys, monkeypatch
):
    """One convention: screen's default file is the one the report looks for (check values:
    the file names in products/report/sites.py and the two plumes of this basin)."""
    run, _ = basin
    here = tmp_path / "here"
    here.mkdir()
    monkeypatch.chdir(here)  # nothing may land in the current folder
    assert main(["screen", str(run), "--min-melt-thickness", "1"]) == 0
    assert (run / "candidates.gpkg").is_file()
    assert (run / "candidates.geojson").is_file()
    assert list(here.iterdir()) == []
    assert f"wrote {run / 'candidates.gpkg'}" in capsys.readouterr().out
    from lidmelt.products._report._write import write_report

    page = write_report(run, coastlines=False).read_text(encoding="utf-8")
    assert "Candidate regions of candidates.gpkg" in page
    assert "Alpha" in page


def test_cli_screen_old_run_says_how_to_fix(make_run_dir, tmp_path, capsys):
    old = make_run_dir(
        {"melt_thickness_km": np.ones(SHAPE)}, transform=T, crs="EPSG:6933", name="old"
    )
    assert main(["screen", str(old), "--min-melt-thickness", "1", "-o", str(tmp_path / "c.gpkg")])
    err = capsys.readouterr().err
    assert "anomaly_melt_thickness_km" in err
    assert "--basis total" in err


def test_cells_whose_regime_says_no_melting_are_never_candidates(make_run_dir):
    # lidmelt definition (docs/physics.md, "Melt that counts"): a column whose melt fraction at
    # the top stays below the least that can be extracted is "not melting" (regime 0), so it is
    # no candidate cell even where its raw anomaly melt passes the threshold. Alpha's disk is
    # split: its western half regime 3 (the anomaly only), its eastern half regime 0.
    x, y = centres()
    lon, lat = TO_LONLAT.transform(x, y)
    name, (px, py), radius, melt_radius, melt = PLUMES[0]
    disk = geodesic_km(px, py, lon, lat) < melt_radius
    west = disk & (x < px)
    run = make_run_dir(
        {
            "melt_thickness_km": np.where(disk, melt, 0.0),
            "anomaly_melt_thickness_km": np.where(disk, melt, 0.0),
            "melting_regime": np.where(west, 3.0, 0.0),
        },
        transform=T,
        crs="EPSG:6933",
    )
    plume_summary(run, [(name, (px, py), radius)])
    out = screen(run, min_melt_thickness_km=1.0)
    assert len(out) == 1
    np.testing.assert_array_equal(shapely.contains_xy(out.iloc[0].geometry, x, y), west)
    assert out.iloc[0]["n_cells"] == west.sum()
