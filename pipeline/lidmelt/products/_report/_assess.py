"""The report's section on known features: how good is the map, and what the features say
about an ensemble's keys.

Written when the run folder has an assessment (``RUN_DIR/assess.json``, from ``lidmelt assess``
or a run with ``[assess]``: :mod:`lidmelt.products._assess`) or its ensemble scored its members
(``summary.json`` → ``"ensemble"`` → ``"assessment"``: :mod:`lidmelt.ensemble._posterior`): the
AUC with its interval and the features scored, the success-rate figure, the weights of evidence
at each threshold, the features per candidate region and those not scored; then the members'
scores, their weights and each varied key's prior beside its weighted distribution (a table and
a figure). Numbers to 3 significant figures.
"""

from __future__ import annotations

import io
import json
import math
from typing import Any

from lidmelt._errors import LidmeltError
from lidmelt.grids._rundir import RunDir
from lidmelt.products import _ensemble as ens
from lidmelt.products._assess._figure import posterior_figure, success_rate_figure
from lidmelt.products._assess._write import ASSESS_NAME, FIGURE_NAME
from lidmelt.products._report._blocks import Block, MapImage, Section, Table, format_sig


def _cell(value: Any) -> str:
    if value is None:
        return "undefined"
    if isinstance(value, int):
        return f"{value:,}"
    return format_sig(float(value)) if math.isfinite(float(value)) else "-"


def thresholds_table(thresholds: list[dict[str, Any]], used: int) -> Table:
    """One row per threshold: captured features, area share, W+, W-, contrast, studentized."""
    rows = []
    for t in thresholds:
        rows.append((
            f"{t['value']:g}" + (" (screening)" if t.get("screening") else ""),
            f"{t['captured']} of {used}", f"{100 * t['area_fraction']:.3g} %",
            _cell(t.get("w_plus")), _cell(t.get("w_minus")), _cell(t.get("contrast")),
            _cell(t.get("studentized_contrast")),
        ))  # fmt: skip
    header = ("V ≥", "Features captured", "Area share", "W+", "W−", "Contrast C",
              "Studentized C / s(C)")  # fmt: skip
    return Table(header, tuple(rows))


def _candidate_table(regions: dict[str, Any]) -> list[Block]:
    if not regions.get("file"):
        return [f"Candidate regions: {regions.get('note', 'none')}."]
    rows = [(str(r["rank"]), r["plume"] or "-", str(r["n_features"]), ", ".join(r["features"]))
            for r in regions["regions"]]  # fmt: skip
    rows.append(("none", "-", str(regions["n_in_no_candidate"]),
                 ", ".join(regions["in_no_candidate"])))  # fmt: skip
    text = f"Known features per candidate region of 'lidmelt screen' ({regions['file']}):"
    return [text, Table(("Candidate", "Plume", "Features", "Names"), tuple(rows))]


def _figure(run: RunDir, doc: dict[str, Any], dpi: float) -> MapImage:
    path = run.path / FIGURE_NAME
    caption = (
        "Success rate of the known features: the fraction captured against the fraction of "
        "the ocean area, cells ranked from the highest value (Chung & Fabbri 2003); shaded: the "
        "90 % interval over the features; dashed: chance"
    )
    if path.is_file():
        return MapImage("success_rate", path.read_bytes(), "image/png", FIGURE_NAME, caption)
    buf = io.BytesIO()
    success_rate_figure(doc, dpi=dpi).savefig(buf, format="png", dpi=dpi)
    return MapImage("success_rate", buf.getvalue(), "image/png", "rendered", caption)


def _run_blocks(run: RunDir, doc: dict[str, Any], dpi: float) -> list[Block]:
    low, high = doc["auc_ci90"]
    method = doc.get("auc_method", {})
    text = (
        f"The map {doc['variable']} against {doc['n_features']} known features of "
        f"{doc['features_file']}: {doc['n_features_used']} scored, {doc['n_outside_grid']} "
        f"outside the grid and {doc['n_nodata']} on cells without data (listed below, not "
        f"scored). AUC {doc['auc']:.3f} (90 % interval {low:.3f} to {high:.3f}; chance 0.5): "
        "the area-weighted probability that a feature's cell outranks a random ocean cell, "
        f"ties counted half; the interval from {method.get('resamples', '?')} resamples of the "
        "features (expanded percentile interval, Hesterberg 2015)."
    )
    blocks: list[Block] = [text, _figure(run, doc, dpi)]
    unit = doc.get("background", {}).get("unit_cell_km2")
    blocks += [
        "Weights of evidence (Bonham-Carter 1994) at each threshold of the map, the features "
        f"as points in unit cells of {_cell(unit)} km² (the mean cell area):",
        thresholds_table(doc["thresholds"], doc["n_features_used"]),
        *_candidate_table(doc.get("candidates", {})),
    ]
    if doc["not_used"]:
        names = "; ".join(f"{d['name']} ({d['reason'].replace('_', ' ')})"
                          for d in doc["not_used"][:50])  # fmt: skip
        blocks.append(f"Not scored: {names}.")
    return blocks


def distributions_table(entries: list[dict[str, Any]]) -> Table:
    """Per varied key: prior (members as drawn) and weighted mean, sd and 5-95 % range."""
    rows = []
    for e in entries:
        if e["kind"] == "choice":
            for name in e["prior"]["shares"]:
                rows.append((f"{e['key']} = {name}", "share",
                             _cell(e["prior"]["shares"][name]),
                             _cell(e["posterior"]["shares"][name])))  # fmt: skip
            continue
        for stat in ("mean", "sd", "p5", "p50", "p95"):
            rows.append((e["key"] if stat == "mean" else "", stat, _cell(e["prior"][stat]),
                         _cell(e["posterior"][stat])))  # fmt: skip
    return Table(("Workflow key", "Statistic", "Prior (members as drawn)",
                  "Weighted by the known features"), tuple(rows), mono=(0,))  # fmt: skip


def _ensemble_blocks(run: RunDir, entry: dict[str, Any], dpi: float) -> list[Block]:
    a = entry["assessment"]
    lik = a.get("likelihood", {})
    auc = a.get("auc", {})
    text = (
        f"Each member scored against the same features ({a.get('n_features_inside')} inside "
        f"the grid) on its own {a.get('member_variable')}: AUC from {_cell(auc.get('min'))} "
        f"to {_cell(auc.get('max'))} (each within {_cell(a.get('largest_auc_bound'))} of the "
        f"exact, binned in the chunk pass). Weights by GLUE (Beven & Binley 1992): "
        f"{lik.get('measure')}, rejection AUC {lik.get('rejection_auc')}, shape "
        f"{lik.get('shape')}; {a.get('behavioural_members')} behavioural members, "
        f"{_cell(a.get('effective_members'))} effective."
    )
    blocks: list[Block] = [text]
    if a.get("distributions"):
        blocks += ["What the known features say about each varied key:",
                   distributions_table(a["distributions"])]  # fmt: skip
        try:
            members = ens.read_members(run)
            samples = {d["key"]: members[d["key"]].to_numpy() for d in a["distributions"]}
            fig = posterior_figure(a["distributions"], samples, members["weight"].to_numpy(),
                                   dpi=dpi)  # fmt: skip
            buf = io.BytesIO()
            fig.savefig(buf, format="png", dpi=dpi)
            caption = ("Each varied key: the members as drawn (grey) and weighted by their "
                       "score against the known features (blue); dashed: the means")  # fmt: skip
            blocks.append(MapImage("posterior", buf.getvalue(), "image/png", "ensemble", caption))
        except (LidmeltError, KeyError) as exc:
            blocks.append(f"No figure of the weighted keys: {exc}")
    if a.get("weighted_probability"):
        blocks.append(f"Weighted probability map: {a['weighted_probability']}.")
    return blocks


def assess_section(run: RunDir, *, dpi: float = 100) -> Section | None:
    """The section, or None when the run has neither an assessment nor scored members."""
    path = run.path / ASSESS_NAME
    doc = None
    if path.is_file():
        try:
            doc = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            doc = None
    entry = ens.ensemble_entry(run) or {}
    scored = isinstance(entry.get("assessment"), dict)
    if doc is None and not scored:
        return None
    blocks = _run_blocks(run, doc, dpi) if doc is not None else []
    if scored:
        blocks += _ensemble_blocks(run, entry, dpi)
    return Section("assess", "Known features: how good is the map?", tuple(blocks))
