"""Drawing the members of an ensemble: Latin hypercube or random, then each key's distribution.

Every varied key gets one column of probabilities u in (0, 1). Latin hypercube sampling
(McKay, Beckman & Conover 1979, Technometrics 21, 239) cuts (0, 1) into N equal strata and puts
exactly one member in each stratum of each column, in an independent random order per column;
plain random sampling draws u uniformly. The values are the inverse cumulative distribution
functions at u (the inversion method, common practice), so the marginals of a Latin hypercube
are exact to 1/N. Everything comes from one ``numpy.random.default_rng(seed)``, column by
column in the order the keys are written: same workflow and seed, same members.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy.special import ndtri

from lidmelt._config_tables import VarySpec


def unit_samples(members: int, dims: int, *, seed: int, sampling: str) -> np.ndarray:
    """(members, dims) probabilities in (0, 1): a Latin hypercube or plain random draws."""
    rng = np.random.default_rng(seed)
    if sampling == "random":
        return rng.random((members, dims))
    u = np.empty((members, dims))
    for d in range(dims):
        strata = rng.permutation(members)
        u[:, d] = (strata + rng.random(members)) / members
    return u


def inverse_cdf(spec: VarySpec, u: np.ndarray) -> list[Any]:
    """The values of ``spec``'s distribution at probabilities ``u`` (inverse CDF).

    normal: mean + sd * Phi^-1(u); uniform: low + (high - low) u; lognormal:
    median * exp(sigma_ln * Phi^-1(u)); triangular [low, mode, high]: the inverse of the
    piecewise quadratic CDF (common practice); choice: the value whose cumulative weight
    interval holds u.
    """
    p = spec.parameters
    kind = spec.distribution
    if kind == "normal":
        out = p[0] + p[1] * ndtri(u)
    elif kind == "uniform":
        out = p[0] + (p[1] - p[0]) * u
    elif kind == "lognormal":
        out = p[0] * np.exp(p[1] * ndtri(u))
    elif kind == "triangular":
        low, mode, high = p
        span = high - low
        cut = (mode - low) / span if span > 0 else 0.0
        left = low + np.sqrt(u * span * (mode - low))
        right = high - np.sqrt((1.0 - u) * span * (high - mode))
        out = np.where(u < cut, left, right)
    else:
        weights = np.asarray(spec.weights or [1.0] * len(p), float)
        edges = np.cumsum(weights) / weights.sum()
        index = np.minimum(np.searchsorted(edges, u, side="right"), len(p) - 1)
        return [p[k] for k in index]
    return [float(v) for v in out]


def draw_members(
    vary: Sequence[VarySpec], members: int, *, seed: int, sampling: str
) -> tuple[tuple[Any, ...], ...]:
    """The value of every varied key for each member: (members x keys), deterministic."""
    u = unit_samples(members, len(vary), seed=seed, sampling=sampling)
    columns = [inverse_cdf(spec, u[:, d]) for d, spec in enumerate(vary)]
    return tuple(zip(*columns, strict=True)) if columns else tuple(() for _ in range(members))
