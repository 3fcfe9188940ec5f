"""What the fast C kernels read: reordered weights and patches, against loops."""

import numpy as np
import pytest

from tinyconv.export.c_fast_conv import PATCH_GROUP_ORDER, patch_offset
from tinyconv.export.c_layout import pair_filters


@pytest.mark.parametrize("f, k", [(1, 1), (2, 4), (3, 9), (4, 27), (5, 8), (2, 3)])
def test_pairs_match_plain_loops(f, k):
    """Filters paired group by group of four values, then the pair's tails, as loops do."""
    rng = np.random.default_rng(f * 100 + k)
    rows = rng.integers(-127, 128, (f, k), dtype=np.int64)
    flat = pair_filters(rows)
    assert flat.size == f * k and sorted(flat.tolist()) == sorted(rows.reshape(-1).tolist())
    full = (k // 4) * 4
    want = []
    for o in range(0, f - 1, 2):
        for g in range(k // 4):
            want += list(rows[o, 4 * g:4 * g + 4]) + list(rows[o + 1, 4 * g:4 * g + 4])
        want += list(rows[o, full:]) + list(rows[o + 1, full:])
    if f % 2:
        want += list(rows[-1])
    np.testing.assert_array_equal(flat, want)
    # each pair starts at o * K, as the kernel computes it
    for o in range(0, f - 1, 2):
        assert flat[o * k:(o + 2) * k].size == 2 * k


@pytest.mark.parametrize("k_total", [1, 3, 4, 9, 16, 27, 30])
def test_patch_offsets_tile_the_pair(k_total):
    """The two patches' int16 values fill the 4 K bytes of the pair once each, and each
    group of four sits in 8 bytes of its own pixel."""
    offsets = [patch_offset(j, q, k_total) for q in (0, 1) for j in range(k_total)]
    assert sorted(offsets) == list(range(0, 4 * k_total, 2))
    for j in range(k_total // 4 * 4):
        for q in (0, 1):
            base = 16 * (j // 4) + 8 * q
            assert base <= patch_offset(j, q, k_total) < base + 8


def test_group_order_pairs_with_sign_extension_of_a_word():
    """SXTB16 of a word of weights (w0..w3) gives (w0, w2), of the word rotated by 8
    gives (w1, w3) (Arm C Language Extensions, __sxtb16); the patch's group order
    (0, 2, 1, 3) puts (x0, x2) in its first word and (x1, x3) in its second, so two
    dual multiply-accumulates give w0 x0 + w1 x1 + w2 x2 + w3 x3."""
    weights = np.array([3, -5, 7, 11])
    x = np.array([13, 17, -19, 23])
    word = weights[[0, 2]], weights[[1, 3]]              # the two SXTB16 results
    patch = x[list(PATCH_GROUP_ORDER)]                    # as stored
    first, second = patch[:2], patch[2:]                  # the patch's two words
    total = int(word[0] @ first + word[1] @ second)
    assert total == int(weights @ x)


def test_channel_records_hold_bias_multiplier_and_shift_per_channel():
    """One record a channel, [folded bias, multiplier, shift], in channel order: the same
    values as the three arrays the plain kernels read (the dense bias folded as the
    fast kernels need); a layer with a lower clamp above -128 stores its shifts 64
    higher, so that the general form takes it."""
    from dataclasses import replace

    from tinyconv.device.measure import random_network
    from tinyconv.export.c_layout import bias, channel_records
    qnet, _ = random_network("12x12rgb/c6k3-p2-dw3-c5k1-gap-d7", 4, seed=2)
    for layer in qnet.layers:
        if layer.weights is None:
            continue
        rec = channel_records(layer).reshape(-1, 3)
        b = bias(layer, "fast")
        for ch in range(len(b)):
            assert rec[ch].tolist() == [int(b[ch]), int(layer.multiplier[ch]),
                                        int(layer.shift[ch])]
        # a raised lower clamp moves every shift out of the fast form's range, by 64
        raised = channel_records(replace(layer, lo=-100)).reshape(-1, 3)
        assert (raised[:, 2] == rec[:, 2] + 64).all() and (raised[:, 2] > 23).all()
