"""Checks of single workflow values, with messages that name the file, the key and the fix.

Every check takes a :class:`Context` (where the values come from) and the dotted key, and raises
:class:`lidmelt._errors.WorkflowError` saying what was found, what was expected (with the unit)
and how to write it.
"""

from __future__ import annotations

import difflib
import math
import reprlib
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

from lidmelt._errors import WorkflowError

#: A reader of one value: ``reader(ctx, dotted_key, value) -> checked value``.
Reader = Callable[["Context", str, Any], Any]

#: The longest text of one value or key that a message echoes (characters).
SHOWN_CHARS = 80


def _repr_of_bounded_size() -> reprlib.Repr:
    short = reprlib.Repr()
    short.maxstring = short.maxother = SHOWN_CHARS
    short.maxlist = short.maxtuple = short.maxdict = 6
    short.maxlevel = 3
    return short


_SHORT = _repr_of_bounded_size()


def shown(value: Any) -> str:
    """``repr(value)`` for a message, at most about :data:`SHOWN_CHARS` characters: a long
    string or number is cut in the middle and its length given, a long or deep array or table
    is elided (a hostile 10 MB value is never echoed whole)."""
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 256:
        return f"a whole number of about {value.bit_length() * 0.30103:.0f} digits"
    text = _SHORT.repr(value)
    if isinstance(value, str) and len(value) > SHOWN_CHARS:
        text += f" ({len(value)} characters)"
    return text


def shortened(text: str, limit: int = SHOWN_CHARS) -> str:
    """``text`` (a key, a --set item, a library's message) for a message, cut in the middle if
    longer than ``limit`` characters."""
    if len(text) <= limit:
        return text
    half = limit // 2
    return f"{text[:half]}...{text[-half:]} ({len(text)} characters)"


class Context:
    """Where values come from, for error messages.

    Parameters
    ----------
    source : str
        The workflow file as the user named it.
    set_keys : dict of str to str
        Dotted key -> the ``--set`` item that wrote it (filled while the overrides apply).
    """

    def __init__(self, source: str, set_keys: dict[str, str]) -> None:
        self.source = source
        self.set_keys = set_keys

    def origin(self, key: str) -> str:
        """`` (from --set ITEM)`` when a --set item wrote this key or a parent table, else ''."""
        for set_key, item in self.set_keys.items():
            if key == set_key or key.startswith(set_key + "."):
                return f" (from --set {shortened(item)})"
        return ""

    def where(self, key: str) -> str:
        """``'key' in file.toml``, plus the --set item that wrote it, if any."""
        return f"'{shortened(key)}' in {self.source}{self.origin(key)}"


_TYPE_NAMES: tuple[tuple[type, str], ...] = (
    (bool, "a boolean"),  # before int: a bool is an int
    (int, "a whole number"),
    (float, "a decimal number"),
    (str, "a string"),
    (list, "an array"),
    (dict, "a table"),
)


def _type_name(value: Any) -> str:
    for kind, name in _TYPE_NAMES:
        if isinstance(value, kind):
            return name
    return f"a {type(value).__name__}"


def wrong_type(ctx: Context, key: str, value: Any, expected: str, example: str) -> WorkflowError:
    """The error for a value of the wrong type (to raise), with an example of the right one."""
    return WorkflowError(
        f"{ctx.where(key)} is {shown(value)} ({_type_name(value)}); expected {expected}. "
        f"Write it like: {example}"
    )


def leaf(key: str) -> str:
    """The last part of a dotted key."""
    return key.rsplit(".", 1)[-1]


def number(ctx: Context, key: str, value: Any, *, unit: str) -> float:
    """``value`` as a float if it is a finite number (in ``unit``), else raise."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise wrong_type(ctx, key, value, f"a number in {unit}", f"{leaf(key)} = 1.0")
    if not math.isfinite(value):
        msg = f"{ctx.where(key)} is {shown(value)}; expected a finite number in {unit}."
        raise WorkflowError(msg)
    return float(value)


def integer(ctx: Context, key: str, value: Any, *, example: str) -> int:
    """``value`` if it is a whole number (TOML integer), else raise."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise wrong_type(
            ctx, key, value, "a whole number (no decimal point)", f"{leaf(key)} = {example}"
        )
    return value


def at_least(
    ctx: Context, key: str, value: Any, minimum: int, *, unit: str, advice: str, example: str
) -> int:
    """``value`` if it is a whole number >= ``minimum``, else raise with ``advice``."""
    value = integer(ctx, key, value, example=example)
    if value < minimum:
        msg = f"{ctx.where(key)} is {value}{unit}; expected at least {minimum} {advice}"
        raise WorkflowError(msg)
    return value


def boolean(ctx: Context, key: str, value: Any) -> bool:
    """``value`` if it is true or false, else raise."""
    if not isinstance(value, bool):
        raise wrong_type(ctx, key, value, "true or false (unquoted)", f"{leaf(key)} = true")
    return value


def string(ctx: Context, key: str, value: Any, *, example: str) -> str:
    """``value`` if it is a non-empty string, else raise."""
    if not isinstance(value, str):
        raise wrong_type(ctx, key, value, "a quoted string", f'{leaf(key)} = "{example}"')
    if not value.strip():
        msg = f"{ctx.where(key)} is an empty string; expected {example!r} or similar."
        raise WorkflowError(msg)
    return value


def choice(ctx: Context, key: str, value: Any, choices: Sequence[str]) -> str:
    """``value`` if it is one of ``choices``, else raise suggesting the nearest one."""
    value = string(ctx, key, value, example=choices[0])
    if value not in choices:
        near = difflib.get_close_matches(value, choices, n=1)
        hint = f" Did you mean {near[0]!r}?" if near else ""
        msg = (
            f"{ctx.where(key)} is {shown(value)}, which is not known; expected one of "
            f"{', '.join(repr(c) for c in choices)}.{hint}"
        )
        raise WorkflowError(msg)
    return value


def in_range(
    ctx: Context, key: str, value: Any, low: float, high: float, unit: str, advice: str
) -> float:
    """``value`` as a float if it is a number within [low, high] (in ``unit``), else raise."""
    checked = number(ctx, key, value, unit=unit)
    if not low <= checked <= high:
        msg = (
            f"{ctx.where(key)} is {checked:g} {unit}, outside the accepted range "
            f"{low:g} to {high:g} {unit}; {advice}"
        )
        if not msg.endswith(("?", ".")):
            msg += "."
        raise WorkflowError(msg)
    return checked


def table(ctx: Context, key: str, value: Any) -> dict[str, Any]:
    """``value`` if it is a TOML table, else raise."""
    if not isinstance(value, dict):
        raise wrong_type(ctx, key, value, "a table", f"[{key}] on a line of its own")
    return value


def read_fields(
    ctx: Context, prefix: str, values: Mapping[str, Any], readers: Mapping[str, Reader]
) -> dict[str, Any]:
    """The fields of the table ``prefix`` that are given, each checked by its reader."""
    return {
        name: read(ctx, f"{prefix}.{name}", values[name])
        for name, read in readers.items()
        if name in values
    }


def user_path(written: str | Path, *, base: Path | None = None, what: str = "path") -> Path:
    """``written`` as an absolute path (``~`` expanded, relative to ``base`` or the current
    folder), or a WorkflowError naming ``what`` for a NUL character, an unknown ``~user``,
    a name too long for the file system or a path that cannot be resolved."""
    text = str(written)
    problem = None
    if "\x00" in text:
        problem = "holds a NUL character"
    elif len(text) > 4096 or any(len(part) > 255 for part in Path(text).parts):
        problem = "is longer than the file system allows (4096 characters, 255 per name)"
    if problem is None:
        try:
            path = Path(text).expanduser()
            return ((base / path) if base is not None else path).resolve()
        except RuntimeError:
            problem = "starts with '~user' for a user this system does not know"
        except (OSError, ValueError) as exc:
            problem = f"cannot be resolved ({exc})"
    shown = text if len(text) <= 80 else text[:77] + "..."
    msg = f"{what} {shown!r} {problem}. Give a plain absolute or relative path."
    raise WorkflowError(msg)
