"""Members without a value: counted, reported, and never added as zero.

A member has no value in a cell with input data when its evaluation gives no melt thickness
there (no solidus crossing within the model's pressure range, an invalid input;
:mod:`lidmelt.ensemble._kernel`). lidmelt treats such members one way everywhere:

- in a cell, its probabilities and percentiles are over the members with a value there (the
  ``members_without_value_fraction`` layer gives the share of the others);
- a member without a value in any cell of the basin has no basin totals (NaN in
  ``ensemble_members.csv``, its ``cells_without_value`` beside them) and is left out of the
  totals' percentiles and of the basin's drivers; the same holds per candidate for the
  candidate's cells;
- the summary counts them (per basin and per candidate), and when they are more than
  :data:`WARN_SHARE` of the members the run warns, naming the varied keys whose values set them
  apart from the others (:func:`key_contrast`).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy.stats import rankdata

from lidmelt._config_tables import VarySpec

#: Share of the members without a value above which the run warns.
WARN_SHARE = 0.05
#: How members without a value are treated (for the summary and the report).
TREATMENT = (
    "left out of the totals and the drivers; in each cell the probabilities and percentiles "
    "are over the members with a value there"
)
#: A key sets the members apart when the probability that an affected member's value exceeds
#: another's (the Mann-Whitney statistic U / (n1 n0); Mann & Whitney 1947) is at least this far
#: from 1/2.
_APART = 0.25


def _separation(x: np.ndarray, affected: np.ndarray) -> float:
    """|P(affected member's value > another's) - 1/2| (ties count 1/2): 0 to 0.5."""
    n1, n0 = int(affected.sum()), int((~affected).sum())
    if not n1 or not n0:
        return 0.0
    ranks = rankdata(x)
    u = ranks[affected].sum() - n1 * (n1 + 1) / 2.0
    return abs(u / (n1 * n0) - 0.5)


def _describe(spec: VarySpec, values: list[Any], affected: np.ndarray) -> str:
    """The affected members' values of one key beside the others'."""
    if spec.distribution == "choice":
        picked = sorted({str(v) for v, a in zip(values, affected, strict=True) if a})
        return f"{spec.key} = {', '.join(picked)}"
    x = np.asarray(values, float)
    mine, rest = x[affected], x[~affected]
    text = f"{spec.key} from {mine.min():.6g} to {mine.max():.6g}"
    if rest.size:
        text += f" (the others {rest.min():.6g} to {rest.max():.6g})"
    return text


def key_contrast(
    vary: Sequence[VarySpec], samples: Sequence[Sequence[Any]], affected: np.ndarray
) -> list[str]:
    """The keys whose values set the ``affected`` members apart, most telling first: those at
    least ``_APART`` from an even split (:func:`_separation`), else the most telling one."""
    scored = []
    for d, spec in enumerate(vary):
        values = [row[d] for row in samples]
        if spec.distribution == "choice":
            x = np.array([list(spec.parameters).index(v) for v in values], float)
        else:
            x = np.asarray(values, float)
        scored.append((_separation(x, affected), d))
    scored.sort(key=lambda item: -item[0])
    telling = [d for score, d in scored if score >= _APART] or [d for _, d in scored[:1]]
    return [_describe(vary[d], [row[d] for row in samples], affected) for d in telling]


def missing_summary(
    vary: Sequence[VarySpec], samples: Sequence[Sequence[Any]], sums: dict[str, np.ndarray]
) -> dict[str, Any]:
    """The summary's ``members_without_value`` entry for the basin (module notes)."""
    cells = sums["cells_without_value"]
    affected = cells > 0
    n = len(cells)
    out: dict[str, Any] = {
        "members": int(affected.sum()),
        "share": float(affected.sum() / n) if n else 0.0,
        "member_numbers": [int(m) + 1 for m in np.flatnonzero(affected)],
        "member_cells": int(cells.sum()),
        "member_cells_no_solidus_crossing": int(sums["cells_no_onset"].sum()),
        "member_cells_invalid_input": int(sums["cells_invalid_input"].sum()),
        "treatment": TREATMENT,
    }
    if affected.any() and vary:
        out["set_apart_by"] = key_contrast(vary, samples, affected)
    return out


def missing_warning(entry: dict[str, Any], members: int) -> str | None:
    """The run's warning when more than :data:`WARN_SHARE` of the members lack a value."""
    if entry["share"] <= WARN_SHARE:
        return None
    causes = []
    if entry["member_cells_no_solidus_crossing"]:
        causes.append(
            f"no solidus crossing within the model's pressure range in "
            f"{entry['member_cells_no_solidus_crossing']:,} member-cells"
        )
    if entry["member_cells_invalid_input"]:
        causes.append(f"an invalid input in {entry['member_cells_invalid_input']:,} member-cells")
    text = (
        f"{entry['members']} of {members} ensemble members ({100.0 * entry['share']:.3g} %) have "
        f"no value in some cells with data ({'; '.join(causes) or 'no melt thickness'}): they are "
        f"{TREATMENT}."
    )
    if entry.get("set_apart_by"):
        text += f" They are the members with {'; '.join(entry['set_apart_by'])}."
    return text + " Narrow those distributions, or choose a model that covers them."
