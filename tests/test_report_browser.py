"""The report as people see it: rendered by a real headless browser (Debian's chromium).

A copy of report.html gets a small script that checks, after layout, that every image has
decoded (``naturalWidth > 0``) and that no element reaches beyond the page width, and writes
the findings into the DOM; ``chromium --headless --dump-dom`` returns that DOM. The report
itself loads no script (tested in test_report.py); only the test's copy carries one. Skipped,
with its reason, where chromium is not installed (.ci/run installs it).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from affine import Affine

from browserkit import CHROMIUM, run_probe
from conftest import reseal
from lidmelt.products._report._write import write_report

pytestmark = pytest.mark.skipif(
    CHROMIUM is None, reason="chromium is not installed (apt-get install -y chromium)"
)

_PROBE = """
<script>
window.addEventListener("load", () => {
  const width = document.documentElement.clientWidth;
  const images = Array.from(document.images).map(
    (img) => ({alt: img.alt, ok: img.complete && img.naturalWidth > 0, w: img.naturalWidth}));
  const wide = [];
  for (const el of document.body.querySelectorAll("*")) {
    const r = el.getBoundingClientRect();
    if (r.width > 0 && r.right > width + 1) {
      wide.push(el.tagName + (el.id ? "#" + el.id : "") + " right=" + Math.round(r.right));
    }
  }
  const tables = Array.from(document.querySelectorAll("table")).map((t) => {
    const r = t.getBoundingClientRect();
    const box = t.parentElement.getBoundingClientRect();
    return {right: Math.round(r.right), container: Math.round(box.right),
            scroll: t.scrollWidth, client: t.clientWidth,
            overflow: getComputedStyle(t).overflowX};
  });
  const out = {width: width, scrollWidth: document.documentElement.scrollWidth,
               images: images, wide: wide, tables: tables};
  const pre = document.createElement("pre");
  pre.id = "probe-result";
  pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
});
</script>
"""


def _render(html_path, tmp_path, width):
    probe = tmp_path / f"probe_{width}.html"
    text = html_path.read_text(encoding="utf-8").replace("</body>", _PROBE + "</body>")
    probe.write_text(text, encoding="utf-8")
    return run_probe(probe, tmp_path, width, budget_ms=5000, timeout=120)


@pytest.fixture
def report_html(make_run_dir, tmp_path):
    melt = np.zeros((20, 30))
    melt[5:15, 10:20] = 4.0
    melt[:, :3] = np.nan
    age = np.tile(np.linspace(10.0, 80.0, 30), (20, 1))
    run = make_run_dir(
        {
            "melt_thickness_km": melt,
            "onset_depth_km": np.where(melt > 0, 90.0, np.nan),
            "plate_age_ma": age,
        },
        transform=Affine(1.0, 0.0, 10.0, 0.0, -1.0, 10.0),
        summary={
            "workflow": "[run]\nname = '" + "a-very-long-unbroken-name" * 12 + "'\n",
            "statistics": {
                "data_cells": 540,
                "melting_cells": 100,
                "anomaly_melt_volume_km3": 4.6e6,
                "ambient_melt_volume_km3": 1.0e7,
                "melt_volume_km3": 1.46e7,
                "regime_cells": {"0": 440, "1": 100, "2": 0},
            },
        },
    )
    doc = json.loads((run / "summary.json").read_text(encoding="utf-8"))
    doc["inputs"]["plate_age_ma"]["source"] = "/data/" + "a-long-folder-name/" * 12 + "age.nc"
    reseal(run, inputs=doc["inputs"])
    stations = tmp_path / "stations.csv"
    stations.write_text(
        "name,lon,lat\nA station with a long descriptive name,15.2,4.8\nB,22.7,0.5\n",
        encoding="utf-8",
    )
    return write_report(run, coastlines=False, stations=stations)


@pytest.mark.parametrize("width", [1280, 600])
def test_report_renders_in_a_browser_with_decoded_images_and_no_overflow(
    report_html, tmp_path, width
):
    result = _render(report_html, tmp_path, width)
    # Check values: the report embeds one map per output and input here (3 PNGs) and the
    # stations' map, and a page that fits has scrollWidth == clientWidth (CSSOM View,
    # scrollWidth definition).
    assert len(result["images"]) == 4
    assert all(img["ok"] for img in result["images"]), result["images"]
    assert result["wide"] == [], result["wide"]
    assert result["scrollWidth"] <= result["width"]
    # every table fits its container, or scrolls inside it (CSS overflow-x: auto)
    assert len(result["tables"]) >= 5
    for table in result["tables"]:
        assert table["right"] <= table["container"] + 1, table
        if table["scroll"] > table["client"]:
            assert table["overflow"] in ("auto", "scroll"), table
