"""The C99 text of the residual addition, shared by both kernel styles.

The line-for-line C form of :func:`tinyconv.quant.residual.add_integer`: each
input's difference from its zero point, scaled by ``2^ADD_BITS`` (a product,
not a shift, so no negative number is shifted), rescaled to the common scale
with the rounding fixed-point ``_scale``, the two summed and requantised with
a third multiplier, then clamped to int8 (Jacob et al., CVPR 2018). ``@P@`` is
the symbol prefix, ``@U@`` its upper-case form.

:data:`ADD` (the plain style) calls the general ``_scale`` three times a value;
:data:`ADD_FAST` (the fast style) computes the same roundings on the magnitude
with one 32 x 32 -> 64-bit product each (``_rs`` and ``_rq`` of the fast
style's requantisation template, :mod:`tinyconv.export.c_fast`),
as the fast requantisation does, when every shift is within 0..31 (always, for
the multipliers :func:`~tinyconv.quant.residual.add_multipliers` gives), and
falls back on the general form otherwise.
"""

from tinyconv.quant.residual import ADD_BITS

ADD = r"""
/* Residual addition: y = a + b on three int8 grids. Both inputs go to one common
   scale (@BITS@ more fraction bits than the coarser one), are summed, and the sum
   is requantised to y's grid, rounding as the reference does. */
@U@_KERNEL void @P@_add(const int8_t *a, const int8_t *b, int8_t *y, int32_t n,
                        int32_t za, int32_t zb, int32_t ma, int32_t na, int32_t mb,
                        int32_t nb, int32_t my, int32_t ny, int32_t zy)
{
    int32_t i;
    for (i = 0; i < n; ++i) {
        int32_t ta = @P@_scale(((int32_t)a[i] - za) * ((int32_t)1 << @BITS@), ma, na);
        int32_t tb = @P@_scale(((int32_t)b[i] - zb) * ((int32_t)1 << @BITS@), mb, nb);
        int32_t v = @P@_scale(ta + tb, my, ny) + zy;
        if (v < INT8_MIN) v = INT8_MIN;
        if (v > INT8_MAX) v = INT8_MAX;
        y[i] = (int8_t)v;
    }
}
""".replace("@BITS@", str(ADD_BITS))

ADD_FAST = r"""
/* Residual addition: y = a + b on three int8 grids. Both inputs go to one common
   scale (@BITS@ more fraction bits than the coarser one), are summed, and the sum
   is requantised to y's grid, rounding as the reference does. */
@U@_KERNEL void @P@_add(const int8_t *a, const int8_t *b, int8_t *y, int32_t n,
                        int32_t za, int32_t zb, int32_t ma, int32_t na, int32_t mb,
                        int32_t nb, int32_t my, int32_t ny, int32_t zy)
{
    int32_t i;
    if ((uint32_t)na > 31u || (uint32_t)nb > 31u || (uint32_t)ny > 31u
            || ma < 0 || mb < 0 || my < 0) {
        for (i = 0; i < n; ++i) {  /* the general form (never needed in practice) */
            int32_t ta = @P@_scale(((int32_t)a[i] - za) * ((int32_t)1 << @BITS@), ma, na);
            int32_t tb = @P@_scale(((int32_t)b[i] - zb) * ((int32_t)1 << @BITS@), mb, nb);
            int32_t v = @P@_scale(ta + tb, my, ny) + zy;
            if (v < INT8_MIN) v = INT8_MIN;
            if (v > INT8_MAX) v = INT8_MAX;
            y[i] = (int8_t)v;
        }
        return;
    }
    for (i = 0; i < n; ++i) {
        int32_t ta = @P@_rs(((int32_t)a[i] - za) * ((int32_t)1 << @BITS@), ma, na);
        int32_t tb = @P@_rs(((int32_t)b[i] - zb) * ((int32_t)1 << @BITS@), mb, nb);
        y[i] = @P@_rq(ta + tb, my, ny, zy, INT8_MIN, INT8_MAX);
    }
}
""".replace("@BITS@", str(ADD_BITS))
