"""What drives the answer: statistics of the members' basin totals against their sampled values.

- Rank correlation: Spearman's rho (Spearman 1904), the Pearson correlation of the ranks
  (ties get their mean rank), between a varied key and the basin melt volume. A ``choice`` key
  is ranked by the position of its value in the list.
- Variance fraction: a binned estimate of the first-order sensitivity index
  S_i = Var(E[Y | X_i]) / Var(Y) (Saltelli et al. 2008, Global Sensitivity Analysis: The Primer,
  Wiley, ch. 1, from memory): the members are cut into B bins of equal size by the rank of
  X_i (B = floor(sqrt(N)), at least 2; a ``choice`` key: one bin per value), E[Y | X_i] is the
  mean of Y in each bin, and its member-weighted variance is divided by the variance of Y. The
  estimate is biased upwards by about (B - 1) / N for a key that does not matter (the variance
  of bin means of noise; common practice), and the fractions of independent keys add up to at
  most about 1 when the model is additive.
- Percentiles of the totals: the same order statistics as the maps
  (:func:`lidmelt.ensemble.kernel.order_statistics`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy.stats import rankdata

from lidmelt.config import VarySpec
from lidmelt.ensemble.kernel import order_statistics

__all__ = ["drivers", "numeric_column", "spearman", "total_statistics", "variance_fraction"]


def numeric_column(spec: VarySpec, values: Sequence[Any]) -> np.ndarray:
    """The sampled values of one key as numbers (a choice: the position of its value)."""
    if spec.distribution == "choice":
        return np.array([list(spec.parameters).index(v) for v in values], float)
    return np.asarray(values, float)


def spearman(x: np.ndarray, y: np.ndarray) -> float | None:
    """Spearman's rank correlation of x and y; None when either is constant."""
    rx, ry = rankdata(x), rankdata(y)
    sx, sy = rx.std(), ry.std()
    if sx == 0 or sy == 0:
        return None
    return float(np.mean((rx - rx.mean()) * (ry - ry.mean())) / (sx * sy))


def variance_fraction(x: np.ndarray, y: np.ndarray, *, categorical: bool = False) -> float | None:
    """Binned first-order index Var(E[y | x]) / Var(y); None when y is constant."""
    var = float(np.var(y))
    if var == 0 or len(y) < 2:
        return None
    if categorical:
        labels = x.astype(np.int64)
    else:
        bins = max(2, math.isqrt(len(y)))
        order = np.argsort(x, kind="stable")
        labels = np.empty(len(y), np.int64)
        labels[order] = np.arange(len(y)) * bins // len(y)
    total = 0.0
    mean = float(np.mean(y))
    for label in np.unique(labels):
        part = y[labels == label]
        total += len(part) * (float(np.mean(part)) - mean) ** 2
    return min(1.0, total / len(y) / var)


def drivers(
    vary: Sequence[VarySpec], samples: Sequence[Sequence[Any]], volume: np.ndarray
) -> list[dict[str, Any]]:
    """Per varied key: its rank correlation with the melt volume and its variance fraction,
    sorted by importance (variance fraction, then |rank correlation|)."""
    out = []
    for d, spec in enumerate(vary):
        x = numeric_column(spec, [row[d] for row in samples])
        categorical = spec.distribution == "choice"
        out.append(
            {
                "key": spec.key,
                "rank_correlation_melt_volume": spearman(x, volume),
                "variance_fraction": variance_fraction(x, volume, categorical=categorical),
            }
        )

    def importance(item: dict[str, Any]) -> tuple[float, float]:
        rho = item["rank_correlation_melt_volume"]
        return (-(item["variance_fraction"] or 0.0), -abs(rho or 0.0))

    return sorted(out, key=importance)


def total_statistics(values: np.ndarray, percentiles: Sequence[float]) -> dict[str, float]:
    """``{"p10": ..., "p50": ..., "p90": ..., "mean": ...}`` of one total over the members."""
    qs = sorted({10.0, 50.0, 90.0, *percentiles})
    stats = order_statistics(np.asarray(values, np.float64)[:, None], qs)[:, 0]
    out = {f"p{q:g}": float(v) for q, v in zip(qs, stats, strict=True)}
    out["mean"] = float(np.mean(values))
    return out
