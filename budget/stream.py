"""Running a budget block by block in time.

`run_blocks(func, nt, chunk)` calls ``func(slice)`` for consecutive time blocks and returns
their results in order; memory stays bounded by one block.
"""

from __future__ import annotations


def run_blocks(func, nt: int, chunk: int, progress=None) -> list:
    out = []
    for t0 in range(0, nt, chunk):
        ts = slice(t0, min(nt, t0 + chunk))
        out.append(func(ts))
        if progress is not None:
            progress(ts.stop, nt)
    return out
