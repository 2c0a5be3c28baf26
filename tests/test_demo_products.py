"""The demo run's products as a new user meets them (issue 20): one report, volumes, README image.

One ``lidmelt run workflows/demo.toml`` (the invented demo basin, with maps and report) into a
temporary folder; check values are the report's own structure (its sections and images, read
back from the page), the definition of the ambient volume (total minus anomaly-added, docs of
lidmelt._statistics) and the stamp that ``lidmelt map --overview`` writes into a PNG.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from lidmelt.cli import main

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[1]
README_IMAGE = ROOT / "docs" / "images" / "overview.png"
REGENERATE = (
    "lidmelt run workflows/demo.toml && lidmelt map runs/demo --overview --format png "
    "-o docs/images"
)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "demo"
    assert main(["run", str(ROOT / "workflows" / "demo.toml"), "-o", str(out), "--quiet"]) == 0
    return out


def _images(page: str) -> list[str]:
    return re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)


def _sections(page: str) -> list[tuple[str, str]]:
    return re.findall(r'<section id="([^"]+)"><h2>([^<]+)</h2>', page)


def test_the_run_report_has_the_overview_and_input_maps_and_no_staging_path(demo, capsys):
    page = (demo / "report.html").read_text(encoding="utf-8")
    images = _images(page)
    # overview, 8 output maps (onset pressure repeats onset depth), plate age, thermal anomaly
    assert len(images) >= 11
    captions = re.findall(r"<figcaption>([^<]*)</figcaption>", page)
    assert captions[0].startswith("Overview")
    assert any("plate_age_ma" in c for c in captions)
    assert any("thermal_anomaly_k" in c for c in captions)
    for path in [demo / "report.html", demo / "summary.json", *sorted(demo.glob("maps/*.svg"))]:
        assert "staging" not in path.read_text(encoding="utf-8", errors="replace"), path


def test_lidmelt_report_writes_the_report_the_run_wrote(demo, tmp_path, capsys):
    again = tmp_path / "again.html"
    assert main(["report", str(demo), "-o", str(again)]) == 0
    run_page = (demo / "report.html").read_text(encoding="utf-8")
    report_page = again.read_text(encoding="utf-8")
    assert _images(report_page) == _images(run_page)  # the same images, byte for byte
    assert _sections(report_page) == _sections(run_page)
    assert 'id="contents"' in run_page
    assert 'id="contents"' in report_page
    warned = bool(json.loads((demo / "summary.json").read_text(encoding="utf-8"))["warnings"])
    # the warnings section is there exactly when the run warned, in both pages
    assert ('id="warnings"' in run_page) == warned == ('id="warnings"' in report_page)


def test_summary_has_the_anomaly_ambient_and_total_volumes(demo, capsys):
    stats = json.loads((demo / "summary.json").read_text(encoding="utf-8"))["statistics"]
    volumes = [k for k in stats if k.endswith("_volume_km3")]
    assert volumes == ["anomaly_melt_volume_km3", "ambient_melt_volume_km3", "melt_volume_km3"]
    # the ambient volume is the total minus the anomaly-added one (its definition)
    assert stats["ambient_melt_volume_km3"] == pytest.approx(
        stats["melt_volume_km3"] - stats["anomaly_melt_volume_km3"], rel=1e-12
    )
    assert 0 < stats["anomaly_melt_volume_km3"] < stats["melt_volume_km3"]


def test_readme_overview_image_shows_the_current_demo_run(demo):
    """The README's image carries the stamp of the run it was drawn from; a change of the
    physics (or of the demo) changes the demo's statistics, and this fails until the image is
    drawn again with the command the README names."""
    from PIL import Image

    from lidmelt.grids._rundir import open_run
    from lidmelt.products._maps._overview import run_stamp
    from lidmelt.products._maps._write import STAMP_KEY

    with Image.open(README_IMAGE) as image:
        stamp = image.text.get(STAMP_KEY)
    fresh = run_stamp(open_run(demo).summary)
    assert stamp == fresh, f"docs/images/overview.png is out of date; redraw it: {REGENERATE}"
    assert "overview --format png -o" in (ROOT / "README.md").read_text(encoding="utf-8")
