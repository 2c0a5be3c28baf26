"""What drives each candidate: the screening candidates of the deterministic run, per member.

The ensemble stage runs after the deterministic outputs are stored, so their candidates are
known before any member is evaluated. A layer above the ensemble (the products' screening,
handed in by ``lidmelt run``: :func:`lidmelt.products._screening.ensemble_candidates`) screens
the deterministic run and returns :class:`Candidates`: a label grid (0 outside, k on the cells of
the candidate of rank k, for the K largest) and one record per candidate. Each chunk then sums,
per member, area x melt thickness over each candidate's cells (exactly, like the basin totals:
:func:`lidmelt.ensemble._kernel.reduce_chunk`), and :func:`candidate_entries` ranks the varied
keys against each candidate's volume with the estimators of :mod:`lidmelt.ensemble._drivers`.

A candidate's footprint is that of the deterministic run: a member's melt outside it counts in
the basin total, not in the candidate's volume.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from lidmelt._config_tables import VarySpec
from lidmelt.ensemble._drivers import drivers, total_statistics


@dataclass(frozen=True, eq=False)
class Candidates:
    """The deterministic run's candidates as the ensemble tracks them.

    ``labels``: (height, width) unsigned integers on the run's grid (the smallest type that holds
    K: one byte per cell for up to 255 candidates), 0 outside, k (1..K) on the cells of the
    candidate of rank k. ``records[k - 1]``: that candidate's screening record (at least
    ``rank``, ``plume``, ``n_cells``, ``area_km2``, ``melt_volume_km3``). ``screening``: how
    they were found (basis, thresholds, how many regions qualified).
    """

    labels: np.ndarray
    records: tuple[dict[str, Any], ...]
    screening: dict[str, Any] = field(default_factory=dict)

    @property
    def count(self) -> int:
        return len(self.records)


#: ``source(context) -> Candidates or None``: screens the deterministic run of a stage context.
CandidateSource = Callable[[Any], "Candidates | None"]


def candidate_column(rank: int) -> str:
    """The ``ensemble_members.csv`` column of the melt volume of candidate ``rank`` (km3)."""
    return f"candidate_{rank}_melt_volume_km3"


def candidate_missing_column(rank: int) -> str:
    """The ``ensemble_members.csv`` column of the cells of candidate ``rank`` where a member
    has no value (its volume there is then NaN: :mod:`lidmelt.ensemble._missing`)."""
    return f"candidate_{rank}_cells_without_value"


def candidate_probability(sums: dict[str, np.ndarray], k: int, quantum: float) -> dict[str, Any]:
    """Candidate ``k`` (from 0)'s probability statistics from the ensemble's sums: the
    area-weighted mean over its cells with a value, the largest, and the area where melting is
    more likely than not (km2; :data:`lidmelt.ensemble._kernel.LIKELY`)."""
    area = int(sums["candidate_value_area"][k])
    top = int(sums["candidate_max_probability"][k])
    return {
        "mean_probability": sums["candidate_probability_area"][k] / area if area else None,
        "max_probability": top * quantum if top >= 0 else None,
        "likely_area_km2": float(sums["candidate_likely_area"][k] * quantum),
    }


def candidate_entries(
    found: Candidates,
    vary: Sequence[VarySpec],
    samples: Sequence[Sequence[Any]],
    volumes: np.ndarray,
    percentiles: Sequence[float],
    *,
    missing: np.ndarray | None = None,
    probability: Sequence[dict[str, Any]] = (),
    seed: int = 0,
) -> list[dict[str, Any]]:
    """Per candidate: its record, its volume's percentiles over the members and its drivers.

    ``volumes``: (K, members) km3, NaN where a member has no value in some of the candidate's
    cells (``missing``: (K, members) those cells' counts); such members are left out of the
    percentiles and drivers and counted as ``members_without_value``. The record's
    ``melt_volume_km3`` is the deterministic (central) volume; ``members_melt_volume_km3`` the
    statistics over the members; ``probability`` per candidate its probability statistics
    (:func:`candidate_probability`, with the probability's basis and threshold).
    """
    out = []
    for k, (record, volume) in enumerate(zip(found.records, volumes, strict=True)):
        lacking = int((missing[k] > 0).sum()) if missing is not None else 0
        out.append(
            {
                **record,
                **(probability[k] if k < len(probability) else {}),
                "members_without_value": lacking,
                "members_melt_volume_km3": total_statistics(volume, percentiles),
                "drivers": drivers(vary, samples, volume, seed=seed, salt=k + 1),
            }
        )
    return out
