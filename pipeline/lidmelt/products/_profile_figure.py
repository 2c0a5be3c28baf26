"""The profile figure: a run's values along a ship track, drawn as a cross-section.

From the top: plate age and thermal anomaly (the inputs) against distance, then the melt
thickness, then the section itself with depth downward: the top of the melting column (the
deeper of the lid base and the crust base, ``melting_top_km``) and the onset depth of melting
as lines, the melting column shaded between them and the lid shaded above. Waypoints are
dotted verticals named at the top (their names from the track file, else WP1, WP2, ...);
stations near the track (within :data:`NEAR_KM` km) are marked at their distance along it;
a small map in the corner shows the track over the run's melt thickness (longitude and
latitude labelled, with its colour bar). The title is the track's name. No two lines share a
colour (plate age blue, thermal anomaly vermillion, onset bluish green). Drawn with
matplotlib's Agg canvas (no display needed).
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._errors import InputError
from lidmelt._files import atomic_path

#: Stations within this distance (km) of a profile point are marked on the profile.
NEAR_KM = 50.0

_LID_LABEL = "top of the melting column (lid, geotherm or crust base)"
#: Line colours (Okabe & Ito 2008 palette, from memory): plate age blue, thermal anomaly
#: vermillion, onset bluish green, so that no two lines of the figure share a colour.
_ONSET_COLOR = "#009E73"


@dataclass(frozen=True)
class NearStation:
    """A station near the track: its name, distance along the track and offset (km)."""

    name: str
    distance_km: float
    offset_km: float


def stations_near_track(
    gdf: Any, lon: Sequence[float], lat: Sequence[float], names: Sequence[str]
) -> list[NearStation]:
    """Stations within :data:`NEAR_KM` km of a profile point, at the nearest point's distance.

    Distances are WGS84 geodesics (pyproj.Geod) from each station to every profile point.
    """
    import pyproj

    geod = pyproj.Geod(ellps="WGS84")
    plon = gdf["lon"].to_numpy(float)
    plat = gdf["lat"].to_numpy(float)
    dist = gdf["distance_km"].to_numpy(float)
    out = []
    for x, y, name in zip(lon, lat, names, strict=True):
        _, _, d_m = geod.inv(np.full(plon.size, x), np.full(plat.size, y), plon, plat)
        k = int(np.argmin(d_m))
        if d_m[k] / 1000.0 <= NEAR_KM:
            out.append(NearStation(str(name), float(dist[k]), float(d_m[k] / 1000.0)))
    return out


def _column(gdf: Any, name: str) -> np.ndarray | None:
    return gdf[name].to_numpy(dtype=float) if name in gdf.columns else None


def _draw_inputs(ax: Any, gdf: Any, d: np.ndarray) -> None:
    """Top panel: plate age (left axis) and thermal anomaly (right axis)."""
    age, anomaly = _column(gdf, "plate_age_ma"), _column(gdf, "thermal_anomaly_k")
    if age is not None:
        ax.plot(d, age, color="#0072B2", lw=1.4, label="plate age")
        ax.set_ylabel("Plate age (Ma)", color="#0072B2")
    if anomaly is not None:
        twin = ax.twinx()
        twin.plot(d, anomaly, color="#D55E00", lw=1.4, label="thermal anomaly")
        twin.set_ylabel("Thermal anomaly (K)", color="#D55E00")
        twin.tick_params(labelsize=8)
    if age is None and anomaly is None:
        ax.text(
            0.5,
            0.5,
            "no plate age or anomaly in this run",
            transform=ax.transAxes,
            ha="center",
            va="center",
            color="0.4",
        )
    ax.grid(alpha=0.3)


def _draw_melt(ax: Any, gdf: Any, d: np.ndarray) -> None:
    """Middle panel: melt thickness against distance, filled down to 0."""
    melt = _column(gdf, "melt_thickness_km")
    if melt is not None:
        ax.fill_between(d, 0, melt, color="#CC79A7", alpha=0.35, lw=0)
        ax.plot(d, melt, color="#882255", lw=1.6)
        ax.set_ylim(bottom=0)
    ax.set_ylabel("Melt thickness (km)")
    ax.grid(alpha=0.3)


def _draw_section(ax: Any, gdf: Any, d: np.ndarray) -> None:
    """Bottom panel: depth downward; lid shaded, the melting column shaded between lines."""
    lid, onset = _column(gdf, "melting_top_km"), _column(gdf, "onset_depth_km")
    melt = _column(gdf, "melt_thickness_km")
    if lid is not None:
        ax.fill_between(d, 0, lid, color="0.85", lw=0, label="lid (and crust)")
        ax.plot(d, lid, color="0.15", lw=1.6, label=_LID_LABEL)
    if lid is not None and onset is not None:
        melting = np.isfinite(lid) & np.isfinite(onset) & (onset > lid)
        if melt is not None:
            melting &= melt > 0
        ax.fill_between(
            d, lid, onset, where=melting, color="#E69F00", alpha=0.45, lw=0, label="melting column"
        )
    if onset is not None:
        shown = onset if melt is None else np.where(melt > 0, onset, np.nan)
        ax.plot(d, shown, color=_ONSET_COLOR, lw=1.6, label="onset depth of melting")
    ax.set_ylim(bottom=0)
    ax.invert_yaxis()
    ax.set_ylabel("Depth below the seafloor (km)")
    ax.set_xlabel("Distance along the track (km)")
    ax.grid(alpha=0.3)
    if ax.lines:
        ax.legend(loc="upper right", fontsize=8, framealpha=0.85)


def _mark_waypoints(axes: list[Any], waypoints: list[float], names: Sequence[str]) -> None:
    """Dotted verticals at every waypoint, named above the top panel."""
    for ax in axes:
        for x in waypoints:
            ax.axvline(x, color="0.45", lw=0.8, ls=":")
    top = axes[0]
    for x, name in zip(waypoints, names, strict=False):
        top.annotate(
            name,
            (x, 1.0),
            xycoords=top.get_xaxis_transform(),
            xytext=(0, 3),
            textcoords="offset points",
            ha="center",
            va="bottom",
            fontsize=8,
            color="0.25",
            annotation_clip=False,
        )


def _mark_stations(ax: Any, near: list[NearStation]) -> None:
    """Stations near the track: triangles on the melt panel's baseline, with names."""
    for s in near:
        ax.plot(
            [s.distance_km],
            [0.0],
            marker="^",
            ms=7,
            mfc="black",
            mec="white",
            clip_on=False,
            zorder=5,
            transform=ax.get_xaxis_transform(),
        )
        ax.annotate(
            f"{s.name} ({s.offset_km:.0f} km off)",
            (s.distance_km, 0.0),
            xycoords=ax.get_xaxis_transform(),
            xytext=(3, 6),
            textcoords="offset points",
            fontsize=7.5,
            rotation=90,
            va="bottom",
            ha="center",
            color="0.1",
        )


def _draw_inset(fig: Any, gdf: Any, run: Any, near_lonlat: tuple) -> Any:
    """A small lon/lat map of the track over the run's melt thickness (when given), with its
    axes labelled, a colour bar and a title, all inside the figure."""
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    ax = fig.add_axes((0.73, 0.875, 0.15, 0.085))
    lon, lat = gdf["lon"].to_numpy(float), gdf["lat"].to_numpy(float)
    image = None
    if run is not None and "melt_thickness_km" in run.outputs:
        da = run.open("melt_thickness_km")
        if da.rio.crs is not None and da.rio.crs.is_geographic:
            w, s, e, n = (float(v) for v in da.rio.bounds())
            image = ax.imshow(
                np.asarray(da.values, float),
                extent=(w, e, s, n),
                origin="upper",
                cmap="viridis",
                interpolation="nearest",
                aspect="auto",
            )
    ax.plot(lon, lat, color="red", lw=1.2)
    ax.plot(lon[0], lat[0], "o", color="red", ms=3)
    if near_lonlat[0]:
        ax.plot(near_lonlat[0], near_lonlat[1], "^", ms=3, color="black")
    degrees = FuncFormatter(lambda v, _: f"{v:g}°")
    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_locator(MaxNLocator(nbins=4))
        axis.set_major_formatter(degrees)
    ax.tick_params(labelsize=6, length=2, pad=1)
    ax.set_xlabel("Longitude", fontsize=6.5, labelpad=1)
    ax.set_ylabel("Latitude", fontsize=6.5, labelpad=1)
    fig.text(0.69, 0.985, "Track (red) over the melt thickness", fontsize=7, va="top")
    if image is not None:
        cax = fig.add_axes((0.89, 0.875, 0.01, 0.085))
        bar = fig.colorbar(image, cax=cax)
        bar.ax.tick_params(labelsize=6, length=2, pad=1)
        bar.set_label("Melt thickness (km)", fontsize=6.5, labelpad=2)
    return ax


def plot_profile(gdf: Any, path: str | os.PathLike[str], **options: Any) -> Path:
    """Draw a track profile (:func:`make_profile_figure`) and write it as PNG, atomically."""
    fig = make_profile_figure(gdf, **options)
    path = Path(path)
    with atomic_path(path) as temp:
        fig.savefig(temp, dpi=150, format="png")
    return path


def make_profile_figure(
    gdf: Any,
    *,
    title: str = "",
    waypoint_names: Sequence[str] = (),
    stations: Any = None,
    run: Any = None,
    subtitle: str = "",
) -> Any:
    """Draw a track profile as a cross-section (see the module notes); return the figure.

    Parameters
    ----------
    gdf : geopandas.GeoDataFrame
        The result of :func:`lidmelt.products._profiles.sample_track` (needs ``distance_km``
        and one of ``melt_thickness_km``, ``onset_depth_km``, ``melting_top_km``).
    title : str
        The track's name (default "Track profile").
    waypoint_names : sequence of str
        One name per waypoint (default WP1, WP2, ...).
    stations : lidmelt.products._maps.Stations or None
        Stations; those within :data:`NEAR_KM` km of the track are marked.
    run : RunDir or None
        The run, for the inset map's background.
    subtitle : str
        A second line under the title (e.g. the model and ambient temperature).

    Raises
    ------
    lidmelt._errors.InputError
        If ``gdf`` lacks the columns to plot.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    needed = {"melt_thickness_km", "onset_depth_km", "melting_top_km"}
    if "distance_km" not in gdf.columns or not needed & set(gdf.columns):
        msg = (
            f"the profile table has columns {', '.join(map(str, gdf.columns))}; expected "
            "distance_km and melt_thickness_km, onset_depth_km or melting_top_km. Give the "
            "result of sample_track()."
        )
        raise InputError(msg)
    d = gdf["distance_km"].to_numpy(dtype=float)
    fig = Figure(figsize=(9, 8.5), dpi=150, facecolor="white")
    FigureCanvasAgg(fig)
    grid = fig.add_gridspec(
        3, 1, height_ratios=(1, 1, 2.2), hspace=0.12, left=0.09, right=0.9, top=0.84, bottom=0.07
    )
    top = fig.add_subplot(grid[0])
    mid = fig.add_subplot(grid[1], sharex=top)
    bottom = fig.add_subplot(grid[2], sharex=top)
    _draw_inputs(top, gdf, d)
    _draw_melt(mid, gdf, d)
    _draw_section(bottom, gdf, d)
    waypoints = list(gdf.attrs.get("lidmelt_waypoint_distance_km", []))
    names = list(waypoint_names) or [f"WP{k}" for k in range(1, len(waypoints) + 1)]
    _mark_waypoints([top, mid, bottom], waypoints, names)
    near: list[NearStation] = []
    near_lonlat: tuple = ([], [])
    if stations is not None and len(stations.lon):
        labels = stations.names or [f"station {k}" for k in range(1, len(stations.lon) + 1)]
        near = stations_near_track(gdf, stations.lon, stations.lat, labels)
        near_lonlat = (list(stations.lon), list(stations.lat))
        _mark_stations(mid, near)
    top.set_xlim(d.min(), d.max() if d.max() > d.min() else d.min() + 1)
    for ax in (top, mid):
        ax.tick_params(labelbottom=False, labelsize=8)
    bottom.tick_params(labelsize=8)
    fig.text(0.09, 0.975, title or "Track profile", fontsize=13, fontweight="bold", va="top")
    if subtitle:
        fig.text(0.09, 0.945, subtitle, fontsize=9, va="top", color="0.2")
    _draw_inset(fig, gdf, run, near_lonlat)
    return fig
