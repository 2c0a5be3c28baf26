"""Grids in and out: the one grid class, readers, alignment, areas, vectors and writers.

- :mod:`._grid`: :class:`Grid`, the grid of a run (target of alignment, point lookups);
- :mod:`._io`: grid readers behind one registry (:func:`open_grid`, :func:`detect_format`);
- :mod:`._align`: :func:`align`, any grid onto a :class:`Grid`;
- :mod:`._area`: geodesic cell areas;
- :mod:`._anomaly`: thermal anomalies from plume centres;
- :mod:`._vector`: points, tracks and polygons from CSV or vector files;
- :mod:`._geotiff`, :mod:`._write`, :mod:`._store`: GeoTIFF and NetCDF writing;
- :mod:`._rundir`: the run directory, read and written.

Attributes
----------
RESAMPLING_METHODS : dict of str to rasterio.enums.Resampling
    The resampling names :func:`align` accepts (``"nearest"``, ``"bilinear"``, ``"cubic"``
    ...: GDAL warper kernels).
"""

from lidmelt.grids._align import RESAMPLING_METHODS, align
from lidmelt.grids._anomaly import Plume, plume_anomaly
from lidmelt.grids._area import cell_area_km2
from lidmelt.grids._grid import Grid
from lidmelt.grids._io import open_grid
from lidmelt.grids._rundir import RunDir, open_run
from lidmelt.grids._vector import read_points, read_polygons
from lidmelt.grids._write import write_geotiff, write_netcdf

__all__ = [
    "RESAMPLING_METHODS",
    "Grid",
    "Plume",
    "RunDir",
    "align",
    "cell_area_km2",
    "open_grid",
    "open_run",
    "plume_anomaly",
    "read_points",
    "read_polygons",
    "write_geotiff",
    "write_netcdf",
]
