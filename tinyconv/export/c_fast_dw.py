"""The C99 text of the fast depthwise convolution (:data:`DWCONV`).

Four channels at a time with the channel loop innermost, the zero point folded
into the bias (and added back for the taps in the padding); on the DSP path a
tap is two word loads split by ``SXTB16`` into channels (0, 2) and (1, 3) and
multiplied by ``SMLABB`` / ``SMLATT`` (Arm C Language Extensions). A whole
row of a 3-wide window is written out (160 bytes of code for 7 % of the step);
the whole inside 3 x 3 window is not (600 bytes for 10 %). Requantised with ``_out1`` of
:data:`tinyconv.export.c_fast.REQUANT`.
"""

DWCONV = r"""
/* Depthwise convolution, NHWC, weights [k][k][c], four channels at a time with
   the channel loop innermost (four accumulators in registers), then one at a
   time for the last c % 4. The bias holds b - zp * sum(w) over the whole
   window, so taps inside the image multiply raw values and the taps in the
   padding (which hold zp) add zp * w back. On the DSP path a tap is two word
   loads: SXTB16 splits channels (0, 2) and (1, 3) of the input and of the
   weights, and SMLABB / SMLATT multiply the matching halves. */
/* One tap of four channels: the input at px + dx, the weights at pw + dw. */
#if @U@_USE_DSP
#define @U@_DWTAP(dx, dw)                                                      \
    do {                                                                      \
        uint32_t xv, wv;                                                      \
        int32_t xe, we;                                                       \
        memcpy(&xv, px + (dx), 4);                                            \
        memcpy(&wv, pw + (dw), 4);                                            \
        xe = __sxtb16((int32_t)xv);                                           \
        we = __sxtb16((int32_t)wv);                                           \
        a0 = __smlabb(xe, we, a0);                                            \
        a2 = __smlatt(xe, we, a2);                                            \
        xe = @P@_sxtb16_ror8(xv);                                             \
        we = @P@_sxtb16_ror8(wv);                                             \
        a1 = __smlabb(xe, we, a1);                                            \
        a3 = __smlatt(xe, we, a3);                                            \
    } while (0)
#else
#define @U@_DWTAP(dx, dw)                                                      \
    do {                                                                      \
        const int8_t *xq = px + (dx), *wq = pw + (dw);                        \
        a0 += xq[0] * wq[0];                                                  \
        a1 += xq[1] * wq[1];                                                  \
        a2 += xq[2] * wq[2];                                                  \
        a3 += xq[3] * wq[3];                                                  \
    } while (0)
#endif

@U@_KERNEL void @P@_dwconv(const int8_t *x, int8_t *y, int32_t h, int32_t w, int32_t c,
                           int32_t oh, int32_t ow, int32_t k, int32_t s, int32_t pt,
                           int32_t pl, int32_t xz, const int8_t *wt, const int32_t *rec,
                           int32_t yz,
                           int32_t lo, int32_t hi)
{
    int32_t oy, ox, ch, ky, kx;
    (void)hi;  /* 127: see @P@_sat8 */
    for (oy = 0; oy < oh; ++oy) {
        int32_t iy0 = oy * s - pt;
        int32_t ky0 = iy0 < 0 ? -iy0 : 0, ky1 = h - iy0 < k ? h - iy0 : k;
        for (ox = 0; ox < ow; ++ox) {
            int32_t ix0 = ox * s - pl;
            int32_t kx0 = ix0 < 0 ? -ix0 : 0, kx1 = w - ix0 < k ? w - ix0 : k;
            int32_t edge = ky0 > 0 || ky1 < k || kx0 > 0 || kx1 < k;
            int32_t step = (w - (kx1 - kx0)) * c;  /* from a row's end to the next row */
            const int8_t *base = x + ((iy0 + ky0) * w + ix0 + kx0) * c;
            const int8_t *wbase = wt + (ky0 * k + kx0) * c;
            int32_t wstep = (k - (kx1 - kx0)) * c;
            int8_t *out = y + (oy * ow + ox) * c;
            for (ch = 0; ch + 4 <= c; ch += 4) {
                const int32_t *r = rec + 4 * ch;  /* bias, multiplier, nh, code a channel */
                int32_t a0 = r[0], a1 = r[4], a2 = r[8], a3 = r[12];
                const int8_t *px = base + ch, *pw = wbase + ch;
                for (ky = ky0; ky < ky1; ++ky) {
                    if (kx1 - kx0 == 3) {  /* a whole row of a 3-wide window, written out */
                        @U@_DWTAP(0, 0);
                        @U@_DWTAP(c, c);
                        @U@_DWTAP(2 * c, 2 * c);
                        px += 3 * c;
                        pw += 3 * c;
                    } else {
                        for (kx = kx0; kx < kx1; ++kx) {
                            @U@_DWTAP(0, 0);
                            px += c;
                            pw += c;
                        }
                    }
                    px += step;
                    pw += wstep;
                }
                if (edge) {  /* the padding's taps hold the zero point */
                    for (ky = 0; ky < k; ++ky) {
                        int32_t row = ky < ky0 || ky >= ky1;  /* a whole row in the padding */
                        for (kx = 0; kx < k; ++kx) {
                            const int8_t *q = wt + (ky * k + kx) * c + ch;
                            if (!row && kx == kx0) kx = kx1 - 1;  /* skip the inside taps */
                            else {
                                a0 += xz * q[0];
                                a1 += xz * q[1];
                                a2 += xz * q[2];
                                a3 += xz * q[3];
                            }
                        }
                    }
                }
                /* the record of each channel is read before its output is stored */
                out[ch] = @P@_out1(a0, r, yz, lo);
                out[ch + 1] = @P@_out1(a1, r + 4, yz, lo);
                out[ch + 2] = @P@_out1(a2, r + 8, yz, lo);
                out[ch + 3] = @P@_out1(a3, r + 12, yz, lo);
            }
            for (; ch < c; ++ch) {
                const int32_t *r = rec + 4 * ch;
                int32_t a0 = r[0];
                const int8_t *px = base + ch, *pw = wbase + ch;
                for (ky = ky0; ky < ky1; ++ky) {
                    for (kx = kx0; kx < kx1; ++kx) {
                        a0 += px[0] * pw[0];
                        px += c;
                        pw += c;
                    }
                    px += step;
                    pw += wstep;
                }
                if (edge) {
                    for (ky = 0; ky < k; ++ky) {
                        for (kx = 0; kx < k; ++kx) {
                            if (ky >= ky0 && ky < ky1 && kx >= kx0 && kx < kx1) continue;
                            a0 += xz * wt[(ky * k + kx) * c + ch];
                        }
                    }
                }
                out[ch] = @P@_out1(a0, r, yz, lo);
            }
        }
    }
}
"""
