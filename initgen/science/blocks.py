"""The one way initgen walks a large array in pieces, and the piece sizes, each with its reason.

Every loop over blocks of an array in initgen (the soil functions in memory, the compare report
and the repacking copy reading files) takes its index tuples from :func:`slab_blocks`; the
engine's walk over a model file (:mod:`initgen.engine.tiling`) cuts at the file's seam and chunk
edges as well, on top of its own element budget below.
"""

from __future__ import annotations

from typing import Iterator

import numpy as np

__all__ = ["slab_blocks", "SOIL_BLOCK_ELEMENTS", "APPLY_BLOCK_ELEMENTS", "COMPARE_BLOCK_ELEMENTS",
           "REPACK_BLOCK_ELEMENTS"]

#: The soil functions (temperature and energy modes, the enthalpy solver) work in pieces of about
#: this many cells so that their dozen float64 temporaries stay in the CPU cache (results do not
#: depend on it: every cell is computed on its own).
SOIL_BLOCK_ELEMENTS = 1 << 15
#: apply reads and writes a model file in pieces of at most this many values per variable (2 MB
#: as float64), so its memory stays flat whatever the file's size.
APPLY_BLOCK_ELEMENTS = 250_000
#: compare reads the two files in pieces of at most this many values per variable (16 MB as
#: float64 per file): only running statistics are kept.
COMPARE_BLOCK_ELEMENTS = 2_000_000
#: the repacking copy moves raw values in pieces of at most this many (32 MB as float64).
REPACK_BLOCK_ELEMENTS = 4_000_000


def slab_blocks(shape: tuple, limit: int) -> Iterator[tuple]:
    """Index tuples (of slices) that cover an array of ``shape`` in pieces of at most ~``limit`` elements.

    Pieces are slabs along the first dimension (contiguous on disk and in C-ordered memory); when
    one index of the first dimension alone holds more than ``limit`` elements, the next dimension
    is split too, and so on. A scalar shape gives one empty tuple; a shape with a zero length
    gives nothing.

    Parameters
    ----------
    shape : tuple of int
        Shape of the array to walk.
    limit : int
        Largest number of elements in one piece (a single element if the last dimension forces it).

    Yields
    ------
    tuple of slice
        One index per piece, in C order; together they cover every element exactly once.

    Examples
    --------
    >>> list(slab_blocks((4, 3), 6))
    [(slice(0, 2, None), slice(None, None, None)), (slice(2, 4, None), slice(None, None, None))]
    """
    if len(shape) == 0:
        yield ()
        return
    if any(s == 0 for s in shape):
        return
    k = 0
    while k < len(shape) - 1 and int(np.prod(shape[k + 1:])) > limit:
        k += 1
    inner = int(np.prod(shape[k + 1:])) if k + 1 < len(shape) else 1
    step = max(1, limit // max(inner, 1))
    rest = (slice(None),) * (len(shape) - k - 1)
    for outer in np.ndindex(*shape[:k]):
        head = tuple(slice(i, i + 1) for i in outer)
        for start in range(0, shape[k], step):
            yield head + (slice(start, min(shape[k], start + step)),) + rest
