"""The one block iterator (initgen.science.blocks): every element covered exactly once, no piece
over the limit, pieces in C order along the first dimension (contiguous on disk)."""

import numpy as np

from initgen.science.blocks import slab_blocks


def test_blocks_cover_the_array_once():
    for shape in [(), (7,), (3, 5), (2, 3, 4, 5), (1, 1, 200)]:
        count = np.zeros(shape, int)
        for key in slab_blocks(shape, 7):
            count[key] += 1
            assert count[key].size <= 7 or len(shape) == 0
        assert np.all(count == 1)


def test_blocks_are_first_dimension_slabs_in_c_order():
    # a row of 12 fits a limit of 30: slabs of two rows; flattening the pieces in order gives
    # np.arange back (C order), so a reader walks the file front to back
    a = np.arange(5 * 3 * 4).reshape(5, 3, 4)
    keys = list(slab_blocks(a.shape, 30))
    assert [k[0] for k in keys] == [slice(0, 2), slice(2, 4), slice(4, 5)]
    np.testing.assert_array_equal(np.concatenate([a[k].ravel() for k in keys]), np.arange(a.size))


def test_a_row_over_the_limit_splits_the_next_dimension():
    keys = list(slab_blocks((2, 10, 10), 30))
    assert all(k[0].stop - k[0].start == 1 for k in keys)
    assert max((k[1].stop - k[1].start) * 10 for k in keys) <= 30
