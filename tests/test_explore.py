"""The interactive map page (maps/explore.html): what it embeds, checked without a browser.

The page's data block is parsed back from the HTML and decoded as the page's script does
(base64, zlib, little-endian float32 / uint8); the values are compared with the GeoTIFFs read
by rasterio, cell by cell. The page in a browser: tests/test_explore_browser.py.
"""

from __future__ import annotations

import base64
import io
import json
import math
import re
import zlib

import matplotlib.image as mpimg
import numpy as np
import pytest
import rasterio
from affine import Affine
from matplotlib.colors import to_rgb

from conftest import write_validity_flag
from lidmelt.cli import main
from lidmelt.products._maps._explore import page_data, write_explore_page
from lidmelt.products._maps._explore_data import display_stride

# Check values below: the colours are the documented constants of products/_maps/_style.py
# (nodata "#c8c8c8", no melting "#ffffff").
NODATA_RGB = to_rgb("#c8c8c8")
WHITE = (1.0, 1.0, 1.0)
HOSTILE = '</script><script>alert("x")</script><b>&amp;'


def read_data(page):
    """The page's data block, parsed as the browser's JSON.parse would."""
    text = page.read_text(encoding="utf-8")
    match = re.search(
        r'<script type="application/json" id="lidmelt-data">(.*?)</script>', text, re.S
    )
    assert match, "no data block"
    return json.loads(match.group(1)), text


def unpack(b64, dtype):
    return np.frombuffer(zlib.decompress(base64.b64decode(b64)), dtype=dtype)


def geotiff(path):
    with rasterio.open(path) as src:
        return src.read(1)


@pytest.fixture
def run(make_run_dir, tmp_path):
    # Invented fields on a 1 degree grid from 10 E, 10 N (west to east, north to south).
    rng = np.random.default_rng(7)
    melt = np.zeros((20, 30))
    melt[5:15, 10:20] = rng.uniform(0.5, 9.0, (10, 10))
    melt[:, :3] = np.nan
    onset = np.where(melt > 0, rng.uniform(60.0, 120.0, melt.shape), np.nan)
    regime = np.where(np.isnan(melt), np.nan, np.where(melt > 0, 3.0, 0.0))
    path = make_run_dir(
        {"melt_thickness_km": melt, "onset_depth_km": onset, "melting_regime": regime},
        transform=Affine(1.0, 0.0, 10.0, 0.0, -1.0, 10.0),
        summary={"inputs": {"thermal_anomaly_k": {"plumes": [
            {"name": "Plume <i>one</i>", "longitude": 15.5, "latitude": 4.5}]}}},
        name="run<b>",
    )  # fmt: skip
    flags = np.where(np.isnan(melt), 255, 0).astype(np.uint8)
    flags[6, 12] = 4 | 8  # beyond calibration and water saturated
    write_validity_flag(path, flags)
    (path / "stations.csv").write_text(f"name,lon,lat\n{HOSTILE},22.5,0.5\nB,12.5,8.5\n")
    return path


def test_page_embeds_every_layer_with_the_geotiff_values_and_flags(run):
    page = write_explore_page(run)
    assert page == run / "maps" / "explore.html"
    data, _ = read_data(page)
    names = [layer["name"] for layer in data["layers"]]
    assert names == ["melt_thickness_km", "onset_depth_km", "melting_regime"]
    assert data["frame"]["stride"] == 1
    for layer in data["layers"]:
        expected = geotiff(run / f"{layer['name']}.tif")
        values = unpack(layer["values"], "<f4").reshape(expected.shape)
        # bit for bit, NaN where the GeoTIFF has nodata
        np.testing.assert_array_equal(values, expected)
    flags = unpack(data["flags"]["values"], np.uint8).reshape(20, 30)
    np.testing.assert_array_equal(flags, geotiff(run / "validity_flag.tif"))
    assert flags[6, 12] == 12
    assert {"4", "8"} <= set(data["flags"]["meanings"])


def test_layer_images_use_the_static_maps_colours(run):
    data, _ = read_data(write_explore_page(run))
    melt_layer = data["layers"][0]
    png = base64.b64decode(melt_layer["image"].split(",", 1)[1])
    image = mpimg.imread(io.BytesIO(png), format="png")
    assert image.shape[:2] == (20, 30)
    melt = geotiff(run / "melt_thickness_km.tif")
    assert np.allclose(image[0, 0, :3], NODATA_RGB, atol=1 / 255)  # column 0: nodata
    assert np.allclose(image[0, 5, :3], WHITE, atol=1 / 255)  # 0 km: no melting
    # a melting cell: viridis at its place on the scale 0 .. 99.5th percentile of the melting
    # cells (the melt style documented in products/_maps/_style.py), 256 colours
    melt = melt.astype(float)
    top = np.percentile(melt[melt > 0], 99.5)
    assert melt_layer["legend"]["vmin"] == 0.0
    assert math.isclose(melt_layer["legend"]["vmax"], top, rel_tol=1e-9)
    row, col = 7, 13
    index = min(int(melt[row, col] / top * 256), 255)
    from matplotlib import colormaps

    expected = colormaps["viridis"].resampled(256)(index)[:3]
    assert np.allclose(image[row, col, :3], expected, atol=1.5 / 255)
    # the regime is categorical: its classes from the registry, no colour scale
    regime = data["layers"][2]["legend"]
    assert [c["value"] for c in regime["classes"]] == [0, 1, 2, 3]


def test_marks_are_placed_on_their_cells(run):
    data, _ = read_data(write_explore_page(run))
    marks = data["marks"]
    # 1 degree cells from 10 E, 10 N: column = lon - 10, row = 10 - lat (worked by hand)
    assert marks["plumes"] == [{"name": "Plume <i>one</i>", "col": 5.5, "row": 5.5}]
    assert [(s["col"], s["row"]) for s in marks["stations"]] == [(12.5, 9.5), (2.5, 1.5)]
    assert marks["stations"][0]["name"] == HOSTILE
    assert marks["candidates"] == []
    assert marks["tracks"] == []


def test_every_string_from_the_run_is_escaped_and_nothing_is_loaded(run):
    _, text = read_data(write_explore_page(run))
    # the hostile station name cannot close the data block or open a tag
    assert "<script><script>" not in text
    assert 'alert("x")' not in text.replace("\\u003c", "<").split("lidmelt-data")[0]
    assert text.count("</script>") == 2  # the data block and the page's own script
    assert "<b>" not in text
    assert "<i>" not in text
    assert "run&lt;b&gt;" in text  # the run folder's name in the title, escaped
    # no reference to anything outside: no src or href attribute, no URL scheme
    markup = text.split('<script type="application/json"')[0]
    assert not re.search(r"\b(src|href|url)\s*[=(]", markup, re.I)
    assert "http:" not in text
    assert "https:" not in text
    data, _ = read_data(run / "maps" / "explore.html")  # images only as data: URLs
    assert all(layer["image"].startswith("data:image/png;base64,") for layer in data["layers"])
    assert "default-src 'none'" in text


def test_large_grids_are_shown_every_stride_th_cell(run):
    # worked by hand for a 2' global grid (5400 x 10800) with 15 layers and 6 million values:
    # s = 12 gives 450 * 900 * 15 = 6,075,000 > 6e6; s = 13 gives 416 * 831 * 15 = 5,185,440
    assert display_stride(5400, 10800, 15, 6_000_000) == 13
    assert display_stride(20, 30, 3, 6_000_000) == 1
    from lidmelt.grids._rundir import RunDir

    data = page_data(RunDir(run), budget=3 * 7 * 10)  # 20 x 30 with 3 layers: stride 3
    frame = data["frame"]
    assert (frame["stride"], frame["offset"], frame["rows"], frame["cols"]) == (3, 1, 7, 10)
    melt = geotiff(run / "melt_thickness_km.tif")
    values = unpack(data["layers"][0]["values"], "<f4").reshape(7, 10)
    np.testing.assert_array_equal(values, melt[1::3, 1::3])
    page = run / "maps" / "small.html"
    from lidmelt.products._maps._explore import render_page

    page.parent.mkdir(exist_ok=True)
    page.write_text(render_page(RunDir(run), data), encoding="utf-8")
    assert "one cell per 3 x 3 block (10 x 7 cells" in page.read_text(encoding="utf-8")


def test_lidmelt_map_explore_writes_the_page(run, tmp_path, capsys):
    out = tmp_path / "pages"
    assert main(["map", str(run), "--explore", "-o", str(out)]) == 0
    assert capsys.readouterr().out.strip() == str(out / "explore.html")
    data, _ = read_data(out / "explore.html")
    assert len(data["layers"]) == 3
    with pytest.raises(SystemExit):
        main(["map", "--help"])
    assert "--explore" in capsys.readouterr().out
