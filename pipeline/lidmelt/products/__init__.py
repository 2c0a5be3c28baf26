"""What a finished run gives its users: values at points, along tracks and in regions,
candidate regions, map figures and the report.

- :mod:`.sampling`: a run's grids sampled at points (statuses, stencils, output checks);
- :mod:`.sites`: :func:`sample_stations`; :mod:`.profiles`: :func:`sample_track`;
- :mod:`.regions`: :func:`region_statistics`; :mod:`.screening`: :func:`screen`;
- :mod:`.maps`: map figures; :mod:`.report`: the run report.

Nothing here parses arguments or prints: the command line (:mod:`lidmelt.cli`) does.
"""

from lidmelt.products.candidate_files import write_candidates
from lidmelt.products.maps import draw_map, draw_run_maps, make_map_figure
from lidmelt.products.profiles import sample_track, write_profile
from lidmelt.products.regions import region_statistics, write_regions
from lidmelt.products.report import write_report
from lidmelt.products.screening import screen
from lidmelt.products.sites import sample_stations, write_stations

__all__ = [
    "draw_map",
    "draw_run_maps",
    "make_map_figure",
    "region_statistics",
    "sample_stations",
    "sample_track",
    "screen",
    "write_candidates",
    "write_profile",
    "write_regions",
    "write_report",
    "write_stations",
]
