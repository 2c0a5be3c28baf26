"""The run report: one self-contained HTML page (and optionally a PDF) describing a run.

The page holds the job in one line, the run's warnings, a caution on what the numbers are for,
the summary numbers and per-variable statistics, the count of cells per validity flag, the maps
(embedded as base64 PNG), the melting model's parameter table with the source of each value,
the cooling model and lid isotherm, the grid, the input provenance
(source path and SHA-256 of each input), the workflow text and the lidmelt version.

- :mod:`.content`: the sections as text and tables, independent of the format;
- :mod:`.html_page`: the HTML page (every string escaped, nothing loaded from outside);
- :mod:`.pdf`: the PDF (text pages, one page per map);
- :mod:`.ensemble`: the section on an ensemble run (distributions, probability, drivers);
- :mod:`.write`: :func:`write_report`, which gathers the maps and writes the files.
"""

from lidmelt.products.report.content import (
    CAUTION,
    FRONT_SECTIONS,
    MapImage,
    Pre,
    Section,
    Table,
    build_sections,
    flags_section,
    format_number,
    format_sig,
    format_value,
    job_line,
    run_warnings,
    variable_label,
    variable_units,
)
from lidmelt.products.report.html_page import render_html
from lidmelt.products.report.pdf import write_pdf
from lidmelt.products.report.write import (
    REPORT_MAP_DPI,
    REPORT_MAP_WIDTH_IN,
    collect_maps,
    write_report,
)

__all__ = [
    "CAUTION",
    "FRONT_SECTIONS",
    "REPORT_MAP_DPI",
    "REPORT_MAP_WIDTH_IN",
    "MapImage",
    "Pre",
    "Section",
    "Table",
    "build_sections",
    "collect_maps",
    "flags_section",
    "format_number",
    "format_sig",
    "format_value",
    "job_line",
    "render_html",
    "run_warnings",
    "variable_label",
    "variable_units",
    "write_pdf",
    "write_report",
]
