"""Tests of lidmelt.products._report: content, provenance, escaping, self-containment, PDF, CLI.

The run directories are small invented grids from the ``make_run_dir`` fixture; the summary
values are the test's own inputs, so every check value is "what the summary says" (the report
must carry it unchanged) or a file-format constant named beside it.
"""

from __future__ import annotations

import base64
import io
import json
import os
import re
import socket
import time
import urllib.request

import cartopy.crs  # noqa: F401 - required (pyproject): a missing one fails, never skips
import matplotlib.image as mpimg
import numpy as np
import pytest
from affine import Affine

from conftest import reseal
from lidmelt._errors import InputError, RunDirError
from lidmelt.cli import main
from lidmelt.products._report._content import format_sig, format_value
from lidmelt.products._report._write import REPORT_MAP_DPI, REPORT_MAP_WIDTH_IN, write_report

BOX = Affine(1.0, 0.0, 10.0, 0.0, -1.0, 10.0)  # invented: 1 deg cells from 10 E, 10 N

SHA_AGE = "3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855a"
SHA_ANOM = "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"

SUMMARY = {
    "model": {
        "name": "katz2003_dry",
        "parameters": {
            "a1_c": 1085.7,
            "a2_c_per_gpa": 132.9,
            "beta2": 1.2e-06,
            "n_steps": 400,
            "hydrous": False,
        },
        "reference": "Katz, Spiegelman & Langmuir (2003), G-cubed 4(9), Table 2",
        "sources": {"a1_c": "Katz et al. (2003) Table 2, A1"},
    },
    "ambient_potential_temperature_c": 1315.0,
    "cooling": {
        "name": "plate_gdh1",
        "lid_isotherm_c": 1100.0,
        "parameters": {"plate_thickness_km": 95.0, "diffusivity_m2_s": 8.04e-07},
    },
    "statistics": {
        "melting_cells": 1234567,
        "melting_area_km2": 45678.9,
        "melt_volume_km3": 123456.0,
        "variables": {"melt_thickness_km": {"min": 0.0, "max": 9.5, "mean": 2.25}},
    },
    "workflow": "[run]\nname = \"basin <b>&</b>\"\n<script>alert('x')</script>\n",
}


def fields():
    melt = np.zeros((20, 30))
    melt[5:15, 10:20] = 4.0
    melt[:, :3] = np.nan
    age = np.tile(np.linspace(10.0, 80.0, 30), (20, 1))
    return {"melt_thickness_km": melt, "plate_age_ma": age}


@pytest.fixture
def run(make_run_dir):
    path = make_run_dir(fields(), transform=BOX, summary=SUMMARY)
    doc = json.loads((path / "summary.json").read_text(encoding="utf-8"))
    doc["inputs"]["plate_age_ma"].update(source="/data/invented & co/age_<v1>.nc", sha256=SHA_AGE)
    doc["inputs"]["thermal_anomaly_k"] = {
        "file": None,
        "source": "builtin: plume (invented)",
        "sha256": SHA_ANOM,
        "units": "K",
    }
    reseal(path, **doc)  # lidmelt refuses a summary edited without its manifest
    return path


def html_of(path):
    return path.read_text(encoding="utf-8")


def test_report_carries_every_parameter_value_and_input_hash(run):
    out = write_report(run)
    assert out == run / "report.html"
    text = html_of(out)
    # Check values: the summary's own numbers, shown with every stored digit (repr).
    for name, value in SUMMARY["model"]["parameters"].items():
        assert f"<td>{name}</td><td>{format_value(value)}</td>" in text
    assert "<td>1.2e-06</td>" in text
    assert "<td>false</td>" in text
    for name, value in SUMMARY["cooling"]["parameters"].items():
        assert f"<td>{name}</td><td>{value!r}</td>" in text
    assert SHA_AGE in text
    assert SHA_ANOM in text
    assert "/data/invented &amp; co/age_&lt;v1&gt;.nc" in text  # source path, escaped


def test_parameter_sources_per_row_with_reference_fallback(run):
    # Issue 14: each source is written once, in a numbered list; every parameter row names
    # its source by number (the summary's per-parameter source, else the model reference).
    text = html_of(write_report(run, maps=[]))
    assert "<td>a1_c</td><td>1085.7</td><td>[1]</td>" in text
    assert "<td>[1]</td><td>Katz et al. (2003) Table 2, A1</td>" in text
    ref = "Katz, Spiegelman &amp; Langmuir (2003), G-cubed 4(9), Table 2"
    assert "<td>a2_c_per_gpa</td><td>132.9</td><td>[2]</td>" in text
    assert f"<td>[2]</td><td>model reference ({ref})</td>" in text
    assert text.count(f"model reference ({ref})") == 1  # once, however many rows cite it


def test_summary_numbers_lid_and_version(run):
    text = html_of(write_report(run, maps=[]))
    assert "1,234,567" in text  # melting cells (a count): exact, thousands separators
    # Issue 14: statistics to 3 significant figures (45678.9 -> 45,700; 123456 -> 123,000).
    assert "45,700 km²" in text
    assert "123,000 km³" in text
    # per variable: its long name (the registry's) and unit, min, max and mean
    assert "<td>Melt thickness</td><td>km</td><td>0</td><td>9.50</td><td>2.25</td>" in text
    assert "plate_gdh1" in text
    assert "1100.0 °C" in text
    assert "1315 °C" in text  # ambient potential temperature in the job line
    assert "lidmelt test" in text  # the run's version (fixture writes "test")


def test_caution_is_present(run):
    text = html_of(write_report(run, maps=[]))
    assert "not a volcanic hazard assessment" in text
    assert "volcano observatories and civil-protection agencies" in text


def test_strings_from_files_are_escaped(run):
    text = html_of(write_report(run, maps=[]))
    assert "<script>" not in text
    assert "<b>" not in text
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in text
    assert "basin &lt;b&gt;&amp;&lt;/b&gt;" in text


def test_page_is_self_contained_with_embedded_png_maps(run):
    text = html_of(write_report(run))
    # No resource from outside: no external links, scripts, stylesheets or fonts.
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//)""", text)
    assert "<link" not in text
    assert "<script" not in text
    assert "@import" not in text
    assert "url(" not in text
    images = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', text)
    # One output (melt thickness) and, since issue 14, the input maps the run has (plate age).
    assert len(images) == 2
    png = base64.b64decode(images[0])
    assert png[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec, section 5.2)
    pixels = mpimg.imread(io.BytesIO(png), format="png")
    assert pixels.shape[1] == REPORT_MAP_WIDTH_IN * REPORT_MAP_DPI
    assert np.var(pixels[..., :3]) > 0.001  # not blank


def test_fresh_maps_in_run_dir_are_reused_and_stale_ones_redrawn(run):
    maps_dir = run / "maps"
    maps_dir.mkdir()
    fake = maps_dir / "melt_thickness_km.png"
    fake.write_bytes(b"\x89PNG\r\n\x1a\n" + b"invented bytes")
    text = html_of(write_report(run))
    assert base64.b64encode(fake.read_bytes()).decode() in text
    # named relative to the run directory (a run writes its report in a staging folder)
    assert "(melt_thickness_km; maps/melt_thickness_km.png)" in text
    assert str(fake) not in text
    old = time.time() - 3600  # older than summary.json: redrawn for the report
    os.utime(fake, (old, old))
    text = html_of(write_report(run))
    assert base64.b64encode(fake.read_bytes()).decode() not in text
    assert "rendered for this report" in text


def test_given_maps_and_no_maps(run, tmp_path):
    svg = tmp_path / "extra.svg"
    svg.write_text(
        '<svg xmlns="http://www.w3.org/2000/svg" width="4" height="4"/>', encoding="utf-8"
    )
    text = html_of(write_report(run, maps=[svg], path=tmp_path / "r.html"))
    assert 'src="data:image/svg+xml;base64,' in text
    text = html_of(write_report(run, maps=[], path=tmp_path / "r.html"))
    assert "No maps were included." in text
    with pytest.raises(InputError, match="does not exist"):
        write_report(run, maps=[tmp_path / "none.png"])
    with pytest.raises(InputError, match=r"\.png or \.svg"):
        write_report(run, maps=[run / "summary.json"])


def test_pdf_has_text_and_map_pages(run):
    out = write_report(run, pdf=True)
    pdf = out.with_suffix(".pdf").read_bytes()
    assert pdf[:5] == b"%PDF-"  # PDF magic number (ISO 32000-1, 7.5.2)
    # Page objects: "/Type /Page" not followed by "s" (ISO 32000-1, 7.7.3.3). At least the
    # first text page, one map page and one table page.
    pages = re.findall(rb"/Type\s*/Page(?!s)", pdf)
    assert len(pages) >= 3


def test_no_network_and_no_temporary_files(run, monkeypatch):
    def refuse(*args, **kwargs):
        raise OSError("network access attempted in a test")

    monkeypatch.setattr(urllib.request, "urlopen", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)
    monkeypatch.setattr(socket.socket, "connect", refuse)
    write_report(run, pdf=True)
    leftovers = [p.name for p in run.iterdir() if ".tmp" in p.name]
    assert leftovers == []


def test_missing_summary_fields_do_not_break_the_page(make_run_dir):
    path = make_run_dir(
        {"melt_thickness_km": np.zeros((4, 4))},
        transform=BOX,
        summary={"statistics": {}, "cooling": None, "workflow": ""},
    )
    text = html_of(write_report(path, maps=[]))
    assert "records no statistics" in text
    assert "lid came from a lid-thickness grid" in text


def test_bad_output_name_and_bad_run(run, tmp_path):
    with pytest.raises(InputError, match=r"must end in \.html"):
        write_report(run, path=tmp_path / "report.txt", maps=[])
    with pytest.raises(RunDirError, match=r"no summary\.json"):
        write_report(tmp_path)


def test_cli_report(run, tmp_path, capsys):
    out = tmp_path / "out" / "r.html"
    assert main(["report", str(run), "-o", str(out), "--pdf"]) == 0
    printed = capsys.readouterr().out
    assert str(out) in printed
    assert str(out.with_suffix(".pdf")) in printed
    assert out.is_file()
    assert out.with_suffix(".pdf").is_file()


def test_cli_report_bad_run_dir(tmp_path, capsys):
    assert main(["report", str(tmp_path / "nothing")]) == 1
    assert "does not exist" in capsys.readouterr().err


# Warnings, flag counts and the anomaly basis (issue 11) --------------------------------------


WARNING = "more than a quarter of the cells with data melt at the ambient temperature (invented)"


@pytest.fixture
def flagged_run(make_run_dir, make_flag_grid):
    summary = {
        **SUMMARY,
        "warnings": [WARNING],
        "statistics": {
            **SUMMARY["statistics"],
            "anomaly_melt_volume_km3": 45678.9,
            "ambient_melt_volume_km3": 77777.1,  # 123456 - 45678.9, the summary's definition
            "anomaly": {"melting_cells": 42},
            "melt_production_km3_yr": 0.012345,
        },
    }
    path = make_run_dir(fields(), transform=BOX, summary=summary, name="flagged")
    flags = np.zeros((20, 30), dtype=np.uint8)
    flags[:, :3] = 255  # 60 cells without data
    flags[5:10, 10:15] = 4  # 25 cells beyond calibration
    flags[10:12, 10:13] = 2  # 6 cells without onset
    flags[0, 20] = 4 | 8  # 1 cell beyond calibration and water-saturated
    make_flag_grid(path, flags, transform=BOX)
    return path


def test_report_counts_cells_per_flag_bit(flagged_run):
    from lidmelt.physics import FLAG_MEANINGS

    text = html_of(write_report(flagged_run, maps=[]))
    # Check values: counts by construction of the fixture's grid (600 cells, 60 without data,
    # 540 with data; bit 4: 25 + 1; bit 2: 6; bit 8: 1; no flag: 540 - 32 = 508).
    assert '<section id="flags"><h2>Validity flags</h2>' in text
    for bit, count in ((1, 0), (2, 6), (4, 26), (8, 1)):
        meaning = FLAG_MEANINGS[bit].replace("'", "&#x27;")
        assert f"<td>{bit}</td><td>{meaning}</td><td>{count}</td>" in text
    assert "<td>0</td><td>no flag: valid and calibrated</td><td>508</td>" in text
    assert "<td>cells with data (any flag)</td><td>540</td>" in text
    assert "<td>cells in the grid</td><td>600</td>" in text
    assert "<td>4.81 %</td>" in text  # 26 / 540 to 3 significant figures
    # The flags come before the maps, right after the summary.
    assert text.index('id="summary"') < text.index('id="flags"') < text.index('id="maps"')


def test_report_without_a_flag_grid_says_so(run):
    text = html_of(write_report(run, maps=[]))
    assert "has no validity flag grid" in text


def test_warnings_are_shown_near_the_top(flagged_run, run):
    text = html_of(write_report(flagged_run, maps=[]))
    assert f"<li>{WARNING}</li>" in text
    # Near the top: after the job line, before the caution and every section.
    assert text.index('class="job"') < text.index('id="warnings"') < text.index('class="caution"')
    assert text.index('id="warnings"') < text.index("<section")
    assert 'id="warnings"' not in html_of(write_report(run, maps=[]))  # none, no box


def test_anomaly_basis_and_further_statistics_to_three_figures(flagged_run):
    text = html_of(write_report(flagged_run, maps=[]))
    # Check values: the summary's own numbers rounded to 3 significant figures (45678.9 ->
    # 45,700; 0.012345 -> 0.0123); counts (integers) are exact.
    added = "<td>Melt volume added by the thermal anomaly</td><td>45,700 km³</td>"
    assert added in text
    assert "<td>Anomaly: melting cells</td><td>42</td>" in text  # a key put into words
    assert "<td>Melt production</td><td>0.0123 km³/yr</td>" in text
    # issue 20: the anomaly-added volume leads, then the ambient one (total minus it), the total
    ambient = "<td>Ambient melt volume (total minus anomaly-added)</td><td>77,800 km³</td>"
    assert text.index(added) < text.index(ambient) < text.index("<td>Total melt volume</td>")
    assert "area integral of min(H, H_ambient)" in text
    # The totals keep their own table, now also to 3 significant figures (issue 14: no false
    # precision): 45678.9 -> 45,700.
    assert "<td>Melting area</td><td>45,700 km²</td>" in text


def test_format_sig():
    # Check values: rounding to 3 significant figures by hand.
    assert format_sig(45678.9) == "45,700"
    assert format_sig(2.25) == "2.25"
    assert format_sig(-0.0012345, unit="K") == "-0.00123 K"
    assert format_sig(1.0e-7) == "1.00e-07"
    assert format_sig(999.96) == "1,000"
    assert format_sig(1234567) == "1,234,567"  # a count: exact
