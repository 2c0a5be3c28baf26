"""``lidmelt cache``: what the melting-table cache holds, or clear it."""

from __future__ import annotations

import argparse

from lidmelt.physics._tablecache import cache_info, clear_cache


def register(subparsers: argparse._SubParsersAction) -> None:
    """Register ``lidmelt cache``."""
    p = subparsers.add_parser(
        "cache",
        help="show or clear the melting-table cache",
        description=(
            "Melting tables are built once per model and parameter set and cached in "
            "$LIDMELT_CACHE_DIR (else ~/.cache/lidmelt), each with the SHA-256 of its content "
            "(checked on load). The folder is kept under $LIDMELT_CACHE_MAX_MB megabytes "
            "(default 1024) by removing the least recently used tables."
        ),
    )
    group = p.add_mutually_exclusive_group()
    group.add_argument("--info", action="store_true", help="list the cached tables (default)")
    group.add_argument("--clear", action="store_true", help="remove every cached table")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Print the cache's content, or clear it."""
    if args.clear:
        removed = clear_cache()
        print(f"lidmelt cache: removed {len(removed)} file(s) from {cache_info().folder}")
        return 0
    info = cache_info()
    print(f"lidmelt cache: {info.folder}")
    for name, size in info.tables:
        print(f"  {name}  {size / 1e6:.1f} MB")
    print(
        f"  {len(info.tables)} table(s), {info.total_bytes / 1e6:.1f} MB of "
        f"{info.limit_bytes / 1e6:.0f} MB (LIDMELT_CACHE_MAX_MB)"
    )
    return 0
