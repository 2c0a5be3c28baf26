"""Compute dask arrays on a dask.distributed cluster and write their blocks here, as they come.

The workers compute; the process that holds the open files (the client) writes, so the cluster
needs no access to the output folder. Blocks are gathered one at a time as they finish, so the
client holds a few blocks, not whole bands.
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["store_on_client"]


def _block_slices(array) -> list[tuple[tuple[int, ...], tuple[slice, slice]]]:
    """(block index, (rows, cols)) of every block of a 2-D dask array."""
    starts = [np.cumsum((0, *c)) for c in array.chunks]
    return [
        (index, tuple(slice(int(s[i]), int(s[i + 1])) for s, i in zip(starts, index, strict=True)))
        for index in np.ndindex(*array.numblocks)
    ]


def store_on_client(client, sources: list, targets: list, extra: list) -> list[Any]:
    """Compute ``sources`` (2-D dask arrays) and ``extra`` (dask objects) on ``client``; write
    each block of ``sources[k]`` into ``targets[k]`` (``target[rows, cols] = block``) in this
    process; return the computed ``extra``.

    Blocks and ``extra`` are one submission, so the chunks they share are computed once; graphs
    are not optimised, so that fusion does not give the shared chunks a new name per output.
    """
    import dask
    from distributed import as_completed

    where: dict[Any, list] = {}  # block key -> [(target, rows, cols)] (equal keys written alike)
    blocks = []
    for source, target in zip(sources, targets, strict=True):
        delayed = source.to_delayed(optimize_graph=False)
        for index, (rows, cols) in _block_slices(source):
            block = delayed[index]
            if block.key not in where:
                blocks.append(block)
            where.setdefault(block.key, []).append((target, rows, cols))
    futures = client.compute([*blocks, dask.delayed(extra)], optimize_graph=False)
    try:
        pending = as_completed(futures[:-1], loop=client.loop, with_results=True)
        for future, value in pending:
            for target, rows, cols in where[future.key]:
                target[rows, cols] = value
            future.release()
        return futures[-1].result()
    finally:
        client.cancel(futures)
