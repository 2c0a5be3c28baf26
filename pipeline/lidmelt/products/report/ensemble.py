"""The report's section on an ensemble run: distributions, probability, totals and drivers.

Written when the run's ``summary.json`` has an ``"ensemble"`` entry
(:mod:`lidmelt.products.ensemble`): how the members were drawn (count, sampling, seed, melting
tables built), the distribution of each varied workflow key (a table), the map of the
probability of melting (:mod:`lidmelt.products.maps.probability`), the members' basin melt
volume as a histogram (:mod:`lidmelt.products.maps.members`), the percentiles of the basin
totals over the members (a table) and the varied keys ranked by what they drive (a table with
the rank correlation of each with the basin melt volume and the fraction of its variance it
explains, as the run computed them; ranked by that fraction, then by the size of the
correlation) and, when the run tracked candidates (``"candidates"`` in the entry:
:mod:`lidmelt.ensemble.candidates`), one row per candidate of the deterministic run: its rank
and plume, its melt volume in the deterministic run and its percentiles over the members, and
its leading drivers (at most :data:`TOP_DRIVERS`, in the same order; a candidate whose volume
is the same in every member has none). Numbers to 3 significant figures.
"""

from __future__ import annotations

import io
import math
from typing import Any

from lidmelt.errors import LidmeltError
from lidmelt.grids.rundir import RunDir
from lidmelt.products import ensemble as ens
from lidmelt.products.maps import make_map_figure
from lidmelt.products.maps.members import TOTAL_LABELS, member_histogram
from lidmelt.products.report.content import (
    Block,
    MapImage,
    Section,
    Table,
    format_sig,
    format_value,
)

__all__ = [
    "TOP_DRIVERS",
    "candidates_table",
    "distribution_table",
    "drivers_table",
    "ensemble_section",
    "ordered_drivers",
    "totals_table",
]

_NOT_RECORDED = "not recorded"
#: Drivers shown per candidate.
TOP_DRIVERS = 3


def _cell(value: Any) -> str:
    if isinstance(value, bool) or value is None:
        return _NOT_RECORDED if value is None else str(value)
    if isinstance(value, float) and not math.isfinite(value):
        return "-"
    return format_sig(float(value)) if isinstance(value, int | float) else str(value)


def distribution_table(vary: dict[str, Any]) -> Table:
    """One row per varied workflow key: its distribution and parameters as the run stored them."""
    rows = []
    for key, spec in vary.items():
        spec = spec if isinstance(spec, dict) else {"value": spec}
        params = [f"{k} = {format_value(v)}" for k, v in spec.items() if k != "distribution"]
        rows.append((str(key), str(spec.get("distribution", _NOT_RECORDED)), "; ".join(params)))
    return Table(("Workflow key", "Distribution", "Parameters"), tuple(rows), mono=(0,))


def totals_table(totals: dict[str, Any]) -> Table:
    """The percentiles (and mean) of each basin total over the members."""
    stats = ("p10", "p50", "p90", "mean")
    rows = []
    for name, values in totals.items():
        values = values if isinstance(values, dict) else {}
        rows.append((TOTAL_LABELS.get(name, name), *(_cell(values.get(k)) for k in stats)))
    return Table(("Basin total", "p10", "p50 (median)", "p90", "mean"), tuple(rows))


def _number(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return math.nan
    return float(value)


def ordered_drivers(drivers: list[Any]) -> list[dict[str, Any]]:
    """The drivers ranked: largest variance fraction first, then largest |rank correlation|."""

    def key(d: dict[str, Any]) -> tuple[float, float]:
        fraction = _number(d.get("variance_fraction"))
        rho = abs(_number(d.get("rank_correlation_melt_volume")))
        return (
            -(fraction if math.isfinite(fraction) else -math.inf),
            -(rho if math.isfinite(rho) else -math.inf),
        )

    return sorted((d for d in drivers if isinstance(d, dict)), key=key)


def drivers_table(drivers: list[Any]) -> Table:
    """The varied keys ranked by the share of the melt volume's variance they explain."""
    rows = tuple(
        (
            str(rank),
            str(d.get("key", _NOT_RECORDED)),
            _cell(d.get("rank_correlation_melt_volume")),
            _cell(d.get("variance_fraction")),
        )
        for rank, d in enumerate(ordered_drivers(drivers), start=1)
    )
    header = ("Rank", "Workflow key", "Rank correlation with melt volume", "Variance fraction")
    return Table(header, rows, mono=(1,))


def _leading_drivers(drivers: Any) -> str:
    """The first :data:`TOP_DRIVERS` ranked drivers with a value, as "key (rho R, share F)"."""
    shown = []
    for d in ordered_drivers(drivers if isinstance(drivers, list) else []):
        rho, fraction = d.get("rank_correlation_melt_volume"), d.get("variance_fraction")
        if rho is None and fraction is None:
            continue
        shown.append(f"{d.get('key', _NOT_RECORDED)} (rho {_cell(rho)}, share {_cell(fraction)})")
    return "; ".join(shown[:TOP_DRIVERS]) or "none: the same volume in every member"


def candidates_table(candidates: list[Any]) -> Table:
    """One row per tracked candidate: rank, plume, deterministic volume, member percentiles and
    leading drivers of its melt volume."""
    rows = []
    for c in (c for c in candidates if isinstance(c, dict)):
        stats = c.get("members_melt_volume_km3")
        stats = stats if isinstance(stats, dict) else {}
        rows.append(
            (
                str(c.get("rank", _NOT_RECORDED)),
                str(c.get("plume") or "-"),
                _cell(c.get("melt_volume_km3")),
                *(_cell(stats.get(k)) for k in ("p10", "p50", "p90")),
                _leading_drivers(c.get("drivers")),
            )
        )
    header = ("Rank", "Plume", "Melt volume (km³)", "p10", "p50", "p90", "Leading drivers")
    return Table(header, tuple(rows))


def _candidate_blocks(entry: dict[str, Any]) -> list[Block]:
    """The candidates paragraph and table (nothing when the run tracked none)."""
    found = entry.get("candidates")
    if not isinstance(found, dict):
        return []
    listed = found.get("list")
    if not isinstance(listed, list) or not listed:
        note = found.get("note") or "no region of the deterministic run qualified"
        return [f"No candidates tracked over the members: {note}."]
    text = (
        f"What drives each candidate: the {len(listed)} largest of the "
        f"{found.get('found', _NOT_RECORDED)} candidates of the deterministic run ('lidmelt "
        f"screen' on the {found.get('basis', _NOT_RECORDED)} basis with a least melt of "
        f"{format_value(found.get('min_melt_thickness_km'))} km, ranked by melt volume), each "
        "with its melt volume in the deterministic run, its percentiles over the members (the "
        "candidate's cells, area x melt thickness of each member; ensemble_members.csv) and "
        "the varied keys that drive it (rank correlation rho and variance share):"
    )
    return [text, candidates_table(listed)]


def _png(fig: Any, dpi: float) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def _figures(run: RunDir, entry: dict[str, Any], *, dpi: float, width_in: float) -> list[Block]:
    """The probability map and the histogram of the members' melt volume (when available)."""
    blocks: list[Block] = []
    probability = ens.run_probability(run)
    if probability is not None:
        fig, _ = make_map_figure(run, probability, coastlines=False, dpi=dpi, width_in=width_in)
        blocks.append(MapImage(probability, _png(fig, dpi), "image/png", "ensemble"))
    try:
        members = ens.read_members(run)
        totals = (entry.get("totals") or {}).get("melt_volume_km3")
        fig = member_histogram(members, percentiles=totals, width_in=0.75 * width_in, dpi=dpi)
    except LidmeltError as exc:
        return [*blocks, f"No histogram of the members' totals: {exc}"]
    caption = (
        "Basin melt volume of each ensemble member (ensemble_members.csv); vertical lines: "
        "its 10th, 50th and 90th percentiles over the members"
    )
    blocks.append(MapImage("melt_volume_km3", _png(fig, dpi), "image/png", "ensemble", caption))
    return blocks


def _overview(run: RunDir, entry: dict[str, Any]) -> str:
    """One paragraph: how many members, how they were drawn, what maps the run has."""
    members = entry.get("members", _NOT_RECORDED)
    text = (
        f"{members} members drawn by {entry.get('sampling', _NOT_RECORDED)} sampling with "
        f"seed {entry.get('seed', _NOT_RECORDED)}; melting tables built: "
        f"{entry.get('tables_built', _NOT_RECORDED)}."
    )
    maps = [n for n in run.outputs if ens.is_ensemble_output(n)]
    if maps:
        text += f" Maps over the members: {', '.join(maps)} (draw any with 'lidmelt map')."
    return text


def ensemble_section(run: RunDir, *, dpi: float, width_in: float) -> Section | None:
    """The ensemble section of the report, or None for a run that is not an ensemble."""
    entry = ens.ensemble_entry(run)
    if entry is None:
        return None
    blocks: list[Block] = [_overview(run, entry)]
    vary = entry.get("vary")
    if isinstance(vary, dict) and vary:
        blocks += ["Distributions of the varied workflow keys:", distribution_table(vary)]
    blocks += _figures(run, entry, dpi=dpi, width_in=width_in)
    totals = entry.get("totals")
    if isinstance(totals, dict) and totals:
        blocks += ["Percentiles of the basin totals over the members:", totals_table(totals)]
    drivers = entry.get("drivers")
    if isinstance(drivers, list) and drivers:
        blocks += [
            "What drives the answer: each varied key's rank correlation with the "
            "basin melt volume over the members and the fraction of that volume's variance it "
            "explains, ranked by that fraction:",
            drivers_table(drivers),
        ]
    blocks += _candidate_blocks(entry)
    return Section("ensemble", "Ensemble: how sure are we?", tuple(blocks))
