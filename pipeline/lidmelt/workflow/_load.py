"""Reading a workflow file: TOML, ``--set`` overrides, validation, model checks."""

from __future__ import annotations

import dataclasses
import functools
import tomllib
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from lidmelt._config import RunConfig
from lidmelt._errors import LidmeltError, WorkflowError
from lidmelt.workflow._assess import read_assess
from lidmelt.workflow._checks import Context, shortened, shown, user_path
from lidmelt.workflow._ensemble import read_ensemble
from lidmelt.workflow._motion import read_motion
from lidmelt.workflow._overrides import apply_override
from lidmelt.workflow._tables import read_config

#: The largest workflow file read (bytes): its text is parsed whole and kept in the run's
#: summary; 10,000 inline plumes take about 1.5 MB.
MAX_WORKFLOW_BYTES = 4_000_000

#: The deepest nesting of tables and arrays a workflow may have (the deepest valid key, an
#: ensemble distribution written as nested tables, has about 10 levels).
MAX_NESTING = 32


def load_workflow(
    path: str | Path,
    *,
    overrides: Sequence[str] = (),
    output_dir: str | Path | None = None,
) -> RunConfig:
    """Read, override and validate a workflow file.

    Parameters
    ----------
    path : str or Path
        The workflow file (TOML). Input paths in it are relative to its folder.
    overrides : sequence of str
        ``KEY=VALUE`` items (the ``--set`` options), applied in order before validation.
        KEY is a dotted key into the TOML tree (``model.parameters.cpx_mass_fraction``; array
        items are counted from 1: ``inputs.thermal_anomaly.plumes.1.radius_km``). VALUE is
        read as a TOML value (``1400``, ``0.01``, ``true``, ``"gdh1"``, ``[1, 2]``) and taken
        as a plain string if it is not one.
    output_dir : str or Path, optional
        The ``-o`` option: the output folder, overriding ``run.output_dir``; relative to the
        current working directory.

    Returns
    -------
    RunConfig
        The validated configuration with absolute paths.

    Raises
    ------
    WorkflowError
        If the file cannot be read or parsed, has an unknown key, a value of the wrong type or
        out of range, misses a required input or grid, names an input file that does not exist,
        or names an unknown model or model parameter.
    """
    given = Path(path)
    workflow_path = user_path(given, what="workflow file")
    source = str(given)
    if not workflow_path.is_file():
        state = "is a folder" if workflow_path.is_dir() else "does not exist"
        msg = (
            f"workflow file {source!r} {state} (resolved to '{workflow_path}'); expected a TOML "
            "workflow file. Copy workflows/template.toml to start one."
        )
        raise WorkflowError(msg)
    text = _read_text(source, workflow_path)
    tree = _parse(source, text)
    ctx = Context(source, {})
    items = tuple(overrides)
    for item in items:
        apply_override(ctx, tree, item)
    _check_nesting(ctx, tree)
    cfg = read_config(
        ctx, tree, workflow_path=workflow_path, text=text, overrides=items, output_dir=output_dir
    )
    validate_models(cfg)
    checked: set[tuple] = {(cfg.model, cfg.lithosphere)}

    def member(mctx: Context, member_tree: dict[str, Any]) -> RunConfig:
        member_cfg = read_config(
            mctx, member_tree, workflow_path=workflow_path, text=text, overrides=items,
            output_dir=output_dir,
        )  # fmt: skip
        if (member_cfg.model, member_cfg.lithosphere) not in checked:
            validate_models(member_cfg)
            checked.add((member_cfg.model, member_cfg.lithosphere))
        return member_cfg

    motion = read_motion(ctx, tree, cfg)
    if motion is not None:
        cfg = dataclasses.replace(cfg, motion=motion)
    ensemble = read_ensemble(ctx, tree, member, functools.partial(_fits, cfg, source))
    cfg = cfg if ensemble is None else dataclasses.replace(cfg, ensemble=ensemble)
    assess = read_assess(ctx, tree, workflow_path.parent)
    return cfg if assess is None else dataclasses.replace(cfg, assess=assess)


def _read_text(source: str, workflow_path: Path) -> str:
    """The workflow file's text; a WorkflowError if it is too large or not UTF-8 text."""
    size = workflow_path.stat().st_size
    if size > MAX_WORKFLOW_BYTES:
        msg = (
            f"workflow file {source!r} has {size:,} bytes; a workflow file has at most "
            f"{MAX_WORKFLOW_BYTES:,} (workflows/template.toml has about 10,000). Put long plume "
            "lists in a catalogue (inputs.thermal_anomaly.plumes_file), or check that this is "
            "the workflow file."
        )
        raise WorkflowError(msg)
    try:
        text = workflow_path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        msg = f"workflow file {source!r} cannot be read as UTF-8 text ({exc}); save it as UTF-8."
        raise WorkflowError(msg) from exc
    return text


def _fits(cfg: RunConfig, source: str, options: Any) -> None:
    """Refuse an ensemble whose estimated memory exceeds its limit, before members are drawn."""
    from lidmelt.ensemble._stage import check_memory

    try:
        check_memory(dataclasses.replace(cfg, ensemble=options))
    except WorkflowError as exc:
        msg = f"{source}: {exc}"
        raise WorkflowError(msg) from None


def _parse(source: str, text: str) -> dict[str, Any]:
    """The TOML tree of a workflow file's text; a WorkflowError for bad TOML or for arrays or
    inline tables nested so deeply that the parser runs out of stack (it recurses)."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = (
            f"workflow file {source!r} is not valid TOML: {shortened(str(exc))}. Check that "
            'line (strings need quotes: name = "demo"; tables are written [model]; see '
            "docs/workflow.md)."
        )
        raise WorkflowError(msg) from exc
    except (RecursionError, ValueError) as exc:  # ValueError: an integer of > 4300 digits
        what = (
            "nests arrays or inline tables too deeply"
            if isinstance(exc, RecursionError)
            else "holds a number too long to read (more than 4300 digits)"
        )
        msg = (
            f"workflow file {source!r} {what}; a workflow nests tables and arrays at most "
            f"{MAX_NESTING} levels deep and holds numbers of ordinary size. Check the file "
            "(see docs/workflow.md)."
        )
        raise WorkflowError(msg) from None


def _check_nesting(ctx: Context, tree: dict[str, Any]) -> None:
    """A WorkflowError naming the key where tables or arrays nest more than
    :data:`MAX_NESTING` levels deep (checked without recursion)."""
    stack: list[tuple[Any, int, str]] = [(tree, 0, "")]
    while stack:
        node, depth, key = stack.pop()
        if depth > MAX_NESTING:
            msg = (
                f"{ctx.where(key)} is nested {depth} or more levels deep (tables within tables, "
                f"arrays within arrays); a workflow has at most {MAX_NESTING}. Check the "
                "brackets and [table.headers] there against docs/workflow.md."
            )
            raise WorkflowError(msg)
        if isinstance(node, dict):
            items = node.items()
        elif isinstance(node, list):
            items = ((str(i), v) for i, v in enumerate(node, start=1))
        else:
            continue
        for name, value in items:
            stack.append((value, depth + 1, f"{key}.{name}" if key else name))


def validate_models(cfg: RunConfig) -> None:
    """Check the melting and cooling models, their parameter overrides and the lid isotherm.

    Calls ``lidmelt.physics._melting.get_model(name, **parameters)``,
    ``lidmelt.physics._cooling.get_cooling_model(name, **parameters)`` and
    ``lidmelt.physics._cooling.isotherm_depth_km`` (which checks that the lid isotherm lies below
    the cooling model's mantle temperature). They raise :class:`lidmelt._errors.ModelError` for
    an unknown model or parameter or a bad value; that error is re-raised as a WorkflowError
    that names the file and the key.

    Parameters
    ----------
    cfg : RunConfig
        The configuration to check.

    Raises
    ------
    WorkflowError
        If a model, one of its parameters or the lid isotherm is not valid.
    """
    from lidmelt.physics._cooling import get_cooling_model, isotherm_depth_km
    from lidmelt.physics._melting import get_model

    model, litho = cfg.model, cfg.lithosphere
    checks: list[tuple[str, Any, Any]] = [  # (key, value, the call that checks it)
        ("model.name", model.name, lambda: get_model(model.name)),
        (
            "model.parameters",
            dict(model.parameters),
            lambda: get_model(model.name, **model.parameters),
        ),
        ("lithosphere.cooling", litho.cooling, lambda: get_cooling_model(litho.cooling)),
        (
            "lithosphere.parameters",
            dict(litho.parameters),
            lambda: get_cooling_model(litho.cooling, **litho.parameters),
        ),
        (
            "lithosphere.lid_isotherm_c",
            litho.lid_isotherm_c,
            lambda: isotherm_depth_km(
                litho.lid_isotherm_c,
                0.0,
                model=get_cooling_model(litho.cooling, **litho.parameters),
            ),
        ),
    ]
    for key, value, check in checks:
        try:
            check()
        except LidmeltError as exc:
            sets = [
                item for item in cfg.overrides if item.partition("=")[0].strip().startswith(key)
            ]
            origin = f" (with --set {shortened(', '.join(sets))})" if sets else ""
            msg = (
                f"'{key}' = {shown(value)} in {cfg.workflow_path.name}{origin} is not valid: "
                f"{shortened(str(exc), 600)}"
            )
            raise WorkflowError(msg) from exc
