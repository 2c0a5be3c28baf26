"""Reading the ``[assess]`` table: the known features that score the run and its members.

``features`` is a path relative to the workflow file's folder (like an input grid); the file is
read here (:func:`lidmelt.grids._features.read_feature_points`), so a file without coordinates,
with an unknown CRS or without features stops the run before anything is computed. Whether the
features lie on the grid is checked when the grid is known (the ensemble stage, ``lidmelt
assess``). ``rejection_auc`` and ``likelihood_shape`` set the members' weights
(:mod:`lidmelt.ensemble._posterior`).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from lidmelt._config_tables import AssessOptions
from lidmelt._errors import InputError, WorkflowError
from lidmelt.grids._features import read_feature_points
from lidmelt.workflow._checks import Context, in_range, string, table, user_path


def read_assess(ctx: Context, tree: dict[str, Any], folder: Path) -> AssessOptions | None:
    """The ``[assess]`` table of ``tree`` (None without one), its feature file read."""
    if "assess" not in tree:
        return None
    values = table(ctx, "assess", tree["assess"])
    if "features" not in values:
        msg = (
            f"{ctx.where('assess')} has no 'features'; expected the known features to score "
            'against, e.g. features = "known_seamounts.csv" (relative to the workflow file).'
        )
        raise WorkflowError(msg)
    written = string(ctx, "assess.features", values["features"], example="known_seamounts.csv")
    path = user_path(written, base=folder, what="assess.features")
    if not path.is_file():
        msg = (
            f"{ctx.where('assess.features')} is {written!r} (resolved to '{path}'), which does "
            "not exist; expected a CSV, GeoPackage or GeoJSON of known features. The path is "
            "relative to the workflow file's folder."
        )
        raise WorkflowError(msg)
    crs = values.get("crs")
    if crs is not None:
        crs = string(ctx, "assess.crs", crs, example="EPSG:4326")
    try:
        read_feature_points(path, crs=crs)
    except InputError as exc:
        msg = f"{ctx.where('assess.features')}: {exc}"
        raise WorkflowError(msg) from None
    options: dict[str, Any] = {"features": path, "crs": crs}
    if "rejection_auc" in values:
        options["rejection_auc"] = in_range(
            ctx, "assess.rejection_auc", values["rejection_auc"], 0.0, 0.99, "(an AUC)",
            "members whose AUC is at most this get no weight; 0.5 is chance",
        )  # fmt: skip
    if "likelihood_shape" in values:
        options["likelihood_shape"] = in_range(
            ctx, "assess.likelihood_shape", values["likelihood_shape"], 0.01, 100.0, "(a power)",
            "1 weighs members in proportion to their AUC above the rejection level",
        )  # fmt: skip
    return AssessOptions(**options)
