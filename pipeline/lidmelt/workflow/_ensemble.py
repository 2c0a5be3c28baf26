"""Reading the ``[ensemble]`` table: members, seed, sampling, outputs and ``[ensemble.vary]``.

Each key of ``[ensemble.vary]`` is a dotted workflow key, the name ``--set`` takes (quoted,
``"model.ambient_potential_temperature_c" = {normal = [1350, 25]}``, or written as nested
tables), with one distribution of :data:`lidmelt._config.DISTRIBUTIONS`. The members are drawn
by :func:`lidmelt.ensemble._sampling.draw_members`, and every member's workflow (the file with
its drawn values written in, like ``--set`` items) is validated like the file itself, so a
member outside a key's accepted range is refused before the run starts.
"""

from __future__ import annotations

import copy
import difflib
import json
import math
import re
from collections.abc import Callable
from typing import Any

from lidmelt._config import RunConfig
from lidmelt._config_tables import DISTRIBUTIONS, SAMPLING_METHODS, EnsembleOptions, VarySpec
from lidmelt._errors import WorkflowError
from lidmelt._variables import PROBABILITY_BASES
from lidmelt.ensemble._sampling import draw_members
from lidmelt.workflow._checks import (
    Context,
    at_least,
    choice,
    in_range,
    number,
    shown,
    table,
    wrong_type,
)
from lidmelt.workflow._overrides import apply_override
from lidmelt.workflow._schema import ALL_KEYS

#: The most members an ensemble may have: each member's workflow is validated before the run
#: (about 1 ms, up to 30 ms when a plate model's lid isotherm varies), so 10^5 members take
#: minutes before the first chunk; their memory is bounded by ``memory_limit_gb``.
MAX_MEMBERS = 100_000

#: Tables whose keys an ensemble may vary (the others describe the run, not the model).
_VARIABLE_TABLES = ("model.", "lithosphere.", "inputs.")
#: Keys that are not scalars of the model (paths, names, file layout).
_FIXED_LEAVES = ("path", "variable", "resampling", "name", "crs", "units", "x_name", "y_name")


def read_ensemble(
    ctx: Context,
    tree: dict[str, Any],
    build: Callable[[Context, dict[str, Any]], RunConfig],
    check: Callable[[EnsembleOptions], Any] | None = None,
) -> EnsembleOptions | None:
    """The ``[ensemble]`` table of ``tree`` (None without one), members drawn and validated.

    ``build(ctx, member_tree)`` reads one member's tree into a RunConfig (the workflow reader);
    ``check(options)`` (the options without members) may refuse the ensemble by its size
    before any member is drawn.
    """
    if "ensemble" not in tree:
        return None
    values = table(ctx, "ensemble", tree["ensemble"])
    opts: dict[str, Any] = {}
    if "seed" in values:
        opts["seed"] = at_least(
            ctx, "ensemble.seed", values["seed"], 0, unit="", advice="(any whole number).",
            example="1",
        )  # fmt: skip
    if "sampling" in values:
        opts["sampling"] = choice(ctx, "ensemble.sampling", values["sampling"], SAMPLING_METHODS)
    if "probability_basis" in values:
        opts["probability_basis"] = choice(
            ctx, "ensemble.probability_basis", values["probability_basis"], tuple(PROBABILITY_BASES)
        )
    lists = (("thresholds_km", 1e-6, 1000.0, "km"), ("percentiles", 0, 100, ""))
    for key, low, high, unit in lists:
        if key in values:
            opts[key] = _numbers(ctx, f"ensemble.{key}", values[key], low, high, unit)
    if "memory_limit_gb" in values:
        opts["memory_limit_gb"] = in_range(
            ctx, "ensemble.memory_limit_gb", values["memory_limit_gb"], 0.01, 1.0e6, "GB",
            "give the memory the run may use, in GB",
        )  # fmt: skip
    if "candidates" in values:
        opts["candidates"] = at_least(
            ctx, "ensemble.candidates", values["candidates"], 0, unit=" candidates",
            advice="candidates whose volume per member is kept (0: none).", example="10",
        )  # fmt: skip
    if "candidate_min_melt_km" in values:
        opts["candidate_min_melt_km"] = in_range(
            ctx, "ensemble.candidate_min_melt_km", values["candidate_min_melt_km"], 1e-6, 1000.0,
            "km", "give the least melt the anomaly adds in a candidate cell, in km",
        )  # fmt: skip
    if opts.get("thresholds_km") == ():
        msg = (
            f"{ctx.where('ensemble.thresholds_km')} is empty; list at least one melt thickness "
            "in km (the first is the run's probability of melting), e.g. thresholds_km = [1.0]."
        )
        raise WorkflowError(msg)
    if "thresholds_km" not in opts:  # the candidates' threshold: one melt for both
        opts["thresholds_km"] = (opts.get("candidate_min_melt_km", 1.0),)
    if "members" in values:
        opts["members"] = _read_members(ctx, values["members"], opts, check)
    vary = tuple(_read_vary(ctx, table(ctx, "ensemble.vary", values.get("vary", {}))))
    base = EnsembleOptions(**opts, vary=vary)
    if check is not None:
        check(base)
    if base.members > MAX_MEMBERS:
        msg = (
            f"{ctx.where('ensemble.members')} is {base.members}; expected at most "
            f"{MAX_MEMBERS} members: each member's workflow is checked before the run starts, "
            f"about 1 to 30 ms each, here {base.members * 1e-3:.3g} to {base.members * 3e-2:.3g}"
            " s. Lower ensemble.members; a few hundred give probabilities to about 0.05."
        )
        raise WorkflowError(msg)
    samples = draw_members(vary, base.members, seed=base.seed, sampling=base.sampling)
    member_tree = {k: v for k, v in tree.items() if k != "ensemble"}
    configs = tuple(
        _member_config(ctx, member_tree, vary, row, i, build)
        for i, row in enumerate(samples, start=1)
    )
    return EnsembleOptions(**opts, vary=vary, samples=samples, configs=configs)


def _read_members(
    ctx: Context, value: Any, opts: dict[str, Any], check: Callable[[EnsembleOptions], Any] | None
) -> int:
    """``ensemble.members``: a whole number >= 2. One written as a decimal (``1e9``) whose
    ensemble would not fit in memory is refused for its size first, the larger problem."""
    whole = isinstance(value, float) and math.isfinite(value) and value.is_integer()
    if whole and value >= 2 and check is not None:
        check(EnsembleOptions(**{**opts, "members": int(value)}))
    return at_least(
        ctx, "ensemble.members", value, 2, unit=" members",
        advice="members (a few hundred give probabilities to about 0.05).", example="200",
    )  # fmt: skip


def _numbers(ctx: Context, key: str, value: Any, low: float, high: float, unit: str) -> tuple:
    if not isinstance(value, list):
        raise wrong_type(ctx, key, value, "an array of numbers", f"{key.rsplit('.', 1)[-1]} = [1]")
    out = tuple(in_range(ctx, key, v, low, high, unit, "see docs/workflow.md") for v in value)
    if len(set(out)) != len(out):
        msg = f"{ctx.where(key)} lists a value twice ({list(out)}); list each once."
        raise WorkflowError(msg)
    return out


def _leaves(values: dict[str, Any], prefix: str = "") -> list[tuple[str, dict[str, Any]]]:
    """(dotted key, distribution table) pairs of a possibly nested ``[ensemble.vary]``.

    A table is a distribution when it names one or holds a value that is not a table (a key's
    parts are tables; ``{gamma = [1, 2]}`` is a distribution of an unknown kind)."""
    out = []
    for name, value in values.items():
        key = f"{prefix}.{name}" if prefix else name
        nested = isinstance(value, dict) and not set(value) & set(DISTRIBUTIONS)
        if nested and value and all(isinstance(v, dict) for v in value.values()):
            out.extend(_leaves(value, key))
        else:
            out.append((key, value))
    return out


def _check_key(ctx: Context, where: str, key: str) -> None:
    pattern = re.sub(r"\.\d+\.", ".N.", key)
    free = key.startswith(("model.parameters.", "lithosphere.parameters."))
    leaf = key.rsplit(".", 1)[-1]
    known = free or (pattern in ALL_KEYS and not pattern.endswith("plumes_file"))
    if key.startswith(_VARIABLE_TABLES) and leaf not in _FIXED_LEAVES and known:
        return
    msg = (
        f"{ctx.where(where)}: {shown(key)} is not a workflow key an ensemble can vary; expected "
        "the dotted name of a scalar key of [model], [lithosphere] or [inputs] as --set takes it, "
        "e.g. model.ambient_potential_temperature_c, inputs.water.constant, "
        "inputs.thermal_anomaly.plumes.1.peak_excess_k (see docs/workflow.md)."
    )
    raise WorkflowError(msg)


def _read_vary(ctx: Context, values: dict[str, Any]) -> list[VarySpec]:
    specs = []
    example = '"model.ambient_potential_temperature_c" = { normal = [1350.0, 25.0] }'
    for key, dist in _leaves(values):
        where = f"ensemble.vary.{key}"
        _check_key(ctx, "ensemble.vary", key)
        if not isinstance(dist, dict):
            raise wrong_type(ctx, where, dist, "a table naming one distribution", example)
        kinds = [k for k in dist if k in DISTRIBUTIONS]
        extra = sorted(set(dist) - set(DISTRIBUTIONS) - {"weights"})
        if not kinds and extra:
            raise _unknown_distribution(ctx, where, extra[0])
        if len(kinds) != 1 or extra:
            msg = (
                f"{ctx.where(where)} is {shown(dist)}; expected exactly one of "
                f"{', '.join(DISTRIBUTIONS)} (and 'weights' with choice), e.g. {example}."
            )
            raise WorkflowError(msg)
        specs.append(_read_distribution(ctx, where, key, kinds[0], dist))
    return specs


def _unknown_distribution(ctx: Context, where: str, name: str) -> WorkflowError:
    near = difflib.get_close_matches(name, list(DISTRIBUTIONS), n=1)
    hint = f" Did you mean {near[0]!r}?" if near else ""
    return WorkflowError(
        f"{ctx.where(where)} names the distribution {shown(name)}, which is not known; the "
        f"known distributions are {', '.join(DISTRIBUTIONS)}.{hint} Write one of them, e.g. "
        "{ normal = [1350.0, 25.0] } (see docs/workflow.md)."
    )


def _read_distribution(ctx: Context, where: str, key: str, kind: str, dist: dict) -> VarySpec:
    raw = dist[kind]
    names = DISTRIBUTIONS[kind]
    if kind == "choice":
        if not isinstance(raw, list) or not raw:
            raise wrong_type(
                ctx, f"{where}.choice", raw, "a non-empty array", 'choice = ["a", "b"]'
            )
        weights = None
        if "weights" in dist:
            weights = _numbers_free(ctx, f"{where}.weights", dist["weights"], len(raw))
        return VarySpec(key=key, distribution=kind, parameters=tuple(raw), weights=weights)
    if "weights" in dist:
        msg = f"{ctx.where(where)} gives weights; they belong to choice only."
        raise WorkflowError(msg)
    if not isinstance(raw, list) or len(raw) != len(names):
        shape = f"[{', '.join(names)}]"
        raise wrong_type(ctx, f"{where}.{kind}", raw, f"an array {shape}", f"{kind} = {shape}")
    params = tuple(number(ctx, f"{where}.{kind}", v, unit="the key's unit") for v in raw)
    bad = {
        "normal": params[-1] < 0,
        "uniform": params[0] > params[-1],
        "lognormal": params[0] <= 0 or params[-1] < 0,
        "triangular": not params[0] <= params[1] <= params[-1],
    }[kind]
    if bad:
        rules = {
            "normal": "sd >= 0",
            "uniform": "low <= high",
            "lognormal": "median > 0 and sigma_ln >= 0",
            "triangular": "low <= mode <= high",
        }
        msg = f"{ctx.where(where)}: {kind} = {list(raw)} needs {rules[kind]}; fix the values."
        raise WorkflowError(msg)
    return VarySpec(key=key, distribution=kind, parameters=params)


def _numbers_free(ctx: Context, key: str, value: Any, count: int) -> tuple[float, ...]:
    if not isinstance(value, list) or len(value) != count:
        raise wrong_type(ctx, key, value, f"an array of {count} weights (one per value)", "[1, 1]")
    out = tuple(number(ctx, key, v, unit="(relative weight)") for v in value)
    if any(w < 0 for w in out) or not math.fsum(out) > 0:
        msg = f"{ctx.where(key)} is {list(out)}; expected weights >= 0, not all 0."
        raise WorkflowError(msg)
    return out


def _member_config(
    ctx: Context,
    tree: dict[str, Any],
    vary: tuple[VarySpec, ...],
    row: tuple[Any, ...],
    index: int,
    build: Callable[[Context, dict[str, Any]], RunConfig],
) -> RunConfig:
    """Member ``index``'s configuration: ``tree`` with its drawn values written in."""
    member = copy.deepcopy(tree)
    mctx = Context(f"{ctx.source} (ensemble member {index})", dict(ctx.set_keys))
    for spec, value in zip(vary, row, strict=True):
        literal = json.dumps(value) if isinstance(value, str) else repr(value)
        apply_override(mctx, member, f"{spec.key}={literal}")
    return build(mctx, member)
