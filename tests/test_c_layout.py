"""What the fast C kernels read: reordered weights and patches, against loops."""

import numpy as np
import pytest

from tinyconv.export.c_fast_conv import PATCH_GROUP_ORDER, patch_offset
from tinyconv.export.c_layout import padded_k, pair_filters


@pytest.mark.parametrize("f, k", [(1, 1), (2, 4), (3, 9), (4, 27), (5, 8), (2, 3)])
def test_pairs_match_plain_loops(f, k):
    """Each filter padded with zeros to a multiple of 4 values, then filters paired group
    by group of four values, as loops over the padded rows do."""
    rng = np.random.default_rng(f * 100 + k)
    rows = rng.integers(-127, 128, (f, k), dtype=np.int64)
    flat = pair_filters(rows)
    kp = padded_k(k)
    assert kp % 4 == 0 and k <= kp < k + 4
    assert flat.size == f * kp
    assert sorted(flat.tolist()) == sorted(rows.reshape(-1).tolist() + [0] * (f * (kp - k)))
    padded = np.zeros((f, kp), np.int64)
    padded[:, :k] = rows
    want = []
    for o in range(0, f - 1, 2):
        for g in range(kp // 4):
            want += list(padded[o, 4 * g:4 * g + 4]) + list(padded[o + 1, 4 * g:4 * g + 4])
    if f % 2:
        want += list(padded[-1])
    np.testing.assert_array_equal(flat, want)


@pytest.mark.parametrize("k_total", [1, 3, 4, 9, 16, 27, 30])
def test_patch_offsets_tile_the_pair(k_total):
    """The two patches' int16 values (K padded to Kp) fill the 4 Kp bytes of the pair once
    each, and each group of four sits in 8 bytes of its own pixel."""
    kp = padded_k(k_total)
    offsets = [patch_offset(j, q) for q in (0, 1) for j in range(kp)]
    assert sorted(offsets) == list(range(0, 4 * kp, 2))
    for j in range(kp):
        for q in (0, 1):
            base = 16 * (j // 4) + 8 * q
            assert base <= patch_offset(j, q) < base + 8


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


def _one_product(acc: np.ndarray, mult: int, nh: int, code: int) -> np.ndarray:
    """The C's one-product requantisation (``_rq1`` then ``_sat8``) in Python integers."""
    wrap = (nh + 2 ** 31) % 2 ** 32 - 2 ** 31           # the int32 the C reads
    out = []
    for a in acc.tolist():
        m = -1 if a < 0 else 0
        n = ((wrap + m) << 32) + (0x40000000 | ((m & 1) << 31))
        out.append(min(127, max(-128, (n + a * mult) >> 32 >> code)))
    return np.array(out)


def test_channel_records_give_the_reference_requantisation():
    """One record a channel, [folded bias, multiplier, nh, code], in channel order. Where
    the code is 1..22, the one-product form with the record's nh and code gives, for
    random accumulators and the extremes, exactly the integer reference's requantisation
    (tinyconv.quant.integer.requantize: the two roundings done one after the other);
    other codes hold the shift + 64 for the general form. A layer with a lower clamp
    above -128 has only general-form codes."""
    from dataclasses import replace

    from tinyconv.device.measure import random_network
    from tinyconv.export.c_layout import RARE_CODE_OFFSET, bias, channel_records
    from tinyconv.quant.integer import requantize
    rng = np.random.default_rng(5)
    qnet, _ = random_network("12x12rgb/c6k3-p2-dw3-c5k1-gap-d7", 4, seed=2)
    fast_seen = 0
    for layer in qnet.layers:
        if layer.weights is None:
            continue
        rec = channel_records(layer).reshape(-1, 4)
        b = bias(layer, "fast")
        assert rec[:, 0].tolist() == b.tolist()
        assert rec[:, 1].tolist() == np.asarray(layer.multiplier).reshape(-1).tolist()
        acc = np.concatenate([rng.integers(-2 ** 20, 2 ** 20, 400), [0, -1, 1, -2 ** 31,
                                                                     2 ** 31 - 1]])
        want = requantize(np.repeat(acc[:, None], len(b), axis=1), layer)
        for ch, (_, mult, nh, code) in enumerate(rec.tolist()):
            shift = int(np.asarray(layer.shift).reshape(-1)[ch])
            if 1 <= code <= 22:
                fast_seen += 1
                assert layer.lo == -128 and code == shift - 1
                np.testing.assert_array_equal(_one_product(acc, mult, nh, code), want[:, ch])
            else:
                assert code == shift + RARE_CODE_OFFSET and nh == 0
        raised = channel_records(replace(layer, lo=-100)).reshape(-1, 4)
        assert (raised[:, 3] > 22).all()
        assert (raised[:, 3] - RARE_CODE_OFFSET == np.asarray(layer.shift).reshape(-1)).all()
    assert fast_seen > 0


def test_channel_records_refuse_a_shift_whose_code_would_read_as_one_product():
    """The lowest shift a record holds is 23 - RARE_CODE_OFFSET (its code 23, general
    form); one lower would be a code of 22, read as the one-product form, so the records
    refuse it, naming the shift and the plain style."""
    from dataclasses import replace

    from tinyconv.device.measure import random_network
    from tinyconv.export.c_layout import RARE_CODE_OFFSET, channel_records
    qnet, _ = random_network("8x8gray/c4k3-gap-d3", 3, seed=1)
    layer = qnet.layers[0]
    lowest = np.array(layer.shift, copy=True)
    lowest[0] = 23 - RARE_CODE_OFFSET
    assert channel_records(replace(layer, shift=lowest)).reshape(-1, 4)[0, 3] == 23
    lowest[0] -= 1
    with pytest.raises(ValueError, match=rf"shift {22 - RARE_CODE_OFFSET} is below "
                                         rf"{23 - RARE_CODE_OFFSET}; export it with style='plain'"):
        channel_records(replace(layer, shift=lowest))
