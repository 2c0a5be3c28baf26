"""Tests of the share of the melt made beyond the calibrated pressure in the products.

Candidates (their ``deep_melt_share``: the share of the ANOMALY melt volume), the report's
sentence on candidate #1 and the hatching of the melt-thickness maps. The runs are small
invented grids written with the ``make_run_dir`` fixture; every check value is computed by hand
beside the check.
"""

from __future__ import annotations

import math

import cartopy.crs  # noqa: F401 - required (pyproject): a missing one fails, never skips
import numpy as np
import pytest
from affine import Affine

from lidmelt.grids._rundir import open_run
from lidmelt.products._candidate_files import write_candidates
from lidmelt.products._maps._figure import make_map_figure
from lidmelt.products._maps._overview import make_overview_figure
from lidmelt.products._report._sites import DEEP_SHARE_HEADING, sites_section
from lidmelt.products._screening import screen

# 3 rows x 2 columns of 10 x 30 degree cells from 0 E, 90 N: the rows are the latitude bands
# 60-90 N, 30-60 N and 0-30 N.
BANDS = Affine(10.0, 0.0, 0.0, 0.0, -30.0, 90.0)

# Relative areas of the three bands: on a sphere the area between two latitudes is
# proportional to sin(lat2) - sin(lat1) (Archimedes' hat-box theorem); the ellipsoid's
# authalic latitudes shift these by well under 1 % (hence rtol 0.01 below).
W = np.array([1.0 - math.sin(math.radians(60.0)), math.sin(math.radians(60.0)) - 0.5, 0.5])

# Column 0 is the candidate; column 1 (no melt) is not.
MELT = np.array([[10.0, 0.0], [6.0, 0.0], [2.0, 0.0]])
ANOMALY = np.array([[8.0, 0.0], [4.0, 0.0], [1.0, 0.0]])
SHARE = np.array([[0.5, np.nan], [0.25, np.nan], [0.0, np.nan]])  # NaN: nothing melts

# Hand computation of the candidate's share of its anomaly melt volume made beyond the
# calibrated pressure: sum(share * melt * w) / sum(anomaly * w).
HAND_SHARE = float((SHARE[:, 0] * MELT[:, 0] * W).sum() / (ANOMALY[:, 0] * W).sum())  # 0.4015


def _run(make_run_dir, *, deep=True, pc=6.5, name="bands", share=SHARE, melt=MELT, anom=ANOMALY):
    fields = {"melt_thickness_km": melt, "anomaly_melt_thickness_km": anom}
    if deep:
        fields["deep_melt_share"] = share
    model = {"name": "katz2003", "parameters": {"calibrated_max_pressure_gpa": pc}}
    return make_run_dir(fields, transform=BANDS, summary={"model": model}, name=name)


def test_candidate_share_is_of_the_anomaly_volume_area_weighted(make_run_dir):
    gdf = screen(_run(make_run_dir), min_melt_thickness_km=0.5)
    assert len(gdf) == 1
    # Check value: the hand computation above (0.4015); neither the unweighted 6.5 / 13 = 0.5
    # nor the share of the TOTAL melt volume (1.219 / 4.536 = 0.269) is within 1 % of it.
    assert gdf["deep_melt_share"].iloc[0] == pytest.approx(HAND_SHARE, rel=0.01)


def test_candidate_share_is_capped_at_one_and_nan_without_the_output(make_run_dir):
    # A cell whose deep volume (0.9 x 10 = 9 km) exceeds its anomaly melt (2 km): 4.5 -> 1.
    melt, anom = np.array([[10.0, 0], [0, 0], [0, 0]]), np.array([[2.0, 0], [0, 0], [0, 0]])
    share = np.array([[0.9, np.nan], [np.nan, np.nan], [np.nan, np.nan]])
    capped = _run(make_run_dir, name="capped", share=share, melt=melt, anom=anom)
    assert screen(capped, min_melt_thickness_km=0.5)["deep_melt_share"].iloc[0] == 1.0
    # Without the deep_melt_share output the column is there, NaN.
    gdf = screen(_run(make_run_dir, deep=False, name="nodeep"), min_melt_thickness_km=0.5)
    assert "deep_melt_share" in gdf.columns
    assert np.isnan(gdf["deep_melt_share"].iloc[0])


def _section_text(run_path, gdf):
    path, _ = write_candidates(gdf, run_path / "candidates.gpkg")
    section = sites_section(open_run(run_path), None, path)
    return [b for b in section.blocks if isinstance(b, str)], section


def test_report_says_the_share_of_candidate_one(make_run_dir):
    run_path = _run(make_run_dir)
    texts, section = _section_text(run_path, screen(run_path, min_melt_thickness_km=0.5))
    said = [t for t in texts if "of the anomaly melt volume of candidate #1" in t]
    assert len(said) == 1
    # Check value: 100 x the hand computation (40.15 %, within the 1 % of the spherical
    # areas; the report gives 3 significant figures) and the run's own calibrated pressure
    # (6.5 GPa in its summary).
    number, rest = said[0].split(" % ", 1)
    assert float(number) == pytest.approx(100 * HAND_SHARE, rel=0.01)
    assert rest.startswith("of the anomaly melt volume of candidate #1 comes from beyond 6.5 GPa")
    assert "beyond 6.5 GPa (the model's calibrated pressure)" in said[0]
    # The candidates table gives the same number in percent.
    table = next(b for b in section.blocks if hasattr(b, "header"))
    column = table.header.index(DEEP_SHARE_HEADING)
    assert table.rows[0][column] == number


def test_report_says_nothing_of_the_share_without_candidates(make_run_dir):
    run_path = _run(make_run_dir)
    empty = screen(run_path, min_melt_thickness_km=50.0)  # no cell has 50 km of anomaly melt
    assert len(empty) == 0
    texts, _ = _section_text(run_path, empty)
    assert not any("candidate #1" in t for t in texts)
    # A run without deep_melt_share has NaN shares: no sentence either.
    run_path = _run(make_run_dir, deep=False, name="nodeep")
    texts, _ = _section_text(run_path, screen(run_path, min_melt_thickness_km=0.5))
    assert not any("candidate #1" in t for t in texts)


# Map test: 10 x 8 cells of 1 degree from 10 E, 10 N; melt everywhere, the deep share set by
# hand: above 0.25 in five cells, exactly 0.25 in two (not above: not hatched), NaN in one.
BOX = Affine(1.0, 0.0, 10.0, 0.0, -1.0, 10.0)
ABOVE = ((1, 1), (1, 2), (2, 2), (5, 7), (6, 0))


def _hatched_cells(ax, hatch):
    """The union of the geometries the map hatches with ``hatch`` (both layers), in lon/lat."""
    import shapely

    geoms = [
        g
        for c in ax.get_children()
        if getattr(c, "get_hatch", lambda: None)() == hatch
        for g in c._feature.geometries()
    ]
    return shapely.union_all(geoms) if geoms else None


@pytest.mark.parametrize("variable", ["melt_thickness_km", "anomaly_melt_thickness_km"])
def test_melt_maps_hatch_exactly_the_cells_above_a_quarter(make_run_dir, variable):
    import shapely

    from lidmelt.products._maps._flags import DEEP_HATCH

    share = np.zeros((8, 10))
    for row, col in ABOVE:
        share[row, col] = 0.3
    share[3, 3] = share[4, 8] = 0.25
    share[7, 9] = np.nan
    fields = {"melt_thickness_km": np.full((8, 10), 5.0), "deep_melt_share": share}
    fields["anomaly_melt_thickness_km"] = np.full((8, 10), 2.0)
    model = {"name": "katz2003", "parameters": {"calibrated_max_pressure_gpa": 7.0}}
    run = make_run_dir(fields, transform=BOX, summary={"model": model}, name="deepmap")
    _, info = make_map_figure(run, variable, dpi=60, coastlines=False)
    assert info.decimation == 1
    drawn = _hatched_cells(info.ax, DEEP_HATCH)
    # Check value: the unit boxes of the cells set above 0.25 by hand (row r spans latitude
    # 10 - r - 1 to 10 - r, column c longitude 10 + c to 11 + c).
    boxes = shapely.union_all([shapely.box(10 + c, 9 - r, 11 + c, 10 - r) for r, c in ABOVE])
    assert drawn is not None
    assert drawn.symmetric_difference(boxes).area == pytest.approx(0.0, abs=1e-9)
    assert info.deep_hatched_cells == len(ABOVE)
    assert "more than 25 % of the melt made beyond 7 GPa" in info.legend_labels
    assert "(5 cells): more than 25 % of the melt is made beyond 7 GPa" in info.caption
    # Other maps are not hatched for it.
    _, other = make_map_figure(run, "deep_melt_share", dpi=60, coastlines=False)
    assert _hatched_cells(other.ax, DEEP_HATCH) is None
    assert other.deep_hatched_cells == 0


def test_overview_melt_panel_hatches_the_same_cells(make_run_dir):
    import shapely

    from lidmelt.products._maps._flags import DEEP_HATCH

    share = np.zeros((8, 10))
    for row, col in ABOVE:
        share[row, col] = 0.6
    share[3, 3] = 0.25  # exactly a quarter: not above, not hatched
    fields = {"melt_thickness_km": np.full((8, 10), 5.0), "deep_melt_share": share}
    model = {"name": "katz2003", "parameters": {"calibrated_max_pressure_gpa": 7.0}}
    run = make_run_dir(fields, transform=BOX, summary={"model": model}, name="deepview")
    _, info = make_overview_figure(run, coastlines=False, dpi=60)
    assert info.variables == ("melt_thickness_km",)  # the one panel, (a)
    # Check value: the unit boxes of the cells set above 0.25 by hand (as above).
    boxes = shapely.union_all([shapely.box(10 + c, 9 - r, 11 + c, 10 - r) for r, c in ABOVE])
    drawn = _hatched_cells(info.axes[0], DEEP_HATCH)
    assert drawn.symmetric_difference(boxes).area == pytest.approx(0.0, abs=1e-9)
    assert "Hatched with horizontal lines in (a) (5 cells)" in info.caption
