"""Progress of a run by bands of the grid: a bar on a terminal, log lines otherwise."""

from __future__ import annotations

import functools
import sys
from collections.abc import Callable


def band_reporter(show: bool | None) -> Callable[[int, int], None] | None:
    """Progress by bands: a line that updates in place on a terminal, log lines otherwise."""
    if show is False:
        return None
    return functools.partial(_report, tty=sys.stderr.isatty() if show is None else bool(show))


def _report(done: int, total: int, *, tty: bool) -> None:
    pct = 100 * done // total
    if tty:
        bar = "#" * (pct // 4)
        end = "\n" if done == total else ""
        print(f"\rlidmelt run: [{bar:<25}] {pct:3d} %", end=end, file=sys.stderr, flush=True)
    else:
        print(
            f"lidmelt run: {pct:3d} % of the grid done ({done}/{total} bands)",
            file=sys.stderr,
            flush=True,
        )
