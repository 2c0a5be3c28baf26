"""What the commands share: parent parsers for repeated options, warnings and short tables.

Options that several commands take (a run directory, the coordinate columns and CRS of a point
file) are defined once here as argparse parent parsers, so their names and help texts cannot
drift apart between commands.
"""

from __future__ import annotations

import argparse
import contextlib
import sys
import warnings
from collections.abc import Iterator, Sequence

import pandas as pd

from lidmelt._variables import FLAG_NODATA
from lidmelt.products._sampling import FLAG_COLUMN, FLAG_MEANING_COLUMN, METHODS, STATUSES


def run_dir_option() -> argparse.ArgumentParser:
    """Parent parser: the positional ``RUN_DIR`` of a product command."""
    parent = argparse.ArgumentParser(add_help=False)
    parent.add_argument("run_dir", metavar="RUN_DIR", help="output folder of 'lidmelt run'")
    return parent


def coordinate_options(what: str) -> argparse.ArgumentParser:
    """Parent parser: ``--lon-column``, ``--lat-column`` and ``--crs`` of a point file ``what``."""
    parent = argparse.ArgumentParser(add_help=False)
    parent.add_argument(
        "--lon-column", metavar="NAME", help=f"longitude (x) column of a CSV {what}"
    )
    parent.add_argument("--lat-column", metavar="NAME", help=f"latitude (y) column of a CSV {what}")
    parent.add_argument(
        "--crs",
        metavar="CRS",
        help=(
            f"CRS of a CSV {what}'s coordinates (default EPSG:4326), or of a vector file that "
            "declares none, e.g. EPSG:32633"
        ),
    )
    return parent


def sampling_method_option() -> argparse.ArgumentParser:
    """Parent parser: ``--method`` of grid sampling."""
    parent = argparse.ArgumentParser(add_help=False)
    parent.add_argument(
        "--method",
        choices=METHODS,
        default="bilinear",
        help="bilinear between cell centres (default) or the containing cell's value",
    )
    return parent


@contextlib.contextmanager
def print_warnings(command: str) -> Iterator[None]:
    """Show lidmelt's user warnings as short ``lidmelt COMMAND: warning: ...`` lines on stderr
    (library deprecation notices are not shown on the command line)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("ignore")
        warnings.simplefilter("always", UserWarning)
        try:
            yield
        finally:
            for w in caught:
                print(f"lidmelt {command}: warning: {w.message}", file=sys.stderr)


def format_table(frame: pd.DataFrame, *, max_rows: int = 20) -> str:
    """A short plain-text table of ``frame`` (numbers to 5 significant digits)."""
    shown = frame.head(max_rows)
    text = shown.to_string(index=False, float_format=lambda v: f"{v:.5g}", na_rep="nan")
    if len(frame) > max_rows:
        text += f"\n... ({len(frame) - max_rows} more rows)"
    return text


def flag_summary(frame: pd.DataFrame) -> str:
    """Count of the flagged rows of a sampled table and of each meaning, e.g.
    '; 2 flagged (2 onset deeper than the model's calibrated pressure range)'; '' when the
    table has no flag column. Rows outside the data (flag 255) are not counted here."""
    if FLAG_COLUMN not in frame.columns:
        return ""
    flags = frame[FLAG_COLUMN].to_numpy()
    flagged = (flags != 0) & (flags != FLAG_NODATA)
    if not flagged.any():
        return "; 0 flagged"
    counts = pd.Series(frame[FLAG_MEANING_COLUMN].to_numpy()[flagged]).value_counts()
    parts = ", ".join(f"{int(n)} {text}" for text, n in counts.items())
    return f"; {int(flagged.sum())} flagged ({parts})"


def status_summary(status: Sequence[str], *, what: str) -> str:
    """One line counting the statuses, e.g. '12 stations: 10 ok, 2 outside_grid'."""
    counts = pd.Series(list(status), dtype=object).value_counts()
    parts = [f"{int(counts[s])} {s}" for s in STATUSES if s in counts]
    return f"{len(status)} {what}: " + ", ".join(parts)
