"""How well a map ranks known features: the area-weighted rank statistics of a score.

One home for the rank arithmetic that both a finished run's assessment
(:mod:`lidmelt.products._assess`) and the ensemble's chunk pass (each member's score,
:mod:`lidmelt.ensemble._kernel`) use.

Definitions (lidmelt's own; docs/assess.md):

- the background is every ocean cell of the run with a value V (the cells with data), each
  weighted by its area; a feature is a point in one of those cells and takes the cell's V;
- a feature's score s_f is the area fraction of the background that it outranks, ties counted
  half: s_f = (A(V < v_f) + A(V = v_f) / 2) / A, A the background's area;
- the area under the success-rate curve (Chung & Fabbri 2003, Natural Hazards 30, 451-472: the
  fraction of the features captured against the fraction of the area, cells ranked from the
  highest V) is the mean of the features' scores: the area-weighted probability that a
  feature's cell outranks a random ocean cell, ties counted half. It is the area under an ROC
  curve whose negatives are the background cells weighted by area, the Mann-Whitney form of
  that area (Hanley & McNeil 1982, Radiology 143, 29-36); 0.5 is chance, 1 a perfect ranking;
- its 90 % interval: the expanded bootstrap percentile interval over the features (Hesterberg
  2015, The American Statistician 69, 371-386: the plain percentile interval is too narrow in
  small samples, by about the factor sqrt((n - 1)/n) of the plug-in standard deviation and the
  z against t quantile; the tails are moved to the levels a' with z_a' sqrt((n - 1)/n) =
  t_(a, n-1)), from :data:`RESAMPLES` resamples of the features with replacement drawn from a
  seed. The background is the whole ocean of the run, not a sample: only the features vary.

Binned scores (the ensemble's members, whose maps are not kept): each chunk adds the area of its
cells into bins of V (:func:`bin_keys`: the float32 bit pattern of V >= 0 without its last
:data:`DROPPED_BITS` mantissa bits, so each bin spans a relative width of 2^-8 to 2^-7 of its
values, about 0.4 to 0.8 %; bin 0 holds V = 0 exactly). :func:`binned_scores` then counts every
bin below a feature's bin and half of its own bin: exact where the feature's bin holds only
values equal to it (V = 0 always), and off by at most half of that bin's area fraction
otherwise; that bound is computed and reported with each score.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

#: Resamples of the features for the interval (and the curve's band).
RESAMPLES = 1000
#: The interval's coverage.
INTERVAL = 0.90
#: Mantissa bits of float32 dropped from a value's bin key (23 - 15 = 8 kept).
DROPPED_BITS = 15
#: Bins of :func:`bin_keys`: values from 0 up to 2^7 = 128 (km); larger ones share the last bin.
NBINS = int(np.float32(128.0).view(np.uint32)) >> DROPPED_BITS


@dataclass(frozen=True)
class Scores:
    """Each feature's place in the background's area-weighted ranking.

    ``below[f]``: the area fraction of the background with V < v_f; ``tie[f]``: with V = v_f
    (binned: within v_f's bin); ``bound``: the largest error of the binned AUC (0: exact).
    """

    below: np.ndarray
    tie: np.ndarray
    bound: float = 0.0

    @property
    def scores(self) -> np.ndarray:
        """s_f = below + tie / 2 (module notes)."""
        return self.below + 0.5 * self.tie

    @property
    def auc(self) -> float:
        """The area under the success-rate curve: the mean score (NaN without features)."""
        return float(self.scores.mean()) if self.below.size else float("nan")


class ExactRanks:
    """Exact scores of features (their values V) against a background added block by block.

    Each background cell's area goes into its bin (:func:`bin_keys`, a few bit operations and
    one histogram); only the cells whose bin holds a feature's value are then placed exactly
    among the features' distinct values by a binary search (a global 2' grid has 58 million
    cells, most of them far from any feature's value). :meth:`scores` adds the bins below a
    feature's bin to the exact areas below and equal to its value inside its own bin. Values
    must be >= 0 (melt thicknesses, probabilities); see :func:`bin_keys`.
    """

    def __init__(self, features: np.ndarray) -> None:
        self.features = np.asarray(features, np.float64)
        self.distinct = np.unique(self.features)
        k = self.distinct.size
        self.tied = np.zeros(k)  # area with V equal to each distinct value
        self.low = np.zeros(k)  # area in each value's bin below it, above the value before
        self.histogram = np.zeros(NBINS)
        self._bins = bin_keys(self.distinct)
        self._exact = np.zeros(NBINS, bool)
        self._exact[self._bins] = True
        self._exact[0] = False  # V = 0 is counted apart (exact ties, no search)
        self._exact32 = bool(np.all(self.distinct.astype(np.float32) == self.distinct))

    def add(self, values: np.ndarray, weights: np.ndarray) -> None:
        """Add background cells: ``values`` (NaN: not background) with areas ``weights``
        (broadcast against ``values``; a (rows, 1) column of row areas is spread over each
        row's cells without a full copy)."""
        values = np.asarray(values)
        ok = np.isfinite(values)
        v = values[ok]
        w = _weights_of(np.asarray(weights, np.float64), ok)
        positive = v > 0
        zero_area = float(w[~positive].sum())
        self.histogram[0] += zero_area
        if self._bins[0] == 0 and self.distinct[0] <= 0:  # a feature at V = 0: exact ties
            self.tied[0] += zero_area
        v, w = v[positive], w[positive]
        bins = bin_keys(v)
        self.histogram += np.bincount(bins, weights=w, minlength=NBINS)
        near = self._exact[bins]
        if not near.any():
            return
        v, w, bins = v[near], w[near], bins[near]
        distinct = self.distinct.astype(v.dtype) if self._exact32 else self.distinct
        k = distinct.size
        slot = np.minimum(np.searchsorted(distinct, v, side="left"), k - 1)
        equal = distinct[slot] == v
        self.tied += np.bincount(slot[equal], weights=w[equal], minlength=k)
        # a cell between two feature values lies in the bin of one of them (a bin between
        # would hold a feature value between them): count it where it is the upper one's
        low = ~equal & (v < distinct[slot]) & (bins == self._bins[slot])
        self.low += np.bincount(slot[low], weights=w[low], minlength=k)

    @property
    def area(self) -> float:
        """The background's area added so far (the weights' unit)."""
        return float(self.histogram.sum())

    def scores(self) -> Scores:
        """Each feature's :class:`Scores` (fractions of the background's area)."""
        total = self.area
        # below a value: every bin below its bin, and inside its bin the cells below it (those
        # between the bin's first value and it, the ties of the values before it, and those
        # below the first value)
        first = np.searchsorted(self._bins, self._bins, side="left")
        run_low = np.concatenate([[0.0], np.cumsum(self.low)])
        run_tied = np.concatenate([[0.0], np.cumsum(self.tied)])
        j = np.arange(self.distinct.size)
        within = run_low[j + 1] - run_low[first] + run_tied[j] - run_tied[first]
        below = np.concatenate([[0.0], np.cumsum(self.histogram)[:-1]])[self._bins] + within
        where = np.searchsorted(self.distinct, self.features)
        return Scores(below[where] / total, self.tied[where] / total)


def feature_scores(values: np.ndarray, weights: np.ndarray, features: np.ndarray) -> Scores:
    """Exact scores of ``features`` (their V) against a background of ``values`` weighted by
    ``weights`` (areas, broadcast; NaN values are not background): :class:`ExactRanks`."""
    ranks = ExactRanks(features)
    ranks.add(values, weights)
    return ranks.scores()


def bin_keys(values: np.ndarray) -> np.ndarray:
    """The bin (0 .. NBINS - 1) of each value V (module notes): 0 for V = 0 exactly, else the
    float32 bit pattern without its last :data:`DROPPED_BITS` bits (at least 1, at most
    NBINS - 1). Values must be >= 0: a negative value, -0 and NaN fall in bin 0, so the caller
    keeps only the finite values."""
    v = np.asarray(values, np.float32)
    keys = (v.view(np.uint32) >> DROPPED_BITS).astype(np.int64)
    np.clip(keys, 1, NBINS - 1, out=keys)
    keys[~(v > 0)] = 0
    return keys


def _weights_of(weights: np.ndarray, ok: np.ndarray) -> np.ndarray:
    """The weights of the cells ``ok`` selects (row-major), for weights of ``ok``'s shape or a
    column of one weight per row."""
    if ok.ndim == 2 and weights.shape == (ok.shape[0], 1):
        return np.repeat(weights[:, 0], ok.sum(axis=1))
    return np.broadcast_to(weights, ok.shape)[ok]


def binned_scores(histogram: np.ndarray, features: np.ndarray) -> Scores:
    """Scores of ``features`` (their V) from the background's area per bin (``histogram``,
    NBINS values, any unit): the bins below a feature's bin count whole, its own bin half
    (module notes); ``bound`` is the mean over the features of half their bin's area fraction,
    the features in bin 0 (V = 0, exact ties) excepted."""
    hist = np.asarray(histogram, np.float64)
    total = float(hist.sum())
    features = np.asarray(features, np.float64)
    bins = bin_keys(features)
    below = np.concatenate([[0.0], np.cumsum(hist)[:-1]])[bins] / total
    tie = hist[bins] / total
    bound = float(np.mean(np.where(bins > 0, 0.5 * tie, 0.0))) if features.size else 0.0
    return Scores(below, tie, bound)


def resample_counts(n: int, seed, resamples: int = RESAMPLES) -> np.ndarray:
    """How often each of ``n`` features is drawn in each resample: (resamples, n) float32 counts
    of draws with replacement (numpy's default generator seeded with ``seed``)."""
    rng = np.random.default_rng(seed)
    counts = np.zeros((resamples, n), np.float32)
    for start in range(0, resamples, 100):  # 100 resamples at a time bound the index array
        idx = rng.integers(0, n, size=(min(100, resamples - start), n))
        rows = np.arange(idx.shape[0])[:, None] + start
        np.add.at(counts, (np.broadcast_to(rows, idx.shape), idx), 1.0)
    return counts


def expanded_levels(n: int, coverage: float = INTERVAL) -> tuple[float, float]:
    """The percentile levels (0-100) of the expanded percentile interval of ``n`` features:
    a' = Phi(sqrt(n/(n - 1)) t_(a, n-1)), a = (1 - coverage)/2 (Hesterberg 2015; module
    notes); the plain levels for n < 2."""
    a = 0.5 * (1.0 - coverage)
    if n < 2:
        return 100.0 * a, 100.0 * (1.0 - a)
    low = float(stats.norm.cdf(np.sqrt(n / (n - 1.0)) * stats.t.ppf(a, n - 1)))
    return 100.0 * low, 100.0 * (1.0 - low)


def interval(replicates: np.ndarray, n: int) -> list[float]:
    """The expanded percentile interval of ``replicates`` (bootstrap values of a statistic of
    ``n`` features; linear interpolation between order statistics)."""
    lo, hi = expanded_levels(n)
    return [float(v) for v in np.percentile(np.asarray(replicates, np.float64), [lo, hi])]
