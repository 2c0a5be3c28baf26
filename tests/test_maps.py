"""Tests of lidmelt.products._maps: figure size, colours, overlays, offline safety, CLI errors.

Fields are small invented grids written with the ``make_run_dir`` fixture. Check values come
from independent sources named beside them: matplotlib's colour tables, numpy's percentile,
arithmetic identities, the rule documented in the module, or common practice.
"""

from __future__ import annotations

import logging
import socket
import time
import urllib.request

import cartopy
import cartopy.crs as ccrs
import matplotlib.image as mpimg
import numpy as np
import pytest
from affine import Affine
from matplotlib import colormaps
from matplotlib.colors import to_rgb
from matplotlib.text import Text

from lidmelt._errors import InputError
from lidmelt.cli import main
from lidmelt.products._maps._figure import make_map_figure
from lidmelt.products._maps._layout import check_region, choose_projection, make_projection
from lidmelt.products._maps._overlays import COASTLINE_RELPATH, find_coastlines, load_stations
from lidmelt.products._maps._style import (
    NODATA_COLOR,
    STYLES,
    ZERO_COLOR,
    colour_limits,
    encode_classes,
    style_for,
)
from lidmelt.products._maps._write import draw_map, draw_run_maps

# An invented low-latitude box, 1 degree cells: lon 10..40, lat -10..10.
BOX = Affine(1.0, 0.0, 10.0, 0.0, -1.0, 10.0)


def blocks_field():
    """30 x 20 cells: NaN (lon 10-20), zero (lon 20-30), 5 km (lon 30-40)."""
    melt = np.zeros((20, 30))
    melt[:, :10] = np.nan
    melt[:, 20:] = 5.0
    return melt


def basin_fields(nx=400, ny=300):
    """An invented basin: a disc of melt, onset depths, an age gradient and a NaN margin."""
    y, x = np.mgrid[0:ny, 0:nx]
    r = np.hypot(x - 0.55 * nx, y - 0.5 * ny) / (0.2 * ny)
    melt = np.clip(10.0 * (1.0 - r**2), 0.0, None)
    onset = np.where(melt > 0, 60.0 + 50.0 * (1.0 - r), np.nan)
    age = 5.0 + 100.0 * x / nx
    margin = x < 0.08 * nx + 10 * np.sin(y / 20.0)
    out = {"melt_thickness_km": melt, "onset_depth_km": onset, "plate_age_ma": age}
    for v in out.values():
        v[margin] = np.nan
    return out


@pytest.fixture
def basin_run(make_run_dir):
    # 0.075 deg cells from 40W, 15S: a mid-latitude invented basin.
    return make_run_dir(basin_fields(), transform=Affine(0.075, 0, -40.0, 0, -0.075, -15.0))


@pytest.fixture
def blocks_run(make_run_dir):
    onset = np.full((20, 30), np.nan)
    onset[:, 20:] = 80.0
    return make_run_dir(
        {"melt_thickness_km": blocks_field(), "onset_depth_km": onset}, transform=BOX, name="blocks"
    )


def pixel_at(fig, ax, lon, lat, half=2):
    """Median RGB (0-255) of a small patch around (lon, lat) in the drawn figure."""
    fig.canvas.draw()
    rgba = np.asarray(fig.canvas.buffer_rgba())
    x, y = ax.projection.transform_point(lon, lat, ccrs.PlateCarree())
    px, py = ax.transData.transform((x, y))
    row, col = int(rgba.shape[0] - py), int(px)  # the pixel that holds the point
    patch = rgba[row - half : row + half + 1, col - half : col + half + 1, :3].reshape(-1, 3)
    return np.median(patch, axis=0)


# 1. Reference values -------------------------------------------------------------------------


def test_png_has_requested_pixel_size_and_is_not_blank(blocks_run, tmp_path):
    # Check value: a figure width_in wide saved at dpi has width_in * dpi pixels (matplotlib's
    # definition of dpi; 4 in x 50 dpi = 200 px). Not blank: a single-colour image has zero
    # variance (identity); a map with data, grey nodata and text has far more than 100.
    out = draw_map(
        blocks_run,
        "melt_thickness_km",
        path=tmp_path / "m.png",
        dpi=50,
        width_in=4.0,
        coastlines=False,
    )
    img = mpimg.imread(out)
    assert img.shape[1] == 200
    fig, _ = make_map_figure(
        blocks_run, "melt_thickness_km", dpi=50, width_in=4.0, coastlines=False
    )
    assert img.shape[0] == round(fig.get_size_inches()[1] * 50)  # not cropped ("tight")
    assert np.var(img[..., :3] * 255.0) > 100.0


def test_pixel_size_at_publication_settings(blocks_run, tmp_path):
    # Check value: 3.5 in x 300 dpi = 1050 px (a one-column journal figure, common practice).
    out = draw_map(
        blocks_run,
        "melt_thickness_km",
        path=tmp_path / "m.png",
        dpi=300,
        width_in=3.5,
        coastlines=False,
    )
    assert mpimg.imread(out).shape[1] == 1050


def test_nodata_zero_melt_and_melt_colours_differ(blocks_run):
    fig, info = make_map_figure(
        blocks_run, "melt_thickness_km", coastlines=False, dpi=80, width_in=6.0
    )
    nodata = pixel_at(fig, info.ax, 13.3, 2.3)
    zero = pixel_at(fig, info.ax, 23.3, 2.3)
    melt = pixel_at(fig, info.ax, 33.3, 2.3)
    # Nodata is the documented neutral light grey (r = g = b), within rounding.
    np.testing.assert_allclose(nodata, np.array(to_rgb(NODATA_COLOR)) * 255, atol=2)
    assert np.ptp(nodata) <= 2
    # Zero melt must be visibly different from nodata (common practice: > 40 of 255 in RGB).
    assert np.linalg.norm(zero - nodata) > 40
    # The 5 km block is the top of the scale (vmax = top percentile of a constant 5 km):
    # matplotlib's own viridis table gives its colour (independent of lidmelt).
    np.testing.assert_allclose(melt, np.array(colormaps["viridis"](1.0)[:3]) * 255, atol=3)
    assert np.linalg.norm(zero - melt) > 40
    assert info.zero_color == ZERO_COLOR


def test_undefined_onset_depth_where_no_melting_is_not_nodata(blocks_run):
    fig, info = make_map_figure(
        blocks_run, "onset_depth_km", coastlines=False, dpi=80, width_in=6.0
    )
    nodata = pixel_at(fig, info.ax, 13.3, 2.3)  # melt thickness NaN too: no data
    no_melt = pixel_at(fig, info.ax, 23.3, 2.3)  # melt thickness 0: no melting
    np.testing.assert_allclose(nodata, np.array(to_rgb(NODATA_COLOR)) * 255, atol=2)
    assert np.linalg.norm(no_melt - nodata) > 40


def test_colour_limits_are_robust_percentiles():
    # Check value: for 0, 1, ..., 100 the 2nd and 98th percentiles (linear interpolation) are
    # 2 and 98 (identity of an arithmetic sequence); numpy.percentile agrees independently.
    values = np.arange(101.0)
    vmin, vmax, extend = colour_limits(values)
    assert (vmin, vmax) == pytest.approx((2.0, 98.0))
    assert (vmin, vmax) == pytest.approx(tuple(np.percentile(values, [2, 98])))
    assert extend == "both"
    with_nan = np.concatenate([values, [np.nan] * 50])
    assert colour_limits(with_nan)[:2] == pytest.approx((2.0, 98.0))


def test_colour_limits_of_melt_start_at_zero():
    # Melt amounts: 0 to the 99.5th percentile of the positive values (documented rule);
    # positives 1..100 -> 99.5th percentile 99.505 (numpy.percentile, linear).
    values = np.concatenate([np.zeros(500), np.arange(1.0, 101.0)])
    vmin, vmax, extend = colour_limits(values, zero_is_no_melt=True)
    assert vmin == 0.0
    assert vmax == pytest.approx(np.percentile(np.arange(1.0, 101.0), 99.5))
    assert extend == "max"


def test_colour_limits_follow_the_region(make_run_dir):
    # Invented field: 100 Ma west of 25 E, a 1..2 Ma ramp east of it. With --region over the
    # ramp only, the limits are numpy's 2nd/98th percentiles of the ramp cells alone. (Plate
    # age keeps the 2-98 percentile rule; the excess to melt, used here before issue 14, is
    # now diverging and symmetric: see test_excess_to_melt_is_diverging_about_zero.)
    values = np.full((20, 30), 100.0)
    ramp = np.tile(np.linspace(1.0, 2.0, 15), (20, 1))
    values[:, 15:] = ramp
    run = make_run_dir({"plate_age_ma": values}, transform=BOX, name="ramp")
    _, info = make_map_figure(
        run, "plate_age_ma", region=(25.2, 40.0, -10.0, 10.0), coastlines=False, dpi=40
    )
    assert (info.vmin, info.vmax) == pytest.approx(tuple(np.percentile(ramp, [2, 98])))


# 2. Limits and identities --------------------------------------------------------------------


def test_constant_field_gets_a_valid_window():
    vmin, vmax, extend = colour_limits(np.full(10, 7.0))
    assert vmin < 7.0 < vmax
    assert extend == "neither"


def test_one_sixth_rule_standard_parallels():
    # Check value: S = 30, N = 60 -> 30 + 30/6 = 35 and 60 - 30/6 = 55 (arithmetic of the
    # one-sixth rule; Snyder 1987, from memory).
    proj, _ = choose_projection((-20.0, 10.0, 30.0, 60.0))
    assert isinstance(proj, ccrs.LambertConformal)
    assert float(proj.proj4_params["lat_1"]) == pytest.approx(35.0)
    assert float(proj.proj4_params["lat_2"]) == pytest.approx(55.0)


@pytest.mark.parametrize(
    ("region", "expected"),
    [
        ((150.0, 170.0, -10.0, 12.0), ccrs.Mercator),  # |lat| <= 30: low latitudes
        ((-40.0, -10.0, -37.5, -15.0), ccrs.LambertConformal),  # mid latitude, 30 deg wide
        ((-80.0, 20.0, 30.0, 60.0), ccrs.AlbersEqualArea),  # mid latitude, 100 deg wide
        ((-180.0, 180.0, -90.0, -60.0), ccrs.SouthPolarStereo),  # centre latitude -75
        ((-60.0, 60.0, 60.0, 85.0), ccrs.NorthPolarStereo),  # centre latitude 72.5
        ((-180.0, 180.0, -90.0, 90.0), ccrs.Robinson),  # global
        ((0.0, 360.0, -70.0, 70.0), ccrs.Robinson),  # all longitudes
    ],
)
def test_automatic_projection_rule(region, expected):
    # Check values: the rule in the module docstring (issue 5 spec: Mercator for low
    # latitudes, conic for mid latitudes, polar stereographic near the poles, Robinson global).
    proj, reason = choose_projection(region)
    assert type(proj) is expected
    assert "automatic" in reason


def test_projection_by_name_is_case_insensitive_and_centred():
    proj, name = make_projection("mercator", (150.0, 170.0, -10.0, 10.0))
    assert isinstance(proj, ccrs.Mercator)
    assert name == "Mercator"
    assert float(proj.proj4_params["lon_0"]) == pytest.approx(160.0)  # (150 + 170) / 2


# 3. Shapes, overlays and projections ------------------------------------------------------


def test_projected_grid_uses_its_footprint(make_run_dir):
    # An invented 400 km square around the South Pole in EPSG:3031: the automatic rule gives a
    # south polar stereographic map.
    values = np.full((40, 40), 3.0)
    run = make_run_dir(
        {"melt_thickness_km": values},
        crs="EPSG:3031",
        transform=Affine(10000.0, 0, -200000.0, 0, -10000.0, 200000.0),
    )
    _fig, info = make_map_figure(run, "melt_thickness_km", coastlines=False, dpi=50)
    assert "south polar" in info.projection
    # Check value: the grid's x extent (+-200 km in EPSG:3031, true scale at 71 S) converted
    # by pyproj into the map projection (true scale at the pole): the extent is the grid's.
    import pyproj

    tr = pyproj.Transformer.from_crs("EPSG:3031", info.ax.projection.proj4_init, always_xy=True)
    xs, _ = tr.transform([-200000.0, 200000.0], [0.0, 0.0])
    x0, x1 = info.ax.get_xlim()
    assert x1 - x0 == pytest.approx(xs[1] - xs[0], rel=1e-3)


def test_overlays_are_drawn(basin_run, tmp_path):
    import geopandas as gpd
    from shapely.geometry import Polygon

    stations = tmp_path / "stations.csv"
    stations.write_text("Name,Lon,Lat\nA,-30,-20\nB,-25,-26\nC,-15,-30\n", encoding="utf-8")
    cands = tmp_path / "cands.gpkg"
    gpd.GeoDataFrame(
        {"id": [1, 2]},
        geometry=[
            Polygon([(-27, -24), (-22, -24), (-22, -28), (-27, -28)]),
            Polygon([(-15, -18), (-12, -18), (-13, -21)]),
        ],
        crs="EPSG:4326",
    ).to_file(cands)
    _fig, info = make_map_figure(
        basin_run,
        "melt_thickness_km",
        stations=stations,
        candidates=cands,
        age_contours=True,
        coastlines=False,
        dpi=60,
    )
    assert info.n_stations == 3  # rows in the file
    assert info.n_candidates == 2  # polygons in the file
    # The age field runs 5..105 Ma (invented); contour levels lie strictly inside it.
    assert info.age_levels
    assert all(5.0 < level < 105.0 for level in info.age_levels)
    labels = [t.get_text() for t in info.ax.texts]
    assert {"A", "B", "C"} <= set(labels)


def test_station_file_without_lon_lat_columns_is_rejected(tmp_path):
    bad = tmp_path / "s.csv"
    bad.write_text("name,easting,northing\nA,1,2\n", encoding="utf-8")
    with pytest.raises(InputError, match="longitude column"):
        load_stations(bad)


def test_coastlines_from_a_local_file_are_drawn(basin_run, tmp_path, monkeypatch, caplog):
    import geopandas as gpd
    from shapely.geometry import LineString

    # A pre-existing cartopy data tree holding an (invented) ne_110m_coastline.shp.
    root = tmp_path / "cartopy-data"
    shp = root / COASTLINE_RELPATH
    shp.parent.mkdir(parents=True)
    gpd.GeoDataFrame(
        {"id": [1]}, geometry=[LineString([(-27.3, -14), (-27.3, -40)])], crs="EPSG:4326"
    ).to_file(shp)
    monkeypatch.setenv("CARTOPY_DATA_DIR", str(root))
    assert find_coastlines() == shp
    with caplog.at_level(logging.WARNING, logger="lidmelt.products._maps"):
        fig, info = make_map_figure(basin_run, "melt_thickness_km", dpi=60)
    assert info.coastlines == shp
    assert not [r for r in caplog.records if "coastline" in r.getMessage()]
    # The line at 27.3 W is drawn in black over the white (no melt) part of the basin; the
    # same pixel is light without it.
    assert pixel_at(fig, info.ax, -27.3, -17.0, half=0).max() < 128
    bare, bare_info = make_map_figure(basin_run, "melt_thickness_km", dpi=60, coastlines=False)
    assert pixel_at(bare, bare_info.ax, -27.3, -17.0, half=0).min() > 200


def test_all_text_lies_inside_the_figure(basin_run, tmp_path):
    # Common practice: a publication figure must not cut off any label.
    stations = tmp_path / "s.csv"
    stations.write_text("name,lon,lat\nST-1,-11,-20\n", encoding="utf-8")
    for width in (3.5, 8.0):
        fig, info = make_map_figure(
            basin_run,
            "onset_depth_km",
            stations=stations,
            age_contours=True,
            coastlines=False,
            dpi=100,
            width_in=width,
        )
        fig.canvas.draw()
        renderer = fig.canvas.get_renderer()
        texts = [t for t in fig.findobj(Text) if t.get_visible() and t.get_text().strip()]
        texts += [t for t in info.gridliner.label_artists if t.get_visible()]
        assert len(texts) > 10
        box = fig.bbox
        for text in texts:
            ext = text.get_window_extent(renderer)
            where = (width, text.get_text())
            assert ext.x0 >= box.x0 - 1, where
            assert ext.x1 <= box.x1 + 1, where
            assert ext.y0 >= box.y0 - 1, where
            assert ext.y1 <= box.y1 + 1, where


def test_render_time_of_a_400_by_300_grid(basin_run, tmp_path):
    # Budget from the issue: a 400 x 300 grid map in well under 3 s.
    make_map_figure(basin_run, "melt_thickness_km", coastlines=False, dpi=30)  # warm-up
    start = time.perf_counter()
    draw_map(basin_run, "melt_thickness_km", path=tmp_path / "m.png", coastlines=False)
    assert time.perf_counter() - start < 3.0


# 4. Metadata: colour bar, caption, files -----------------------------------------------------


def test_colorbar_label_has_long_name_and_unit(blocks_run):
    _fig, info = make_map_figure(blocks_run, "melt_thickness_km", coastlines=False, dpi=50)
    drawn = info.colorbar.ax.get_xlabel()
    assert drawn == info.colorbar_label
    assert "(km)" in drawn  # the run's unit for melt_thickness_km
    assert "Melt thickness" in drawn


def test_title_and_caption_name_model_and_ambient_temperature(make_run_dir):
    run = make_run_dir(
        {"melt_thickness_km": blocks_field()},
        transform=BOX,
        summary={
            "model": {"name": "invented_model", "parameters": {}, "reference": "none"},
            "ambient_potential_temperature_c": 1333.0,
        },
    )
    fig, info = make_map_figure(run, "melt_thickness_km", coastlines=False, dpi=50)
    texts = " ".join(t.get_text() for t in fig.texts).replace("\n", " ")
    assert "invented_model" in texts
    assert "1333 °C" in texts
    assert "no melting" in info.caption
    assert "grey: no data" in info.caption


def test_run_maps_default_folder_formats_and_no_temp_files(blocks_run):
    paths = draw_run_maps(blocks_run, fmt="svg", dpi=40, width_in=4.0, coastlines=False)
    assert [p.name for p in paths] == ["melt_thickness_km.svg", "onset_depth_km.svg"]
    assert all(p.parent == blocks_run / "maps" for p in paths)
    assert b"<svg" in paths[0].read_bytes()[:2000]
    pdf = draw_run_maps(
        blocks_run, fmt="pdf", variables=["onset_depth_km"], dpi=40, width_in=4.0, coastlines=False
    )
    assert pdf[0].read_bytes()[:5] == b"%PDF-"  # PDF magic number (ISO 32000-1, 7.5.2)
    names = sorted(p.name for p in (blocks_run / "maps").iterdir())
    assert names == ["melt_thickness_km.svg", "onset_depth_km.pdf", "onset_depth_km.svg"]


def test_every_registered_variable_has_a_map_style():
    # The style keys of lidmelt._variables all have an entry in the presentation registry, and
    # each variable keeps the colour map and no-melt classes the module docstring documents
    # (depths and pressures cividis_r, melt viridis, melt fraction plasma; the excess to melt
    # diverging RdBu_r since issue 14, which asks for a diverging scale for signed quantities).
    from lidmelt._variables import VARIABLES

    assert {v.style for v in VARIABLES.values()} <= set(STYLES)
    documented = {
        "melt_thickness_km": ("viridis", True, False),
        "onset_depth_km": ("cividis_r", False, True),
        "onset_pressure_gpa": ("cividis_r", False, True),
        # the top of melting is nodata where a column meets its geotherm nowhere and does not
        # melt (the geotherm rule, docs/physics.md "One mantle beneath the lid")
        "melting_top_km": ("cividis_r", False, True),
        "max_melt_fraction": ("plasma", True, False),
        "mean_melt_pressure_gpa": ("cividis_r", False, True),
        "excess_to_melt_k": ("RdBu_r", False, False),
        "plate_age_ma": ("viridis", False, False),
        "lid_thickness_km": ("cividis_r", False, False),
        "thermal_anomaly_k": ("inferno", False, False),
        "water_wt_pct": ("cividis", False, False),
    }
    for name, expected in documented.items():
        style = style_for(name)
        assert (style.cmap, style.zero_is_no_melt, style.nan_is_no_melt) == expected, name
        assert style.title == VARIABLES[name].title
    assert style_for("not_registered_k").cmap == "viridis"


# Offline safety ------------------------------------------------------------------------------


def test_nothing_tries_to_download(blocks_run, tmp_path, monkeypatch, caplog):
    calls = []

    def refuse(*args, **kwargs):
        calls.append(args)
        raise OSError("network access attempted in a test")

    monkeypatch.setattr(urllib.request, "urlopen", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)
    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setenv("CARTOPY_DATA_DIR", str(tmp_path / "empty"))
    with caplog.at_level(logging.WARNING, logger="lidmelt.products._maps"):
        paths = draw_run_maps(blocks_run, out_dir=tmp_path / "maps", dpi=40)
    assert len(paths) == 2
    assert all(p.is_file() for p in paths)
    assert calls == []
    # Exactly one note about the missing coastlines per command, not one per map.
    notes = [r for r in caplog.records if "coastline" in r.getMessage()]
    assert len(notes) == 1
    # Cartopy's downloaders are gone: asking for Natural Earth data fails at once.
    assert not cartopy.config["downloaders"]
    import cartopy.feature as cfeature

    with pytest.raises(ValueError, match="downloadable"):
        list(cfeature.COASTLINE.geometries())
    assert calls == []


# 5. Errors -----------------------------------------------------------------------------------


def test_unknown_projection_lists_valid_names():
    with pytest.raises(InputError, match=r"Valid names: .*Robinson"):
        make_projection("Mercatorr", (0.0, 10.0, 0.0, 10.0))


@pytest.mark.parametrize(
    "region", [(10.0, 0.0, 0.0, 10.0), (0.0, 10.0, 10.0, 0.0), (0.0, 10.0, -95.0, 0.0)]
)
def test_bad_region_is_rejected(region):
    with pytest.raises(InputError, match="expected"):
        check_region(region)


def test_cli_unknown_variable(blocks_run, capsys):
    assert main(["map", str(blocks_run), "--variable", "melt_thickness"]) == 1
    err = capsys.readouterr().err
    assert "'melt_thickness' is not in run" in err
    assert "melt_thickness_km" in err  # the valid names are listed


def test_cli_unknown_projection(blocks_run, capsys):
    assert main(["map", str(blocks_run), "--projection", "Flatland"]) == 1
    err = capsys.readouterr().err
    assert "unknown projection 'Flatland'" in err
    assert "LambertConformal" in err
    assert not (blocks_run / "maps").exists()  # checked before any figure is drawn


def test_cli_missing_stations_file(blocks_run, tmp_path, capsys):
    missing = tmp_path / "nowhere.csv"
    assert main(["map", str(blocks_run), "--stations", str(missing)]) == 1
    err = capsys.readouterr().err
    assert "stations file" in err
    assert "does not exist" in err


def test_cli_missing_coastline_file(blocks_run, tmp_path, capsys):
    assert main(["map", str(blocks_run), "--coastlines", str(tmp_path / "c.shp")]) == 1
    assert "coastlines file" in capsys.readouterr().err


def test_cli_writes_maps(blocks_run, tmp_path, capsys):
    out = tmp_path / "figs"
    status = main(
        [
            "map",
            str(blocks_run),
            "--variable",
            "melt_thickness_km",
            "--dpi",
            "40",
            "--width-in",
            "5",
            "--region",
            "12",
            "38",
            "-8",
            "8",
            "-o",
            str(out),
        ]
    )
    assert status == 0
    png = out / "melt_thickness_km.png"
    assert str(png) in capsys.readouterr().out
    assert mpimg.imread(png).shape[1] == 200  # 5 in x 40 dpi


def test_values_at_or_below_the_lower_limit_get_the_first_scale_colour():
    # identity of the class encoding: a value clipped to vmin must draw the colour map's first
    # colour, never the "no melting" or nodata class colours (a half-bin offset keeps it clear)
    import matplotlib as mpl

    # limits where a value exactly at vmin landed on the edge of the "no melting" bin (seen on a
    # demo excess-to-melt map); any limits must work, these are the ones that once failed
    vmin, vmax = -210.17019073486327, 126.78192291259765
    values = np.array([[vmin - 5.0, vmin, vmax, np.nan]])
    out, cmap, norm = encode_classes(values, mpl.colormaps["inferno"], vmin, vmax, None)
    colours = cmap(norm(out))[0]
    first, last = mpl.colormaps["inferno"].resampled(256)([0.0, 1.0])
    np.testing.assert_allclose(colours[0], first)
    np.testing.assert_allclose(colours[1], first)
    np.testing.assert_allclose(colours[2], last)
    np.testing.assert_allclose(colours[3][:3], mpl.colors.to_rgb(NODATA_COLOR))


def test_deep_melt_share_has_a_fixed_scale_from_0_to_1():
    # lidmelt choice (products/maps/style.py, key "share"): a share of the melt is drawn on
    # fixed limits 0 and 1 (its definition's range, docs/physics.md "How much is extrapolation"),
    # so that maps of runs compare and an all-zero map is not stretched to +-1e-7
    from lidmelt.products._maps._style import style_for

    style = style_for("deep_melt_share")
    assert style.limits == (0.0, 1.0)
    assert style.nan_is_no_melt  # NaN without melt (the registry's undefined_without_melt)
