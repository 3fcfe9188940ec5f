"""The C99 text of the fast convolution: int16 patches and a register-blocked product.

Two output pixels at a time: their receptive fields are copied into the
scratch as int16 ``x - zp`` (:data:`PATCH`; taps in the padding are 0, so the
product has no branches), then every pair of filters is multiplied with both
patches at once (:data:`CONV`: four accumulators, two filters x two pixels),
four values of ``K = k k c`` a step, ``K`` rounded up to whole groups of four
(``Kp``: the weights carry zeros there, the patches 0, so no step is left
over). The two patches are interleaved so that one pointer walks both: group
by group (four values), the first pixel's four then the second's, each
group's values stored in the order (0, 2, 1, 3) (:func:`patch_offset` says the
same in Python). The weights come from
:func:`tinyconv.export.c_layout.weights`: per pair of filters, group by group,
four values of the first then four of the second, in order. So on the DSP
path one 32-bit load of four weights gives the pairs (0, 2) and (1, 3) through
``SXTB16`` of the word and of the word rotated by 8, which line up with the
patch's two words, and ``SMLAD`` does two products each.

Patches: an inside window whose kernel rows fill groups of four is one call of
the group copier; a short K whose rows do not (first layers of 1 or 3
channels) goes by an offset table, two inside pixels at once (a window in
the padding by the same table, testing each tap); the rest row by row. Under GCC-compatible compilers the DSP path's group step is written out
in assembly (GCC's scheduler spills the C), with LDRD where the weights and
the patch pair are word-aligned. The requantisation's per-channel constants
are worked out once for both pixels (``_out2`` in
:data:`tinyconv.export.c_fast.REQUANT`).
"""

#: order of a group's four values in the patch
PATCH_GROUP_ORDER = (0, 2, 1, 3)
#: the longest K whose patch is copied by table (the C's ``{PREFIX}_TABLE``; its three
#: tables, 4 bytes a value, live on the stack)
PATCH_TABLE = 32


def patch_offset(j: int, pixel: int) -> int:
    """Byte offset of value ``j`` of ``pixel`` (0 or 1) in the interleaved patch pair."""
    return 16 * (j // 4) + 8 * pixel + 2 * PATCH_GROUP_ORDER.index(j % 4)


PATCH = r"""
/* rows x n4 whole groups of four values as int16 x - zp: row r read from
   src + r * stride, written 16 bytes a group (one slot of the interleaved pair,
   each group as values 0, 2, 1, 3) and on from row to row. */
@U@_OUTLINE void @P@_groups(const int8_t *src, int32_t stride, int8_t *dst,
                            int32_t rows, int32_t n4, int32_t xz)
{
    int32_t r, g;
#if @U@_USE_DSP
    uint32_t nz2 = ((0u - (uint32_t)xz) & 0xFFFFu) * 0x10001u;  /* -zp in both halves */
#endif
    for (r = 0; r < rows; ++r, src += stride) {
        const int8_t *sp = src;
        for (g = n4; g > 0; --g, sp += 4, dst += 16) {
            uint32_t u;
#if @U@_USE_DSP
            int32_t a, b;
            memcpy(&u, sp, 4);
            a = __sxtab16((int32_t)nz2, (int32_t)u);  /* values 0, 2 */
            b = @P@_sxtab16_ror8((int32_t)nz2, u);    /* values 1, 3 */
            memcpy(dst, &a, 4);
            memcpy(dst + 4, &b, 4);
#else
            uint32_t lo, hi;  /* one load, the four values by sign extension */
            memcpy(&u, sp, 4);
            lo = (uint32_t)((int8_t)u - xz) & 0xFFFFu;
            lo |= (uint32_t)((int8_t)(u >> 16) - xz) << 16;
            hi = (uint32_t)((int8_t)(u >> 8) - xz) & 0xFFFFu;
            hi |= (uint32_t)((int8_t)(u >> 24) - xz) << 16;
            memcpy(dst, &lo, 4);
            memcpy(dst + 4, &hi, 4);
#endif
        }
    }
}

/* Byte offset of value j of pixel q in the interleaved pair: 16 (j / 4) + 8 q
   + 2 r with r = 0, 2, 1, 3 for j % 4 = 0..3. */
@U@_INLINE int32_t @P@_at(int32_t j, int32_t q)
{
    return 16 * (j >> 2) + 8 * q + 4 * (j & 1) + 2 * ((j >> 1) & 1);
}

/* Values j .. j + n - 1 of pixel q's patch as int16 x - zp into the interleaved
   pair at col (zeros when src is 0: taps in the padding). */
@U@_OUTLINE void @P@_put(const int8_t *src, int8_t *col, int32_t j, int32_t n,
                         int32_t xz, int32_t q)
{
    int32_t e = j + n;
    while (j < e) {
        int16_t v = 0;
        if ((j & 3) == 0 && j + 4 <= e) {  /* whole groups */
            int32_t n4 = (e - j) >> 2;
            if (src) {
                @P@_groups(src, 0, col + 4 * j + 8 * q, 1, n4, xz);
                src += 4 * n4;
            } else {  /* padding: eight zero bytes a group in this slot */
                int8_t *dst = col + 4 * j + 8 * q;
                int32_t g;
                for (g = 0; g < n4; ++g, dst += 16) memset(dst, 0, 8);
            }
            j += 4 * n4;
            continue;
        }
        if (src) v = (int16_t)(*src++ - xz);  /* one value (all of a padding run) */
        memcpy(col + @P@_at(j, q), &v, 2);
        ++j;
    }
}

/* Two inside pixels' patches by table (a short K whose kernel rows do not fill
   whole groups: first layers of 1 or 3 channels): value j from p0 + so[j] and
   p1 + so[j] into col + at[j] (slot 0) and col + at[j] + 8 (slot 1). */
@U@_OUTLINE void @P@_patch_table(const int8_t *p0, const int8_t *p1, int8_t *col,
                                 const int16_t *so, const uint8_t *at, int32_t K,
                                 int32_t xz)
{
    int32_t j;
    int8_t *col8 = col + 8;
    for (j = 0; j < K; ++j) {  /* the tables read before the stores (which may alias them) */
        int32_t s = so[j], a = at[j];
        int16_t v0 = (int16_t)(p0[s] - xz), v1 = (int16_t)(p1[s] - xz);
        memcpy(col + a, &v0, 2);
        memcpy(col8 + a, &v1, 2);
    }
}

/* One pixel's patch by table (as @P@_patch_table) where its window reaches
   into the padding: the taps outside the image are 0 (tk[j] = 8 ky + kx of
   value j); into col + at[j], col being the pair's slot. */
@U@_OUTLINE void @P@_patch_edge(const int8_t *x, int8_t *col, const int16_t *so,
                                const uint8_t *at, const uint8_t *tk, int32_t K, int32_t h,
                                int32_t w, int32_t c, int32_t iy0, int32_t ix0, int32_t xz)
{
    int32_t j, base = (iy0 * w + ix0) * c;
    for (j = 0; j < K; ++j) {
        int32_t t = tk[j], a = at[j];
        int16_t v = 0;
        if ((uint32_t)(iy0 + (t >> 3)) < (uint32_t)h && (uint32_t)(ix0 + (t & 7)) < (uint32_t)w)
            v = (int16_t)(x[base + so[j]] - xz);
        memcpy(col + a, &v, 2);
    }
}

/* One output pixel's receptive field (kernel rows, columns, channels: the
   weights' order) into slot q of the interleaved pair at col. */
@U@_OUTLINE void @P@_patch(const int8_t *x, int8_t *col, int32_t q, int32_t h,
                           int32_t w, int32_t c, int32_t k, int32_t iy0, int32_t ix0,
                           int32_t xz)
{
    int32_t ky, kx, row = k * c;
    if ((row & 3) == 0 && iy0 >= 0 && ix0 >= 0 && iy0 + k <= h && ix0 + k <= w) {
        /* the whole window inside, its rows filling groups: one call */
        @P@_groups(x + (iy0 * w + ix0) * c, w * c, col + 8 * q, k, row >> 2, xz);
        return;
    }
    for (ky = 0; ky < k; ++ky) {
        int32_t iy = iy0 + ky, j = ky * row;
        if (iy < 0 || iy >= h) {
            @P@_put(0, col, j, row, 0, q);
        } else if (ix0 >= 0 && ix0 + k <= w) {  /* the whole kernel row inside */
            @P@_put(x + (iy * w + ix0) * c, col, j, row, xz, q);
        } else {
            for (kx = 0; kx < k; ++kx, j += c) {
                int32_t ix = ix0 + kx;
                @P@_put(ix < 0 || ix >= w ? 0 : x + (iy * w + ix) * c, col, j, c, xz, q);
            }
        }
    }
}
"""

CONV = r"""
/* The longest K patched by table (its three tables, 4 bytes a value, live on the stack). */
#define @U@_TABLE @TABLE@

/* One group of four values of K for filters a, b (weights at wp + 8 j) and
   pixels 0, 1 (the pair at pp + 16 j). */
#if @U@_USE_DSP && defined(__GNUC__)
/* GCC's scheduler hoists the loads of an unrolled C version and spills an
   accumulator; written out, a group is six loads that step the pointers, four
   SXTB16 and eight SMLAD (wp and pp move on by 8 and 16 bytes). When the
   weights and the patch pair are on word boundaries (the K of the layer a
   multiple of 4, the arrays aligned), LDRD loads two words at once:
   @U@_GROUPD, three loads. */
#define @U@_GROUP_ASM(LOADS, SECOND)                                                 \
    do {                                                                      \
        uint32_t ua, ub, wa, wb, x0, x1;                                      \
        __asm__ volatile(                                                     \
            LOADS                                                             \
            "sxtb16 %[wa], %[ua]\n\t"                                         \
            "sxtb16 %[wb], %[ub]\n\t"                                         \
            "smlad %[a00], %[wa], %[x0], %[a00]\n\t"                          \
            "smlad %[a10], %[wb], %[x0], %[a10]\n\t"                          \
            "sxtb16 %[ua], %[ua], ror #8\n\t"                                 \
            "sxtb16 %[ub], %[ub], ror #8\n\t"                                 \
            "smlad %[a00], %[ua], %[x1], %[a00]\n\t"                          \
            "smlad %[a10], %[ub], %[x1], %[a10]\n\t"                          \
            SECOND                                                            \
            "smlad %[a01], %[wa], %[x0], %[a01]\n\t"                          \
            "smlad %[a11], %[wb], %[x0], %[a11]\n\t"                          \
            "smlad %[a01], %[ua], %[x1], %[a01]\n\t"                          \
            "smlad %[a11], %[ub], %[x1], %[a11]\n\t"                          \
            : [a00] "+r"(a00), [a01] "+r"(a01), [a10] "+r"(a10), [a11] "+r"(a11), \
              [wp] "+r"(wp), [pp] "+r"(pp), [ua] "=&r"(ua), [ub] "=&r"(ub),   \
              [wa] "=&r"(wa), [wb] "=&r"(wb), [x0] "=&r"(x0), [x1] "=&r"(x1)  \
            :                                                                 \
            : "memory");                                                      \
    } while (0)
#define @U@_GROUP(j)                                                          \
    @U@_GROUP_ASM("ldr %[ua], [%[wp]], #4\n\t"                                 \
                  "ldr %[ub], [%[wp]], #4\n\t"                                 \
                  "ldr %[x0], [%[pp]], #4\n\t"                                 \
                  "ldr %[x1], [%[pp]], #4\n\t",                                \
                  "ldr %[x0], [%[pp]], #4\n\t"                                 \
                  "ldr %[x1], [%[pp]], #4\n\t")
#define @U@_GROUPD(j)                                                         \
    @U@_GROUP_ASM("ldrd %[ua], %[ub], [%[wp]], #8\n\t"                         \
                  "ldrd %[x0], %[x1], [%[pp]], #8\n\t",                        \
                  "ldrd %[x0], %[x1], [%[pp]], #8\n\t")
#define @U@_HAS_GROUPD 1
#elif @U@_USE_DSP
#define @U@_GROUP(j)                                                          \
    do {                                                                      \
        uint32_t ua, ub;                                                      \
        int32_t x0, x1, wa, wb;                                               \
        memcpy(&ua, wp + 8 * (j), 4);                                         \
        memcpy(&ub, wp + 8 * (j) + 4, 4);                                     \
        memcpy(&x0, pp + 16 * (j), 4);                                        \
        memcpy(&x1, pp + 16 * (j) + 4, 4);                                    \
        wa = __sxtb16((int32_t)ua);                                           \
        wb = __sxtb16((int32_t)ub);                                           \
        a00 = __smlad(wa, x0, a00);                                           \
        a10 = __smlad(wb, x0, a10);                                           \
        ua = (uint32_t)@P@_sxtb16_ror8(ua);                                   \
        ub = (uint32_t)@P@_sxtb16_ror8(ub);                                   \
        a00 = __smlad((int32_t)ua, x1, a00);                                  \
        a10 = __smlad((int32_t)ub, x1, a10);                                  \
        memcpy(&x0, pp + 16 * (j) + 8, 4);                                    \
        memcpy(&x1, pp + 16 * (j) + 12, 4);                                   \
        a01 = __smlad(wa, x0, a01);                                           \
        a11 = __smlad(wb, x0, a11);                                           \
        a01 = __smlad((int32_t)ua, x1, a01);                                  \
        a11 = __smlad((int32_t)ub, x1, a11);                                  \
    } while (0)
#define @U@_HAS_GROUPD 0
#else
#define @U@_TAP(wi, at)                                                       \
    do {                                                                      \
        int32_t x_ = @P@_ld16(pp + 16 * (j_) + (at));                         \
        int32_t z_ = @P@_ld16(pp + 16 * (j_) + (at) + 8);                     \
        a00 += wp[8 * (j_) + (wi)] * x_;                                      \
        a01 += wp[8 * (j_) + (wi)] * z_;                                      \
        a10 += wp[8 * (j_) + (wi) + 4] * x_;                                  \
        a11 += wp[8 * (j_) + (wi) + 4] * z_;                                  \
    } while (0)
#define @U@_GROUP(j)                                                          \
    do {                                                                      \
        const int32_t j_ = (j);                                               \
        @U@_TAP(0, 0);                                                        \
        @U@_TAP(1, 4);                                                        \
        @U@_TAP(2, 2);                                                        \
        @U@_TAP(3, 6);                                                        \
    } while (0)
#define @U@_HAS_GROUPD 0
#endif

/* Every filter x the two pixels of the interleaved patch pair at col (the
   same pixel twice for a last odd pixel, whose outputs y1 = y0 are written
   twice). K is a multiple of 4 (the exporter pads the weights, the patches
   hold zeros there). Pair layout: group by group (four values of K), the
   first pixel's four int16 then the second's, each as values (0, 2, 1, 3).
   Weights: per pair of filters, group by group, four values of the first then
   four of the second; a last odd filter alone, in order. */
/* The groups of one pair of filters by both pixels, from pp and wp. */
#if @U@_HAS_GROUPD
#define @U@_STEPS()                                                           \
    do {                                                                      \
        if (aligned) {                                                        \
            while (pp != stop2) {  /* two groups a turn, two words a load */  \
                @U@_GROUPD(0);                                                \
                @U@_GROUPD(0);                                                \
            }                                                                 \
            if (pp != stop) @U@_GROUPD(0);                                    \
        } else {                                                              \
            while (pp != stop) @U@_GROUP(0);  /* unaligned layers: short */   \
        }                                                                     \
    } while (0)
#else
#define @U@_STEPS()                                                           \
    do {                                                                      \
        while (pp != stop2) {  /* two groups a turn */                        \
            @U@_GROUP(0);                                                     \
            @U@_GROUP(1);                                                     \
            wp += 16;                                                         \
            pp += 32;                                                         \
        }                                                                     \
        if (pp != stop) {                                                     \
            @U@_GROUP(0);                                                     \
            wp += 8;                                                          \
            pp += 16;                                                         \
        }                                                                     \
    } while (0)
#endif

/* One pair of filters (o, o + 1) by both pixels: the accumulators from the
   records, STEPS over the groups, the four outputs. */
#define @U@_PAIR(STEPS)                                                       \
    do {                                                                      \
        const int8_t *pp = col;  /* wp runs on from one pair to the next */   \
        const int32_t *r = rec + 4 * o;  /* bias, multiplier, nh, code a filter */ \
        int32_t a00 = r[0], a01 = r[0], a10 = r[4], a11 = r[4];               \
        STEPS;                                                                \
        @P@_out2(a00, a01, r, yz, lo, y0 + o, y0 + o + d);                    \
        @P@_out2(a10, a11, r + 4, yz, lo, y0 + o + 1, y0 + o + 1 + d);        \
    } while (0)

static void @P@_mm(const int8_t *col, int32_t K, int32_t f, const int8_t *wt,
                   const int32_t *rec, int32_t yz, int32_t lo, int8_t *y0, int8_t *y1)
{
    int32_t i, o, g = K >> 2, d = (int32_t)(y1 - y0);
    const int8_t *stop = col + 16 * g, *stop2 = col + 32 * (g >> 1), *wp = wt;
#if @U@_HAS_GROUPD
    /* every pair of filters' weights and the patch pair on a word boundary */
    int32_t aligned = (((uintptr_t)col | (uintptr_t)wt) & 3u) == 0;
#endif
    for (o = 0; o < (f & ~1); o += 2) @U@_PAIR(@U@_STEPS());
    if (f & 1) {  /* a last odd filter */
        const int8_t *pp = col;
        const int32_t *r = rec + 4 * o;
        int32_t a00 = r[0], a01 = r[0];
        for (i = 0; i < g; ++i) {
            a00 += wp[0] * @P@_ld16(pp) + wp[1] * @P@_ld16(pp + 4)
                   + wp[2] * @P@_ld16(pp + 2) + wp[3] * @P@_ld16(pp + 6);
            a01 += wp[0] * @P@_ld16(pp + 8) + wp[1] * @P@_ld16(pp + 12)
                   + wp[2] * @P@_ld16(pp + 10) + wp[3] * @P@_ld16(pp + 14);
            wp += 4;
            pp += 16;
        }
        @P@_out2(a00, a01, r, yz, lo, y0 + o, y0 + o + d);
    }
}

/* Convolution, NHWC, two output pixels at a time through the interleaved
   int16 patch pair in `col` (2 Kp values: k k c rounded up to a multiple of 4,
   the values past k k c zero). */
@U@_KERNEL void @P@_conv(const int8_t *x, int8_t *y, int8_t *col, int32_t h, int32_t w,
                         int32_t c, int32_t oh, int32_t ow, int32_t f, int32_t k,
                         int32_t s, int32_t pt, int32_t pl, int32_t xz, const int8_t *wt,
                         const int32_t *rec, int32_t yz, int32_t lo, int32_t hi)
{
    int32_t K = k * k * c, Kp = (K + 3) & ~3, n = oh * ow, p, j;
    int32_t table = K <= @U@_TABLE && ((k * c) & 3) != 0;
    int16_t so[@U@_TABLE];  /* the patch by table (see @P@_patch_table, @P@_patch_edge) */
    uint8_t at[@U@_TABLE], tk[@U@_TABLE];
    (void)hi;  /* 127: see @P@_sat8 */
    for (j = 0; table && j < K; ++j) {
        int32_t ky = j / (k * c), r = j - ky * k * c;
        so[j] = (int16_t)(ky * w * c + r);
        at[j] = (uint8_t)@P@_at(j, 0);
        tk[j] = (uint8_t)(8 * ky + r / c);  /* k <= 5 here: K <= 32 and k c not a multiple of 4 */
    }
    for (j = K; j < Kp; ++j) {  /* the padding of the last group: zero, never written again */
        int16_t zero = 0;
        memcpy(col + @P@_at(j, 0), &zero, 2);
        memcpy(col + @P@_at(j, 1), &zero, 2);
    }
    for (p = 0; p < n; p += 2) {
        int32_t oy = p / ow, ox = p - oy * ow, q = p + 1 < n ? p + 1 : p;
        int32_t qy = q / ow, qx = q - qy * ow;
        int32_t iy0 = oy * s - pt, ix0 = ox * s - pl, iy1 = qy * s - pt, ix1 = qx * s - pl;
        if (table && iy0 >= 0 && ix0 >= 0 && iy0 + k <= h && ix0 + k <= w && iy1 >= 0
            && ix1 >= 0 && iy1 + k <= h && ix1 + k <= w) {  /* both inside: by table */
            @P@_patch_table(x + (iy0 * w + ix0) * c, x + (iy1 * w + ix1) * c, col, so, at,
                            K, xz);
        } else if (table) {  /* a window in the padding: by table, testing each tap */
            @P@_patch_edge(x, col, so, at, tk, K, h, w, c, iy0, ix0, xz);
            @P@_patch_edge(x, col + 8, so, at, tk, K, h, w, c, iy1, ix1, xz);
        } else {
            @P@_patch(x, col, 0, h, w, c, k, iy0, ix0, xz);
            @P@_patch(x, col, 1, h, w, c, k, iy1, ix1, xz);
        }
        @P@_mm(col, Kp, f, wt, rec, yz, lo, y + p * f, y + q * f);
    }
}
""".replace("@TABLE@", str(PATCH_TABLE))
