"""The report's section on an ensemble run: distributions, probability, totals and drivers.

Written when the run's ``summary.json`` has an ``"ensemble"`` entry
(:mod:`lidmelt.products._ensemble`): how the members were drawn (count, sampling, seed, melting
tables built) and what the probability is of (its basis, threshold and the members counted), the
members without a value and how they are treated (:mod:`lidmelt.ensemble._missing`), the
distribution of each varied workflow key (a table), the map of the run's probability of melting
(:mod:`lidmelt.products._maps._probability`), the members' basin melt volume as a histogram
(:mod:`lidmelt.products._maps._members`), the percentiles of the basin totals over the members with
a value (a table; Hyndman & Fan 1996 definition 7) and the varied keys with what they drive (a
table: the rank correlation with the basin melt volume and the first-order variance share, each
with its 90 % bootstrap interval; the drivers ranked by share, the keys whose share interval
reaches 0 listed after them as not distinguishable from sampling noise,
:mod:`lidmelt.ensemble._drivers`) and, when the run tracked candidates (``"candidates"`` in the
entry: :mod:`lidmelt.ensemble._candidates`), one row per candidate of the deterministic run: its
rank and plume, its probability (mean over its cells, of the stated basis and threshold), its
melt volume in the deterministic run and its percentiles over the members, the members without a
value in it and its leading drivers with their share intervals (at most :data:`TOP_DRIVERS`).
Numbers to 3 significant figures. A run of an earlier lidmelt (no intervals) shows "not
recorded" where a value is missing.
"""

from __future__ import annotations

import io
import math
from typing import Any

from lidmelt._errors import LidmeltError
from lidmelt._variables import (
    PROBABILITY_BASES,
    ordinal,
    parse_ensemble_name,
    probability_long_name,
)
from lidmelt.ensemble._drivers import MONOTONE_ONLY
from lidmelt.grids._rundir import RunDir
from lidmelt.products import _ensemble as ens
from lidmelt.products._maps._figure import make_map_figure
from lidmelt.products._maps._members import TOTAL_LABELS, member_histogram
from lidmelt.products._report._blocks import (
    Block,
    MapImage,
    Section,
    Table,
    format_sig,
    format_value,
)

_NOT_RECORDED = "not recorded"
#: Drivers shown per candidate.
TOP_DRIVERS = 3


def _cell(value: Any) -> str:
    if isinstance(value, bool) or value is None:
        return _NOT_RECORDED if value is None else str(value)
    if isinstance(value, float) and not math.isfinite(value):
        return "-"
    if isinstance(value, int):  # a count
        return f"{value:,}"
    return format_sig(float(value)) if isinstance(value, float) else str(value)


def _with_interval(value: Any, interval: Any) -> str:
    """``"0.55 (0.40 to 0.63)"``; the value alone when the run recorded no interval."""
    text = _cell(value)
    if value is None or not (isinstance(interval, list | tuple) and len(interval) == 2):
        return text
    return f"{text} ({_cell(float(interval[0]))} to {_cell(float(interval[1]))})"


def distribution_table(vary: dict[str, Any]) -> Table:
    """One row per varied workflow key: its distribution and parameters as the run stored them."""
    rows = []
    for key, spec in vary.items():
        spec = spec if isinstance(spec, dict) else {"value": spec}
        params = [f"{k} = {format_value(v)}" for k, v in spec.items() if k != "distribution"]
        rows.append((str(key), str(spec.get("distribution", _NOT_RECORDED)), "; ".join(params)))
    return Table(("Workflow key", "Distribution", "Parameters"), tuple(rows), mono=(0,))


def totals_table(totals: dict[str, Any]) -> Table:
    """The percentiles (and mean) of each basin total over the members with a value."""
    stats = ("p10", "p50", "p90", "mean", "members")
    rows = []
    for name, values in totals.items():
        values = values if isinstance(values, dict) else {}
        rows.append((TOTAL_LABELS.get(name, name), *(_cell(values.get(k)) for k in stats)))
    header = ("Basin total", "p10", "p50 (median)", "p90", "mean", "Members with a value")
    return Table(header, tuple(rows))


def _number(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return math.nan
    return float(value)


def _is_driver(d: dict[str, Any]) -> bool:
    """A driver: so marked by the run (a run of an earlier lidmelt: any key with a share)."""
    if "driver" in d:
        return bool(d["driver"])
    return math.isfinite(_number(d.get("variance_fraction")))


def ordered_drivers(drivers: list[Any]) -> list[dict[str, Any]]:
    """The keys ranked: drivers first (largest variance share, then largest |rank
    correlation|), then those with a rank correlation only, those not distinguishable from
    noise, those without a value."""

    def key(d: dict[str, Any]) -> tuple[int, float, float]:
        fraction = _number(d.get("variance_fraction"))
        rho = abs(_number(d.get("rank_correlation_melt_volume")))
        group = 0 if _is_driver(d) else (1 if d.get("assessment") == MONOTONE_ONLY else 2)
        group = group if math.isfinite(fraction) else 3
        return (
            group,
            -(fraction if math.isfinite(fraction) else -math.inf),
            -(rho if math.isfinite(rho) else -math.inf),
        )

    return sorted((d for d in drivers if isinstance(d, dict)), key=key)


def _assessment(d: dict[str, Any]) -> str:
    return str(d.get("assessment") or ("driver" if _is_driver(d) else _NOT_RECORDED))


def drivers_table(drivers: list[Any]) -> Table:
    """The varied keys: drivers ranked by the share of the melt volume's variance they explain,
    then the others; each value with its 90 % interval."""
    rows, rank = [], 0
    for d in ordered_drivers(drivers):
        rank += _is_driver(d)
        rows.append(
            (
                str(rank) if _is_driver(d) else "-",
                str(d.get("key", _NOT_RECORDED)),
                _with_interval(
                    d.get("rank_correlation_melt_volume"), d.get("rank_correlation_interval")
                ),
                _with_interval(d.get("variance_fraction"), d.get("variance_fraction_interval")),
                _assessment(d),
            )
        )
    header = ("Rank", "Workflow key", "Rank correlation with melt volume (90 % interval)",
              "Variance share (90 % interval)", "Assessment")  # fmt: skip
    return Table(header, tuple(rows), mono=(1,))


def _leading_drivers(drivers: Any) -> str:
    """The first :data:`TOP_DRIVERS` drivers as "key (share S, from L to H)"."""
    shown = [
        f"{d.get('key', _NOT_RECORDED)} (share "
        f"{_with_interval(d.get('variance_fraction'), d.get('variance_fraction_interval'))}; "
        f"rho {_cell(d.get('rank_correlation_melt_volume'))})"
        for d in ordered_drivers(drivers if isinstance(drivers, list) else [])
        if _is_driver(d)
    ]
    if shown:
        return "; ".join(shown[:TOP_DRIVERS])
    if any(isinstance(d, dict) and d.get("variance_fraction") is not None for d in drivers or []):
        return "none distinguishable from sampling noise"
    return "none: the same volume in every member"


def candidates_table(candidates: list[Any]) -> Table:
    """One row per tracked candidate: rank, plume, probability, deterministic volume, member
    percentiles, members without a value and leading drivers of its melt volume."""
    rows = []
    for c in (c for c in candidates if isinstance(c, dict)):
        stats = c.get("members_melt_volume_km3")
        stats = stats if isinstance(stats, dict) else {}
        rows.append(
            (
                str(c.get("rank", _NOT_RECORDED)),
                str(c.get("plume") or "-"),
                _cell(c.get("mean_probability")),
                _cell(c.get("melt_volume_km3")),
                *(_cell(stats.get(k)) for k in ("p10", "p50", "p90")),
                _cell(c.get("members_without_value")),
                _leading_drivers(c.get("drivers")),
            )
        )
    header = ("Rank", "Plume", "Mean probability", "Melt volume (km³)", "p10", "p50", "p90",
              "Members without a value", "Leading drivers (share, 90 % interval)")  # fmt: skip
    return Table(header, tuple(rows))


def _probability_text(entry: dict[str, Any]) -> str:
    """What the run's probability is of, in one sentence."""
    prob = entry.get("probability")
    if not isinstance(prob, dict) or not prob.get("thresholds_km"):
        return "The run records no basis for its probabilities (made by an earlier lidmelt)."
    basis, thresholds = str(prob.get("basis")), prob["thresholds_km"]
    first = probability_long_name(basis, thresholds[0]) if basis in PROBABILITY_BASES else basis
    others = ", ".join(f"{t:g}" for t in thresholds[1:])
    fmin = prob.get("min_melt_fraction")
    text = (
        f"Probability of melting: the {first}, as the fraction of the members with a value in "
        f"the cell whose melt reaches it"
    )
    if isinstance(fmin, int | float):
        text += f" with a melt fraction of at least {100 * fmin:g} % at the top of melting"
    text += f" ({', '.join(prob.get('outputs') or [])})"
    return text + (f"; also at {others} km." if others else ".")


def _missing_text(entry: dict[str, Any]) -> str:
    """The members without a value: how many, why, how they are treated."""
    lacking = entry.get("members_without_value")
    if not isinstance(lacking, dict):
        return ""
    count = lacking.get("members", 0)
    if not count:
        return "Every member has a value in every cell with data."
    text = (
        f"{count} of {entry.get('members', _NOT_RECORDED)} members have no value in some cells "
        f"with data ({format_value(lacking.get('member_cells_no_solidus_crossing'))} "
        "member-cells without a solidus crossing within the model's pressure range, "
        f"{format_value(lacking.get('member_cells_invalid_input'))} with an invalid input); "
        f"they are {lacking.get('treatment', _NOT_RECORDED)}."
    )
    apart = lacking.get("set_apart_by")
    if isinstance(apart, list) and apart:
        text += f" They are the members with {'; '.join(map(str, apart))}."
    return text


def _candidate_blocks(entry: dict[str, Any]) -> list[Block]:
    """The candidates paragraph and table (nothing when the run tracked none)."""
    found = entry.get("candidates")
    if not isinstance(found, dict):
        return []
    listed = found.get("list")
    if not isinstance(listed, list) or not listed:
        note = found.get("note") or "no region of the deterministic run qualified"
        return [f"No candidates tracked over the members: {note}."]
    first = next((c for c in listed if isinstance(c, dict)), {})
    what = parse_ensemble_name(str(first.get("probability", "")))
    prob = probability_long_name(what.basis, what.threshold_km) if what else _NOT_RECORDED
    text = (
        f"What drives each candidate: the {len(listed)} largest of the "
        f"{found.get('found', _NOT_RECORDED)} candidates of the deterministic run ('lidmelt "
        f"screen' on the {found.get('basis', _NOT_RECORDED)} basis with a least melt of "
        f"{format_value(found.get('min_melt_thickness_km'))} km, ranked by melt volume), each "
        f"with its mean probability over its cells (the {prob}), its melt volume in the "
        "deterministic run, its percentiles over the members with a value in all its cells "
        "(area x melt thickness of each member; ensemble_members.csv), the members without a "
        "value there and the varied keys that drive it (variance share with its 90 % interval, "
        "rank correlation rho):"
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
    marks = ", ".join(ordinal(q) for q in (10, 50, 90))
    caption = (
        "Basin melt volume of each ensemble member with a value (ensemble_members.csv); "
        f"vertical lines: its {marks} percentiles over those members (Hyndman & Fan 1996, "
        "definition 7: linear interpolation between order statistics)"
    )
    blocks.append(MapImage("melt_volume_km3", _png(fig, dpi), "image/png", "ensemble", caption))
    return blocks


def _overview(run: RunDir, entry: dict[str, Any]) -> list[str]:
    """How many members, how drawn, what the probability is of, members without a value."""
    members = entry.get("members", _NOT_RECORDED)
    text = (
        f"{members} members drawn by {entry.get('sampling', _NOT_RECORDED)} sampling with "
        f"seed {entry.get('seed', _NOT_RECORDED)}; melting tables built: "
        f"{entry.get('tables_built', _NOT_RECORDED)}."
    )
    maps = [n for n in run.outputs if ens.is_ensemble_output(n)]
    if maps:
        text += f" Maps over the members: {', '.join(maps)} (draw any with 'lidmelt map')."
    return [p for p in (text, _probability_text(entry), _missing_text(entry)) if p]


def _drivers_text(entry: dict[str, Any]) -> str:
    method = entry.get("drivers_method") if isinstance(entry.get("drivers_method"), dict) else {}
    replicates = method.get("replicates", _NOT_RECORDED)
    return (
        "What drives the answer: each varied key's rank correlation with the basin melt volume "
        "over the members with a value and its first-order variance share (the part of that "
        "volume's variance its own value explains, noise removed), each with a 90 % bootstrap "
        f"interval ({replicates} resamples of the members). Keys whose share interval reaches 0 "
        "are not ranked: not distinguishable from sampling noise, or with a rank correlation "
        "only when its interval does not reach 0:"
    )


def ensemble_section(run: RunDir, *, dpi: float, width_in: float) -> Section | None:
    """The ensemble section of the report, or None for a run that is not an ensemble."""
    entry = ens.ensemble_entry(run)
    if entry is None:
        return None
    blocks: list[Block] = [*_overview(run, entry)]
    vary = entry.get("vary")
    if isinstance(vary, dict) and vary:
        blocks += ["Distributions of the varied workflow keys:", distribution_table(vary)]
    blocks += _figures(run, entry, dpi=dpi, width_in=width_in)
    totals = entry.get("totals")
    if isinstance(totals, dict) and totals:
        blocks += [
            "Percentiles of the basin totals over the members with a value (Hyndman & Fan "
            "1996, definition 7):",
            totals_table(totals),
        ]
    drivers = entry.get("drivers")
    if isinstance(drivers, list) and drivers:
        blocks += [_drivers_text(entry), drivers_table(drivers)]
    blocks += _candidate_blocks(entry)
    return Section("ensemble", "Ensemble: how sure are we?", tuple(blocks))
