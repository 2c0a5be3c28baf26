"""The run report: one self-contained HTML page (and optionally a PDF) describing a run.

The page holds the job in one line, the run's warnings, a caution on what the numbers are for,
the summary numbers and per-variable statistics, the count of cells per validity flag, the maps
(embedded as base64 PNG), the melting model's parameter table with the source of each value,
the cooling model and lid isotherm, the grid, the input provenance
(source path and SHA-256 of each input), the workflow text and the lidmelt version.

- :mod:`._content`: the sections as text and tables, independent of the format;
- :mod:`._html_page`: the HTML page (every string escaped, nothing loaded from outside);
- :mod:`._pdf`: the PDF (text pages, one page per map);
- :mod:`._ensemble`: the section on an ensemble run (distributions, probability, drivers);
- :mod:`._write`: :func:`write_report`, which gathers the maps and writes the files.
"""
