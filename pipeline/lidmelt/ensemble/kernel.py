"""One chunk of an ensemble: every member evaluated, then reduced to probabilities, percentiles
and basin totals at once (nothing per member leaves the chunk).

Definitions (lidmelt's own):

- melt probability: the fraction of members with melt thickness H > 0 in a cell (among the
  members with data there); ``melt_probability_ge_<T>km``: the fraction with H >= T (compared
  in float32, the precision of the outputs).
- percentile q of an output: the empirical quantile of the members' values, the order statistic
  of rank ceil(q N / 100) (at least 1) among the N members with a value (the inverse of the
  empirical distribution function, definition 1 of Hyndman & Fan 1996, Am. Stat. 50, 361; from
  memory). No interpolation, so for an output that grows monotonically with one varied input the
  percentile is the output at that input's own percentile. The onset depth is defined only where
  a member melts: its percentiles are over the members that melt.
- basin totals per member: sum over cells of area x H (melt volume, km3), area x anomaly melt
  thickness, and the area of cells with H > 0 (km2). Each cell's term is rounded to a multiple of
  2^-20 (about 1e-6 km3 or km2) and summed as 64-bit integers: integer sums do not depend on the
  order of addition, so the totals are the same bit for bit whatever the chunking and workers.
- candidate volumes per member: the same integer sum of area x H over the cells of each
  candidate of the deterministic run (a label grid: 0 outside, k for candidate k), exact too.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from lidmelt.engine import KernelSettings, evaluate_chunk
from lidmelt.variables import OUTPUTS

__all__ = [
    "BASES",
    "QUANTUM",
    "TOTALS",
    "MemberPlan",
    "layer_names",
    "order_statistics",
    "reduce_chunk",
]

#: Outputs whose percentiles an ensemble writes.
BASES: tuple[str, ...] = ("melt_thickness_km", "anomaly_melt_thickness_km", "onset_depth_km")
#: Basin totals of each member, in the order of :func:`reduce_chunk`'s totals.
TOTALS: tuple[str, ...] = ("melting_area_km2", "melt_volume_km3", "anomaly_melt_volume_km3")
#: Fixed-point step of the totals' cell terms (km2 or km3).
QUANTUM = 2.0**-20
_INDEX = {name: list(OUTPUTS).index(name) for name in BASES}


def layer_names(thresholds_km, percentiles) -> list[str]:
    """Names of the reduced layers, in order: probability, thresholds, percentiles per base."""
    names = ["melt_probability"] + [f"melt_probability_ge_{t:g}km" for t in thresholds_km]
    return names + [f"{base}_p{q:g}" for base in BASES for q in percentiles]


@dataclass(frozen=True, eq=False)
class MemberPlan:
    """How to evaluate the members of a chunk.

    ``settings[m]`` is member m's kernel settings and ``groups[m]`` its input group; for each
    group, ``scalars[g]`` holds per kernel input its constant, or None where a block is passed.
    """

    settings: tuple[KernelSettings, ...]
    groups: tuple[int, ...]
    scalars: tuple[tuple[Any, ...], ...]
    thresholds_km: tuple[float, ...]
    percentiles: tuple[float, ...]
    candidates: int = 0


def order_statistics(stack: np.ndarray, percentiles) -> np.ndarray:
    """Percentiles over axis 0 of ``stack`` as order statistics (NaN members left out).

    Only cells whose members differ are sorted: where every member has the same finite value
    (far from melting: H = 0 in all) each order statistic is that value, and where none has a
    value it is NaN. Sorting was most of an ensemble's cost beyond the kernel
    (``benchmarks/bench_ensemble.py``).
    """
    count = np.isfinite(stack).sum(axis=0)
    out = np.full((len(percentiles), *stack.shape[1:]), np.nan, stack.dtype)
    with np.errstate(invalid="ignore"):
        low = np.fmin.reduce(stack, axis=0)
        same = (count == len(stack)) & (low == np.fmax.reduce(stack, axis=0))
    out[:, same] = low[same]
    todo = ~same & (count > 0)
    if not todo.any():
        return out
    ordered = np.sort(stack[:, todo], axis=0)  # NaN sorts last
    n = count[todo]
    for k, q in enumerate(percentiles):
        rank = np.maximum(np.ceil(q * n / 100.0).astype(np.int64) - 1, 0)
        rank = np.minimum(rank, len(stack) - 1)
        out[k, todo] = np.take_along_axis(ordered, rank[None], axis=0)[0]
    return out


def _member_inputs(plan: MemberPlan, group_blocks, shape) -> list[list[Any]]:
    """Per group, the kernel's positional inputs (blocks and constants, age broadcast)."""
    out = []
    for scalars, blocks in zip(plan.scalars, group_blocks, strict=True):
        it = iter(blocks)
        vals = [next(it) if s is None else s for s in scalars]
        vals[0] = np.broadcast_to(vals[0], shape)  # the lid from age needs an age everywhere
        out.append(vals)
    return out


def _candidate_cells(labels, candidates: int) -> list[np.ndarray]:
    """Flat indices of the chunk's cells of candidates 1..``candidates`` (none without labels)."""
    if labels is None or candidates == 0:
        return []
    flat = np.asarray(labels).ravel()
    return [np.flatnonzero(flat == k) for k in range(1, candidates + 1)]


def reduce_chunk(
    plan: MemberPlan, area: np.ndarray, group_blocks, labels=None
) -> tuple[np.ndarray, np.ndarray]:
    """Evaluate every member on one chunk and reduce them.

    Returns the reduced layers ((n_layers, y, x) float32, in :func:`layer_names` order) and the
    members' totals ((3 + plan.candidates, members) int64 multiples of :data:`QUANTUM`:
    :data:`TOTALS` order, then the melt volume of candidates 1..K of ``labels``).
    """
    area = np.asarray(area, np.float64)
    shape = area.shape
    values = _member_inputs(plan, group_blocks, shape)
    members = len(plan.settings)
    stacks = np.empty((len(BASES), members, *shape), np.float32)
    totals = np.zeros((len(TOTALS) + plan.candidates, members), np.int64)
    cells = _candidate_cells(labels, plan.candidates)
    cell_area = np.rint(area / QUANTUM).astype(np.int64)
    checked: set[int] = set()  # input groups whose blocks were range-checked in this chunk
    for m, (settings, group) in enumerate(zip(plan.settings, plan.groups, strict=True)):
        out = evaluate_chunk(*values[group], settings=settings, check_inputs=group not in checked)
        checked.add(group)
        for b, name in enumerate(BASES):
            stacks[b, m] = out[_INDEX[name]]
        for t, layer in ((1, stacks[0, m]), (2, stacks[1, m])):
            terms = np.rint(np.nan_to_num(layer.astype(np.float64) * area) / QUANTUM)
            totals[t, m] = terms.astype(np.int64).sum()
            if t == 1 and cells:  # the melt volume of each candidate's cells
                totals[len(TOTALS) :, m] = [terms.ravel()[c].astype(np.int64).sum() for c in cells]
        totals[0, m] = cell_area[stacks[0, m] > 0].sum()
    thickness = stacks[0]
    count = np.isfinite(thickness).sum(axis=0)
    layers = [(thickness > 0).sum(axis=0)]
    layers += [(thickness >= np.float32(t)).sum(axis=0) for t in plan.thresholds_km]
    with np.errstate(invalid="ignore", divide="ignore"):
        fractions = [np.where(count > 0, n / count, np.nan) for n in layers]
    reduced = np.stack(fractions).astype(np.float32)
    pcts = [order_statistics(stacks[b], plan.percentiles) for b in range(len(BASES))]
    return np.concatenate([reduced, *pcts]), totals
