"""Weights of evidence at a threshold, and the success-rate curve with its band.

Weights of evidence (Bonham-Carter 1994, Geographic Information Systems for Geoscientists,
Pergamon, chapter 9, from memory; the count form of its equations checked against their
statement in the documentation of the Arc-WofE extension, "Equations"): the map is made binary
at a threshold t, B the cells with V >= t, and the area is counted in unit cells of area u.
With N{T} = A/u unit cells of background, N{B} = A(B)/u of them in B, N{D} features (each a
point in one unit cell) and N{B and D} of them in B:

    W+ = ln[ (N{B and D}/N{D}) / ((N{B} - N{B and D}) / (N{T} - N{D})) ]
    W- = ln[ ((N{D} - N{B and D})/N{D}) / ((N{T} - N{B} - N{D} + N{B and D}) / (N{T} - N{D})) ]
    s^2(W+) = 1/N{B and D} + 1/(N{B} - N{B and D})
    s^2(W-) = 1/(N{D} - N{B and D}) + 1/(N{T} - N{B} - N{D} + N{B and D})
    C = W+ - W-,  s(C) = sqrt(s^2(W+) + s^2(W-)),  studentized contrast C / s(C).

lidmelt's unit cell is the mean area of the run's background cells (A over their number), so
N{T} is the number of ocean cells with a value and each feature stands for one unit cell. The
weights hardly depend on u while features are few beside the unit cells; the variances do
(through the unit cells' counts) only where B holds few unit cells. Where a count in a logarithm
or a variance is 0 or negative (no feature in B, every feature in B, more features than unit
cells in B), the weights are undefined: null, with a note.

Success-rate curve (Chung & Fabbri 2003): the cells are ranked by V from the highest; at each
fraction x of the background's area, the fraction y of the features whose cells are within it.
Cells of equal V enter together, so a feature whose value is shared by an area of tie fraction
e above which lie a of the area counts as captured for the share (x - a)/e of it between a and
a + e: the curve is piecewise linear, and its area is the AUC with ties counted half
(:mod:`lidmelt.ensemble._score`). Its band: the pointwise expanded percentile interval of the
same resamples of the features.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from lidmelt.ensemble._score import Scores, expanded_levels

#: At most this many points of the curve are written (its vertices, or evenly spread points).
CURVE_POINTS = 2001
#: Points of the curve's band.
BAND_POINTS = 201


def _log_ratio(a: float, b: float, c: float, d: float) -> float | None:
    """ln[(a/b) / (c/d)], None where a count is not positive."""
    if min(a, b, c, d) <= 0:
        return None
    return math.log((a / b) / (c / d))


def weights_of_evidence(
    captured: int, features: int, area_fraction: float, cells: float
) -> dict[str, Any]:
    """W+, W-, the contrast and its studentized value (module notes) for ``captured`` of
    ``features`` in B, B holding ``area_fraction`` of ``cells`` unit cells."""
    n_t, n_d, n_bd = float(cells), float(features), float(captured)
    n_b = area_fraction * n_t
    outside = n_t - n_b - n_d + n_bd
    w_plus = _log_ratio(n_bd, n_d, n_b - n_bd, n_t - n_d)
    w_minus = _log_ratio(n_d - n_bd, n_d, outside, n_t - n_d)
    out: dict[str, Any] = {"w_plus": w_plus, "w_minus": w_minus, "contrast": None,
                           "s_contrast": None, "studentized_contrast": None}  # fmt: skip
    if w_plus is None or w_minus is None:
        out["note"] = (
            "undefined: no feature in B" if n_bd == 0 else
            "undefined: every feature in B" if n_bd == n_d else
            "undefined: more features than unit cells on one side of the threshold"
        )  # fmt: skip
        return out
    variance = 1 / n_bd + 1 / (n_b - n_bd) + 1 / (n_d - n_bd) + 1 / outside
    out["contrast"] = w_plus - w_minus
    out["s_contrast"] = math.sqrt(variance)
    out["studentized_contrast"] = out["contrast"] / out["s_contrast"]
    return out


def _ramps(above: np.ndarray, tie: np.ndarray, x: np.ndarray) -> np.ndarray:
    """(features, points): the share of each feature captured at area fractions ``x``."""
    width = np.where(tie > 0, tie, 1.0)
    share = (x[None, :] - above[:, None]) / width[:, None]
    share = np.where(tie[:, None] > 0, share, (x[None, :] >= above[:, None]).astype(float))
    return np.clip(share, 0.0, 1.0)


def _points(above: np.ndarray, tie: np.ndarray) -> np.ndarray:
    """The curve's area fractions: its vertices, or :data:`CURVE_POINTS` spread points (half
    even, half at the vertices' quantiles, so a steep start keeps its shape)."""
    vertices = np.unique(np.concatenate([[0.0, 1.0], above, np.minimum(above + tie, 1.0)]))
    if vertices.size <= CURVE_POINTS:
        return vertices
    half = CURVE_POINTS // 2
    spread = np.quantile(vertices, np.linspace(0.0, 1.0, half))
    return np.unique(np.concatenate([np.linspace(0.0, 1.0, CURVE_POINTS - half), spread]))


def curve(scores: Scores, counts: np.ndarray) -> dict[str, Any]:
    """The success-rate curve of ``scores`` and its band from resample ``counts`` ((resamples,
    features) draws): ``area_fraction``, ``feature_fraction`` and ``band`` (``area_fraction``,
    ``low``, ``high``)."""
    above = np.clip(1.0 - scores.below - scores.tie, 0.0, 1.0)
    n = above.size
    x = _points(above, scores.tie)
    y = np.zeros(x.size)
    for start in range(0, n, 2000):  # 2000 features at a time bound the (features, points) array
        y += _ramps(above[start : start + 2000], scores.tie[start : start + 2000], x).sum(axis=0)
    step = max(1, math.ceil(x.size / BAND_POINTS))
    xb = np.unique(np.concatenate([x[::step], [1.0]]))
    ramps = _ramps(above, scores.tie, xb).astype(np.float32)
    replicates = counts @ ramps / n
    lo, hi = expanded_levels(n)
    low, high = np.percentile(replicates, [lo, hi], axis=0)
    return {
        "area_fraction": x.tolist(),
        "feature_fraction": (y / n).tolist(),
        "band": {"area_fraction": xb.tolist(), "low": low.tolist(), "high": high.tolist()},
    }
