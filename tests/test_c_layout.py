"""What the fast C kernels read: reordered weights and folded biases, against loops."""

import numpy as np
import pytest

from tinyconv.export.c_layout import GROUP_ORDER, pair_filters, swizzle_groups


def _loops_swizzle(rows):
    out = rows.copy()
    for r in range(rows.shape[0]):
        for g in range(rows.shape[1] // 4):
            for j in range(4):
                out[r, 4 * g + j] = rows[r, 4 * g + GROUP_ORDER[j]]
    return out


@pytest.mark.parametrize("f, k", [(1, 1), (2, 4), (3, 9), (4, 27), (5, 8), (2, 3)])
def test_swizzle_and_pairs_match_plain_loops(f, k):
    """Groups of four reordered (0, 2, 1, 3) and filters paired group by group, as loops do."""
    rng = np.random.default_rng(f * 100 + k)
    rows = rng.integers(-127, 128, (f, k), dtype=np.int64)
    sw = swizzle_groups(rows)
    np.testing.assert_array_equal(sw, _loops_swizzle(rows))
    flat = pair_filters(sw)
    assert flat.size == f * k and sorted(flat.tolist()) == sorted(rows.reshape(-1).tolist())
    full, t = (k // 4) * 4, k % 4
    want = []
    for o in range(0, f - 1, 2):
        for g in range(k // 4):
            want += list(sw[o, 4 * g:4 * g + 4]) + list(sw[o + 1, 4 * g:4 * g + 4])
        want += list(sw[o, full:]) + list(sw[o + 1, full:])
    if f % 2:
        want += list(sw[-1])
    np.testing.assert_array_equal(flat, want)
    # each pair starts at o * K, as the kernel computes it
    for o in range(0, f - 1, 2):
        assert flat[o * k:(o + 2) * k].size == 2 * k


def test_swizzle_is_undone_by_the_pairing_the_kernel_reads():
    """A word's bytes (0, 2, 1, 3) read as (byte 0, byte 2) and (byte 1, byte 3) give the
    pairs (0, 1) and (2, 3): what SXTB16 of the word and of the word >> 8 take
    (Arm C Language Extensions, __sxtb16)."""
    values = np.array([[11, 22, 33, 44]])
    b = swizzle_groups(values)[0]
    assert (b[0], b[2]) == (11, 22) and (b[1], b[3]) == (33, 44)
