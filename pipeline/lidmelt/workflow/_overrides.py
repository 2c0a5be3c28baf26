"""``--set KEY=VALUE`` overrides: dotted keys into the TOML tree, values read as TOML."""

from __future__ import annotations

import tomllib
from typing import Any

from lidmelt._errors import WorkflowError
from lidmelt.workflow._checks import Context, shortened, shown


def parse_value(text: str) -> Any:
    """A --set VALUE as a TOML value, falling back to the plain string; a WorkflowError for
    arrays or inline tables nested too deeply for the parser (it recurses)."""
    try:
        parsed = tomllib.loads(f"v = {text}")
    except tomllib.TOMLDecodeError:
        return text
    except (RecursionError, ValueError) as exc:  # ValueError: an integer of > 4300 digits
        msg = (
            f"--set value {shortened(text)!r} cannot be read ({type(exc).__name__}: nested too "
            "deeply, or a number too long); give an ordinary TOML value: a number, a string, "
            "true/false, an array or an inline table (see docs/workflow.md)."
        )
        raise WorkflowError(msg) from None
    if set(parsed) != {"v"}:  # e.g. a value with a newline and a second key
        return text
    return parsed["v"]


def apply_override(ctx: Context, tree: dict[str, Any], item: str) -> None:
    """Write one ``KEY=VALUE`` item into ``tree`` (creating tables) and note it in ``ctx``."""
    key, sep, raw = item.partition("=")
    key = key.strip()
    parts = key.split(".")
    if not sep or not key or any(not p.strip() for p in parts):
        msg = (
            f"--set {shortened(item)!r} is not KEY=VALUE; expected a dotted key into the "
            "workflow, e.g. --set model.ambient_potential_temperature_c=1400 or "
            "--set inputs.water.constant=0.01."
        )
        raise WorkflowError(msg)
    parts = [p.strip() for p in parts]
    node: Any = tree
    for depth, part in enumerate(parts[:-1]):
        here = ".".join(parts[: depth + 1])
        if isinstance(node, list):
            node = node[_list_index(ctx, node, part, here, item)]
        else:
            node = node.setdefault(part, {})
        if not isinstance(node, dict | list):
            msg = (
                f"--set {shortened(item)}: '{shortened(here)}' in {ctx.source} is a value "
                f"({shown(node)}), not a table, so '{shortened(key)}' cannot be set. Check the "
                "key against docs/workflow.md."
            )
            raise WorkflowError(msg)
    last = parts[-1]
    if isinstance(node, list):
        node[_list_index(ctx, node, last, key, item)] = parse_value(raw.strip())
    else:
        node[last] = parse_value(raw.strip())
    ctx.set_keys[key] = item


def _list_index(ctx: Context, node: list[Any], part: str, here: str, item: str) -> int:
    if not part.isdigit() or not 1 <= int(part) <= len(node):
        msg = (
            f"--set {shortened(item)}: '{shortened(here)}' needs an item number from 1 to "
            f"{len(node)} (the array in {ctx.source} has {len(node)} items, counted from 1), e.g. "
            "inputs.thermal_anomaly.plumes.1.radius_km=300."
        )
        raise WorkflowError(msg)
    return int(part) - 1
