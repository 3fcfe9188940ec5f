"""The C99 text of the integer kernels, one template per step kind.

Each is the line-for-line C form of the NumPy reference in
:mod:`tinyconv.quant.integer` and :mod:`tinyconv.quant.fixed_point`: int32
accumulators, the rounding doubling high multiply and rounding right shift
written on the magnitude (so no negative number is ever right-shifted, which
C99 leaves to the implementation), and integer division that truncates toward
zero (which C99 defines). ``@P@`` is replaced by the symbol prefix.
Only the kernels a network uses are emitted (``-Wall`` rejects unused static
functions). The residual addition's template is in :mod:`tinyconv.export.c_add`.
"""

from tinyconv.export import c_add

SCALE = r"""
/* acc * mult * 2^-31 * 2^-shift, rounded half away from zero, integers only. */
static int32_t @P@_scale(int32_t acc, int32_t mult, int32_t shift)
{
    int64_t x = acc;
    int64_t ab, nudge, high, mag;
    if (shift < 0) { /* only for a multiplier >= 1: saturating left shift */
        x = x * ((int64_t)1 << -shift);
        if (x > INT32_MAX) x = INT32_MAX;
        if (x < INT32_MIN) x = INT32_MIN;
        shift = 0;
    }
    /* rounding doubling high multiply */
    ab = x * (int64_t)mult;
    nudge = ab >= 0 ? ((int64_t)1 << 30) : (1 - ((int64_t)1 << 30));
    high = (ab + nudge) / ((int64_t)1 << 31); /* C99 division truncates toward zero */
    if (x == INT32_MIN && mult == INT32_MIN) high = INT32_MAX;
    if (shift == 0) return (int32_t)high;
    /* rounding right shift, on the magnitude */
    mag = high < 0 ? -high : high;
    mag = (mag + ((int64_t)1 << (shift - 1))) >> shift;
    return (int32_t)(high < 0 ? -mag : mag);
}
"""

OUT = r"""
/* Requantise one accumulator onto the output grid and clamp (ReLU: lo = zp). */
static int8_t @P@_out(int32_t acc, int32_t mult, int32_t shift, int32_t zp,
                      int32_t lo, int32_t hi)
{
    int64_t y = (int64_t)@P@_scale(acc, mult, shift) + zp;
    if (y < lo) y = lo;
    if (y > hi) y = hi;
    return (int8_t)y;
}
"""

RDIV = r"""
/* total / count rounded half away from zero (count >= 1). */
static int8_t @P@_rdiv(int32_t total, int32_t count)
{
    int32_t mag = total < 0 ? -total : total;
    mag = (mag + count / 2) / count;
    return (int8_t)(total < 0 ? -mag : mag);
}
"""

CONV = r"""
/* Standard convolution, NHWC, weights [f][k][k][c], zero padding = input zp. */
@U@_KERNEL void @P@_conv(const int8_t *x, int8_t *y, int32_t h, int32_t w, int32_t c,
                     int32_t oh, int32_t ow, int32_t f, int32_t k, int32_t s,
                     int32_t pt, int32_t pl, int32_t xz, const int8_t *wt,
                     const int32_t *bias, const int32_t *mult, const int32_t *shift,
                     int32_t yz, int32_t lo, int32_t hi)
{
    int32_t oy, ox, o, ky, kx, ch;
    for (oy = 0; oy < oh; ++oy) {
        for (ox = 0; ox < ow; ++ox) {
            for (o = 0; o < f; ++o) {
                int32_t acc = bias[o];
                for (ky = 0; ky < k; ++ky) {
                    int32_t iy = oy * s - pt + ky;
                    if (iy < 0 || iy >= h) continue;
                    for (kx = 0; kx < k; ++kx) {
                        int32_t ix = ox * s - pl + kx;
                        const int8_t *px;
                        const int8_t *pw;
                        if (ix < 0 || ix >= w) continue;
                        px = x + (iy * w + ix) * c;
                        pw = wt + ((o * k + ky) * k + kx) * c;
                        for (ch = 0; ch < c; ++ch) {
                            acc += ((int32_t)px[ch] - xz) * (int32_t)pw[ch];
                        }
                    }
                }
                y[(oy * ow + ox) * f + o] = @P@_out(acc, mult[o], shift[o], yz, lo, hi);
            }
        }
    }
}
"""

DWCONV = r"""
/* Depthwise convolution, NHWC, weights [k][k][c], zero padding = input zp. */
@U@_KERNEL void @P@_dwconv(const int8_t *x, int8_t *y, int32_t h, int32_t w, int32_t c,
                       int32_t oh, int32_t ow, int32_t k, int32_t s, int32_t pt,
                       int32_t pl, int32_t xz, const int8_t *wt, const int32_t *bias,
                       const int32_t *mult, const int32_t *shift, int32_t yz,
                       int32_t lo, int32_t hi)
{
    int32_t oy, ox, ch, ky, kx;
    for (oy = 0; oy < oh; ++oy) {
        for (ox = 0; ox < ow; ++ox) {
            for (ch = 0; ch < c; ++ch) {
                int32_t acc = bias[ch];
                for (ky = 0; ky < k; ++ky) {
                    int32_t iy = oy * s - pt + ky;
                    if (iy < 0 || iy >= h) continue;
                    for (kx = 0; kx < k; ++kx) {
                        int32_t ix = ox * s - pl + kx;
                        if (ix < 0 || ix >= w) continue;
                        acc += ((int32_t)x[(iy * w + ix) * c + ch] - xz)
                               * (int32_t)wt[(ky * k + kx) * c + ch];
                    }
                }
                y[(oy * ow + ox) * c + ch] = @P@_out(acc, mult[ch], shift[ch], yz, lo, hi);
            }
        }
    }
}
"""

DENSE = r"""
/* Dense layer, weights [n_out][n_in]; a map input is read in NHWC order. */
@U@_KERNEL void @P@_dense(const int8_t *x, int8_t *y, int32_t n_in, int32_t n_out,
                      int32_t xz, const int8_t *wt, const int32_t *bias,
                      const int32_t *mult, const int32_t *shift, int32_t yz,
                      int32_t lo, int32_t hi)
{
    int32_t o, i;
    for (o = 0; o < n_out; ++o) {
        const int8_t *row = wt + o * n_in;
        int32_t acc = bias[o];
        for (i = 0; i < n_in; ++i) {
            acc += ((int32_t)x[i] - xz) * (int32_t)row[i];
        }
        y[o] = @P@_out(acc, mult[o], shift[o], yz, lo, hi);
    }
}
"""

HEAD = r"""
/* The classifier head: a dense layer writing the int8 logits, returning the
   arg-max of the same outputs requantised with 8 more fractional bits, so that
   equal int8 logits are still told apart (the first of equal values wins). */
@U@_KERNEL int32_t @P@_head(const int8_t *x, int8_t *y, int32_t n_in, int32_t n_out,
                        int32_t xz, const int8_t *wt, const int32_t *bias,
                        const int32_t *mult, const int32_t *shift, int32_t yz)
{
    int32_t o, i, best = 0;
    int64_t best_value = 0;
    for (o = 0; o < n_out; ++o) {
        const int8_t *row = wt + o * n_in;
        int32_t acc = bias[o];
        int64_t value;
        for (i = 0; i < n_in; ++i) {
            acc += ((int32_t)x[i] - xz) * (int32_t)row[i];
        }
        y[o] = @P@_out(acc, mult[o], shift[o], yz, INT8_MIN, INT8_MAX);
        value = (int64_t)@P@_scale(acc, mult[o], shift[o] - 8) + (int64_t)yz * 256;
        if (o == 0 || value > best_value) {
            best = o;
            best_value = value;
        }
    }
    return best;
}
"""

MAXPOOL = r"""
/* Max pooling, size = stride = s, ragged edge dropped; int8 in, int8 out. */
@U@_KERNEL void @P@_maxpool(const int8_t *x, int8_t *y, int32_t w, int32_t c,
                        int32_t oh, int32_t ow, int32_t s)
{
    int32_t oy, ox, ch, dy, dx;
    for (oy = 0; oy < oh; ++oy) {
        for (ox = 0; ox < ow; ++ox) {
            for (ch = 0; ch < c; ++ch) {
                int8_t m = INT8_MIN;
                for (dy = 0; dy < s; ++dy) {
                    for (dx = 0; dx < s; ++dx) {
                        int8_t v = x[((oy * s + dy) * w + ox * s + dx) * c + ch];
                        if (v > m) m = v;
                    }
                }
                y[(oy * ow + ox) * c + ch] = m;
            }
        }
    }
}
"""

AVGPOOL = r"""
/* Average pooling, size = stride = s; same scale and zero point in and out. */
@U@_KERNEL void @P@_avgpool(const int8_t *x, int8_t *y, int32_t w, int32_t c,
                        int32_t oh, int32_t ow, int32_t s)
{
    int32_t oy, ox, ch, dy, dx;
    for (oy = 0; oy < oh; ++oy) {
        for (ox = 0; ox < ow; ++ox) {
            for (ch = 0; ch < c; ++ch) {
                int32_t total = 0;
                for (dy = 0; dy < s; ++dy) {
                    for (dx = 0; dx < s; ++dx) {
                        total += x[((oy * s + dy) * w + ox * s + dx) * c + ch];
                    }
                }
                y[(oy * ow + ox) * c + ch] = @P@_rdiv(total, s * s);
            }
        }
    }
}
"""

GAP = r"""
/* Global average pooling: (h, w, c) -> (c); same scale and zero point. */
@U@_KERNEL void @P@_gap(const int8_t *x, int8_t *y, int32_t hw, int32_t c)
{
    int32_t ch, i;
    for (ch = 0; ch < c; ++ch) {
        int32_t total = 0;
        for (i = 0; i < hw; ++i) {
            total += x[i * c + ch];
        }
        y[ch] = @P@_rdiv(total, hw);
    }
}
"""

#: which templates each step kind needs, in emission order
NEEDS = {
    "conv": ("SCALE", "OUT", "CONV"),
    "dwconv": ("SCALE", "OUT", "DWCONV"),
    "dense": ("SCALE", "OUT", "DENSE"),
    "head": ("SCALE", "OUT", "HEAD"),
    "maxpool": ("MAXPOOL",),
    "avgpool": ("RDIV", "AVGPOOL"),
    "gap": ("RDIV", "GAP"),
    "add": ("SCALE", "ADD"),
}
KERNEL = r"""
/* Each kernel stays one generic out-of-line function, so a step costs what its
   own loop counts say wherever it sits in the network (GCC would otherwise inline
   or specialise a kernel whose calls share a shape, and the time model could not
   tell); noipa also stops constants flowing in from a single call site. */
#if defined(__GNUC__) && !defined(__clang__)
#define @U@_KERNEL static __attribute__((noipa))
#elif defined(__GNUC__)
#define @U@_KERNEL static __attribute__((noinline))
#else
#define @U@_KERNEL static
#endif
"""

ORDER = ("KERNEL", "SCALE", "OUT", "RDIV", "CONV", "DWCONV", "DENSE", "HEAD", "MAXPOOL", "AVGPOOL", "GAP",
         "ADD")
TEMPLATES = {"KERNEL": KERNEL, "SCALE": SCALE, "OUT": OUT, "RDIV": RDIV, "CONV": CONV, "DWCONV": DWCONV, "DENSE": DENSE,
             "HEAD": HEAD, "MAXPOOL": MAXPOOL, "AVGPOOL": AVGPOOL, "GAP": GAP, "ADD": c_add.ADD}


def kernels_for(kinds, prefix: str) -> str:
    """The C text of every kernel the step ``kinds`` need, prefixed."""
    wanted = {"KERNEL"} | {name for kind in kinds for name in NEEDS[kind]}
    return "".join(TEMPLATES[name].replace("@P@", prefix).replace("@U@", prefix.upper())
                   for name in ORDER if name in wanted)
