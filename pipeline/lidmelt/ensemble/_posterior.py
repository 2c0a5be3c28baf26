"""The ensemble narrowed by the known features: each member's score, its weight, what the
weights say about each varied key, and the weighted probability of melting.

Scores. Each member's map is its melt of the probability basis (``anomaly_melt_thickness_km``
by default: the melt the thermal anomaly adds). Its AUC against the known features is computed
in the ensemble's chunk pass without keeping its grid: per chunk, the features' values and an
area histogram of the map on fine bins (:func:`lidmelt.ensemble._score.binned_scores`: exact for
features at V = 0, within a bound written beside each score otherwise). The background is the
member's cells with a value; a feature on a cell where the member has none is not scored in
that member (``features_scored`` says how many were).

Weights. Generalized likelihood uncertainty estimation (GLUE; Beven & Binley 1992, Hydrological
Processes 6, 279-298): a member is behavioural when its score passes a stated rejection level
and gets a weight proportional to a likelihood measure that grows with the goodness of fit,
rescaled to sum to 1; the non-behavioural members get 0. lidmelt's measure is the AUC above the
rejection level r (by default 0.5: a member that ranks the known volcanoes no better than a
random ocean cell says nothing), raised to a shape power N (B&B's likelihood measures carry
such a power, N = 1 weighing the members in proportion to the measure and larger N favouring
the best; from memory):

    L_m = ((AUC_m - r) / (1 - r))^N  for AUC_m > r, else 0;   w_m = L_m / sum L.

A likelihood measure in GLUE is a stated, informal choice (Beven & Freer 2001, J. Hydrol. 249,
11-29: the behavioural members, each weighted by its likelihood measure); the rejection level
and N are written into the summary with the weights. The effective number of members is
(sum w)^2 / sum w^2 (Kish 1965, Survey Sampling; from memory).

Distributions. For each varied key, the members' drawn values (the prior sample, equal
weights) beside the same values weighted: the mean, the standard deviation and the 5th, 50th
and 95th percentiles, the percentiles of the weighted sample by linear interpolation of its
values at their mid-point cumulative weights (with equal weights Hyndman & Fan 1996
definition 5); for a ``choice`` key the share of each value. A key that does not change the
score keeps its prior within sampling error (about sd / sqrt(effective members)).

Weighted probability. ``melt_probability_<basis>_ge_<T>km_weighted`` (T the run's first
threshold): per cell sum_m w_m I_m / sum_m w_m H_m over the members with a value (H_m = 1),
I_m = 1 where member m melts (the probability's own test). Where every member has a value and
all agree the weighted probability equals the unweighted (0 or 1); only the other cells need the
members' indicators again, which the chunk pass keeps as bits on disk (:func:`pack_masks`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from lidmelt._config_tables import VarySpec

#: Percentiles of the prior and weighted distributions of each key.
SUMMARY_PERCENTILES = (5.0, 50.0, 95.0)


def glue_weights(auc: np.ndarray, rejection: float, shape: float) -> np.ndarray:
    """The members' weights (module notes): 0 for AUC <= ``rejection`` or none, else
    ((AUC - r)/(1 - r))^shape rescaled to sum to 1; all 0 when no member is behavioural."""
    auc = np.asarray(auc, np.float64)
    above = np.where(np.isfinite(auc) & (auc > rejection), auc - rejection, 0.0)
    likelihood = (above / (1.0 - rejection)) ** shape * (above > 0)
    total = likelihood.sum()
    return likelihood / total if total > 0 else np.zeros_like(likelihood)


def effective_members(weights: np.ndarray) -> float:
    """Kish's effective sample size (sum w)^2 / sum w^2 (0 without weight)."""
    w = np.asarray(weights, np.float64)
    return float(w.sum() ** 2 / (w**2).sum()) if (w**2).sum() > 0 else 0.0


def weighted_quantiles(values: np.ndarray, weights: np.ndarray, q: Sequence[float]) -> list:
    """Percentiles ``q`` (0-100) of ``values`` with ``weights`` (module notes)."""
    values, weights = np.asarray(values, np.float64), np.asarray(weights, np.float64)
    keep = weights > 0
    order = np.argsort(values[keep], kind="stable")
    v, w = values[keep][order], weights[keep][order]
    mid = (np.cumsum(w) - 0.5 * w) / w.sum()
    return [float(np.interp(p / 100.0, mid, v)) for p in q]


def _numeric(values: np.ndarray, weights: np.ndarray) -> dict[str, Any]:
    w = weights / weights.sum()
    mean = float((w * values).sum())
    sd = math.sqrt(max(float((w * (values - mean) ** 2).sum()), 0.0))
    pct = weighted_quantiles(values, w, SUMMARY_PERCENTILES)
    return {"mean": mean, "sd": sd, **{f"p{q:g}": v for q, v in zip(SUMMARY_PERCENTILES, pct,
                                                                     strict=True)}}  # fmt: skip


def _shares(values: list, choices: Sequence[Any], weights: np.ndarray) -> dict[str, float]:
    w = weights / weights.sum()
    return {str(c): float(sum(wk for v, wk in zip(values, w, strict=True) if v == c))
            for c in choices}  # fmt: skip


def weighted_distributions(
    vary: Sequence[VarySpec], samples: Sequence[Sequence[Any]], weights: np.ndarray
) -> list[dict[str, Any]]:
    """Per varied key its prior sample and weighted distribution (module notes)."""
    prior = np.ones(len(samples))
    out = []
    for k, spec in enumerate(vary):
        column = [s[k] for s in samples]
        entry: dict[str, Any] = {"key": spec.key}
        if spec.distribution == "choice":
            entry["kind"] = "choice"
            entry["prior"] = {"shares": _shares(column, spec.parameters, prior)}
            entry["posterior"] = {"shares": _shares(column, spec.parameters, weights)}
        else:
            values = np.asarray(column, np.float64)
            entry["kind"] = "number"
            entry["prior"] = _numeric(values, prior)
            entry["posterior"] = _numeric(values, weights)
        out.append(entry)
    return out


def pack_masks(melting: np.ndarray, valued: np.ndarray, mixed: np.ndarray) -> dict[str, Any]:
    """The members' indicators of the cells ``mixed`` (flat bool) as bits: ``cells`` (flat
    indices in the chunk), ``melting`` and ``valued`` ((ceil(members/8), cells) uint8)."""
    members = melting.shape[0]
    flat_m, flat_v = melting.reshape(members, -1), valued.reshape(members, -1)
    return {
        "cells": np.flatnonzero(mixed).astype(np.int64),
        "melting": np.packbits(flat_m[:, mixed], axis=0),
        "valued": np.packbits(flat_v[:, mixed], axis=0),
    }


def weighted_probability(
    probability: np.ndarray, masks: Path | dict[str, Any], weights: np.ndarray
) -> np.ndarray:
    """One chunk's weighted probability (float32): ``probability`` (the unweighted map of the
    chunk, right where every member has a value and all agree) with the cells of ``masks`` (a
    :func:`pack_masks` dict or the ``.npz`` file it was saved to) weighted."""
    if not isinstance(masks, dict):
        with np.load(masks) as saved:
            masks = {k: saved[k] for k in saved.files}
    out = np.array(probability, np.float32, copy=True)
    if masks["cells"].size == 0:
        return out
    m = weights.size
    melting = np.unpackbits(masks["melting"], axis=0, count=m).astype(np.float64)
    valued = np.unpackbits(masks["valued"], axis=0, count=m).astype(np.float64)
    num, den = weights @ melting, weights @ valued
    with np.errstate(invalid="ignore", divide="ignore"):
        values = np.where(den > 0, num / den, np.nan)
    out.reshape(-1)[masks["cells"]] = values.astype(np.float32)
    return out
