"""Fixed-point requantisation: worked values and exact-rational oracles."""

from fractions import Fraction

import numpy as np
import pytest

from tinyconv.quant.fixed_point import (
    INT32_MAX, INT32_MIN, multiply_by_quantized_multiplier, quantize_multiplier,
    rounding_doubling_high_mul, rounding_right_shift)


def _round_half_away(x: Fraction) -> int:
    """Round half away from zero with exact rationals (standard library fractions)."""
    mag = abs(x)
    whole = int(mag)
    if mag - whole >= Fraction(1, 2):
        whole += 1
    return whole if x >= 0 else -whole


def test_multiplier_worked_values():
    """M = 0.001 and M = 0.0072474273 give the CHECKS.md worked (m0, n)."""
    # Jacob et al., CVPR 2018: M = 2^-n M0, M0 in [0.5, 1), stored round(M0 2^31) (computed)
    assert quantize_multiplier(0.001) == (1_099_511_628, 9)
    assert quantize_multiplier(0.0072474273) == (1_992_157_647, 7)


def test_requantise_worked_accumulators():
    """Accumulators 12345, -12345, 1500 at M = 0.001 give 12, -12, 2."""
    # Jacob et al., CVPR 2018 (rounding doubling high multiply, rounding right shift);
    # values computed in CHECKS.md. 1500 * 0.001 = 1.5 rounds away from zero to 2.
    m0, n = quantize_multiplier(0.001)
    out = multiply_by_quantized_multiplier(np.array([12345, -12345, 1500]), m0, n)
    assert out.tolist() == [12, -12, 2]


def test_multiplier_normalised_and_close():
    """m0 lies in [2^30, 2^31) and m0 2^-31 2^-n is within half a unit of M."""
    rng = np.random.default_rng(3)
    for m in np.exp(rng.uniform(np.log(1e-7), np.log(0.99), 200)):
        m0, n = quantize_multiplier(float(m))
        assert 2 ** 30 <= m0 < 2 ** 31
        # the stored value is round(M0 2^31): error at most 1/2 of 2^-31 2^-n
        assert abs(Fraction(m0, 2 ** 31) / 2 ** n - Fraction(float(m))) <= Fraction(1, 2 ** (32 + n))


def test_multiplier_edges():
    """Zero, a mantissa rounding up to 2^31, tiny and >= 1 multipliers, bad values."""
    assert quantize_multiplier(0.0) == (0, 0)
    # 1 - 2^-40: M0 2^31 rounds to 2^31, so the pair becomes (2^30, -1), i.e. exactly 1.0
    m0, n = quantize_multiplier(1.0 - 2.0 ** -40)
    assert (m0, n) == (2 ** 30, -1)
    assert quantize_multiplier(2.0 ** -40) == (0, 0)
    assert quantize_multiplier(3.0) == (3 * 2 ** 29, -2)
    with pytest.raises(ValueError, match="finite and >= 0"):
        quantize_multiplier(-0.5)
    with pytest.raises(ValueError, match="finite and >= 0"):
        quantize_multiplier(float("nan"))


def test_high_mul_matches_exact_rounding():
    """round(a b / 2^31) half away from zero, against exact fractions."""
    rng = np.random.default_rng(0)
    a = rng.integers(INT32_MIN, INT32_MAX, 500, endpoint=True)
    b = rng.integers(2 ** 30, INT32_MAX, 500, endpoint=True)
    got = rounding_doubling_high_mul(a, b)
    want = [_round_half_away(Fraction(int(x) * int(y), 2 ** 31)) for x, y in zip(a, b)]
    assert got.tolist() == want
    # the one overflow case saturates (gemmlowp's rule, Jacob et al. 2018 [from memory])
    assert int(rounding_doubling_high_mul(INT32_MIN, INT32_MIN)) == INT32_MAX


def test_right_shift_matches_exact_rounding_and_bit_form():
    """Magnitude form equals exact rounding and the mask/threshold bit form."""
    rng = np.random.default_rng(1)
    x = rng.integers(INT32_MIN, INT32_MAX, 400, endpoint=True)
    x[:6] = [-1536, 1536, -3, 3, 0, -1]  # exact halves and small values
    for n in (0, 1, 5, 9, 17, 31):
        got = rounding_right_shift(x, n).tolist()
        exact = [_round_half_away(Fraction(int(v), 2 ** n)) for v in x]
        assert got == exact
        # the mask/threshold form with an arithmetic shift (gemmlowp's RoundingDivideByPOT,
        # Jacob et al. 2018 [from memory]): Python's >> on ints is arithmetic
        mask = (1 << n) - 1
        bits = [(int(v) >> n) + ((int(v) & mask) > ((mask >> 1) + (int(v) < 0))) for v in x]
        assert got == bits


def test_left_shift_for_large_multipliers():
    """A multiplier >= 1 uses a saturating left shift: 100 * 3 = 300, saturation at int32."""
    m0, n = quantize_multiplier(3.0)
    out = multiply_by_quantized_multiplier(np.array([100, -100, INT32_MAX]), m0, n)
    assert out.tolist()[:2] == [300, -300]
    assert out.tolist()[2] == _round_half_away(Fraction(INT32_MAX * m0, 2 ** 31))
