"""What a finished run gives its users: values at points, along tracks and in regions,
candidate regions, map figures and the report.

- :mod:`._sampling`: a run's grids sampled at points (statuses, stencils, output checks);
- :mod:`._sites`: :func:`sample_stations`; :mod:`._profiles`: :func:`sample_track`;
- :mod:`._regions`: :func:`region_statistics`; :mod:`._screening`: :func:`screen`;
- :mod:`._maps`: map figures; :mod:`._report`: the run report.

Nothing here parses arguments or prints: the command line (:mod:`lidmelt.cli`) does.
"""

from lidmelt.products._assess._assessment import assess
from lidmelt.products._assess._write import write_assessment
from lidmelt.products._candidate_files import write_candidates
from lidmelt.products._maps._write import draw_map, draw_run_maps
from lidmelt.products._profiles import sample_track, write_profile
from lidmelt.products._regions import region_statistics, write_regions
from lidmelt.products._report._write import write_report
from lidmelt.products._screening import screen
from lidmelt.products._sites import sample_stations, write_stations

__all__ = [
    "assess",
    "draw_map",
    "draw_run_maps",
    "region_statistics",
    "sample_stations",
    "sample_track",
    "screen",
    "write_assessment",
    "write_candidates",
    "write_profile",
    "write_regions",
    "write_report",
    "write_stations",
]
