"""What drives the answer: the members' totals against their sampled values, with error bars.

- Rank correlation: Spearman's rho (Spearman 1904), the Pearson correlation of the ranks (ties
  get their mean rank), between a varied key and a total (the basin melt volume, or a
  candidate's). A ``choice`` key is ranked by the position of its value in the list.
- Variance share: the first-order sensitivity index S_i = Var(E[Y | X_i]) / Var(Y) (Sobol' 1993;
  Saltelli et al. 2008, Global Sensitivity Analysis: The Primer, Wiley, ch. 1; from memory)
  estimated from the members as they are ("given data"). For independent inputs E[Y | X_i] - E[Y]
  is the i-th first-order term of the ANOVA (Hoeffding) decomposition of Y, and the sum of those
  terms is the projection of Y onto functions additive in the inputs (Hoeffding 1948; from
  memory). lidmelt fits that additive model by least squares - the first-order terms of a
  random-sampling high-dimensional model representation (Li, Rosenthal & Rabitz 2001, J. Phys.
  Chem. A 105, 7765; from memory): per numeric key the Legendre polynomials of degree 1..k of
  2u - 1, u = (rank - 1/2)/N the member's place in the key's order (uniform for any
  distribution), per ``choice`` key one indicator per value but the first. The degree k (the
  same for every key) is that of 3, 2, 1 whose fit leaves the least residual variance
  SS_res / (N - 1 - p) (the largest adjusted R^2), among those that keep the columns
  p <= (N - 1)/2: with few members and many keys a higher degree does not earn its columns.
  Then, with sigma^2 = SS_res / (N - 1 - p) the residual variance (interactions and what the
  polynomials miss),

      V_i = Var(g_i) - df_i sigma^2 / N,     S_i = V_i / (sum_j V_j + sigma^2),

  Var(g_i) the variance over the members of key i's fitted term and df_i its columns: the
  subtraction removes the fitted term's expected share of noise (the degrees-of-freedom
  correction of epsilon squared, Kelley 1935, PNAS 21, 554; the formula
  (SS_b - df_b MS_res) / SS_tot as in the effect-size literature, e.g. Liu 2022, Methodology 18,
  44), so a key that does not matter has S_i = 0 on average instead of the binned estimator's
  upward bias of about (bins - 1)/N; and Var(Y) is the sum of the first-order variances and the
  residual variance (their cross-covariances vanish for independent inputs), which removes most
  of the sampling noise of a ratio to the members' own variance. The shares then add up to
  1 - sigma^2 / Var(Y) <= 1. A share below 0 is reported as 0.
- Error bars: 90 % bootstrap percentile intervals (Efron & Tibshirani 1993, An Introduction to
  the Bootstrap, ch. 13; from memory) of the rank correlation and the share, from
  :data:`REPLICATES` resamples of the members with replacement (weighted least squares with the
  resample's counts; the same resamples for every key; drawn from the ensemble's seed, so the
  same seed gives the same intervals). The bootstrap treats the members as a simple random
  sample: with random members the intervals held the truth of a known case in 90 % of seeds;
  for a Latin hypercube, whose estimates vary less, they are wider than needed (conservative;
  ``benchmarks/bench_drivers.py``, figures in docs/workflow.md). A key whose share interval
  reaches 0 is not ranked as a driver: "not distinguishable from sampling noise" when its rank
  correlation's interval reaches 0 too, else "rank correlation only" (a monotone trend the
  share cannot yet tell from noise).
- Percentiles of the totals: the same definition as the maps
  (:func:`lidmelt.ensemble._kernel.member_percentiles`, Hyndman & Fan 1996 definition 7), over
  the members with a value.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.polynomial import legendre
from scipy.stats import rankdata

from lidmelt._config_tables import VarySpec
from lidmelt.ensemble._kernel import member_percentiles

#: Bootstrap resamples of the members.
REPLICATES = 1000
#: Probability content of the intervals (the 5th to the 95th percentile of the replicates).
INTERVAL = 0.90
#: What a key whose share and rank-correlation intervals both reach 0 is called.
NOISE = "not distinguishable from sampling noise"
#: What a key is called whose share interval reaches 0 but whose rank correlation's does not.
MONOTONE_ONLY = "rank correlation only: its share is not distinguishable from sampling noise"
#: Largest polynomial degree per numeric key.
_MAX_DEGREE = 3
#: Replicates per batch of the least-squares fits (bounds the memory of a batch).
_BATCH = 100


def numeric_column(spec: VarySpec, values: Sequence[Any]) -> np.ndarray:
    """The sampled values of one key as numbers (a choice: the position of its value)."""
    if spec.distribution == "choice":
        return np.array([list(spec.parameters).index(v) for v in values], float)
    return np.asarray(values, float)


def spearman(x: np.ndarray, y: np.ndarray) -> float | None:
    """Spearman's rank correlation of x and y; None when either is constant."""
    ranks = [rankdata(np.asarray(v, float)[None], axis=1) for v in (x, y)]
    rho = _rank_correlations(*ranks)[0]
    return None if np.isnan(rho) else float(rho)


def _rank_correlations(rx: np.ndarray, ry: np.ndarray) -> np.ndarray:
    """Row by row Pearson correlation of (R, N) ranks: Spearman's rho (NaN where constant)."""
    rx = rx - rx.mean(axis=1, keepdims=True)
    ry = ry - ry.mean(axis=1, keepdims=True)
    den = np.sqrt((rx * rx).sum(axis=1) * (ry * ry).sum(axis=1))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, (rx * ry).sum(axis=1) / den, np.nan)


@dataclass(frozen=True)
class Design:
    """The additive model's columns (N, p) and, per column, the key it belongs to."""

    columns: np.ndarray
    owner: np.ndarray
    degree: int


def _key_columns(x: np.ndarray, categorical: bool, degree: int) -> np.ndarray:
    """One key's columns: indicators of its values but the first, or Legendre P1..Pk."""
    values = np.unique(x)
    if len(values) < 2:
        return np.zeros((len(x), 0))
    if categorical:
        return np.column_stack([(x == v).astype(float) for v in values[1:]])
    z = 2.0 * (rankdata(x) - 0.5) / len(x) - 1.0
    return np.column_stack([legendre.legval(z, np.eye(k + 1)[k]) for k in range(1, degree + 1)])


def _residual_variance(columns: np.ndarray, y: np.ndarray) -> float:
    """sigma^2 = SS_res / (N - 1 - p) of the least-squares fit of y on [1, columns]."""
    a = np.column_stack([np.ones(len(y)), columns])
    beta = np.linalg.lstsq(a, y, rcond=None)[0]
    return float(((y - a @ beta) ** 2).sum() / max(len(y) - a.shape[1], 1))


def design_matrix(
    xs: Sequence[np.ndarray], categorical: Sequence[bool], y: np.ndarray | None = None
) -> Design | None:
    """The additive model of the keys ``xs`` (module notes); None with too few members.

    Of the degrees 3, 2, 1 that keep p <= (N - 1) / 2 columns (degree 1: p <= N - 3), the one
    whose fit to ``y`` leaves the least residual variance sigma^2 = SS_res / (N - 1 - p) (the
    largest adjusted R^2; common practice): a higher degree must earn its columns. Without
    ``y``, the highest.
    """
    n = len(xs[0]) if xs else 0
    best: tuple[float, Design] | None = None
    for degree in range(_MAX_DEGREE, 0, -1):
        blocks = [_key_columns(x, c, degree) for x, c in zip(xs, categorical, strict=True)]
        p = sum(b.shape[1] for b in blocks)
        if not (p <= (n - 1) / 2 or (degree == 1 and p <= n - 3)):
            continue
        owner = np.concatenate([np.full(b.shape[1], d) for d, b in enumerate(blocks)])
        columns = np.column_stack(blocks) if p else np.zeros((n, 0))
        design = Design(columns, owner.astype(np.int64), degree)
        if y is None:
            return design
        score = _residual_variance(columns, y)
        if best is None or score <= best[0]:
            best = (score, design)
    return best[1] if best else None


def first_order_shares(design: Design, y: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """(R, keys) variance shares of each key for R weightings (R, N) of the members."""
    keys = int(design.owner.max()) + 1 if design.owner.size else 0
    out = np.empty((len(weights), keys))
    for start in range(0, len(weights), _BATCH):
        out[start : start + _BATCH] = _shares(design, y, weights[start : start + _BATCH], keys)
    return out


def _shares(design: Design, y: np.ndarray, w: np.ndarray, keys: int) -> np.ndarray:
    """:func:`first_order_shares` of one batch of weightings (weighted least squares).

    With weights w (a resample's counts; 1 for the members themselves) the coefficients'
    covariance is sigma^2 G K G, G = (A' W A)^-1, K = A' W^2 A (members repeated in a resample
    share their error), the residual sum of squares expects sigma^2 (sum w - tr(G K)), and the
    noise in a fitted term's variance is sigma^2 tr(C_i (G K G)_ii) / sum w, C_i the weighted
    centred cross-products of its columns (linear-model algebra; with w = 1 these are the
    familiar N - 1 - p and about df_i / N).
    """
    a = np.column_stack([np.ones(len(y)), design.columns])
    weighted = a.T[None] * w[:, None, :]  # (R, p + 1, N): A' W
    g = _inverse(weighted @ a)
    k = (weighted * w[:, None, :]) @ a  # A' W^2 A
    beta = (g @ (weighted @ y)[..., None])[..., 0]  # (R, p + 1)
    cov = g @ k @ g
    total = w.sum(axis=1)
    residual = (w * (y[None] - beta @ a.T) ** 2).sum(axis=1)
    dof = total - np.einsum("rij,rji->r", g, k)
    sigma2 = residual / np.maximum(dof, 1.0)
    parts = np.empty((len(w), keys))
    for d in range(keys):
        cols = np.flatnonzero(design.owner == d) + 1
        ad = a[:, cols]
        term = beta[:, cols] @ ad.T  # (R, N)
        mean = (w * term).sum(axis=1) / total
        var = (w * (term - mean[:, None]) ** 2).sum(axis=1) / total
        sums = w @ ad  # (R, df)
        cross = (ad.T[None] * w[:, None, :]) @ ad - sums[:, :, None] * sums[:, None, :] / total[
            :, None, None
        ]
        noise = np.einsum("rij,rji->r", cross, cov[:, cols][:, :, cols]) / total
        parts[:, d] = var - sigma2 * noise
    with np.errstate(invalid="ignore", divide="ignore"):
        return parts / (parts.sum(axis=1) + sigma2)[:, None]


def _inverse(m: np.ndarray) -> np.ndarray:
    """Inverses of a stack of matrices; the pseudo-inverse where one is singular (a resample
    without a value of a ``choice`` key leaves its column empty)."""
    try:
        return np.linalg.inv(m)
    except np.linalg.LinAlgError:
        return np.linalg.pinv(m)


def _interval(replicates: np.ndarray) -> tuple[float, float] | None:
    """The :data:`INTERVAL` percentile interval of the finite replicates (None without)."""
    finite = replicates[np.isfinite(replicates)]
    if not finite.size:
        return None
    tail = 50.0 * (1.0 - INTERVAL)
    low, high = member_percentiles(finite[:, None], (tail, 100.0 - tail))[:, 0]
    return float(low), float(high)


def _record(key: str, rho, rho_reps, share, share_reps, reason: str) -> dict[str, Any]:
    """One key's driver record (module notes; shares and their interval clipped to 0..1)."""
    rho_ci = _interval(rho_reps) if rho is not None else None
    share_ci = _interval(share_reps) if share is not None else None
    driver = share_ci is not None and share_ci[0] > 0.0
    return {
        "key": key,
        "rank_correlation_melt_volume": rho,
        "rank_correlation_interval": list(rho_ci) if rho_ci else None,
        "variance_fraction": None if share is None else float(np.clip(share, 0.0, 1.0)),
        "variance_fraction_interval": (
            [float(np.clip(v, 0.0, 1.0)) for v in share_ci] if share_ci else None
        ),
        "driver": driver,
        "assessment": "driver" if driver else _why_not(share, rho_ci, reason),
    }


def _why_not(share: float | None, rho_ci: tuple[float, float] | None, reason: str) -> str:
    """Why a key is not ranked: ``reason`` (no share), noise, or a rank correlation only."""
    if share is None:
        return reason
    if rho_ci is not None and (rho_ci[0] > 0.0 or rho_ci[1] < 0.0):
        return MONOTONE_ONLY
    return NOISE


def drivers(
    vary: Sequence[VarySpec],
    samples: Sequence[Sequence[Any]],
    volume: np.ndarray,
    *,
    seed: int = 0,
    salt: int = 0,
) -> list[dict[str, Any]]:
    """Per varied key: rank correlation and variance share with the total ``volume``, each with
    its bootstrap interval (module notes), ranked: the drivers by share (then |rho|), then the
    keys with a rank correlation only, those not distinguishable from noise, those without a
    share. Members whose ``volume`` is NaN (no value: :mod:`lidmelt.ensemble._kernel`) are left
    out. ``seed`` and ``salt`` (0 for the basin, k for candidate k) seed the resamples."""
    y = np.asarray(volume, float)
    keep = np.isfinite(y)
    y = y[keep]
    xs = [numeric_column(s, [row[d] for row in samples])[keep] for d, s in enumerate(vary)]
    categorical = [s.distribution == "choice" for s in vary]
    n = len(y)
    varies = n > 2 and float(np.ptp(y)) > 0
    design = design_matrix(xs, categorical, y) if varies and xs else None
    idx = np.random.default_rng([seed, salt, 19]).integers(0, max(n, 1), (REPLICATES, n))
    counts = np.zeros((REPLICATES, n))
    np.add.at(counts, (np.arange(REPLICATES)[:, None], idx), 1.0)
    shares = first_order_shares(design, y, np.ones((1, n)))[0] if design else None
    reps = first_order_shares(design, y, counts) if design else None
    y_ranks = rankdata(y[idx], axis=1) if varies else None
    reason = _no_share(n, varies, design is not None)
    out = []
    for d, spec in enumerate(vary):
        rho = spearman(xs[d], y) if varies else None
        rho_reps = None
        if rho is not None:
            rho_reps = _rank_correlations(rankdata(xs[d][idx], axis=1), y_ranks)
        share = None if shares is None or not (design.owner == d).any() else float(shares[d])
        share_reps = reps[:, d] if share is not None else None
        why = reason if shares is None else "the key has one value among these members"
        out.append(_record(spec.key, rho, rho_reps, share, share_reps, why))
    return sorted(out, key=_importance)


def _no_share(n: int, varies: bool, fitted: bool) -> str:
    """Why no key has a share (when none has)."""
    if n < 3:
        return f"too few members with a value ({n})"
    if not varies:
        return "no variation (the same total in every member)"
    return "" if fitted else f"too few members ({n}) for the additive model of every key"


def _importance(item: dict[str, Any]) -> tuple[int, float, float]:
    """Drivers first (by share, then |rho|), then rank correlations only, then noise, then keys
    without a value."""
    order = {"driver": 0, MONOTONE_ONLY: 1, NOISE: 2}
    group = order.get(item["assessment"], 3)
    rho = item["rank_correlation_melt_volume"]
    return (group, -(item["variance_fraction"] or 0.0), -abs(rho or 0.0))


def total_statistics(values: np.ndarray, percentiles: Sequence[float]) -> dict[str, Any]:
    """``{"p10": ..., "p50": ..., "p90": ..., "mean": ..., "members": n}`` of one total over the
    ``n`` members with a value (NaN: without one; None when no member has one)."""
    values = np.asarray(values, np.float64)
    values = values[np.isfinite(values)]
    qs = sorted({10.0, 50.0, 90.0, *percentiles})
    if not values.size:
        return {**{f"p{q:g}": None for q in qs}, "mean": None, "members": 0}
    stats = member_percentiles(values[:, None], qs)[:, 0]
    out: dict[str, Any] = {f"p{q:g}": float(v) for q, v in zip(qs, stats, strict=True)}
    out["mean"] = float(np.mean(values))
    out["members"] = int(values.size)
    return out
