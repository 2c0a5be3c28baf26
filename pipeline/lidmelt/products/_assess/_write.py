"""Writing an assessment: its JSON and its success-rate figure, atomically.

By default both go into the run directory, beside the maps and the report and like them
outside the run's manifest (``lidmelt assess`` may add or redraw them in a finished run without
breaking it): ``RUN_DIR/assess.json`` and ``RUN_DIR/maps/success_rate.png``, where ``lidmelt
report`` finds them. Given ``-o OUT.json``, the figure goes beside it as ``OUT.png``.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from lidmelt._errors import InputError
from lidmelt._files import write_json_atomic
from lidmelt.products._assess._figure import success_rate_figure
from lidmelt.products._maps._write import save_figure

#: The assessment's file in the run directory.
ASSESS_NAME = "assess.json"
#: Its figure in the run directory.
FIGURE_NAME = "maps/success_rate.png"


def figure_path(json_path: Path, run_dir: Path | None = None) -> Path:
    """The figure of the assessment written to ``json_path``: in the run's maps folder for the
    default file, else beside it with the suffix ``.png``."""
    if run_dir is not None and json_path.resolve() == (run_dir / ASSESS_NAME).resolve():
        return run_dir / FIGURE_NAME
    return json_path.with_suffix(".png")


def check_output(path: str | os.PathLike[str]) -> Path:
    """The output file, checked before any work: a ``.json`` file that is not a folder."""
    path = Path(path)
    if path.suffix.lower() != ".json" or path.is_dir():
        msg = (
            f"assessment output {str(path)!r} must be a .json file (its figure goes beside it "
            "with the suffix .png). Give e.g. -o assess.json."
        )
        raise InputError(msg)
    return path


def write_assessment(
    doc: dict[str, Any], path: str | os.PathLike[str], *, run_dir: Path | None = None
) -> tuple[Path, Path]:
    """Write an assessment as JSON and draw its success-rate figure.

    Parameters
    ----------
    doc : dict
        The assessment :func:`assess` returned.
    path : str or os.PathLike
        The ``.json`` file, written atomically.
    run_dir : pathlib.Path, optional
        The run assessed: the default file (``assessment.json`` in the run) puts its figure in
        the run's maps folder; any other file gets its figure beside it (suffix ``.png``).

    Returns
    -------
    tuple of pathlib.Path
        The JSON file and the figure.
    """
    path = check_output(path)
    figure = figure_path(path, run_dir)
    figure.parent.mkdir(parents=True, exist_ok=True)
    fig = success_rate_figure(doc)
    save_figure(fig, figure)
    write_json_atomic(path, doc)
    return path, figure
