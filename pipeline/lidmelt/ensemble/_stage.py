"""The ensemble stage of a run: members grouped, memory checked, chunks reduced and written.

Members whose workflows differ only in ``[inputs]`` share one melting model and table; each
distinct model (name and parameters) builds one table (cached on disk like every table) and the
summary reports how many. Members with the same inputs share their input blocks. The grid is
computed one row of chunks at a time, each chunk one task (:func:`lidmelt.ensemble._kernel.
reduce_chunk`) on local threads or on a dask.distributed scheduler (``[compute] scheduler`` or
the ``LIDMELT_SCHEDULER`` environment variable); the reduced rows are written here. Given a
candidate source (:mod:`lidmelt.ensemble._candidates`), the stage first screens the deterministic
run and keeps, per member, the melt volume of each of its largest candidates.
"""

from __future__ import annotations

import functools
import sys
import tempfile
import time
import uuid
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._cluster import share
from lidmelt._engine import StageContext, kernel_arguments, kernel_settings
from lidmelt._errors import WorkflowError
from lidmelt._files import write_text_atomic
from lidmelt._run_inputs import lid_cooling_model, load_inputs, load_model
from lidmelt._variables import PROBABILITY_BASES, ensemble_variable, weighted_probability_name
from lidmelt.ensemble._candidates import (
    Candidates,
    CandidateSource,
    candidate_column,
    candidate_entries,
    candidate_missing_column,
    candidate_probability,
)
from lidmelt.ensemble._drivers import INTERVAL, REPLICATES, drivers, total_statistics
from lidmelt.ensemble._kernel import (
    LIKELY,
    QUANTUM,
    TOTALS,
    MemberPlan,
    combine_sums,
    empty_sums,
    layer_names,
    reduce_chunk,
)
from lidmelt.ensemble._missing import missing_summary, missing_warning
from lidmelt.ensemble._posterior import glue_weights
from lidmelt.ensemble._scoring import (
    assessment_entry,
    feature_blocks,
    locate,
    masks_size,
    member_scores,
    write_weighted,
)
from lidmelt.grids import _rundir as rundir
from lidmelt.grids._area import cell_area_km2
from lidmelt.grids._store import GeoTiffItem, GeoTiffSet
from lidmelt.physics._evaluate import EXTRACTION_MIN_MELT_FRACTION

#: The members' sampled values and basin totals, in the run directory.
MEMBERS_FILE = "ensemble_members.csv"
#: Its columns of each member's score against the known features ([assess]).
SCORE_COLUMNS = ("auc", "auc_bound", "features_scored", "weight")
#: Bytes per cell of one member's kernel evaluation in flight (float64 temporaries of the
#: column evaluation and the stacked outputs; measured with bench_ensemble.py, rounded up).
_KERNEL_BYTES_PER_CELL = 400
#: Inputs per group held per cell (float64).
_INPUT_BYTES_PER_CELL = 5 * 8


def estimate_memory_bytes(cfg, *, groups: int | None = None) -> int:
    """Peak memory of the ensemble: per worker, one chunk of every member's kept outputs (three
    float32 layers and their sorted copy; with known features two bool indicators too), the
    input blocks of every input group, one member's kernel temporaries and the reduced
    layers.

    Parameters
    ----------
    cfg : RunConfig
        The validated workflow (its ensemble, grid and chunks).
    groups : int, optional
        The number of input groups; by default counted from the workflow.

    Returns
    -------
    int
        The estimated peak in bytes.
    """
    ens = cfg.ensemble
    side = int(cfg.compute.chunk_size)
    cells = side * side
    groups = groups if groups is not None else len({c.inputs for c in ens.configs}) or 1
    layers = len(layer_names(ens.probability_basis, ens.thresholds_km, ens.percentiles))
    scoring = 2 if getattr(cfg, "assess", None) is not None else 0  # members' indicators
    per_cell = (
        ens.members * (3 * 4 * 2 + scoring)
        + groups * _INPUT_BYTES_PER_CELL
        + _KERNEL_BYTES_PER_CELL
        + layers * 4 * 2
    )
    return int(cells * per_cell * max(1, int(cfg.compute.workers)))


def check_memory(cfg) -> float:
    """The ensemble's estimated memory in GB; a WorkflowError if over ``memory_limit_gb``."""
    need = estimate_memory_bytes(cfg) / 1e9
    limit = cfg.ensemble.memory_limit_gb
    if need > limit:
        msg = (
            f"an ensemble of ensemble.members = {cfg.ensemble.members} with compute.chunk_size "
            f"= {cfg.compute.chunk_size} and compute.workers = {cfg.compute.workers} needs about "
            f"{need:.3g} GB, over ensemble.memory_limit_gb = {limit:g} GB; memory grows with "
            "chunk_size^2 x members x workers. Lower ensemble.members, compute.chunk_size (e.g. "
            "256) or compute.workers, or raise ensemble.memory_limit_gb if the machine has the "
            "memory."
        )
        raise WorkflowError(msg)
    return need


def ensemble_stages(
    cfg, *, announce: bool = True, candidates: CandidateSource | None = None
) -> tuple:
    """The extra stages of :func:`lidmelt._engine.run_basin` for ``cfg``: the ensemble, if the
    workflow has one, its memory checked (and stated on stderr) before the run starts.

    Parameters
    ----------
    cfg : RunConfig
        The validated workflow.
    announce : bool
        Print the members' memory estimate on stderr.
    candidates : callable, optional
        ``candidates(context)`` screens the deterministic run
        (:mod:`lidmelt.ensemble._candidates`); without it (or with ``[ensemble] candidates = 0``)
        only the basin totals get drivers.

    Returns
    -------
    tuple
        The stages to pass as ``run_basin(cfg, extra_stages=...)``; empty without an ensemble.

    Raises
    ------
    ConfigError
        If the members would not fit in memory (the message gives the estimate and the limit).
    """
    if getattr(cfg, "ensemble", None) is None:
        return ()
    need = check_memory(cfg)
    if announce:
        ens = cfg.ensemble
        print(
            f"lidmelt run: ensemble of {ens.members} members ({ens.sampling}, seed {ens.seed}), "
            f"about {need:.3g} GB of memory (limit {ens.memory_limit_gb:g} GB)",
            file=sys.stderr,
        )
    if candidates is None or cfg.ensemble.candidates == 0:
        return (run_ensemble_stage,)
    return (functools.partial(run_ensemble_stage, candidates=candidates),)


def _table_key(cfg) -> tuple:
    """What a melting table depends on: the model's name and parameter overrides."""
    return (cfg.model.name, cfg.model.parameters)


def _plan(
    context: StageContext, candidates: int = 0, features: int = 0
) -> tuple[MemberPlan, list[list], int]:
    """The members' plan, each input group's kernel arguments, and the tables built."""
    cfg = context.cfg
    ens = cfg.ensemble
    chunks = int(cfg.compute.chunk_size)
    template = context.target.template(chunks)
    groups: dict[Any, tuple[int, Any]] = {cfg.inputs: (0, context.inputs)}
    models: dict[Any, tuple] = {_table_key(cfg): (context.model, context.table)}
    coolings: dict[Any, Any] = {}
    shared: dict = {}  # identical input files are read and aligned once for all groups
    settings, member_groups = [], []
    for member in ens.configs:
        if member.inputs not in groups:
            inputs = load_inputs(member, target=context.target, chunks=chunks, cache=shared)
            groups[member.inputs] = (len(groups), inputs)
        index, inputs = groups[member.inputs]
        if _table_key(member) not in models:
            models[_table_key(member)] = load_model(member)
        model, table = models[_table_key(member)]
        if member.lithosphere not in coolings:
            coolings[member.lithosphere] = lid_cooling_model(member, inputs=inputs)
        cooling = coolings[member.lithosphere]
        if "plate_age_ma" not in inputs.values:
            cooling = None
        settings.append(
            kernel_settings(member, inputs=inputs, model=model, table=table, cooling=cooling)
        )
        member_groups.append(index)
    args = [kernel_arguments(inputs, template=template) for _, inputs in groups.values()]
    scalars = tuple(tuple(None if hasattr(a, "dask") else a for a in arg) for arg in args)
    used = {_table_key(m) for m in ens.configs}
    tables = len(used) if cfg.compute.method == "table" else 0
    plan = MemberPlan(tuple(settings), tuple(member_groups), scalars, ens.thresholds_km,
                      ens.percentiles, candidates, ens.probability_basis, features)  # fmt: skip
    return plan, [[a for a in arg if hasattr(a, "dask")] for arg in args], tables


def _label_blocks(labels: np.ndarray | None, chunks: tuple) -> list[list]:
    """``labels`` cut into the blocks of ``chunks`` ((rows, cols) of a dask array), or Nones."""
    rows, cols = (np.cumsum((0, *c)) for c in chunks)
    if labels is None:
        return [[None] * (len(cols) - 1) for _ in range(len(rows) - 1)]
    return [
        [labels[rows[i] : rows[i + 1], cols[j] : cols[j + 1]] for j in range(len(cols) - 1)]
        for i in range(len(rows) - 1)
    ]


def _compute_rows(
    context: StageContext, plan: MemberPlan, group_arrays, write, labels=None, scoring=None
) -> dict[str, np.ndarray]:
    """Reduce every chunk, one row of chunks at a time; ``write(row0, layers)`` each row;
    return the chunks' sums combined (:func:`lidmelt.ensemble._kernel.combine_sums`). With
    ``scoring`` (the known features' cells and a folder), each chunk's member masks are saved
    there and listed in the sums' ``"masks"`` by (row, column) of chunks."""
    import dask

    cfg = context.cfg
    chunks = int(cfg.compute.chunk_size)
    area = cell_area_km2(context.target, chunks=chunks).data
    template = context.target.template(chunks).data
    area = area.rechunk(template.chunks)
    label_blocks = _label_blocks(labels, area.chunks)
    cells, folder = scoring if scoring is not None else (None, None)
    feature_at = feature_blocks(cells, area.chunks, context.target.width)
    chunk_grid = area.chunks
    area = area.to_delayed()
    blocks = [[a.to_delayed(optimize_graph=False) for a in arrays] for arrays in group_arrays]
    token = uuid.uuid4().hex
    client = context.client  # the run's (lidmelt._cluster.connect), or None: local threads
    if client is not None:  # the plan and its tables go to each worker once, not every row
        plan_d = share(client, plan)
    else:
        plan_d = dask.delayed(plan, name=f"lidmelt-ensemble-plan-{token}", traverse=False)
    sums = empty_sums(len(plan.settings), plan.candidates, plan.features)
    masks: dict = {}
    kwargs = {"scheduler": "threads", "num_workers": int(cfg.compute.workers)}
    if client is not None:
        kwargs = {"scheduler": client.get}
    row0 = 0
    for i in range(area.shape[0]):
        tasks = [
            dask.delayed(reduce_chunk, pure=True)(
                plan_d,
                area[i, j],
                [[b[i, j] for b in g] for g in blocks],
                label_blocks[i][j],
                feature_at[i][j],
                dask_key_name=f"lidmelt-ensemble-{token}-{i}-{j}",
            )
            for j in range(area.shape[1])
        ]
        results = dask.compute(*tasks, **kwargs)
        layers = np.concatenate([r[0] for r in results], axis=2)
        for j, r in enumerate(results):
            if "masks" in r[1]:
                masks[i, j] = folder / f"masks_{i}_{j}.npz"
                np.savez(masks[i, j], **r[1]["masks"])
            combine_sums(sums, r[1])
        write(row0, list(layers))
        row0 += layers.shape[1]
    if masks:
        sums["masks"] = masks
        sums["chunks"] = chunk_grid
    return sums


def _csv_number(value: float) -> str:
    """A CSV cell: the number's repr (an integer as it is), or empty for NaN (no value)."""
    if isinstance(value, np.integer | int):
        return str(int(value))
    return "" if np.isnan(value) else repr(float(value))


def _members_csv(
    ens, totals: np.ndarray, missing: np.ndarray, volumes, volume_missing, scores=None
) -> str:
    """The text of :data:`MEMBERS_FILE`: member, each varied key, the basin totals (empty where
    the member has no value in some cell) and its cells without a value, then per tracked
    candidate its melt volume and cells without a value; with known features each member's
    ``auc``, ``auc_bound``, ``features_scored`` and ``weight`` (:data:`SCORE_COLUMNS`)."""
    ranks = range(1, len(volumes) + 1)
    head = ["member", *(s.key for s in ens.vary), *TOTALS, "cells_without_value"]
    for rank in ranks:
        head += [candidate_column(rank), candidate_missing_column(rank)]
    head += list(SCORE_COLUMNS) if scores is not None else []
    rows = [",".join(head)]
    for m, sample in enumerate(ens.samples):
        cells = [str(m + 1), *(repr(v) if not isinstance(v, str) else v for v in sample)]
        cells += [_csv_number(v) for v in totals[:, m]] + [str(int(missing[m]))]
        for k in range(len(volumes)):
            cells += [_csv_number(volumes[k, m]), str(int(volume_missing[k, m]))]
        if scores is not None:
            cells += [_csv_number(scores[c][m]) for c in SCORE_COLUMNS]
        rows.append(",".join(cells))
    return "\n".join(rows) + "\n"


def _screen(context: StageContext, source: CandidateSource | None) -> Candidates | None:
    """The deterministic run's candidates, the largest ``[ensemble] candidates`` of them."""
    if source is None or context.cfg.ensemble.candidates == 0:
        return None
    return source(context)


def _with_values(quanta: np.ndarray, missing: np.ndarray) -> np.ndarray:
    """Sums in km2 or km3, NaN for the members without a value in some of their cells."""
    return np.where(missing > 0, np.nan, quanta * QUANTUM)


def _probability_entry(ens, names: list[str]) -> dict[str, Any]:
    """The summary's ``probability`` entry: what the probability maps are of."""
    return {
        "basis": ens.probability_basis,
        "thresholds_km": list(ens.thresholds_km),
        "outputs": names[: len(ens.thresholds_km)],
        "min_melt_fraction": EXTRACTION_MIN_MELT_FRACTION,
        "likely": LIKELY,
        "members_counted": "the members with a value in the cell",
    }


def _candidates_entry(found: Candidates, ens, sums, names: list[str]) -> dict[str, Any]:
    """The summary's ``candidates`` entry (with each candidate's probability statistics)."""
    volumes = _with_values(sums["candidate_volume"], sums["candidate_cells_without_value"])
    basis = {"probability": names[0], "probability_basis": ens.probability_basis,
             "probability_threshold_km": ens.thresholds_km[0]}  # fmt: skip
    probability = [{**basis, **candidate_probability(sums, k, QUANTUM)} for k in range(found.count)]
    listed = candidate_entries(
        found, ens.vary, ens.samples, volumes, ens.percentiles,
        missing=sums["candidate_cells_without_value"], probability=probability, seed=ens.seed,
    )  # fmt: skip
    return {**found.screening, "tracked": found.count, "list": listed}


def _score_members(context: StageContext, sums, cells, items, names) -> tuple[dict, list, list]:
    """After the pass: each member's score and weight, the summary's ``assessment`` entry and
    the weighted probability map (:mod:`lidmelt.ensemble._scoring`); returns the scores (by
    column), the written files and warnings."""
    cfg, ens = context.cfg, context.cfg.ensemble
    options = cfg.assess
    scores = member_scores(sums, ens.members)
    weights = glue_weights(scores["auc"], options.rejection_auc, options.likelihood_shape)
    scores["weight"] = weights
    basis_variable = PROBABILITY_BASES[ens.probability_basis]
    entry = assessment_entry(ens, options, cells, scores, weights, basis_variable)
    files, notes = [], []
    if weights.sum() > 0:
        name = weighted_probability_name(ens.probability_basis, ens.thresholds_km[0])
        var = ensemble_variable(name)
        tags = {**context.tags, "variable": name, "units": var.units}
        template = items[0].da
        item = GeoTiffItem(template, context.run_dir / rundir.output_file(name), var.long_name,
                           var.units, tags)  # fmt: skip
        with GeoTiffSet([item], cog=cfg.outputs.cloud_optimized, verify=False) as out:
            write_weighted(out, items[0].path, sums["masks"], weights, sums["chunks"])
        files.append(item.path)
        items.append(item)
        names.append(name)
        entry["weighted_probability"] = name
    else:
        notes.append(
            f"no ensemble member ranks the known features of {options.features.name} better "
            f"than assess.rejection_auc = {options.rejection_auc:g} (largest AUC "
            f"{np.nanmax(scores['auc']) if np.isfinite(scores['auc']).any() else 'none'}): no "
            "member is behavioural, so there are no weights and no weighted probability map."
        )
        entry["weighted_probability"] = None
    entry["masks_bytes"] = masks_size(sums.get("masks", {}))
    return {"entry": entry, "scores": scores}, files, notes


def run_ensemble_stage(
    context: StageContext, candidates: CandidateSource | None = None
) -> tuple[list[Path], dict[str, Any]]:
    """Evaluate the ensemble of ``context.cfg`` and write its layers, CSV and summary entry
    (with ``candidates``, a source of the deterministic run's candidates: their drivers too;
    with ``[assess]``, each member's score, its weight and the weighted probability)."""
    t0 = time.perf_counter()
    cfg = context.cfg
    ens = cfg.ensemble
    assessing = getattr(cfg, "assess", None) is not None
    cells = locate(cfg.assess, context.target) if assessing else None
    found = _screen(context, candidates)
    plan, group_arrays, tables = _plan(context, found.count if found else 0,
                                       cells.count if cells else 0)  # fmt: skip
    names = layer_names(ens.probability_basis, ens.thresholds_km, ens.percentiles)
    template = context.target.template(int(cfg.compute.chunk_size))
    items = []
    for name in names:
        var = ensemble_variable(name)
        tags = {**context.tags, "variable": name, "units": var.units}
        path = context.run_dir / rundir.output_file(name)
        items.append(GeoTiffItem(template, path, var.long_name, var.units, tags))
    with tempfile.TemporaryDirectory(dir=context.run_dir.parent, prefix="masks-") as folder:
        # the run checks every file before it is sealed (rundir.seal_run): no read-back here
        with GeoTiffSet(items, cog=cfg.outputs.cloud_optimized, verify=False) as out:
            labels = found.labels if found and found.count else None
            scoring = (cells, Path(folder)) if cells is not None else None
            sums = _compute_rows(context, plan, group_arrays, out.write_rows, labels, scoring)
        t1 = time.perf_counter()
        scored, weighted_files, notes = (
            _score_members(context, sums, cells, items, names) if assessing else (None, [], [])
        )
        scoring_s = time.perf_counter() - t1
    missing = sums["cells_without_value"]
    totals = _with_values(sums["totals"], np.broadcast_to(missing, sums["totals"].shape))
    volumes = _with_values(sums["candidate_volume"], sums["candidate_cells_without_value"])
    text = _members_csv(ens, totals, missing, volumes, sums["candidate_cells_without_value"],
                        scored["scores"] if scored else None)  # fmt: skip
    files = [item.path for item in items if item.path not in weighted_files] + weighted_files
    files.append(write_text_atomic(context.run_dir / MEMBERS_FILE, text))
    lacking = missing_summary(ens.vary, ens.samples, sums)
    warning = missing_warning(lacking, ens.members)
    run_warnings = [w for w in (warning, *notes) if w]
    for w in run_warnings:
        warnings.warn(w, UserWarning, stacklevel=2)
    entry = _entry(cfg, names, plan, tables, _Reduced(sums, totals, lacking, found))
    if scored:
        entry["assessment"] = {**scored["entry"], "scoring_s": scoring_s}
    entry["compute_s"] = time.perf_counter() - t0
    outputs = {
        name: {"file": item.path.name, "units": item.units, "long_name": item.description}
        for name, item in zip(names, items, strict=True)
    }
    extra = {"ensemble": entry, "outputs": outputs}
    if run_warnings:
        extra["warnings"] = run_warnings
    return files, extra


@dataclass(frozen=True, eq=False)
class _Reduced:
    """What the members gave: the sums of the chunks, the members' totals (NaN where a member
    lacks a value), the summary of the members without a value and the tracked candidates
    (None without screening)."""

    sums: dict[str, Any]
    totals: np.ndarray
    lacking: dict[str, Any]
    found: Candidates | None


def _entry(cfg, names, plan, tables, reduced: _Reduced) -> dict[str, Any]:
    """The summary's ``"ensemble"`` entry (without its assessment and time)."""
    ens, totals, found = cfg.ensemble, reduced.totals, reduced.found
    entry = {
        "members": ens.members,
        "seed": ens.seed,
        "sampling": ens.sampling,
        "vary": {spec.key: spec.to_record() for spec in ens.vary},
        "probability": _probability_entry(ens, names),
        "thresholds_km": list(ens.thresholds_km),
        "percentiles": list(ens.percentiles),
        "percentile_definition": "Hyndman & Fan (1996) definition 7 (linear interpolation)",
        "tables_built": tables,
        "input_groups": len(plan.scalars),
        "memory_estimate_gb": estimate_memory_bytes(cfg, groups=len(plan.scalars)) / 1e9,
        "outputs": names,
        "members_without_value": reduced.lacking,
        "totals": {
            name: total_statistics(totals[k], ens.percentiles) for k, name in enumerate(TOTALS)
        },
        "drivers": drivers(ens.vary, ens.samples, totals[1], seed=ens.seed),
        "drivers_method": {"interval": INTERVAL, "replicates": REPLICATES},
    }
    if found is not None:
        entry["candidates"] = (
            _candidates_entry(found, ens, reduced.sums, names) if found.count else
            {**found.screening, "tracked": 0, "list": []}
        )  # fmt: skip
    return entry
