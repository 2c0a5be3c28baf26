"""The building blocks of the report, shared by its HTML and PDF writers: sections of
paragraphs, tables, preformatted text and figures, and the text of numbers."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Table:
    """A table of text cells (already formatted, not yet escaped)."""

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    mono: tuple[int, ...] = ()  # columns shown in a monospace font (hashes, paths)


@dataclass(frozen=True)
class Pre:
    """Preformatted text (the workflow, raw JSON); ``folded``: shown folded under that title."""

    text: str
    folded: str = ""
    in_pdf: bool = True  # False: raw data the PDF leaves to the HTML page (it names it instead)


@dataclass(frozen=True)
class MapImage:
    """One embedded map (or figure: a section may hold one among its blocks)."""

    variable: str
    data: bytes
    mime: str  # "image/png" or "image/svg+xml"
    source: str  # "rendered for this report" or the file it came from
    caption: str = ""  # shown instead of the variable's label when given


Block = str | Table | Pre | MapImage


@dataclass(frozen=True)
class Section:
    """A heading and its blocks: paragraphs (str), :class:`Table`, :class:`Pre` or
    :class:`MapImage` (a figure)."""

    key: str
    heading: str
    blocks: tuple[Block, ...]


def format_value(value: Any) -> str:
    """Exact text of a parameter value as stored in summary.json.

    Floats use Python's shortest round-trip form (``repr``: 1085.7, 1e-06), so the report shows
    every digit the run stored; lists, dicts and null are shown as JSON.
    """
    if isinstance(value, bool) or value is None:
        return json.dumps(value)
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else str(value)
    if isinstance(value, int | str):
        return str(value)
    return json.dumps(value, ensure_ascii=False, sort_keys=True)


def format_number(value: Any, *, unit: str = "") -> str:
    """Readable text of a statistic: thousands separators, 4 significant digits."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        return "not recorded" if value is None else str(value)
    if isinstance(value, int):
        text = f"{value:,}"
    elif not math.isfinite(value):
        text = str(value)
    elif value != 0 and (abs(value) >= 1e4 or abs(value) < 1e-3):
        text = f"{value:,.0f}" if abs(value) >= 1e4 else f"{value:.3e}"
    else:
        text = f"{value:.4g}"
    return f"{text} {unit}".strip()


def format_sig(value: Any, *, unit: str = "", digits: int = 3) -> str:
    """Text of a statistic to ``digits`` significant figures, with thousands separators.

    ``45678.9`` -> ``"45,700"``; ``0.012345`` -> ``"0.0123"``. Integers (counts) are exact
    and shown in full (``"1,234,567"``).
    """
    if isinstance(value, bool) or not isinstance(value, float):
        return format_number(value, unit=unit)
    if value == 0 or not math.isfinite(value):
        text = str(value) if not math.isfinite(value) else "0"
    else:
        rounded = float(f"{value:.{digits}g}")
        exponent = math.floor(math.log10(abs(rounded)))
        if exponent >= digits - 1 and abs(rounded) < 1e15:
            text = f"{round(rounded):,}"
        elif exponent >= -4:
            text = f"{rounded:.{max(digits - 1 - exponent, 0)}f}"
        else:
            text = f"{rounded:.{digits - 1}e}"
    return f"{text} {unit}".strip()
