"""The interactive map page as people use it: in a real headless browser (Debian's chromium).

A copy of explore.html gets two small scripts: one in the head that records script errors,
rejected promises and every request the page's Content-Security-Policy blocks; one at the end
that waits for the page to be drawn, moves the pointer over a known cell (a synthetic
``pointermove`` at the cell's centre, as the page places it), reads the readout table, the
canvas pixel there and a hash of the canvas, switches the layer with the page's own select
element, zooms with the "+" button and reads the cell again. It writes its findings into the
DOM; ``chromium --headless --dump-dom`` returns that DOM. Skipped, with its reason, where
chromium is not installed (as tests/test_report_browser.py).
"""

from __future__ import annotations

import base64
import io
import json
import re

import matplotlib.image as mpimg
import numpy as np
import pytest
import rasterio
from affine import Affine

from browserkit import CHROMIUM, run_probe
from conftest import write_validity_flag
from lidmelt.products._maps._explore import write_explore_page

pytestmark = pytest.mark.skipif(
    CHROMIUM is None, reason="chromium is not installed (apt-get install -y chromium)"
)

#: The known cell (row, column) the tests read: melting, flagged 4 | 8.
CELL = (6, 12)

_HEAD = """<script>
window.__probe = {errors: [], blocked: []};
window.addEventListener("error", (e) => window.__probe.errors.push(String(e.message)));
window.addEventListener("unhandledrejection", (e) => window.__probe.errors.push(String(e.reason)));
document.addEventListener("securitypolicyviolation",
  (e) => window.__probe.blocked.push(e.blockedURI + " " + e.violatedDirective));
</script>"""

_PROBE = """<script>
(async () => {
  const out = {};
  try {
    const api = window.lidmeltExplore;
    await api.ready;
    const canvas = document.getElementById("map"), ctx = canvas.getContext("2d");
    const ratio = window.devicePixelRatio || 1;
    const pixel = (at) => {
      const b = canvas.getBoundingClientRect();
      const x = Math.floor((at.x - b.left) * ratio), y = Math.floor((at.y - b.top) * ratio);
      return Array.from(ctx.getImageData(x, y, 1, 1).data);
    };
    const hash = () => {
      const d = ctx.getImageData(0, 0, canvas.width, canvas.height).data;
      let h = 0;
      for (let i = 0; i < d.length; i++) h = (Math.imul(h, 31) + d[i]) >>> 0;
      return h;
    };
    const read = (row, col) => {
      const at = api.cellCentre(row, col);
      canvas.dispatchEvent(new PointerEvent("pointermove",
        {clientX: at.x, clientY: at.y, bubbles: true}));
      const where = document.getElementById("where");
      return {
        at: at, pixel: pixel(at), row: where.dataset.row, col: where.dataset.col,
        where: where.textContent, hash: hash(),
        values: Array.from(document.querySelectorAll("#values tr")).map((tr) => (
          {name: tr.dataset.name, value: tr.dataset.value, text: tr.textContent,
           active: tr.className === "active"})),
        flags: Array.from(document.querySelectorAll("#flags li")).map((li) => li.textContent),
      };
    };
    out.before = read(%(row)d, %(col)d);
    const next = api.nextDraw();
    const select = document.getElementById("layer");
    select.value = "onset_depth_km";
    select.dispatchEvent(new Event("change"));
    await next;
    out.after = read(%(row)d, %(col)d);
    out.legend = document.getElementById("legend").textContent;
    document.getElementById("zoom-in").click();
    out.zoomed = read(%(row)d, %(col)d);
    document.getElementById("fit").click();
    out.nodata = read(2, 1);
    out.dry = read(2, 5);
    out.resources = performance.getEntriesByType("resource").map((e) => e.name);
    out.width = document.documentElement.clientWidth;
    out.scrollWidth = document.documentElement.scrollWidth;
    out.canvasWidth = canvas.clientWidth;
  } catch (e) {
    out.failure = String((e && e.stack) || e);
  }
  out.errors = window.__probe.errors;
  out.blocked = window.__probe.blocked;
  const pre = document.createElement("pre");
  pre.id = "probe-result";
  pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
})();
</script>"""


def _render(page, tmp_path, width):
    text = page.read_text(encoding="utf-8")
    head = '<meta name="viewport"'
    text = text.replace(head, _HEAD + head, 1)
    text = text.replace("</body>", _PROBE % {"row": CELL[0], "col": CELL[1]} + "</body>")
    probe = tmp_path / f"probe_{width}.html"
    probe.write_text(text, encoding="utf-8")
    return run_probe(probe, tmp_path, width, budget_ms=10000, timeout=180)


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    from conftest import write_run_dir

    # Invented fields on a 1 degree grid from 10 E, 10 N.
    root = tmp_path_factory.mktemp("explore")
    rng = np.random.default_rng(3)
    melt = np.zeros((20, 30))
    melt[5:15, 10:20] = rng.uniform(0.5, 9.0, (10, 10))
    melt[:, :3] = np.nan
    onset = np.where(melt > 0, rng.uniform(60.0, 120.0, melt.shape), np.nan)
    run = write_run_dir(
        root / "run",
        {"melt_thickness_km": melt, "onset_depth_km": onset},
        transform=Affine(1.0, 0.0, 10.0, 0.0, -1.0, 10.0),
        summary={"inputs": {"thermal_anomaly_k": {"plumes": [
            {"name": "P", "longitude": 15.5, "latitude": 4.5}]}}},
    )  # fmt: skip
    flags = np.where(np.isnan(melt), 255, 0).astype(np.uint8)
    flags[CELL] = 4 | 8
    write_validity_flag(run, flags)
    return run, write_explore_page(run)


def _geotiff(path):
    with rasterio.open(path) as src:
        return src.read(1)


def _png_pixel(page, layer, row, col):
    text = page.read_text(encoding="utf-8")
    data = json.loads(re.search(r'id="lidmelt-data">(.*?)</script>', text, re.S).group(1))
    uri = next(entry["image"] for entry in data["layers"] if entry["name"] == layer)
    image = mpimg.imread(io.BytesIO(base64.b64decode(uri.split(",", 1)[1])), format="png")
    return [round(float(v) * 255) for v in image[row, col]]


@pytest.mark.parametrize("width", [1280, 600])
def test_page_loads_offline_switches_layers_and_reads_the_geotiff_values(page, tmp_path, width):
    run, html = page
    result = _render(html, tmp_path, width)
    assert "failure" not in result, result.get("failure")
    assert result["errors"] == []
    assert result["blocked"] == []  # no request attempted (the CSP would block and report it)
    # Resource Timing lists every fetch the page made; data: URLs are not fetches
    assert [r for r in result["resources"] if not r.startswith("data:")] == []
    assert result["scrollWidth"] <= result["width"]  # fits the viewport (CSSOM View)
    assert result["canvasWidth"] <= width
    row, col = CELL
    melt = _geotiff(run / "melt_thickness_km.tif")
    onset = _geotiff(run / "onset_depth_km.tif")
    for state in ("before", "after", "zoomed"):
        seen = result[state]
        assert (int(seen["row"]), int(seen["col"])) == CELL, seen["where"]
        values = {v["name"]: v for v in seen["values"]}
        # the readout is the GeoTIFF's float32 value at the cell, exactly
        assert float(values["melt_thickness_km"]["value"]) == float(melt[row, col])
        assert float(values["onset_depth_km"]["value"]) == float(onset[row, col])
        assert values["melt_thickness_km"]["text"].endswith(" km")
        assert len(seen["flags"]) == 2
        assert seen["flags"][0].startswith("bit 4: ")
        assert seen["flags"][1].startswith("bit 8: ")
    before, after = result["before"], result["after"]
    assert before["values"][0]["active"]
    assert after["values"][1]["active"]
    # the canvas shows the layer's own colour at the cell the readout reads (aligned), and
    # the switch changes the image
    assert before["pixel"] == _png_pixel(html, "melt_thickness_km", row, col)
    assert after["pixel"] == _png_pixel(html, "onset_depth_km", row, col)
    assert before["hash"] != after["hash"]
    assert "Onset" in result["legend"] or "onset" in result["legend"]
    # a cell without data (column 1) and a cell that does not melt (0 km, onset undefined)
    nodata = {v["name"]: v["text"] for v in result["nodata"]["values"]}
    assert nodata == {"melt_thickness_km": "melt_thickness_kmno data",
                      "onset_depth_km": "onset_depth_kmno data"}  # fmt: skip
    assert result["nodata"]["flags"] == ["no input data"]
    dry = {v["name"]: v["text"] for v in result["dry"]["values"]}
    assert dry == {"melt_thickness_km": "melt_thickness_km0 km (no melting)",
                   "onset_depth_km": "onset_depth_kmno melting"}  # fmt: skip
    assert result["dry"]["flags"] == ["no flag set (valid cell)"]
    # zooming moves the cell on the screen; the readout still reads the same cell
    assert result["zoomed"]["at"] != after["at"]
    assert result["zoomed"]["pixel"] == after["pixel"]
