"""The C99 text of the fast integer kernels (the default style of the generated C).

Same results as the plain loop nests of :mod:`tinyconv.export.c_kernels` and
the NumPy reference, bit for bit, but arranged for a small core:

* **convolution** (:mod:`tinyconv.export.c_fast_conv`): two output pixels at
  a time through an interleaved pair of int16 patches, a register-blocked
  product of two filters x two pixels, four values a step;
* **dense and the head** (here): the int8 input read directly, two outputs at
  a time, the input zero point folded into the bias at export
  (``b' = b - zp * sum(w)``);
* **depthwise** (:mod:`tinyconv.export.c_fast_dw`) and **pooling**
  (:mod:`tinyconv.export.c_fast_pool`): the channel loop innermost, four
  channels a step;
* **requantisation** (:data:`REQUANT`, here): the reference's two roundings in
  one signed 64-bit multiply-add, the output zero point folded into its
  rounding constant, the clamp through ``SSAT`` where the core has it;
  multipliers whose shift lies outside 2..23 take the general form; every
  weighted kernel reads one ``[bias, multiplier, nh, code]`` record a channel
  (:func:`tinyconv.export.c_layout.channel_records`);
* the **residual addition** (:mod:`tinyconv.export.c_add`): one pass over the
  values, three rescalings each, on the magnitude like the requantisation.

With ``@U@_USE_DSP`` (on by default when the compiler targets a core with the
DSP extension: Cortex-M4, M7, M33) the products use the Arm C Language
Extensions' ``__sxtb16``, ``__smlad``, ``__smlabb``/``__smlatt`` and max
pooling ``__ssub8``/``__sel``; compilers that take GCC's inline assembly
(GCC, Clang) get a few written-out instructions where GCC's scheduler would
otherwise spill (``SXTB16`` with a rotation, the convolution's inner step).
Without it, the kernels are plain C99. Unaligned words and halfwords are read
and written with ``memcpy``, which compilers turn into single loads and
stores on these cores.
"""

from tinyconv.export.c_layout import RARE_CODE_OFFSET

DSP = r"""
/* Small helpers inlined into the kernels (where the compiler allows it). */
#if defined(__GNUC__)
#define @U@_INLINE static inline __attribute__((always_inline))
#define @U@_OUTLINE static __attribute__((noinline))
#else
#define @U@_INLINE static
#define @U@_OUTLINE static
#endif

/* The DSP extension's dual 16-bit multiply-accumulate (Arm C Language Extensions). */
#if @U@_USE_DSP
#include <arm_acle.h>
/* SXTB16 of a word rotated right by 8 bits (its bytes 1 and 3): one instruction
   where the compiler takes GCC's inline assembly, a rotation and SXTB16 elsewhere. */
@U@_INLINE int32_t @P@_sxtb16_ror8(uint32_t u)
{
#if defined(__GNUC__)
    int32_t r;
    __asm__("sxtb16 %0, %1, ror #8" : "=r"(r) : "r"(u));
    return r;
#else
    return __sxtb16((int32_t)((u >> 8) | (u << 24)));
#endif
}

/* a + SXTB16 of u rotated right by 8 (per 16-bit half), the same way. */
@U@_INLINE int32_t @P@_sxtab16_ror8(int32_t a, uint32_t u)
{
#if defined(__GNUC__)
    int32_t r;
    __asm__("sxtab16 %0, %1, %2, ror #8" : "=r"(r) : "r"(a), "r"(u));
    return r;
#else
    return __sxtab16(a, (int32_t)((u >> 8) | (u << 24)));
#endif
}
#endif
"""

LD16 = r"""
/* An int16 from any address (memcpy: a single load on these cores). */
@U@_INLINE int32_t @P@_ld16(const int8_t *p)
{
    int16_t v;
    memcpy(&v, p, 2);
    return v;
}
"""

REQUANT = r"""
/* acc * mult / 2^31 / 2^shift: the reference's two roundings (of acc * mult /
   2^31, then of that / 2^shift, both half away from zero) computed on the
   magnitude with one 64-bit product. Exact for 0 <= shift <= 31 and a
   multiplier in [0, 2^31), which the exporter checks. */
@U@_INLINE int32_t @P@_rs(int32_t acc, int32_t mult, int32_t shift)
{
    uint32_t neg = acc < 0 ? 1u : 0u;
    uint32_t mag = neg ? 0u - (uint32_t)acc : (uint32_t)acc;
    uint64_t p = (uint64_t)mag * (uint32_t)mult + (((uint64_t)1 << 30) - neg);
    mag = (uint32_t)(p >> 31);
    mag = (mag + ((1u << shift) >> 1)) >> shift;
    return neg ? -(int32_t)mag : (int32_t)mag;
}

/* Requantise one accumulator and clamp; shifts outside 0..31 take the general form. */
@U@_INLINE int8_t @P@_rq(int32_t acc, int32_t mult, int32_t shift, int32_t zp,
                         int32_t lo, int32_t hi)
{
    int32_t y = (uint32_t)shift > 31u ? @P@_scale(acc, mult, shift)
                                      : @P@_rs(acc, mult, shift);
    y += zp;
    if (y < lo) y = lo;
    if (y > hi) y = hi;
    return (int8_t)y;
}

/* C99 leaves two things to the compiler that the one-product form below relies
   on: >> of a negative int32_t copies the sign bit in, and a uint32_t above
   INT32_MAX converts to int32_t modulo 2^32. Compilers for these cores do both;
   this line stops the build on one that does not, rather than let it be wrong. */
typedef char @P@_needs_arithmetic_shift[(-8 >> 1 == -4 && (int32_t)0xFFFFFFF8u == -8) ? 1 : -1];

/* acc * mult / 2^31 / 2^shift + zp for 2 <= shift <= 23, in one signed 64-bit
   multiply-add: the reference's two roundings (of acc * mult / 2^31, halves
   up; then of that / 2^shift, halves away from zero) nest into one,
   (acc * mult + N) >> (31 + shift) with N = 2^(30 + shift) + 2^30 for acc >= 0
   and 2^(30 + shift) - 2^30 below, plus zp * 2^(31 + shift). nh is the high
   word of N for acc >= 0, (2 zp + 1) 2^(shift - 2), and s1 = shift - 1: both
   stored in the channel's record (c_layout.channel_records). */
@U@_INLINE int32_t @P@_rq1(int32_t acc, int32_t mult, uint32_t nh, int32_t s1)
{
    uint32_t m = 0u - (uint32_t)(acc < 0);  /* all ones below zero */
    uint64_t n = ((uint64_t)(nh + m) << 32) | (0x40000000u | (m << 31));
    uint64_t p = n + (uint64_t)((int64_t)acc * mult);
    return (int32_t)(uint32_t)(p >> 32) >> s1;
}

/* A record's code: shift - 1 for the one-product form (1..22), the shift + @RARE@
   for the general form (23 and up; c_layout.channel_records). */
#define @U@_ONE_PRODUCT(code) ((uint32_t)(code) <= 22u)
@U@_INLINE int32_t @P@_shift_of(int32_t code)
{
    return @U@_ONE_PRODUCT(code) ? code + 1 : code - @RARE@;
}

/* The general form for the rare channels outside the one-product range, kept out
   of line so that every kernel's hot path stays short. */
@U@_OUTLINE int8_t @P@_rq_rare(int32_t acc, int32_t mult, int32_t code, int32_t zp, int32_t lo)
{
    return @P@_rq(acc, mult, code - @RARE@, zp, lo, 127);
}

/* Saturate to int8 (the upper clamp of every layer is 127, which the exporter
   checks): the saturation instruction SSAT (Cortex-M3 and up) where the
   compiler takes GCC's inline assembly (written out because GCC turns the C
   below into compares, and the Arm C Language Extensions' __ssat warns under
   -Wsign-conversion with GCC 12), the C elsewhere. A lower clamp above -128
   (after a ReLU whose output zero point is above -128) is the general form's:
   every channel of such a layer has a general-form code in its record
   (c_layout.channel_records), as the one-product form saturates only. */
@U@_INLINE int32_t @P@_sat8(int32_t v)
{
#if defined(__GNUC__) && defined(__ARM_FEATURE_SAT) && __ARM_FEATURE_SAT
    int32_t r;
    __asm__("ssat %0, #8, %1" : "=r"(r) : "r"(v));
    return r;
#else
    return v > 127 ? 127 : (v < -128 ? -128 : v);
#endif
}

/* Requantise two accumulators of one channel (two pixels) with its record r
   (bias, multiplier, nh, code) and clamp to [lo, 127]; codes of the general
   form (rare shifts, and every channel of a layer whose lower clamp is above
   -128) take it. */
@U@_INLINE void @P@_out2(int32_t a0, int32_t a1, const int32_t *r, int32_t zp, int32_t lo,
                         int8_t *y0, int8_t *y1)
{
    /* the record read before either store: a byte store may alias it */
    int32_t mult = r[1], code = r[3];
    uint32_t nh = (uint32_t)r[2];
    if (@U@_ONE_PRODUCT(code)) {
        int32_t v0 = @P@_sat8(@P@_rq1(a0, mult, nh, code));
        int32_t v1 = @P@_sat8(@P@_rq1(a1, mult, nh, code));
        *(uint8_t *)y0 = (uint8_t)v0;
        *(uint8_t *)y1 = (uint8_t)v1;
    } else {
        int8_t v0 = @P@_rq_rare(a0, mult, code, zp, lo);
        *y1 = @P@_rq_rare(a1, mult, code, zp, lo);
        *y0 = v0;
    }
}

/* Requantise one accumulator with its record r and clamp to [lo, 127] (as above). */
@U@_INLINE int8_t @P@_out1(int32_t acc, const int32_t *r, int32_t zp, int32_t lo)
{
    int32_t code = r[3];
    if (!@U@_ONE_PRODUCT(code)) return @P@_rq_rare(acc, r[1], code, zp, lo);
    return (int8_t)@P@_sat8(@P@_rq1(acc, r[1], (uint32_t)r[2], code));
}
""".replace("@RARE@", str(RARE_CODE_OFFSET))

DOT_DIRECT = r"""
/* sum_i w[i] * x[i] over n int8 values, two rows of weights at once (a0: w0, a1: w1). */
@U@_OUTLINE void @P@_dot2(const int8_t *x, const int8_t *w0, const int8_t *w1, int32_t n,
                     int32_t *a0, int32_t *a1)
{
    int32_t i = 0, s0 = *a0, s1 = *a1;
#if @U@_USE_DSP
    for (; i + 4 <= n; i += 4) {
        uint32_t u;
        int32_t xa, xb;
        memcpy(&u, x + i, 4);
        xa = __sxtb16((int32_t)u);
        xb = __sxtb16((int32_t)(u >> 8));
        memcpy(&u, w0 + i, 4);
        s0 = __smlad(__sxtb16((int32_t)u), xa, s0);
        s0 = __smlad(__sxtb16((int32_t)(u >> 8)), xb, s0);
        memcpy(&u, w1 + i, 4);
        s1 = __smlad(__sxtb16((int32_t)u), xa, s1);
        s1 = __smlad(__sxtb16((int32_t)(u >> 8)), xb, s1);
    }
#else
    for (; i + 4 <= n; i += 4) {
        s0 += x[i] * w0[i] + x[i + 1] * w0[i + 1] + x[i + 2] * w0[i + 2] + x[i + 3] * w0[i + 3];
        s1 += x[i] * w1[i] + x[i + 1] * w1[i + 1] + x[i + 2] * w1[i + 2] + x[i + 3] * w1[i + 3];
    }
#endif
    for (; i < n; ++i) {
        s0 += x[i] * w0[i];
        s1 += x[i] * w1[i];
    }
    *a0 = s0;
    *a1 = s1;
}
"""

DENSE = r"""
/* Dense layer, weights [n_out][n_in], bias with the input zero point folded in. */
@U@_KERNEL void @P@_dense(const int8_t *x, int8_t *y, int32_t n_in, int32_t n_out,
                          const int8_t *wt, const int32_t *rec, int32_t yz, int32_t lo,
                          int32_t hi)
{
    int32_t o;
    (void)hi;  /* 127: see @P@_sat8 */
    for (o = 0; o < n_out; o += 2) {
        const int8_t *w0 = wt + o * n_in;
        const int32_t *r = rec + 4 * o;  /* bias, multiplier, nh, code an output */
        int32_t a0 = r[0], a1 = 0;
        if (o + 1 < n_out) a1 = r[4];
        @P@_dot2(x, w0, o + 1 < n_out ? w0 + n_in : w0, n_in, &a0, &a1);
        y[o] = @P@_out1(a0, r, yz, lo);
        if (o + 1 < n_out) y[o + 1] = @P@_out1(a1, r + 4, yz, lo);
    }
}
"""

HEAD = r"""
/* The classifier head: a dense layer (zero point folded into the bias) writing
   the int8 logits, returning the arg-max of the same outputs requantised with
   8 more fractional bits (the first of equal values wins). */
@U@_KERNEL int32_t @P@_head(const int8_t *x, int8_t *y, int32_t n_in, int32_t n_out,
                            const int8_t *wt, const int32_t *rec, int32_t yz)
{
    int32_t o, j, best = 0;
    int64_t best_value = 0;
    for (o = 0; o < n_out; o += 2) {
        const int8_t *w0 = wt + o * n_in;
        int32_t acc[2];
        acc[0] = rec[4 * o];
        acc[1] = o + 1 < n_out ? rec[4 * o + 4] : 0;
        @P@_dot2(x, w0, o + 1 < n_out ? w0 + n_in : w0, n_in, &acc[0], &acc[1]);
        for (j = 0; j < 2 && o + j < n_out; ++j) {
            int64_t value;
            const int32_t *r = rec + 4 * (o + j);  /* bias, multiplier, nh, code */
            int32_t shift = @P@_shift_of(r[3]);
            y[o + j] = @P@_rq(acc[j], r[1], shift, yz, INT8_MIN, INT8_MAX);
            value = (int64_t)@P@_scale(acc[j], r[1], shift - 8)
                    + (int64_t)yz * 256;
            if (o + j == 0 || value > best_value) {
                best = o + j;
                best_value = value;
            }
        }
    }
    return best;
}
"""

#: which templates each step kind needs, in emission order
NEEDS = {
    "conv": ("SCALE", "DSP", "LD16", "REQUANT", "PATCH", "CONV"),
    "dwconv": ("SCALE", "DSP", "REQUANT", "DWCONV"),
    "dense": ("SCALE", "DSP", "REQUANT", "DOT_DIRECT", "DENSE"),
    "head": ("SCALE", "DSP", "REQUANT", "DOT_DIRECT", "HEAD"),
    "maxpool": ("DSP", "MAXPOOL"),
    "avgpool": ("RDIV", "AVGPOOL"),
    "gap": ("RDIV", "GAP"),
    "add": ("SCALE", "DSP", "REQUANT", "ADD"),
}
ORDER = ("KERNEL", "SCALE", "RDIV", "DSP", "LD16", "REQUANT", "PATCH", "CONV", "DOT_DIRECT", "DENSE",
         "HEAD", "DWCONV", "MAXPOOL", "AVGPOOL", "GAP", "ADD")


def templates() -> dict[str, str]:
    """Name -> text of every template of this style (shared ones from the plain style)."""
    from tinyconv.export import c_add, c_fast_conv, c_fast_dw, c_fast_pool, c_kernels
    return {"KERNEL": c_kernels.KERNEL, "SCALE": c_kernels.SCALE, "RDIV": c_kernels.RDIV,
            "ADD": c_add.ADD_FAST,
            "DSP": DSP, "LD16": LD16, "REQUANT": REQUANT,
            "PATCH": c_fast_conv.PATCH, "CONV": c_fast_conv.CONV,
            "DOT_DIRECT": DOT_DIRECT, "DENSE": DENSE, "HEAD": HEAD, "DWCONV": c_fast_dw.DWCONV,
            "MAXPOOL": c_fast_pool.MAXPOOL, "AVGPOOL": c_fast_pool.AVGPOOL,
            "GAP": c_fast_pool.GAP}


def kernels_for(kinds, prefix: str) -> str:
    """The C text of every fast kernel the step ``kinds`` need, prefixed."""
    table = templates()
    wanted = {"KERNEL"} | {name for kind in kinds for name in NEEDS[kind]}
    return "".join(table[name].replace("@P@", prefix).replace("@U@", prefix.upper())
                   for name in ORDER if name in wanted)
