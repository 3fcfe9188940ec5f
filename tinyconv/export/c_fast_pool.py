"""The C99 text of the fast pooling kernels: max, average and global average.

Channel loop innermost; a 2 x 2 max pooling takes four channels a word on the
DSP path (``SSUB8`` and ``SEL``); averages round half away from zero like the
integer reference (``_rdiv`` of the plain kernels).
"""

MAXPOOL = r"""
/* Max pooling, size = stride = s, ragged edge dropped; channel loop innermost.
   For s = 2 on the DSP path, four channels a word: SSUB8 sets each byte's
   greater-or-equal flag and SEL picks the larger (Arm C Language Extensions). */
@U@_KERNEL void @P@_maxpool(const int8_t *x, int8_t *y, int32_t w, int32_t c,
                            int32_t oh, int32_t ow, int32_t s)
{
    int32_t oy, ox, ch, dy, dx;
    for (oy = 0; oy < oh; ++oy) {
        for (ox = 0; ox < ow; ++ox) {
            const int8_t *p = x + ((oy * s) * w + ox * s) * c;
            int8_t *out = y + (oy * ow + ox) * c;
            if (s == 2) {
                const int8_t *q = p + w * c;
                ch = 0;
#if @U@_USE_DSP
                for (; ch + 4 <= c; ch += 4) {
                    uint32_t a, b, m;
                    memcpy(&a, p + ch, 4);
                    memcpy(&b, p + ch + c, 4);
                    (void)__ssub8((int32_t)a, (int32_t)b);
                    m = __sel(a, b);
                    memcpy(&a, q + ch, 4);
                    (void)__ssub8((int32_t)m, (int32_t)a);
                    m = __sel(m, a);
                    memcpy(&b, q + ch + c, 4);
                    (void)__ssub8((int32_t)m, (int32_t)b);
                    m = __sel(m, b);
                    memcpy(out + ch, &m, 4);
                }
#endif
                for (; ch < c; ++ch) {
                    int32_t m = p[ch], v = p[ch + c];
                    m = v > m ? v : m;
                    v = q[ch];
                    m = v > m ? v : m;
                    v = q[ch + c];
                    m = v > m ? v : m;
                    out[ch] = (int8_t)m;
                }
                continue;
            }
            for (ch = 0; ch < c; ++ch) out[ch] = p[ch];
            for (dy = 0; dy < s; ++dy) {
                for (dx = 0; dx < s; ++dx) {
                    const int8_t *r = p + (dy * w + dx) * c;
                    if (dy == 0 && dx == 0) continue;
                    for (ch = 0; ch < c; ++ch) {
                        if (r[ch] > out[ch]) out[ch] = r[ch];
                    }
                }
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
    int32_t oy, ox, ch, dy, dx, ss = s * s;
    for (oy = 0; oy < oh; ++oy) {
        for (ox = 0; ox < ow; ++ox) {
            const int8_t *p = x + ((oy * s) * w + ox * s) * c;
            int8_t *out = y + (oy * ow + ox) * c;
            for (ch = 0; ch < c; ++ch) {
                int32_t total = 0;
                const int8_t *r = p + ch;
                for (dy = 0; dy < s; ++dy) {
                    for (dx = 0; dx < s; ++dx) total += r[dx * c];
                    r += w * c;
                }
                out[ch] = @P@_rdiv(total, ss);
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
        const int8_t *p = x + ch;
        for (i = 0; i < hw; ++i) {
            total += *p;
            p += c;
        }
        y[ch] = @P@_rdiv(total, hw);
    }
}
"""
