"""Writing map figures: one variable to a file, or every variable of a run to a folder.

Every file is written through :func:`lidmelt._files.atomic_path` (an exclusive temporary file
beside the target, renamed when complete), so an interrupted command never leaves a partial
figure under the final name. PNG, PDF and SVG files carry no creation date (reproducible).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

import cartopy.crs as ccrs
from matplotlib.figure import Figure

from lidmelt import __version__
from lidmelt._errors import InputError
from lidmelt._files import atomic_path
from lidmelt._variables import ensemble_variable
from lidmelt.grids._rundir import RunDir
from lidmelt.products._maps import _layout as lay
from lidmelt.products._maps._figure import render_map
from lidmelt.products._maps._options import MapOptions, as_run, check_variable, resolve_options

#: The PNG metadata entry that says which run a figure shows (:func:`save_figure`).
STAMP_KEY = "lidmelt-run"

#: Figure formats that :func:`draw_map` writes.
FORMATS = ("png", "pdf", "svg")

#: Outputs whose map repeats another's (same pattern, another unit): drawn only when asked for.
#: The onset pressure is the onset depth's lithostatic pressure (a 1:1 mapping of the same cells).
REPEATS = {"onset_pressure_gpa": "onset_depth_km"}


def default_map_variables(run: RunDir) -> list[str]:
    """The outputs mapped by default: every output except those whose map repeats another's,
    and of an ensemble's layers the probability maps (percentile maps on request only)."""
    return [
        n
        for n in run.outputs
        if REPEATS.get(n) not in run.outputs
        and (ensemble_variable(n) is None or ensemble_variable(n).style == "probability")
    ]


def _check_suffix(path: Path) -> str:
    fmt = path.suffix.lower().lstrip(".")
    if fmt not in FORMATS:
        msg = (
            f"figure file {str(path)!r} has suffix {path.suffix!r}; expected one of "
            f"{', '.join('.' + f for f in FORMATS)}. Change the file name or --format."
        )
        raise InputError(msg)
    return fmt


def save_figure(
    fig: Figure, path: str | Path, *, dpi: float | None = None, stamp: str | None = None
) -> Path:
    """Save ``fig`` atomically; the format follows the suffix (png, pdf or svg). A PNG carries
    ``stamp`` (text) in its ``lidmelt-run`` metadata entry when given."""
    path = Path(path)
    fmt = _check_suffix(path)
    metadata: dict[str, Any] = {"Creator": f"lidmelt {__version__}"}
    if fmt == "png":
        metadata = {"Software": f"lidmelt {__version__}"}
        if stamp is not None:
            metadata[STAMP_KEY] = stamp
    elif fmt == "pdf":
        metadata["CreationDate"] = None  # reproducible files
    elif fmt == "svg":
        metadata = {"Creator": f"lidmelt {__version__}", "Date": None}
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format=fmt, dpi=dpi or fig.dpi, metadata=metadata)
    return path


def draw_map(run: RunDir | str | Path, variable: str, *, path: str | Path, **options: Any) -> Path:
    """Draw one variable of a run and write it to ``path`` (png, pdf or svg by suffix).

    Parameters
    ----------
    run : RunDir or str or pathlib.Path
        A finished run (see :func:`lidmelt.grids.open_run`).
    variable : str
        An output variable of the run, e.g. ``"melt_thickness_km"``.
    path : str or pathlib.Path
        The image file; its suffix chooses the format.
    **options
        The fields of :class:`MapOptions` (projection, colour limits, overlays, ``width_in``,
        ``dpi`` ...); the written image is ``width_in * dpi`` pixels wide.

    Returns
    -------
    pathlib.Path
        ``path``.

    Raises
    ------
    InputError
        If the variable is not in the run, the suffix is not png, pdf or svg, or an option is
        invalid.
    """
    path = Path(path)
    _check_suffix(path)
    opts = MapOptions(**options)
    fig, _ = render_map(as_run(run), variable, opts)
    return save_figure(fig, path, dpi=opts.dpi)


def draw_run_maps(
    run: RunDir | str | Path,
    *,
    out_dir: str | Path | None = None,
    variables: Sequence[str] | None = None,
    fmt: str = "png",
    **options: Any,
) -> list[Path]:
    """Draw every output variable of a run (or ``variables``) to ``out_dir/<variable>.<fmt>``.

    Parameters
    ----------
    run : RunDir, str or Path
        The run directory.
    out_dir : str, Path or None
        Destination folder; default ``RUN_DIR/maps``.
    variables : list of str or None
        Variables to draw; default every output of the run except those in :data:`REPEATS`
        (the onset pressure map repeats the onset depth map).
    fmt : {"png", "pdf", "svg"}
        Figure format.
    **options
        The fields of :class:`MapOptions`, as for :func:`make_map_figure`. Overlay files are
        read once, all options are checked before the first figure is drawn, and a missing
        coastline is reported once.

    Returns
    -------
    list of Path
        The written figure files, in the order of ``variables``.
    """
    run = as_run(run)
    opts = MapOptions(**options)
    fmt = str(fmt).lower().lstrip(".")
    if fmt not in FORMATS:
        msg = f"figure format {fmt!r}: expected one of {', '.join(FORMATS)}."
        raise InputError(msg)
    names = list(variables) if variables else default_map_variables(run)
    if not names:
        msg = (
            f"run {str(run.path)!r} lists no output variables; there is nothing to map. "
            "Run 'lidmelt run' again."
        )
        raise InputError(msg)
    for name in names:
        check_variable(run, name)
    if opts.region is not None:
        opts = replace(opts, region=lay.check_region(opts.region))
    if opts.projection is not None and not isinstance(opts.projection, ccrs.Projection):
        lay.make_projection(opts.projection, opts.region or (-10.0, 10.0, -10.0, 10.0))
    opts = resolve_options(run, opts)
    out = Path(out_dir) if out_dir is not None else run.path / "maps"
    written = []
    for name in names:
        fig, _ = render_map(run, name, opts)
        written.append(save_figure(fig, out / f"{name}.{fmt}", dpi=opts.dpi))
    return written
