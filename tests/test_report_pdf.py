"""The report's PDF as a reader sees it: its pages rendered and read back with pypdfium2.

Check values: the page geometry of lidmelt.products._report._pdf (A4, its margins, the header and
footer band inside the page), the fixture's own summary and flag counts (as in test_report.py),
and the PDF magic number (ISO 32000-1, 7.5.2).
"""

from __future__ import annotations

import numpy as np
import pypdfium2 as pdfium  # the [test] extra (pyproject): a missing one fails
import pypdfium2.raw as pdfium_raw
import pytest
from affine import Affine

from lidmelt.products._report._pdf import MARGIN_PT, PAGE_PT
from lidmelt.products._report._write import write_report

BOX = Affine(1.0, 0.0, 10.0, 0.0, -1.0, 10.0)  # invented: 1 deg cells from 10 E, 10 N
WARNING = "more than a quarter of the cells with data melt at the ambient temperature (invented)"
#: The header and footer lie 28 pt inside the page (pdf.py); nothing may come closer to an edge.
EDGE_PT = 18.0


@pytest.fixture
def pdf_path(make_run_dir, make_flag_grid):
    melt = np.zeros((20, 30))
    melt[5:15, 10:20] = 4.0
    melt[:, :3] = np.nan
    fields = {
        "melt_thickness_km": melt,
        "onset_depth_km": np.where(melt > 0, 90.0, np.nan),
        "melting_regime": np.where(melt > 0, 1.0, 0.0),
        "plate_age_ma": np.tile(np.linspace(10.0, 80.0, 30), (20, 1)),
    }
    summary = {
        "warnings": [WARNING],
        "statistics": {
            "data_cells": 540,
            "melting_cells": 100,
            "melting_area_km2": 45678.9,
            "anomaly_melt_volume_km3": 45678.9,
            "ambient_melt_volume_km3": 77777.1,  # 123456 - 45678.9, the summary's definition
            "melt_volume_km3": 123456.0,
            "regime_cells": {"0": 440, "1": 100, "2": 0},
            "variables": {
                "melt_thickness_km": {"min": 0.0, "max": 4.0, "mean": 0.74},
                "melting_regime": {"min": 0.0, "max": 1.0, "mean": 0.4321},
            },
        },
        "workflow": "[run]\nname = '" + "a-very-long-unbroken-name" * 12 + "'\n",
    }
    path = make_run_dir(fields, transform=BOX, summary=summary, name="pdfrun")
    flags = np.zeros((20, 30), dtype=np.uint8)
    flags[:, :3] = 255  # 60 cells without data
    flags[5:10, 10:15] = 4  # 25 cells beyond calibration
    flags[10:12, 10:13] = 2  # 6 cells without onset
    flags[0, 20] = 4 | 8  # 1 cell beyond calibration and water-saturated
    make_flag_grid(path, flags, transform=BOX)
    out = write_report(path, pdf=True, coastlines=False)
    return out.with_suffix(".pdf")


def _pages(path):
    doc = pdfium.PdfDocument(str(path))
    return doc, [doc[k] for k in range(len(doc))]


def _text(pages):
    return "\n".join(p.get_textpage().get_text_range() for p in pages)


def test_pdf_is_a_typeset_document_with_human_labels(pdf_path):
    assert pdf_path.read_bytes()[:5] == b"%PDF-"
    _, pages = _pages(pdf_path)
    text = _text(pages)
    # warnings and the caution come first, then the summary and the flags (their meanings)
    assert text.index("Warnings") < text.index("Caution") < text.index("Validity flags")
    assert WARNING[:40] in text.replace("\r\n", " ").replace("\n", " ")
    assert "no solidus crossing within the model" in text  # a flag's meaning
    assert "Melt volume added by the thermal anomaly" in text
    assert text.index("Melt volume added") < text.index("Total melt volume")
    assert "0: no melting" in text  # the regime classes in words
    for raw_key in ("regime_cells", "melt_volume_km3", "anomaly_melt_volume_km3"):
        assert raw_key not in text, raw_key
    # no statistics of the categorical regime (its "mean" 0.4321 would be meaningless)
    assert "0.432" not in text
    # set as text in a proportional font, not as a monospaced text page: wrapped paragraphs
    assert len(pages) >= 3


def _inside(box, margin):
    """Whether a (left, bottom, right, top) box lies ``margin`` points inside the page."""
    left, bottom, right, top = box
    width, height = PAGE_PT
    return margin <= left <= right <= width - margin and margin <= bottom <= top <= height - margin


def test_pdf_pages_draw_nothing_outside_the_page_or_margins(pdf_path):
    """Every character lies inside the page with EDGE_PT to spare (headers included), every
    image inside the margins at most the text width, and the rendered edge band is blank."""
    _, pages = _pages(pdf_path)
    height = PAGE_PT[1]
    images = 0
    for k, page in enumerate(pages):
        assert page.get_size() == pytest.approx(PAGE_PT, abs=0.01)
        textpage = page.get_textpage()
        for i in range(textpage.count_chars()):
            left, bottom, right, top = textpage.get_charbox(i)
            if right <= left:  # spaces and line ends have no box
                continue
            box = (left, bottom, right, top)
            assert _inside(box, EDGE_PT), (k, i, box)
            if bottom > MARGIN_PT and top < height - MARGIN_PT:  # body text: within the margins
                assert _inside((left, MARGIN_PT, right, MARGIN_PT), MARGIN_PT - 0.5), (k, i, box)
        for obj in page.get_objects():
            if obj.type != pdfium_raw.FPDF_PAGEOBJ_IMAGE:
                continue
            images += 1
            assert _inside(obj.get_bounds(), MARGIN_PT - 0.5), (k, obj.get_bounds())
        pixels = page.render(scale=1.0).to_numpy()[..., :3]
        band = int(EDGE_PT)
        for edge in (pixels[:band], pixels[-band:], pixels[:, :band], pixels[:, -band:]):
            assert edge.min() >= 250, k  # white: nothing drawn within 18 pt of the edge
    assert images >= 2  # the maps of the run's output and input


def test_pdf_figures_are_set_at_the_full_text_width(pdf_path):
    _, pages = _pages(pdf_path)
    widths = [
        obj.get_bounds()[2] - obj.get_bounds()[0]
        for page in pages
        for obj in page.get_objects()
        if obj.type == pdfium_raw.FPDF_PAGEOBJ_IMAGE
    ]
    text_width = PAGE_PT[0] - 2 * MARGIN_PT
    # each map fills the text width unless it is as tall as the page allows
    assert max(widths) == pytest.approx(text_width, rel=1e-3)
