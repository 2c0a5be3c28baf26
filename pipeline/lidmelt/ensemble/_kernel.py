"""One chunk of an ensemble: every member evaluated, then reduced to probabilities, percentiles
and sums at once (nothing per member leaves the chunk).

Definitions (lidmelt's own; docs/workflow.md, [ensemble]):

- a member has a value in a cell when the cell has input data (its validity flag is not
  :data:`lidmelt._variables.FLAG_NODATA`) and the member's melt thickness H there is a number. A
  member without a value in a cell with data (no solidus crossing within the model's pressure
  range, an invalid input) is left out of that cell's probabilities and percentiles, and counted
  (the ``members_without_value_fraction`` layer, and per member its ``cells_without_value``); it
  is never
  taken as H = 0.
- probability ``melt_probability_<basis>_ge_<T>km``: among the members with a value in the cell,
  the fraction whose melt of the basis (:data:`lidmelt._variables.PROBABILITY_BASES`: the melt the
  thermal anomaly adds, or all melt) is >= T (compared in float32, the precision of the outputs)
  and whose melt fraction at the top of melting is at least
  :data:`lidmelt.physics.EXTRACTION_MIN_MELT_FRACTION` (a column below it does not count as
  melting).
- percentile q of an output: over the N members with a value, the linear interpolation between
  order statistics of Hyndman & Fan (1996, Am. Stat. 50, 361-365), definition 7 (numpy's
  ``"linear"``, R's default): with the values sorted x_0 <= ... <= x_(N-1) and h = (N - 1) q/100,
  x_floor(h) + (h - floor(h)) (x_(floor(h)+1) - x_floor(h)). The onset depth is defined only
  where a member melts: its percentiles are over the members that melt.
- sums per member: over the cells where it has a value, area x H (melt volume, km3), area x
  anomaly melt thickness, and the area of cells with H > 0 (km2); over each candidate of the
  deterministic run (a label grid: 0 outside, k for candidate k) area x H. Each cell's term is
  rounded to a multiple of 2^-20 (about 1e-6 km3 or km2) and summed as 64-bit integers: integer
  sums do not depend on the order of addition, so they are the same bit for bit whatever the
  chunking and workers. Beside them, per member, the cells without a value (in the basin and in
  each candidate; and how many of them had no solidus crossing or an invalid input).
- per candidate, from the first probability map: the sums of area x probability, of the area
  with a probability and of the area with probability >= :data:`LIKELY` (exact like the totals),
  and the largest probability.
- with known features (``[assess]``, :mod:`lidmelt.ensemble._posterior`): per member the basis
  melt at each feature's cell (``feature_values``: NaN where it has no value; each feature lies
  in one chunk, so the chunks' arrays add up) and the area of its cells with a value in the bins
  of :func:`lidmelt.ensemble._score.bin_keys` (``score_bins``: flat indices member x NBINS + bin
  and their area quanta, only the bins that hold area; combined into one dense histogram), and
  the members' melting indicators of the first threshold where they differ (``masks``:
  :func:`lidmelt.ensemble._posterior.pack_masks`; not combined: the stage keeps them on disk).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from lidmelt._engine import ChunkInputs, KernelSettings, evaluate_chunk
from lidmelt._variables import (
    FLAG_NODATA,
    MEMBERS_WITHOUT_VALUE,
    OUTPUTS,
    PROBABILITY_BASES,
    percentile_name,
    probability_name,
)
from lidmelt.ensemble._posterior import pack_masks
from lidmelt.ensemble._score import NBINS, bin_keys
from lidmelt.physics._evaluate import EXTRACTION_MIN_MELT_FRACTION
from lidmelt.physics._flags import FLAG_INVALID_INPUT, FLAG_NO_ONSET

#: Outputs whose percentiles an ensemble writes.
BASES: tuple[str, ...] = ("melt_thickness_km", "anomaly_melt_thickness_km", "onset_depth_km")
#: Basin totals of each member, in the order of the ``"totals"`` sums of :func:`reduce_chunk`.
TOTALS: tuple[str, ...] = ("melting_area_km2", "melt_volume_km3", "anomaly_melt_volume_km3")
#: Fixed-point step of the sums' cell terms (km2 or km3).
QUANTUM = 2.0**-20
#: A cell is "likely" to melt when its probability is at least this (more likely than not).
LIKELY = 0.5
#: Sums of :func:`reduce_chunk` combined by their largest value, not added.
MAXIMA = ("candidate_max_probability",)
#: Sums given as (flat indices, values) pairs, added into a dense array of the combined sums.
SPARSE = ("score_bins",)
_INDEX = {name: list(OUTPUTS).index(name) for name in OUTPUTS}


def layer_names(basis: str, thresholds_km, percentiles) -> list[str]:
    """Names of the reduced layers, in order: the probabilities (one per threshold), the
    percentiles of each of :data:`BASES`, and ``members_without_value_fraction``."""
    names = [probability_name(basis, t) for t in thresholds_km]
    names += [percentile_name(base, q) for base in BASES for q in percentiles]
    return [*names, MEMBERS_WITHOUT_VALUE.name]


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
    basis: str = "anomaly"
    features: int = 0  # known features to score each member against ([assess])


def member_percentiles(stack: np.ndarray, percentiles) -> np.ndarray:
    """Percentiles over axis 0 of ``stack`` (NaN members left out), Hyndman & Fan definition 7.

    Only cells whose members differ are sorted: where every member has the same finite value
    (far from melting: H = 0 in all) each percentile is that value, and where none has a value
    it is NaN. Sorting was most of an ensemble's cost beyond the kernel
    (``benchmarks/bench_ensemble.py``). Interpolated in float64, returned in ``stack``'s type.
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
    ordered = np.sort(stack[:, todo], axis=0).astype(np.float64)  # NaN sorts last
    last = count[todo] - 1
    for k, q in enumerate(percentiles):
        h = (float(q) / 100.0) * last
        below = np.floor(h).astype(np.int64)
        above = np.minimum(below + 1, last)
        a = np.take_along_axis(ordered, below[None], axis=0)[0]
        b = np.take_along_axis(ordered, above[None], axis=0)[0]
        out[k, todo] = a + (h - below) * (b - a)
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


def empty_sums(members: int, candidates: int, features: int = 0) -> dict[str, np.ndarray]:
    """Zeroed sums of one chunk (module notes); with ``features``, the features' values and
    the members' dense score histograms (the combined sums' form of ``score_bins``)."""
    zeros = np.zeros
    scored = {}
    if features:
        scored = {"feature_values": zeros((members, features)),
                  "score_bins": zeros(members * NBINS, np.int64)}  # fmt: skip
    return {
        **scored,
        "totals": zeros((len(TOTALS), members), np.int64),
        "cells_without_value": zeros(members, np.int64),
        "cells_no_onset": zeros(members, np.int64),
        "cells_invalid_input": zeros(members, np.int64),
        "candidate_volume": zeros((candidates, members), np.int64),
        "candidate_cells_without_value": zeros((candidates, members), np.int64),
        "candidate_probability_area": zeros(candidates, np.int64),
        "candidate_value_area": zeros(candidates, np.int64),
        "candidate_likely_area": zeros(candidates, np.int64),
        "candidate_max_probability": np.full(candidates, -1, np.int64),
    }


def combine_sums(total: dict[str, np.ndarray], part: dict[str, np.ndarray]) -> None:
    """Add the sums of one chunk (``part``) into ``total`` (the :data:`MAXIMA` by maximum)."""
    for key, value in part.items():
        if key in MAXIMA:
            np.maximum(total[key], value, out=total[key])
        elif key in SPARSE:
            np.add.at(total[key], value[0], value[1])
        elif key != "masks":
            total[key] += value


def _quanta(values: np.ndarray) -> np.ndarray:
    """Cell terms as int64 multiples of :data:`QUANTUM` (NaN as 0)."""
    return np.rint(np.nan_to_num(values) / QUANTUM).astype(np.int64)


def _member_sums(sums, m: int, out: np.ndarray, area: tuple, cells: list) -> np.ndarray:
    """Member ``m``'s sums from its kernel rows ``out`` (``area``: the cells' areas and their
    quanta); return its cells without a value."""
    area, area_quanta = area
    melt = out[_INDEX["melt_thickness_km"]]
    flag = out[-1]
    lacking = (flag != FLAG_NODATA) & np.isnan(melt)
    sums["cells_without_value"][m] = lacking.sum()
    if sums["cells_without_value"][m]:
        bits = flag[lacking].astype(np.int64)
        sums["cells_no_onset"][m] = ((bits & FLAG_NO_ONSET) > 0).sum()
        sums["cells_invalid_input"][m] = ((bits & FLAG_INVALID_INPUT) > 0).sum()
    volume = _quanta(melt.astype(np.float64) * area)
    anomaly = out[_INDEX["anomaly_melt_thickness_km"]].astype(np.float64)
    sums["totals"][1, m] = volume.sum()
    sums["totals"][2, m] = _quanta(anomaly * area).sum()
    sums["totals"][0, m] = area_quanta[melt > 0].sum()
    flat_volume, flat_lacking = volume.ravel(), lacking.ravel()
    for k, c in enumerate(cells):  # each candidate's melt volume and cells without a value
        sums["candidate_volume"][k, m] = flat_volume[c].sum()
        sums["candidate_cells_without_value"][k, m] = flat_lacking[c].sum()
    return lacking


def _candidate_probability(sums, probability: np.ndarray, area: np.ndarray, cells: list) -> None:
    """Per candidate: sums of area x p, of the area with a p and with p >= LIKELY, largest p."""
    p, a = probability.ravel().astype(np.float64), area.ravel()
    for k, c in enumerate(cells):
        pc, ac = p[c], a[c]
        ok = np.isfinite(pc)
        sums["candidate_probability_area"][k] = _quanta(pc[ok] * ac[ok]).sum()
        sums["candidate_value_area"][k] = _quanta(ac[ok]).sum()
        sums["candidate_likely_area"][k] = _quanta(ac[ok & (pc >= LIKELY)]).sum()
        if ok.any():
            sums["candidate_max_probability"][k] = int(np.rint(pc[ok].max() / QUANTUM))


def _score_bins(basis: np.ndarray, area_quanta: np.ndarray, m: int) -> tuple[np.ndarray, ...]:
    """Member ``m``'s area quanta per bin of its basis melt (cells with a value), as flat
    indices m x NBINS + bin and sums of the bins that hold area. Zero cells (most of an ocean)
    go to bin 0 by one sum; only the cells with melt are binned one by one."""
    finite = np.isfinite(basis)
    positive = basis > 0
    zero = int(area_quanta[finite & ~positive].sum())
    # integer quanta summed in float64 are exact below 2^53 (a chunk's area is far below)
    counts = np.bincount(bin_keys(basis[positive]), weights=area_quanta[positive],
                         minlength=NBINS)  # fmt: skip
    counts[0] += zero
    bins = np.flatnonzero(counts)
    return m * NBINS + bins, np.rint(counts[bins]).astype(np.int64)


def _feature_values(sums, m: int, basis: np.ndarray, features) -> None:
    """Member ``m``'s basis melt at the chunk's feature cells (``features``: ids and local
    flat indices)."""
    if features is not None and len(features[0]):
        sums["feature_values"][m, features[0]] = basis.ravel()[features[1]]


def _masks(indicators: np.ndarray, valued: np.ndarray, has_data: np.ndarray) -> dict:
    """The members' indicators where they differ or some member has no value (module notes)."""
    members = indicators.shape[0]
    count = indicators.sum(axis=0)
    agree = (valued.sum(axis=0) == members) & ((count == 0) | (count == members))
    return pack_masks(indicators, valued, (has_data & ~agree).ravel())


def reduce_chunk(
    plan: MemberPlan, area: np.ndarray, group_blocks, labels=None, features=None
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Evaluate every member on one chunk and reduce them (module notes).

    Returns the reduced layers ((n_layers, y, x) float32, in :func:`layer_names` order) and the
    chunk's sums (int64 multiples of :data:`QUANTUM` or counts, by name; combine the chunks'
    with :func:`combine_sums`). ``features`` (with ``plan.features``): the ids of the known
    features in this chunk and their flat indices in it.
    """
    area = np.asarray(area, np.float64)
    shape = area.shape
    values = _member_inputs(plan, group_blocks, shape)
    members = len(plan.settings)
    stacks = np.empty((len(BASES), members, *shape), np.float32)
    sums = empty_sums(members, plan.candidates)
    cells = _candidate_cells(labels, plan.candidates)
    basis_row = _INDEX[PROBABILITY_BASES[plan.basis]]
    f_min = np.float32(EXTRACTION_MIN_MELT_FRACTION)
    thresholds = [np.float32(t) for t in plan.thresholds_km]
    melting = np.zeros((len(thresholds), *shape), np.int64)
    with_value = np.zeros(shape, np.int64)
    without_value = np.zeros(shape, np.int64)
    has_data = np.zeros(shape, bool)
    area_quanta = _quanta(area)
    scoring = plan.features > 0
    if scoring:
        sums["feature_values"] = np.zeros((members, plan.features))
        bins, indicators = [], np.zeros((2, members, *shape), bool)
    checked: set[int] = set()  # input groups whose blocks were range-checked in this chunk
    for m, (settings, group) in enumerate(zip(plan.settings, plan.groups, strict=True)):
        out = evaluate_chunk(
            ChunkInputs(*values[group]), settings=settings, check_inputs=group not in checked
        )
        checked.add(group)
        for b, name in enumerate(BASES):
            stacks[b, m] = out[_INDEX[name]]
        without_value += _member_sums(sums, m, out, (area, area_quanta), cells)
        has_data |= out[-1] != FLAG_NODATA
        basis = out[basis_row]
        valued = np.isfinite(basis)
        with_value += valued
        extracted = out[_INDEX["max_melt_fraction"]] >= f_min
        for t, threshold in enumerate(thresholds):
            melts = extracted & (basis >= threshold)
            melting[t] += melts
            if scoring and t == 0:
                indicators[0, m], indicators[1, m] = melts, valued
        if scoring:
            bins.append(_score_bins(basis, area_quanta, m))
            _feature_values(sums, m, basis, features)
    with np.errstate(invalid="ignore", divide="ignore"):
        probability = np.where(with_value > 0, melting / with_value, np.nan).astype(np.float32)
    if cells:
        _candidate_probability(sums, probability[0], area, cells)
    if scoring:
        sums["score_bins"] = tuple(np.concatenate(parts) for parts in zip(*bins, strict=True))
        sums["masks"] = _masks(indicators[0], indicators[1], has_data)
    pcts = [member_percentiles(stacks[b], plan.percentiles) for b in range(len(BASES))]
    lacking = np.where(has_data, without_value / members, np.nan).astype(np.float32)[None]
    return np.concatenate([probability, *pcts, lacking]), sums
