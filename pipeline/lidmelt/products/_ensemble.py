"""The outputs of an ensemble run, as the products read them.

An ensemble run (a workflow with an ``[ensemble]`` table; docs/workflow.md) writes, beside the
usual outputs, per-cell maps over its members (names from the registry,
:func:`lidmelt._variables.parse_ensemble_name`):

- ``melt_probability_<basis>_ge_<T>km``: the probability that a member's melt of the basis
  (``anomaly``: the melt the thermal anomaly adds; ``total``: all melt) reaches T km, among the
  members with a value in the cell (:mod:`lidmelt.ensemble._kernel`); the first of the run's
  thresholds is its probability of melting (:func:`run_probability`);
- ``<variable>_p<q>``: the q-th percentile over the members of an output (e.g.
  ``melt_thickness_km_p90``, ``onset_depth_km_p50``);
- ``members_without_value_fraction``: per cell, the fraction of the members without a value
  there;

the members' sampled parameters and totals in ``ensemble_members.csv`` (one row per member:
``member``, one column per varied workflow key, ``melting_area_km2``, ``melt_volume_km3``,
``anomaly_melt_volume_km3`` (empty where the member has no value in some cell),
``cells_without_value``, then per tracked candidate ``candidate_<rank>_melt_volume_km3`` and
``candidate_<rank>_cells_without_value``), and an ``"ensemble"`` entry in ``summary.json``
(members, seed, sampling, the distributions, the probability's basis and thresholds, the
percentiles of the totals, the members without a value, the drivers with their intervals; and
``"candidates"``: each tracked candidate of the deterministic run with its probability
statistics, its volume's percentiles over the members and its drivers,
:mod:`lidmelt.ensemble._candidates`).

Ensemble runs of an earlier lidmelt named their maps ``melt_probability`` (melt > 0) and
``melt_probability_ge_<T>km``, of no stated basis: :func:`probability_grid` refuses them with a
message that says to run again.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd

from lidmelt._errors import InputError, RunDirError
from lidmelt._variables import (
    PROBABILITY_BASES,
    VARIABLES,
    EnsembleName,
    Variable,
    ensemble_variable,
    is_legacy_probability,
    parse_ensemble_name,
    probability_name,
)
from lidmelt.ensemble._kernel import LIKELY
from lidmelt.ensemble._stage import MEMBERS_FILE
from lidmelt.grids._rundir import RunDir

#: Style key (:mod:`lidmelt.products._maps._style`) of every probability map.
PROBABILITY_STYLE = "probability"
#: Columns a screening candidate gets from a probability map (with its basis and threshold).
PROBABILITY_STATISTICS = ("mean_probability", "max_probability", "likely_area_km2")


def is_ensemble_output(name: str) -> bool:
    """Whether ``name`` is a map over an ensemble's members (probability, percentile, count)."""
    return parse_ensemble_name(name) is not None


def variable_of(name: str) -> Variable | None:
    """The variable ``name``: the registry's entry or the ensemble output it names
    (:func:`lidmelt._variables.ensemble_variable`); None for any other name."""
    return VARIABLES.get(name) or ensemble_variable(name)


def probability_maps(run: RunDir, basis: str | None = None) -> list[str]:
    """The run's probability maps (of ``basis`` only, if given), by basis then threshold."""
    parsed = [(parse_ensemble_name(n), n) for n in run.outputs]
    found = [(p, n) for p, n in parsed if p and p.kind == "probability"]
    found = [(p, n) for p, n in found if basis is None or p.basis == basis]
    return [n for p, n in sorted(found, key=lambda item: (item[0].basis, item[0].threshold_km))]


def run_probability(run: RunDir, basis: str | None = None) -> str | None:
    """The run's probability of melting: the first probability map its summary lists (of
    ``basis``, if given), else the first it has; None without one."""
    entry = (ensemble_entry(run) or {}).get("probability")
    listed = entry.get("outputs") if isinstance(entry, dict) else None
    maps = probability_maps(run, basis)
    for name in listed if isinstance(listed, list) else []:
        if name in maps:
            return name
    return maps[0] if maps else None


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


def _basis_text(basis: str) -> str:
    return {"anomaly": "the melt the thermal anomaly adds", "total": "all melt"}.get(basis, basis)


def legacy_probability_maps(run: RunDir) -> list[str]:
    """The probability maps of an ensemble run of an earlier lidmelt (``melt_probability``,
    ``melt_probability_ge_<T>km``: of any melt, no basis), as its summary lists them."""
    listed = run.summary.get("outputs")
    return [n for n in listed if is_legacy_probability(n)] if isinstance(listed, dict) else []


def _missing_probability(run: RunDir, basis: str, wanted: str | None) -> RunDirError:
    """Why the run has no probability map of ``basis`` (``wanted``: the one asked for)."""
    path = str(run.path)
    if not probability_maps(run) and legacy_probability_maps(run):
        msg = (
            f"run {path!r} was made by an earlier lidmelt: its probability maps "
            f"({', '.join(legacy_probability_maps(run))}) count any melt "
            "and say nothing of its basis. Run 'lidmelt run' on the ensemble workflow again; "
            f"the maps are now {probability_name('anomaly', 1.0)} and the like."
        )
        return RunDirError(msg)
    if not probability_maps(run):
        msg = (
            f"run {path!r} has no probability maps: it is a single run, not an ensemble. "
            "Screening by probability needs the maps of an ensemble: add an [ensemble] table to "
            "the workflow (see docs/workflow.md, [ensemble]) and run 'lidmelt run' again, or "
            "screen this run's melt with --min-melt-thickness KM."
        )
        return RunDirError(msg)
    mine = probability_maps(run, basis)
    if not mine:
        other = probability_maps(run)
        bases = sorted({parse_ensemble_name(n).basis for n in other})
        msg = (
            f"screening basis {basis!r} ({_basis_text(basis)}) needs a probability of that "
            f"melt, but the probability maps of run {path!r} are of basis "
            f"{', '.join(map(repr, bases))}: {', '.join(other)}. Screen with --basis "
            f"{bases[0]}, or run the ensemble again with [ensemble] probability_basis = "
            f'"{basis}".'
        )
        return RunDirError(msg)
    msg = (
        f"run {path!r} has no {wanted} map; its probability maps of basis {basis!r} are "
        f"{', '.join(mine)}. Choose one of their thresholds (--probability-of KM), or add the "
        "threshold to [ensemble] thresholds_km and run again."
    )
    return RunDirError(msg)


def _named_probability(name: str, basis: str) -> EnsembleName:
    """The parsed probability map ``name``, or an InputError."""
    parsed = parse_ensemble_name(name)
    if parsed is None or parsed.kind != "probability":
        msg = (
            f"probability map {name!r} is not a probability map name; expected "
            "melt_probability_<basis>_ge_<T>km (basis one of "
            f"{', '.join(PROBABILITY_BASES)}, T in km, e.g. {probability_name(basis, 1.0)}), "
            "or a threshold in km."
        )
        raise InputError(msg)
    return parsed


def probability_grid(run: RunDir, probability: str | float | None, basis: str = "anomaly") -> str:
    """The name of the probability map of ``basis`` to screen, checked to be in the run.

    ``probability``: None (the run's probability of melting of that basis,
    :func:`run_probability`), a melt threshold in km (``melt_probability_<basis>_ge_<T>km``) or
    the name of a probability map (of that basis).

    Raises
    ------
    InputError
        If ``probability`` is neither a positive number nor a probability map's name.
    RunDirError
        If the run has no such map: a single run (says how to run an ensemble), a run of an
        earlier lidmelt, or maps of another basis or threshold (naming both).
    """
    if isinstance(probability, str):
        parsed = _named_probability(probability, basis)
        if parsed.basis != basis:
            raise _missing_probability(run, basis, probability)
        name = probability
    elif probability is None:
        name = run_probability(run, basis)
        if name is None:
            raise _missing_probability(run, basis, None)
    else:
        threshold = float(probability) if isinstance(probability, int | float) else math.nan
        if not (math.isfinite(threshold) and threshold > 0):
            msg = (
                f"--probability-of {probability!r} km is not a melt thickness; expected a "
                "threshold > 0 in km among the ensemble's thresholds_km, e.g. 1."
            )
            raise InputError(msg)
        name = probability_name(basis, threshold)
    if name not in run.outputs:
        raise _missing_probability(run, basis, name)
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
