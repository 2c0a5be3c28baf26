"""The one lookup of named, frozen model objects (melting models and cooling models alike).

A registry maps names to frozen dataclass instances that carry a ``name``, their parameter
values and a ``sources`` dict (parameter name -> "author year, table/eq"). :func:`lookup` finds
an instance by name (case and surrounding spaces ignored; an unknown name gets the nearest valid
one suggested), checks override names against the fields the class lets users change
(:func:`override_fields`) and returns a validated copy (``dataclasses.replace``) whose
overridden parameters are marked "user override" in ``sources``.
"""

from __future__ import annotations

import dataclasses
import difflib
from collections.abc import Iterable, Mapping
from typing import Any, TypeVar

from lidmelt._errors import ModelError

_M = TypeVar("_M")

#: Fields no override may change: the provenance itself.
_NOT_OVERRIDABLE = ("sources",)


def suggest(word: str, choices: Iterable[str]) -> str:
    """`` Did you mean 'x'?`` for the closest of ``choices`` (difflib ratio >= 0.5), else ""."""
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.5)
    return f" Did you mean {close[0]!r}?" if close else ""


def quoted(names: Iterable[str]) -> str:
    """``'a', 'b', 'c'``: names for a message."""
    return ", ".join(repr(n) for n in names)


def override_fields(model: Any) -> list[str]:
    """The fields of ``model`` that an override may change, in declaration order.

    A class may narrow them with a ``FIXED_FIELDS`` class attribute (fields that identify the
    model rather than parametrise it).
    """
    fixed = set(_NOT_OVERRIDABLE) | set(getattr(model, "FIXED_FIELDS", ()))
    return [f.name for f in dataclasses.fields(model) if f.name not in fixed]


def lookup(
    name_or_instance: Any,
    registry: Mapping[str, _M],
    kind: str,
    model_type: type,
    /,
    **overrides: Any,
) -> _M:
    """A registry entry by name (or a given instance), with fields replaced.

    Parameters
    ----------
    name_or_instance : str or model_type
        A registry name (case and surrounding spaces are ignored) or a model object.
    registry : mapping
        Name -> frozen dataclass instance of ``model_type``.
    kind : str
        What the registry holds, for messages: ``"melting model"``, ``"cooling model"``.
    model_type : type
        The class of the registry's models; instances of it are used as they are.
    **overrides
        Fields to replace. Each must be one of :func:`override_fields`; the copy is validated
        again by the class, and its ``sources`` mark each overridden field "user override".

    Raises
    ------
    ModelError
        Not a name, an unknown name or field (the message lists the valid ones and suggests
        the nearest), or an invalid value.
    """
    if isinstance(name_or_instance, model_type):
        base = name_or_instance
    elif isinstance(name_or_instance, str):
        key = name_or_instance.strip().lower()
        if key not in registry:
            msg = (
                f"Unknown {kind} {name_or_instance!r}; valid names are {quoted(registry)}."
                f"{suggest(key, registry)}"
            )
            raise ModelError(msg)
        base = registry[key]
    else:
        msg = (
            f"{kind.capitalize()} name must be a string, got "
            f"{type(name_or_instance).__name__} {name_or_instance!r}; use one of "
            f"{quoted(registry)}."
        )
        raise ModelError(msg)
    if not overrides:
        return base
    valid = override_fields(base)
    for field in overrides:
        if field not in valid:
            msg = (
                f"Unknown {kind} parameter {field!r} for {base.name!r}; valid parameters are "
                f"{', '.join(valid)}.{suggest(field, valid)}"
            )
            raise ModelError(msg)
    sources = {**base.sources, **dict.fromkeys(overrides, "user override")}
    return dataclasses.replace(base, sources=sources, **overrides)
