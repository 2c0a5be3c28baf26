"""The outputs of an ensemble run, as the products read them.

An ensemble run (a workflow with an ``[ensemble]`` table; docs/workflow.md) writes, beside the
usual outputs, per-cell maps over its members:

- ``melt_probability``: the fraction of members with melt thickness > 0 (0 to 1);
- ``melt_probability_ge_<T>km``: the fraction with melt thickness >= T km (T as ``%g``);
- ``<variable>_p<q>``: the q-th percentile over the members of an output (e.g.
  ``melt_thickness_km_p90``, ``onset_depth_km_p50``);

the members' sampled parameters and basin totals in ``ensemble_members.csv`` (one row per
member: ``member``, one column per varied workflow key, ``melting_area_km2``,
``melt_volume_km3``, ``anomaly_melt_volume_km3``, then ``candidate_<rank>_melt_volume_km3`` per
tracked candidate), and an ``"ensemble"`` entry in ``summary.json`` (members, seed, sampling, the
distributions, thresholds, percentiles, the percentiles of the basin totals and the drivers; and
``"candidates"``: each tracked candidate of the deterministic run with its volume's percentiles
over the members and its drivers, :mod:`lidmelt.ensemble.candidates`).

:func:`variable_of` gives the :class:`~lidmelt.variables.Variable` of any of these names: the
registry's entry when it has one, else one derived from the name (a probability is
dimensionless with the ``"probability"`` style; a percentile map keeps its base variable's unit
and style). :func:`probability_grid` and :func:`probability_statistics` serve the screening of
probability maps (``lidmelt screen --min-probability``).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from lidmelt.errors import InputError, RunDirError
from lidmelt.grids.rundir import RunDir
from lidmelt.variables import VARIABLES, Variable, ensemble_variable

__all__ = [
    "LIKELY",
    "MEMBERS_FILE",
    "PROBABILITY_STATISTICS",
    "PROBABILITY_STYLE",
    "PROBABILITY_VARIABLE",
    "EnsembleName",
    "ensemble_entry",
    "is_ensemble_output",
    "parse_ensemble_name",
    "probability_grid",
    "probability_maps",
    "probability_name",
    "probability_statistics",
    "read_members",
    "variable_of",
]

#: The probability of melting (fraction of the members with melt thickness > 0).
PROBABILITY_VARIABLE = "melt_probability"
#: The members' sampled parameters and basin totals, in the run directory.
MEMBERS_FILE = "ensemble_members.csv"
#: Style key (:mod:`lidmelt.products.maps.style`) of every probability map.
PROBABILITY_STYLE = "probability"
#: A cell is "likely" to melt when its probability is at least this (more likely than not).
LIKELY = 0.5
#: Columns a screening candidate gets from a probability map.
PROBABILITY_STATISTICS = ("mean_probability", "max_probability", "likely_area_km2")

_THRESHOLD = re.compile(
    rf"^{PROBABILITY_VARIABLE}_ge_(?P<t>[0-9]+(?:\.[0-9]+)?(?:e[-+]?[0-9]+)?)km$"
)
_PERCENTILE = re.compile(r"^(?P<base>.+)_p(?P<q>[0-9]+(?:\.[0-9]+)?)$")


@dataclass(frozen=True)
class EnsembleName:
    """What an ensemble output's name says.

    ``kind`` is ``"probability"`` (``threshold_km`` None: melt > 0) or ``"percentile"``
    (``base`` the variable, ``percentile`` in 0-100).
    """

    kind: str
    base: str = ""
    threshold_km: float | None = None
    percentile: float | None = None


def probability_name(threshold_km: float | None = None) -> str:
    """The probability map of melt > 0 (None), or of melt thickness >= ``threshold_km`` km."""
    if threshold_km is None:
        return PROBABILITY_VARIABLE
    return f"{PROBABILITY_VARIABLE}_ge_{threshold_km:g}km"


def parse_ensemble_name(name: str) -> EnsembleName | None:
    """The meaning of an ensemble output name, or None for any other name."""
    if name == PROBABILITY_VARIABLE:
        return EnsembleName("probability")
    match = _THRESHOLD.match(name)
    if match:
        return EnsembleName("probability", threshold_km=float(match["t"]))
    match = _PERCENTILE.match(name)
    if match and match["base"] in VARIABLES and 0.0 <= float(match["q"]) <= 100.0:
        return EnsembleName("percentile", base=match["base"], percentile=float(match["q"]))
    return None


def is_ensemble_output(name: str) -> bool:
    """Whether ``name`` is a map over an ensemble's members (probability or percentile)."""
    return parse_ensemble_name(name) is not None


def variable_of(name: str) -> Variable | None:
    """The variable ``name``: the registry's entry or the ensemble output it names
    (:func:`lidmelt.variables.ensemble_variable`); None for any other name."""
    return VARIABLES.get(name) or ensemble_variable(name)


def probability_maps(run: RunDir) -> list[str]:
    """The run's probability maps (``melt_probability`` first, then by threshold)."""
    found = [n for n in run.outputs if (p := parse_ensemble_name(n)) and p.kind == "probability"]
    return sorted(found, key=lambda n: parse_ensemble_name(n).threshold_km or -1.0)


def ensemble_entry(run: RunDir) -> dict[str, Any] | None:
    """The ``"ensemble"`` entry of the run's summary, or None for a single run."""
    entry = run.summary.get("ensemble")
    return entry if isinstance(entry, dict) else None


def read_members(run: RunDir) -> pd.DataFrame:
    """The run's ``ensemble_members.csv`` (one row per member).

    Raises
    ------
    RunDirError
        If the file is missing or unreadable.
    """
    path = run.path / MEMBERS_FILE
    try:
        return pd.read_csv(path)
    except (OSError, ValueError) as exc:
        msg = (
            f"ensemble run {str(run.path)!r} has no readable {MEMBERS_FILE} ({exc}); it holds "
            "one row per member with its parameters and basin totals. Run 'lidmelt run' on "
            "the ensemble workflow again to rewrite it."
        )
        raise RunDirError(msg) from exc


def _no_probability_maps(run: RunDir, wanted: str) -> RunDirError:
    available = probability_maps(run)
    if available:
        msg = (
            f"run {str(run.path)!r} has no {wanted} map; its probability maps are "
            f"{', '.join(available)}. Choose one of their thresholds (--probability-of KM, "
            "probability=KM), or add the threshold to [ensemble] thresholds_km and run again."
        )
    else:
        msg = (
            f"run {str(run.path)!r} has no probability maps ({wanted} is missing): it is a "
            "single run, not an ensemble. Screening by probability needs the maps of an "
            "ensemble: add an [ensemble] table to the workflow (see docs/workflow.md, "
            "[ensemble]) and run 'lidmelt run' again, or screen this run's melt with "
            "--min-melt-thickness KM."
        )
    return RunDirError(msg)


def probability_grid(run: RunDir, probability: str | float | None) -> str:
    """The name of the probability map to screen, checked to be in the run.

    ``probability``: None (``melt_probability``), a melt thickness threshold in km
    (``melt_probability_ge_<T>km``) or the name of a probability map.

    Raises
    ------
    InputError
        If ``probability`` is neither a non-negative number nor a probability map's name.
    RunDirError
        If the run has no such map (naming the maps it has, or how to run an ensemble).
    """
    if probability is None or isinstance(probability, str):
        name = probability or PROBABILITY_VARIABLE
        parsed = parse_ensemble_name(name)
        if parsed is None or parsed.kind != "probability":
            msg = (
                f"probability map {name!r} is not a probability map name; expected "
                f"{PROBABILITY_VARIABLE} or {PROBABILITY_VARIABLE}_ge_<T>km (T in km, e.g. "
                f"{probability_name(1.0)}), or a threshold in km."
            )
            raise InputError(msg)
    else:
        threshold = float(probability) if isinstance(probability, int | float) else math.nan
        if not (math.isfinite(threshold) and threshold >= 0):
            msg = (
                f"--probability-of {probability!r} km is not a melt thickness; expected a "
                "threshold >= 0 in km among the ensemble's thresholds_km, e.g. 1."
            )
            raise InputError(msg)
        name = probability_name(threshold if threshold > 0 else None)
    if name not in run.outputs:
        raise _no_probability_maps(run, name)
    return name


def probability_statistics(
    probability: np.ndarray, flat: np.ndarray, areas_km2: np.ndarray
) -> dict[str, float]:
    """Probability statistics of the cells ``flat`` (flat indices) with areas ``areas_km2``.

    ``mean_probability``: the area-weighted mean over the cells with a value;
    ``max_probability``; ``likely_area_km2``: the area of the cells with probability >=
    :data:`LIKELY` (km^2). NaN (0 for the area) when no cell has a value.
    """
    p = probability.ravel()[flat]
    ok = np.isfinite(p)
    weight = float(areas_km2[ok].sum())
    return {
        "mean_probability": float((p[ok] * areas_km2[ok]).sum() / weight) if weight else math.nan,
        "max_probability": float(p[ok].max()) if ok.any() else math.nan,
        "likely_area_km2": float(areas_km2[ok & (p >= LIKELY)].sum()),
    }
