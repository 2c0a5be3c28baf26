"""Grids in and out: the one grid class, readers, alignment, areas, vectors and writers.

- :mod:`.grid`: :class:`Grid`, the grid of a run (target of alignment, point lookups);
- :mod:`.io`: grid readers behind one registry (:func:`open_grid`, :func:`detect_format`);
- :mod:`.align`: :func:`align`, any grid onto a :class:`Grid`;
- :mod:`.area`: geodesic cell areas;
- :mod:`.anomaly`: thermal anomalies from plume centres;
- :mod:`.vector`: points, tracks and polygons from CSV or vector files;
- :mod:`.geotiff`, :mod:`.write`, :mod:`.store`: GeoTIFF and NetCDF writing;
- :mod:`.rundir`: the run directory, read and written.

Attributes
----------
RESAMPLING_METHODS : dict of str to rasterio.enums.Resampling
    The resampling names :func:`align` accepts (``"nearest"``, ``"bilinear"``, ``"cubic"``
    ...: GDAL warper kernels).
"""

from lidmelt.grids.align import RESAMPLING_METHODS, align
from lidmelt.grids.anomaly import Plume, plume_anomaly
from lidmelt.grids.area import cell_area_km2
from lidmelt.grids.grid import Grid
from lidmelt.grids.io import detect_format, open_grid
from lidmelt.grids.rundir import RunDir, open_run
from lidmelt.grids.vector import read_points, read_polygons
from lidmelt.grids.write import write_geotiff, write_netcdf

__all__ = [
    "RESAMPLING_METHODS",
    "Grid",
    "Plume",
    "RunDir",
    "align",
    "cell_area_km2",
    "detect_format",
    "open_grid",
    "open_run",
    "plume_anomaly",
    "read_points",
    "read_polygons",
    "write_geotiff",
    "write_netcdf",
]
