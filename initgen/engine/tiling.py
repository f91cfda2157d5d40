"""The one block iterator of a plan: slabs (one per index run of the region, split at the grid's
seam) and fixed-size blocks cut at chunk boundaries, so memory does not grow with file size.
"""

from __future__ import annotations

import numpy as np

from initgen.engine.fields import Plan
from initgen.science.blocks import APPLY_BLOCK_ELEMENTS

BLOCK_ELEMENTS = APPLY_BLOCK_ELEMENTS  # values per variable per block; the reason stands in science/blocks.py


def _runs(flags: np.ndarray, min_gap: int, idx_file: np.ndarray) -> list[tuple[int, int]]:
    """Runs (window positions) where ``flags`` is true, merging gaps < min_gap, never across a
    break in the window's file indices (so every run is one contiguous slice of the file)."""
    pos = np.flatnonzero(flags)
    if pos.size == 0:
        return []
    breaks = np.flatnonzero((np.diff(pos) > min_gap) | (np.diff(idx_file[pos]) != np.diff(pos)))
    starts = np.concatenate([[pos[0]], pos[breaks + 1]])
    ends = np.concatenate([pos[breaks], [pos[-1]]]) + 1
    return list(zip(starts.tolist(), ends.tolist()))


def slabs(plan: Plan) -> list[tuple[dict, tuple]]:
    """Bounding slabs of the region: (file slices per horizontal dim, window slices).

    One slab per run of each horizontal dim: a region that wraps around the dateline on a
    0..360 grid gives two slabs, not one spanning the globe.
    """
    region = plan.region
    dims = plan.model.grid.dims
    per_dim = []
    for ax, d in enumerate(dims):
        other = tuple(a for a in range(region.ndim) if a != ax)
        flags = region.any(axis=other) if other else region
        gap = max(8, region.shape[ax] // 20)
        per_dim.append(_runs(flags, gap, plan.window[ax]))
    out = [({}, ())]
    for ax, (d, runs) in enumerate(zip(dims, per_dim)):
        win = plan.window[ax]
        out = [(dict(h, **{d: slice(int(win[a]), int(win[b - 1]) + 1)}), w + (slice(a, b),))
               for h, w in out for (a, b) in runs]
    return out


def _chunk_edges(start: int, stop: int, step: int, chunk: int) -> list[tuple[int, int]]:
    """Split [start, stop) into pieces of about ``step``, cut at multiples of ``chunk``."""
    if chunk > 1:
        step = max(chunk, (step // chunk) * chunk)
    out = []
    a = start
    while a < stop:
        b = min(stop, ((a // step) + 1) * step if chunk > 1 else a + step)
        out.append((a, b))
        a = b
    return out


def blocks_of(plan: Plan, slab: tuple) -> list[tuple[dict, tuple]]:
    """Tile a slab into blocks of at most about ``BLOCK_ELEMENTS`` values per variable.

    Blocks are cut along both horizontal dims, at the chunk boundaries of chunked variables (a
    block never holds part of a chunk that another block also writes), so the memory a block
    needs does not grow with the file or the region.
    """
    hkey, widx = slab
    model = plan.model
    dims = model.grid.dims
    depth, chunks = 1, [1] * len(dims)
    for role in model.roles.values():
        for v in role.views:
            info = v.info
            depth = max(depth, int(np.prod([s for dd, s in zip(info.dims, info.shape) if dd not in dims])))
            if info.chunks:
                for ax, d in enumerate(dims):
                    if d in info.dims:
                        chunks[ax] = max(chunks[ax], info.chunks[info.dims.index(d)])
    budget = max(1, BLOCK_ELEMENTS // depth)  # horizontal cells per block
    spans = [(hkey[d].start, hkey[d].stop) for d in dims]
    if len(dims) == 1:
        pieces = [[p] for p in _chunk_edges(*spans[0], budget, chunks[0])]
    else:
        ncols = spans[1][1] - spans[1][0]
        cols = ncols if ncols * chunks[0] <= budget else max(1, budget // max(chunks[0], 1))
        col_pieces = _chunk_edges(*spans[1], cols, chunks[1])
        width = max(b - a for a, b in col_pieces)
        row_pieces = _chunk_edges(*spans[0], max(1, budget // width), chunks[0])
        pieces = [[r, c] for r in row_pieces for c in col_pieces]
    out = []
    for piece in pieces:
        h = dict(hkey)
        w = list(widx)
        for ax, (d, (a, b)) in enumerate(zip(dims, piece)):
            offset = widx[ax].start - hkey[d].start  # window position = file index + offset in a slab
            h[d] = slice(a, b)
            w[ax] = slice(a + offset, b + offset)
        out.append((h, tuple(w)))
    return out


# ---------------------------------------------------------------------------------------------


def _bcast_h(arr_h: np.ndarray, ndim_extra: int) -> np.ndarray:
    """Horizontal array -> shape (1, [1,] *h) for broadcasting against (E, [L,] *h)."""
    return arr_h.reshape((1,) * ndim_extra + arr_h.shape)


def _layer_col(vec: np.ndarray, nh: int) -> np.ndarray:
    """Per-layer vector -> (1, L, 1, ...) for broadcasting against (E, L, *h)."""
    return vec.reshape((1, -1) + (1,) * nh)
