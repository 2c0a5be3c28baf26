"""Issue 14: every figure kind draws with the right labels and limits (maps, overview, profile).

Runs are small invented grids (the ``make_run_dir`` fixture). Check values are named beside
them: numpy's min/max/percentile, arithmetic, the rules documented in lidmelt.products._maps.
"""

from __future__ import annotations

import cartopy.crs as ccrs
import matplotlib.image as mpimg
import numpy as np
import pytest
from affine import Affine

from lidmelt.products import _maps as maps
from lidmelt.products._maps._figure import make_map_figure
from lidmelt.products._maps._layout import choose_projection
from lidmelt.products._maps._overlays import load_stations
from lidmelt.products._maps._overview import draw_overview, make_overview_figure
from lidmelt.products._maps._style import NODATA_COLOR, OUTSIDE_COLOR, ZERO_COLOR
from lidmelt.products._profile_figure import make_profile_figure
from lidmelt.products._profiles import sample_track

# Invented low-latitude box, 1 degree cells: lon 10..40, lat -10..10.
BOX = Affine(1.0, 0.0, 10.0, 0.0, -1.0, 10.0)
PLUMES = [
    {"name": "Invented A", "longitude": 15.0, "latitude": 0.0, "radius_km": 200.0},
    {"name": "Invented B", "longitude": 39.5, "latitude": 9.5, "radius_km": 100.0},
]
SUMMARY = {
    "inputs": {
        "plate_age_ma": {"units": "Ma", "file": "input_plate_age_ma.tif"},
        "thermal_anomaly_k": {
            "units": "K",
            "file": "input_thermal_anomaly_k.tif",
            "plumes": PLUMES,
        },
        "water_wt_pct": {"units": "wt%", "constant": 0.01, "source": None},
    },
    "cooling": {"name": "half-space", "lid_isotherm_c": 1100.0},
    "min_top_of_melting_km": 7.0,
}


def fields():
    y, x = np.mgrid[0:20, 0:30]
    melt = np.where(x >= 15, 0.2 * (x - 14), 0.0)
    onset = np.where(melt > 0, 80.0 + 5.0 * (x - 15), 70.0)  # defined where nothing melts too
    onset[0, 29] = 250.0  # one deep plume core
    excess = 10.0 * (x - 10.0) - 40.0  # -140 .. 150 K, zero at x = 14
    lid = 7.0 + 2.0 * x
    return {
        "melt_thickness_km": melt,
        "onset_depth_km": onset,
        "excess_to_melt_k": excess,
        "melting_top_km": lid,
        "plate_age_ma": 1.0 + 3.0 * x + 0.0 * y,
        "thermal_anomaly_k": np.exp(-((x - 5) ** 2 + (y - 10) ** 2) / 20.0) * 200.0,
    }


@pytest.fixture
def run(make_run_dir):
    return make_run_dir(fields(), transform=BOX, name="proposal", summary=SUMMARY)


def test_excess_to_melt_is_diverging_about_zero_with_its_zero_contour(run):
    _fig, info = make_map_figure(run, "excess_to_melt_k", coastlines=False, dpi=50)
    values = fields()["excess_to_melt_k"]
    # Check value: symmetric limits at the larger magnitude of numpy's 2nd/98th percentiles.
    lo, hi = np.percentile(values, [2, 98])
    assert (info.vmin, info.vmax) == pytest.approx((-max(-lo, hi), max(-lo, hi)))
    assert info.cmap == "RdBu_r"
    assert info.zero_contour
    assert "0 (zero contour)" in info.legend_labels
    assert "symmetric about 0" in info.caption


def test_onset_depth_spans_its_whole_range_and_is_not_drawn_where_nothing_melts(run):
    _fig, info = make_map_figure(run, "onset_depth_km", coastlines=False, dpi=50)
    f = fields()
    melting = f["onset_depth_km"][f["melt_thickness_km"] > 0]
    # Check values: numpy min and max of the melting cells (80 km and the 250 km core); the
    # 70 km of the cells that do not melt is not part of the scale.
    assert (info.vmin, info.vmax) == pytest.approx((melting.min(), melting.max()))
    assert info.zero_color == ZERO_COLOR
    assert "not defined there and is not drawn" in info.caption


def test_colorbar_label_does_not_double_its_parenthesis(run):
    _fig, info = make_map_figure(run, "melt_thickness_km", coastlines=False, dpi=50)
    assert info.title == "Melt thickness (column-integrated melt fraction)"
    assert info.colorbar_label == "Melt thickness (km)"
    assert info.colorbar_label.count("(") == 1


def test_plumes_ranks_and_labels_stay_inside_the_frame(run, tmp_path):
    import geopandas as gpd
    from shapely.geometry import box

    cands = tmp_path / "cands.gpkg"
    gpd.GeoDataFrame(
        {"rank": [2, 1]}, geometry=[box(30, -5, 39.9, 5), box(16, -8, 24, -2)], crs="EPSG:4326"
    ).to_file(cands)
    stations = tmp_path / "st.csv"
    stations.write_text("name,lon,lat\nA station with a long name,39.8,9.8\n", encoding="utf-8")
    fig, info = make_map_figure(
        run, "melt_thickness_km", candidates=cands, stations=stations, coastlines=False, dpi=60
    )
    assert info.plumes == ("Invented A", "Invented B")
    assert "plume centre (workflow)" in info.legend_labels
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    frame = info.ax.get_window_extent(renderer)
    texts = {t.get_text(): t for t in info.ax.texts}
    for name in ("Invented A", "Invented B", "#1", "#2", "A station with a long name"):
        box_ = texts[name].get_window_extent(renderer)
        assert frame.x0 - 1 <= box_.x0, name
        assert box_.x1 <= frame.x1 + 1, name
        assert frame.y0 - 1 <= box_.y0, name
        assert box_.y1 <= frame.y1 + 1, name


def test_latitude_labels_on_both_sides(run):
    fig, info = make_map_figure(run, "melting_top_km", coastlines=False, dpi=50)
    fig.canvas.draw()
    gl = info.gridliner
    left = [a.get_text() for a in gl.left_label_artists if a.get_visible()]
    right = [a.get_text() for a in gl.right_label_artists if a.get_visible()]
    assert left
    assert right
    assert set(left) == set(right)
    # Check value: a 20 degree span on a ~5 in high map gets 5 degree lines (nice_step rule),
    # so at least three latitudes (5 S, 0, 5 N) are labelled.
    assert len(left) >= 3


def test_outside_of_the_grid_differs_from_nodata_and_is_said(run):
    _fig, info = make_map_figure(
        run, "melt_thickness_km", region=(0.0, 50.0, -20.0, 20.0), coastlines=False, dpi=40
    )
    assert info.outside_grid
    assert "outside the grid" in info.legend_labels
    assert "outside the grid" in info.caption
    assert OUTSIDE_COLOR != NODATA_COLOR
    _fig, inside = make_map_figure(run, "melt_thickness_km", coastlines=False, dpi=40)
    assert not inside.outside_grid


def test_caption_states_lid_water_and_ambient_as_used(make_run_dir):
    f = fields()
    lid = np.full((20, 30), np.nan)
    lid[:, :15] = 50.0  # the lid-thickness grid covers half the cells
    f["lid_thickness_km"] = lid
    inputs = {
        **SUMMARY["inputs"],
        "lid_thickness_km": {"units": "km", "file": "input_lid_thickness_km.tif"},
    }
    run = make_run_dir(f, transform=BOX, name="lidgrid", summary={**SUMMARY, "inputs": inputs})
    _fig, info = make_map_figure(run, "melt_thickness_km", coastlines=False, dpi=40)
    # Check value: 15 of 30 columns -> 50 % of the cells from the grid, the rest from cooling.
    assert "lid-thickness grid where it has data (50 % of the cells)" in info.caption
    assert "half-space cooling" in info.caption
    assert "source water 0.01 wt % (constant)" in info.caption
    assert "7 km deep (crust base)" in info.caption


def test_regional_basin_across_the_equator_is_not_in_a_world_projection():
    # An invented 60 x 40 degree basin from 32 S to 8 N (centre 12 S, beyond 30 deg, so neither
    # Mercator nor conic): rule 5 of lidmelt.products._maps._layout, no longer Robinson.
    proj, reason = choose_projection((-60.0, 0.0, -32.0, 8.0))
    assert isinstance(proj, ccrs.LambertAzimuthalEqualArea)
    assert "regional" in reason


def test_overview_has_its_panels_labels_and_vector_copies(run, tmp_path):
    fig, info = make_overview_figure(run, coastlines=False, dpi=60)
    assert info.variables == (
        "plate_age_ma",
        "thermal_anomaly_k",
        "melt_thickness_km",
        "onset_depth_km",
        "excess_to_melt_k",
        "melting_top_km",
    )
    assert info.colorbar_labels[2] == "Melt thickness (km)"
    onset = fields()["onset_depth_km"][fields()["melt_thickness_km"] > 0]
    assert info.limits[3] == pytest.approx((onset.min(), onset.max()))  # as the single map
    assert info.limits[4][0] == pytest.approx(-info.limits[4][1])  # diverging about 0
    texts = " ".join(t.get_text() for t in fig.texts)
    assert "(a) Plate age" in texts
    assert "(f) Top of the melting column" in texts
    assert "source water 0.01 wt %" in info.caption
    paths = draw_overview(run, out_dir=tmp_path, coastlines=False)
    assert [p.name for p in paths] == ["overview.png", "overview.pdf", "overview.svg"]
    png = mpimg.imread(paths[0])
    # Check value: 7.2 in at the 300 dpi default = 2160 pixels wide.
    assert png.shape[1] == 2160
    assert paths[1].read_bytes()[:5] == b"%PDF-"
    assert b"<svg" in paths[2].read_bytes()[:2000]


def test_profile_is_a_cross_section_with_named_waypoints(run, tmp_path):
    track = tmp_path / "leg_7.csv"
    track.write_text("name,lon,lat\nStart,12,0\nTurn,25,5\nEnd,38,-5\n", encoding="utf-8")
    gdf = sample_track(run, track, spacing_km=25.0)
    stations = load_stations(_station_file(tmp_path))
    fig = make_profile_figure(
        gdf,
        title="Profile along leg 7",
        waypoint_names=["Start", "Turn", "End"],
        stations=stations,
        run=maps._figure.as_run(run),
    )
    top, mid, section = fig.axes[0], fig.axes[1], fig.axes[2]
    assert section.yaxis_inverted()  # depth downward
    assert section.get_ylabel() == "Depth below the seafloor (km)"
    assert mid.get_ylabel() == "Melt thickness (km)"
    assert top.get_ylabel() == "Plate age (Ma)"
    legend = [t.get_text() for t in section.get_legend().get_texts()]
    assert "top of the melting column (lid, geotherm or crust base)" in legend
    assert "melting column" in legend
    labels = [t.get_text() for ax in fig.axes for t in ax.texts]
    assert {"Start", "Turn", "End"} <= set(labels)
    assert any(t.startswith("Near station") for t in labels)
    assert "Profile along leg 7" in [t.get_text() for t in fig.texts]
    assert any(t.get_text().startswith("Track (red)") for t in fig.texts)  # the inset's title
    # issue 20: the inset has labelled axes and a colour bar, and no two lines share a colour
    inset = next(ax for ax in fig.axes if ax.get_xlabel() == "Longitude")
    assert inset.get_ylabel() == "Latitude"
    assert any(ax.get_ylabel() == "Melt thickness (km)" and ax is not mid for ax in fig.axes)
    twin = [ax for ax in fig.axes if ax is not top and ax.bbox.bounds == top.bbox.bounds]
    colours = [line.get_color() for ax in (top, *twin, section) for line in ax.get_lines()]
    colours = [c for c in colours if c not in ("0.45",)]  # the dotted waypoint verticals
    assert len(colours) == len(set(colours)), colours
    # every text of the figure lies inside it
    fig.canvas.draw()
    page = fig.bbox
    for text in fig.texts:
        box_ = text.get_window_extent()
        assert page.x0 <= box_.x0, text.get_text()
        assert box_.x1 <= page.x1, text.get_text()
        assert box_.y1 <= page.y1, text.get_text()


def test_colour_bars_label_both_ends_of_their_scale(run):
    """Check values: the colour limits the map reports (vmin, vmax) are tick positions."""
    for name in ("melt_thickness_km", "onset_depth_km", "excess_to_melt_k", "melting_top_km"):
        _, info = make_map_figure(run, name, coastlines=False, dpi=60)
        ticks = list(info.colorbar.get_ticks())
        assert ticks[0] == pytest.approx(info.vmin), name
        assert ticks[-1] == pytest.approx(info.vmax), name
        labels = [t.get_text() for t in info.colorbar.ax.get_xticklabels()]
        assert labels[0], name
        assert labels[-1], name


def test_thermal_anomaly_scale_resolves_every_plume(run):
    """The anomaly input spans its whole range (numpy's min and max of the invented field), so
    a 200 K plume core is not drawn in the colour of a 135 K flank."""
    _, info = make_map_figure(run, "thermal_anomaly_k", coastlines=False, dpi=60)
    field = fields()["thermal_anomaly_k"]
    assert (info.vmin, info.vmax) == pytest.approx((field.min(), field.max()), rel=1e-6)
    assert info.extend == "neither"


def test_onset_flags_are_not_hatched_on_the_lid_or_the_excess(run, add_validity_flag):
    """Flag 4 (onset beyond calibration) concerns the onset and the melt, not the lid (the
    lid does not depend on the onset) nor the excess to melt (found at the lid)."""
    from lidmelt.physics._flags import FLAG_BEYOND_CALIBRATION

    flags = np.zeros((20, 30), dtype=np.uint8)
    flags[5:8, 20:25] = FLAG_BEYOND_CALIBRATION
    add_validity_flag(run, flags)
    for name, hatched in (
        ("onset_depth_km", True),
        ("melt_thickness_km", True),
        ("melting_top_km", False),
        ("excess_to_melt_k", False),
    ):
        _, info = make_map_figure(run, name, coastlines=False, dpi=60)
        assert (FLAG_BEYOND_CALIBRATION in info.flag_bits) is hatched, name


def test_labels_of_plumes_stations_and_candidates_do_not_overlap(run, tmp_path):
    """Station names at the plume centres and a candidate's rank beside them: after placement
    no two labels overlap (their rendered boxes) and all stay inside the frame."""
    import geopandas as gpd
    from shapely.geometry import box

    from lidmelt.products._maps._labels import label_overlaps

    cands = tmp_path / "cands.gpkg"
    gpd.GeoDataFrame({"rank": [1]}, geometry=[box(15.0, -2.0, 20.0, 0.5)], crs="EPSG:4326").to_file(
        cands
    )
    stations = tmp_path / "st.csv"
    stations.write_text(
        "name,lon,lat\nInvented A summit,15.1,0.1\nInvented A flank,15.6,-0.4\n"
        "Invented B summit,39.4,9.4\n",
        encoding="utf-8",
    )
    fig, info = make_map_figure(
        run, "melt_thickness_km", candidates=cands, stations=stations, coastlines=False, dpi=60
    )
    fig.canvas.draw()
    names = {"Invented A", "Invented B", "#1", "Invented A summit", "Invented A flank",
             "Invented B summit"}  # fmt: skip
    labels = [t for t in info.ax.texts if t.get_text() in names]
    assert len(labels) == len(names)
    assert label_overlaps(info.ax, labels) == 0
    frame = info.ax.get_window_extent()
    for label in labels:
        box_ = label.get_window_extent()
        assert frame.contains(box_.x0 + 1, box_.y0 + 1), label.get_text()
        assert frame.contains(box_.x1 - 1, box_.y1 - 1), label.get_text()


def test_plume_marks_leave_the_hatching_beneath_them_visible(run):
    """The plume mark is an open ring (no face), so flagged cells under it show their hatch."""
    from lidmelt.products._maps._marks import PLUME_MARKER

    assert PLUME_MARKER["mfc"] == "none"
    _, info = make_map_figure(run, "melt_thickness_km", coastlines=False, dpi=60)
    rings = [line for line in info.ax.get_lines() if line.get_marker() == "o"]
    assert rings
    assert all(line.get_markerfacecolor() == "none" for line in rings)


def _station_file(tmp_path):
    path = tmp_path / "stations.csv"
    path.write_text("name,lon,lat\nNear station,25.1,5.1\nFar station,12,9\n", encoding="utf-8")
    return path


def test_anomaly_melt_map_draws_tails_below_the_least_amount_as_no_added_melt(make_run_dir):
    """Cells below the registry's least anomaly melt (Variable.negligible_below) are drawn in
    the "no added melt" class and do not set the colour scale; the file keeps them."""
    from lidmelt._variables import OUTPUTS
    from lidmelt.products._maps._field import open_field
    from lidmelt.products._maps._options import MapOptions, resolve_options

    least = OUTPUTS["anomaly_melt_thickness_km"].negligible_below
    added = np.zeros((20, 30))
    added[:, 20:] = 3.0  # melt the anomaly adds
    added[:, 10:20] = 1e-7  # a numerical tail
    added[:5, 10:20] = 0.5 * least  # below the least amount
    run = make_run_dir(
        {"melt_thickness_km": added + 1.0, "anomaly_melt_thickness_km": added},
        transform=BOX,
        name="tails",
    )
    _, info = make_map_figure(run, "anomaly_melt_thickness_km", coastlines=False, dpi=60)
    assert f"no added melt (< {least:g} km)" in info.legend_labels
    assert "no melting" not in info.legend_labels  # ambient mantle melts there: not "none"
    as_run = maps._figure.as_run(run)
    field = open_field(as_run, "anomaly_melt_thickness_km", resolve_options(as_run, MapOptions()))
    assert field.no_melt[:, 10:20].all()  # tails drawn as none
    assert not field.no_melt[:, 20:].any()
    kept = np.asarray(as_run.open("anomaly_melt_thickness_km").values)
    assert np.count_nonzero((kept > 0) & (kept < least)) == 200  # the file keeps the tails
