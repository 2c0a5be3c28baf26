"""Publication-quality map figures of a run's variables (cartopy, headless, offline).

The package keeps presentation apart from drawing:

- :mod:`.style`: colour maps per style key, the no-melt classes, colour limits;
- :mod:`.layout`: projections, extents, graticule labels, font sizes, footprints;
- :mod:`.page`: the page layout in inches (map, colour bar, legend, wrapped text);
- :mod:`.overlays`: coastlines (local files only), plate-age contours, stations, candidates;
- :mod:`.captions`: the subtitle and caption text;
- :mod:`.flags`: the run's validity flags: reading, hatching flagged cells, counts;
- :mod:`.options`: :class:`MapOptions`, :class:`MapInfo`, the checks of the options;
- :mod:`.field`: the data layer (variable, colour limits, no-melt cells, zero contour);
- :mod:`.marks`: named plume centres and candidate rank labels;
- :mod:`.figure`: :func:`make_map_figure`, the figure drawn in named steps;
- :mod:`.overview`: :func:`make_overview_figure`, inputs and results as panels on one page;
- :mod:`.write`: :func:`draw_map`, :func:`draw_run_maps` and :func:`save_figure`.
"""

from lidmelt.products.maps.captions import describe_lid, lid_model, map_caption, model_line
from lidmelt.products.maps.figure import (
    MapInfo,
    MapOptions,
    check_variable,
    make_map_figure,
    render_map,
    resolve_options,
)
from lidmelt.products.maps.flags import (
    MARKED_FLAGS,
    flag_counts,
    marked_kinds,
)
from lidmelt.products.maps.layout import (
    Region,
    check_region,
    choose_projection,
    make_projection,
    projection_names,
)
from lidmelt.products.maps.overlays import (
    COASTLINE_RELPATH,
    Stations,
    find_coastlines,
    load_candidates,
    load_stations,
    require_file,
    resolve_coastlines,
)
from lidmelt.products.maps.overview import (
    OVERVIEW_PANELS,
    OverviewInfo,
    draw_overview,
    make_overview_figure,
)
from lidmelt.products.maps.style import (
    MELT_TOP_PERCENTILE,
    NODATA_COLOR,
    OUTSIDE_COLOR,
    PERCENTILES,
    REGIME_CLASSES,
    STYLES,
    ZERO_COLOR,
    ClassStyle,
    MapStyle,
    VariableStyle,
    colour_limits,
    encode_categories,
    encode_classes,
    style_for,
    unit_label,
)
from lidmelt.products.maps.write import (
    FORMATS,
    REPEATS,
    default_map_variables,
    draw_map,
    draw_run_maps,
    save_figure,
)

__all__ = [
    "COASTLINE_RELPATH",
    "FORMATS",
    "MARKED_FLAGS",
    "MELT_TOP_PERCENTILE",
    "NODATA_COLOR",
    "OUTSIDE_COLOR",
    "OVERVIEW_PANELS",
    "PERCENTILES",
    "REGIME_CLASSES",
    "REPEATS",
    "STYLES",
    "ZERO_COLOR",
    "ClassStyle",
    "MapInfo",
    "MapOptions",
    "MapStyle",
    "OverviewInfo",
    "Region",
    "Stations",
    "VariableStyle",
    "check_region",
    "check_variable",
    "choose_projection",
    "colour_limits",
    "default_map_variables",
    "describe_lid",
    "draw_map",
    "draw_overview",
    "draw_run_maps",
    "encode_categories",
    "encode_classes",
    "find_coastlines",
    "flag_counts",
    "lid_model",
    "load_candidates",
    "load_stations",
    "make_map_figure",
    "make_overview_figure",
    "make_projection",
    "map_caption",
    "marked_kinds",
    "model_line",
    "projection_names",
    "render_map",
    "require_file",
    "resolve_coastlines",
    "resolve_options",
    "save_figure",
    "style_for",
    "unit_label",
]
