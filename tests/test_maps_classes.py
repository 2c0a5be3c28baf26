"""Tests of the maps' validity-flag hatching and the styles of the issue-11 outputs.

The melting regime (categorical classes), melt production and the anomaly melt thickness, with
flags from ``validity_flag.tif``. Fields are small invented grids written with the
``make_run_dir`` and ``make_flag_grid`` fixtures; check values are named beside each check.
"""

from __future__ import annotations

import cartopy.crs as ccrs
import numpy as np
import pytest
from affine import Affine
from matplotlib.collections import QuadMesh
from matplotlib.colors import to_rgb

from lidmelt._variables import OUTPUTS
from lidmelt.products._maps._figure import make_map_figure
from lidmelt.products._maps._style import NODATA_COLOR, REGIME_CLASSES, ZERO_COLOR
from lidmelt.products._maps._write import draw_run_maps

# An invented low-latitude box, 1 degree cells from 10 E, 10 N.
BOX = Affine(1.0, 0.0, 10.0, 0.0, -1.0, 10.0)


@pytest.fixture
def blocks_run(make_run_dir):
    """30 x 20 cells: NaN (lon 10-20), zero melt (lon 20-30), 5 km (lon 30-40)."""
    melt = np.zeros((20, 30))
    melt[:, :10] = np.nan
    melt[:, 20:] = 5.0
    return make_run_dir({"melt_thickness_km": melt}, transform=BOX, name="blocks")


def hatches_of(ax):
    """The hatch patterns of every artist on the map axes (None for unhatched artists)."""
    return [c.get_hatch() for c in ax.get_children() if hasattr(c, "get_hatch") and c.get_hatch()]


def drawn_colours(ax):
    """RGB (0-1) of every cell of the data layer as drawn (the map's pcolormesh)."""
    mesh = next(c for c in ax.collections if isinstance(c, QuadMesh))
    rgba = mesh.to_rgba(mesh.get_array())
    return np.asarray(rgba)[..., :3].reshape(*mesh.get_array().shape, 3)


@pytest.fixture
def new_outputs(monkeypatch):
    """The issue-11 outputs in the registry, as their specification names them (added only
    where the registry does not know them yet)."""
    from lidmelt import _variables as variables

    specs = (
        variables.Variable(
            name="anomaly_melt_thickness_km",
            units="km",
            long_name="melt thickness added by the thermal anomaly",
            style="melt",
            zero_means_no_melt=True,
        ),
        variables.Variable(
            name="melting_regime", units="1", long_name="melting regime", style="regime"
        ),
        variables.Variable(
            name="melt_production_mm_yr",
            units="mm/yr",
            long_name="melt production",
            style="production",
        ),
    )
    for spec in specs:
        if spec.name not in variables.VARIABLES:
            monkeypatch.setitem(variables.VARIABLES, spec.name, spec)
            monkeypatch.setitem(variables.OUTPUTS, spec.name, spec)


def test_flagged_cells_are_hatched_with_a_legend_entry(blocks_run, make_flag_grid):
    from lidmelt.physics._flags import FLAG_BEYOND_CALIBRATION, FLAG_NO_ONSET, FLAG_WATER_SATURATED

    flags = np.zeros((20, 30), dtype=np.uint8)
    flags[:, :10] = 255  # the NaN block: no data
    flags[5:10, 22:27] = FLAG_BEYOND_CALIBRATION  # a block inside the 5 km melt
    flags[12:14, 22:24] = FLAG_NO_ONSET | FLAG_BEYOND_CALIBRATION
    make_flag_grid(blocks_run, flags, transform=BOX)
    fig, info = make_map_figure(blocks_run, "melt_thickness_km", dpi=50, coastlines=False)
    # Check values: the bits the test set (4 and 2; not 8), in the order of MARKED_FLAGS.
    assert info.flag_bits == (FLAG_BEYOND_CALIBRATION, FLAG_NO_ONSET)
    assert FLAG_WATER_SATURATED not in info.flag_bits
    assert "beyond calibration (flagged)" in info.legend_labels
    assert "no solidus crossing (flagged)" in info.legend_labels
    assert not any("free water" in label for label in info.legend_labels)
    # Each kind is drawn twice (white halo, dark line) with its own pattern.
    assert sorted(set(hatches_of(info.ax))) == sorted({"///", "\\\\\\"})
    # Caption: the cell counts by construction (25 + 4 cells carry bit 4; 4 carry bit 2).
    assert "validity flag 4, 29 cells" in info.caption
    assert "validity flag 2, 4 cells" in info.caption
    # The hatching is over the data: inside the flagged block the pixels are no longer all
    # the one colour of 5 km (the hatch lines are dark and white).
    fig.canvas.draw()
    rgba = np.asarray(fig.canvas.buffer_rgba())[..., :3].astype(float)
    x, y = info.ax.projection.transform_point(34.5, 2.5, ccrs.PlateCarree())
    px, py = info.ax.transData.transform((x, y))
    row, col = round(rgba.shape[0] - py), round(px)
    inside = rgba[row - 5 : row + 6, col - 5 : col + 6].reshape(-1, 3)
    assert inside.std(axis=0).max() > 20.0  # lines over a uniform colour
    # Outside the flags and clear of graticule lines (the 5 km block at 37.5 E, 7.5 S) the
    # colour stays uniform (identity).
    x, y = info.ax.projection.transform_point(37.5, -7.5, ccrs.PlateCarree())
    px, py = info.ax.transData.transform((x, y))
    row, col = round(rgba.shape[0] - py), round(px)
    outside = rgba[row - 5 : row + 6, col - 5 : col + 6].reshape(-1, 3)
    assert outside.std(axis=0).max() < 1.0


def test_no_hatching_without_flags(blocks_run, make_flag_grid):
    # No flag grid at all (the fixture writes none): nothing hatched, no legend entry.
    _, info = make_map_figure(blocks_run, "melt_thickness_km", dpi=40, coastlines=False)
    assert info.flag_bits == ()
    assert hatches_of(info.ax) == []
    assert not any("flagged" in label for label in info.legend_labels)
    # A flag grid with no marked bit (0 = valid, 1 = invalid input is nodata already).
    flags = np.zeros((20, 30), dtype=np.uint8)
    flags[:, :10] = 1
    make_flag_grid(blocks_run, flags, transform=BOX)
    _, info = make_map_figure(blocks_run, "melt_thickness_km", dpi=40, coastlines=False)
    assert info.flag_bits == ()
    assert hatches_of(info.ax) == []
    # flags=False turns the hatching off.
    flags[0, 25] = 4
    make_flag_grid(blocks_run, flags, transform=BOX)
    _, info = make_map_figure(
        blocks_run, "melt_thickness_km", dpi=40, coastlines=False, flags=False
    )
    assert info.flag_bits == ()


def regime_fields():
    """Columns of 8 cells from lon 10 to 50: nodata, regime 0, 1, 2, 3 (the registry's classes)."""
    regime = np.zeros((20, 40))
    regime[:, :8] = np.nan
    for value in (1, 2, 3):
        regime[:, 8 * (value + 1) : 8 * (value + 2)] = float(value)
    melt = np.where(regime > 0, 3.0, 0.0)
    melt[:, :8] = np.nan
    production = np.where(regime > 0, 2.0 * regime, 0.0)
    production[:, :8] = np.nan
    return {
        "melt_thickness_km": melt,
        "anomaly_melt_thickness_km": np.where(regime >= 2, melt, 0.0),
        "melting_regime": regime,
        "melt_production_mm_yr": production,
    }


def test_melting_regime_is_drawn_as_classes_with_a_legend(make_run_dir, new_outputs):
    run = make_run_dir(regime_fields(), transform=BOX, name="regime")
    fig, info = make_map_figure(run, "melting_regime", dpi=60, coastlines=False)
    assert info.categorical
    assert info.colorbar is None
    assert info.colorbar_label == ""
    assert len(fig.axes) == 1  # the map only: no colour-bar axes
    for item in REGIME_CLASSES:
        assert item.label in info.legend_labels
    assert "no data" in info.legend_labels
    assert "classes named in the legend" in info.caption
    # Check values: white for no melting (as in the other maps); blue #0072B2, reddish purple
    # #CC79A7 and vermillion #D55E00 from the colour-blind safe palette of Okabe & Ito (2008);
    # nodata grey #c8c8c8. The legend's texts are the registry's class labels.
    expected = {
        22.0: "#ffffff", 30.0: "#0072B2", 38.0: "#CC79A7", 46.0: "#D55E00",
        14.0: NODATA_COLOR,
    }  # fmt: skip
    assert [c.label for c in REGIME_CLASSES] == [c.label for c in OUTPUTS["melting_regime"].classes]
    colours = drawn_colours(info.ax)
    for lon, colour in expected.items():
        got = colours[10, int(lon - 10.0)]  # row 10 = lat -0.5; column = whole degrees from 10 E
        assert np.allclose(got, to_rgb(colour), atol=0.01), (lon, got)


def test_melt_production_style_is_sequential_with_no_melting_white(make_run_dir, new_outputs):
    run = make_run_dir(regime_fields(), transform=BOX, name="production")
    _, info = make_map_figure(run, "melt_production_mm_yr", dpi=60, coastlines=False)
    # Check values: the documented style (plasma, sequential), 0 = no melting drawn white.
    assert info.cmap == "plasma"
    assert not info.categorical
    assert info.colorbar is not None
    assert info.vmin == 0.0
    assert info.zero_color == ZERO_COLOR
    assert "no melting" in info.legend_labels
    assert np.allclose(drawn_colours(info.ax)[10, 15], 1.0)  # 25 E, regime 0: white
    assert info.colorbar_label.startswith("Melt production")


def test_run_maps_include_the_anomaly_melt_and_the_regime(make_run_dir, new_outputs):
    run = make_run_dir(regime_fields(), transform=BOX, name="all")
    paths = draw_run_maps(run, dpi=30, width_in=4.0, coastlines=False)
    names = [p.stem for p in paths]
    assert "anomaly_melt_thickness_km" in names
    assert "melting_regime" in names
    assert "melt_production_mm_yr" in names
    assert all(p.is_file() for p in paths)
