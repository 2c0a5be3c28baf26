"""The optional tables of a workflow: ``[ensemble]`` (with its ``[ensemble.vary]`` items),
``[motion]`` and ``[assess]``, frozen like the rest of :mod:`lidmelt._config` (which re-exports
them; :class:`lidmelt._config.RunConfig` holds them). Standard library only.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

_NO_RECORD = {"record": False}  # a field left out of the provenance record (RunConfig.to_dict)
#: Distributions of ``[ensemble.vary]``, their parameters in the workflow's order (``lognormal
#: = [median, sigma_ln]``: ln is normal with that median and sd; ``choice``: values, ``weights``).
DISTRIBUTIONS: dict[str, tuple[str, ...]] = {
    "normal": ("mean", "sd"),
    "uniform": ("low", "high"),
    "lognormal": ("median", "sigma_ln"),
    "triangular": ("low", "mode", "high"),
    "choice": ("values",),
}
#: How the members are drawn: Latin hypercube (McKay, Beckman & Conover 1979) or plain random.
SAMPLING_METHODS: tuple[str, ...] = ("latin_hypercube", "random")


@dataclass(frozen=True, kw_only=True)
class VarySpec:
    """One distribution of ``[ensemble.vary]``.

    Parameters
    ----------
    key : str
        The dotted workflow key it varies (the name ``--set`` takes).
    distribution : str
        One of :data:`DISTRIBUTIONS`.
    parameters : tuple
        The distribution's parameters in the order of :data:`DISTRIBUTIONS` (``choice``: the
        values).
    weights : tuple of float or None
        ``choice`` only: relative weights of the values (None: equal).
    """

    key: str
    distribution: str
    parameters: tuple[Any, ...]
    weights: tuple[float, ...] | None = None

    def to_record(self) -> dict[str, Any]:
        """``{"distribution": ..., <parameter name>: value, ...}`` for summary.json."""
        if self.distribution == "choice":
            rec: dict[str, Any] = {"distribution": "choice", "values": list(self.parameters)}
            if self.weights is not None:
                rec["weights"] = list(self.weights)
            return rec
        names = DISTRIBUTIONS[self.distribution]
        return {"distribution": self.distribution, **dict(zip(names, self.parameters, strict=True))}


@dataclass(frozen=True, kw_only=True)
class EnsembleOptions:
    """The ``[ensemble]`` table: members drawn from distributions of workflow keys.

    Parameters
    ----------
    members : int
        Number of members (default 200).
    seed : int
        Seed of the random generator; same workflow and seed, same members.
    sampling : str
        One of :data:`SAMPLING_METHODS`.
    probability_basis : str
        What the probabilities are of: ``"anomaly"`` (the melt the thermal anomaly adds, the
        default) or ``"total"`` (all melt); a key of :data:`lidmelt._variables.PROBABILITY_BASES`.
    thresholds_km : tuple of float
        Melt thicknesses T (km, > 0) of the ``melt_probability_<basis>_ge_<T>km`` outputs; the
        first is the run's probability of melting (maps, report, candidates). Default: the
        candidates' threshold ``candidate_min_melt_km`` alone.
    percentiles : tuple of float
        Percentiles (0-100) of the ``<output>_p<q>`` outputs (default 10, 50, 90).
    memory_limit_gb : float
        The run refuses an ensemble whose estimated memory exceeds this (GB, default 2).
    candidates : int
        How many screening candidates of the deterministic run (the largest, by ``lidmelt
        screen``'s rank) get their melt volume per member and their drivers (default 10; 0:
        none).
    candidate_min_melt_km : float
        The screening threshold of those candidates: the melt the anomaly adds >= this (km,
        default 1).
    vary : tuple of VarySpec
        The distributions, in the order written.
    samples : tuple of tuple
        The drawn value of each varied key, per member (members x keys).
    configs : tuple of RunConfig
        Each member's configuration (the workflow with its drawn values); not in
        :meth:`RunConfig.to_dict`.
    """

    members: int = 200
    seed: int = 0
    sampling: str = "latin_hypercube"
    probability_basis: str = "anomaly"
    thresholds_km: tuple[float, ...] = (1.0,)
    percentiles: tuple[float, ...] = (10.0, 50.0, 90.0)
    memory_limit_gb: float = 2.0
    candidates: int = 10
    candidate_min_melt_km: float = 1.0
    vary: tuple[VarySpec, ...] = ()
    samples: tuple[tuple[Any, ...], ...] = field(default=(), repr=False, compare=False)
    configs: tuple[Any, ...] = field(default=(), repr=False, compare=False, metadata=_NO_RECORD)


@dataclass(frozen=True, kw_only=True)
class MotionOptions:
    """The ``[motion]`` table (docs/workflow.md): ``rotations`` holds the rows (age_ma, pole_lat,
    pole_lon, angle_deg) of ``rotations_file``; ``plate_rotations`` per plate id of the grid
    ``plate_ids_file`` its file and rows (``rotations`` serves the other ids); ``drift`` per
    plume (name, ages, lon, lat) of ``drift_file``; the history runs from 0 to ``max_age_ma``
    in steps of ``step_ma`` (Ma); ``duration_min_melt_km``: the anomaly's melt that counts."""

    max_age_ma: float
    step_ma: float = 1.0
    rotations_file: Path | None = None
    rotations: tuple[tuple[float, float, float, float], ...] = ()
    plate_ids_file: Path | None = None
    plate_rotations: tuple[tuple[int, Path, tuple], ...] = ()
    drift_file: Path | None = None
    drift: tuple[tuple[str, tuple, tuple, tuple], ...] = ()
    duration_min_melt_km: float = 1.0


@dataclass(frozen=True, kw_only=True)
class AssessOptions:
    """The ``[assess]`` table: known features that score the run and each ensemble member:
    ``features`` (absolute path), the ``crs`` of a CSV's coordinates, and the members' weights
    (:mod:`lidmelt.ensemble._posterior`): AUC <= ``rejection_auc`` gets none, the others
    ((AUC - rejection_auc)/(1 - rejection_auc))^``likelihood_shape``."""

    features: Path
    crs: str | None = None
    rejection_auc: float = 0.5
    likelihood_shape: float = 1.0
