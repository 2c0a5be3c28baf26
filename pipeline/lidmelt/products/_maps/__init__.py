"""Publication-quality map figures of a run's variables (cartopy, headless, offline).

The package keeps presentation apart from drawing:

- :mod:`._style`: colour maps per style key, the no-melt classes, colour limits;
- :mod:`._layout`: projections, extents, graticule labels, font sizes, footprints;
- :mod:`._page`: the page layout in inches (map, colour bar, legend, wrapped text);
- :mod:`._overlays`: coastlines (local files only), plate-age contours, stations, candidates;
- :mod:`._captions`: the subtitle and caption text;
- :mod:`._flags`: the run's validity flags: reading, hatching flagged cells, counts;
- :mod:`._options`: :class:`MapOptions`, :class:`MapInfo`, the checks of the options;
- :mod:`._field`: the data layer (variable, colour limits, no-melt cells, zero contour);
- :mod:`._marks`: named plume centres and candidate rank labels;
- :mod:`._figure`: :func:`make_map_figure`, the figure drawn in named steps;
- :mod:`._overview`: :func:`make_overview_figure`, inputs and results as panels on one page;
- :mod:`._write`: :func:`draw_map`, :func:`draw_run_maps` and :func:`save_figure`;
- :mod:`._explore`: the interactive map page ``maps/explore.html`` (its data in
  :mod:`._explore_data` and :mod:`._explore_marks`, its script in :mod:`._explore_script`).
"""
