"""The C of ours that runs a generated classifier on an emulated board.

Three files are written beside the classifier's ``{prefix}.c`` / ``{prefix}.h``:

* ``board.c`` — the vector table and reset handler (copy ``.data``, clear
  ``.bss``, call ``main``, leave through semihosting), a SysTick-based tick
  counter with wrap counting, the stack painter, and semihosting output;
* ``board.ld`` — the linker script for the core's board (code in its code
  memory, data and a 64 KB stack at the top of its data memory);
* ``main.c`` — the test program: N images as constant data; for each it paints
  the stack, times ``{prefix}_classify`` in SysTick ticks and prints the ticks,
  the class and the logits; then the deepest stack the classifier used.

With ``marks=True`` the classifier is compiled with ``{PREFIX}_MARK(step)``
bound to ``board_mark``, so the program also prints the tick count at the start
of each step (the per-step figures of the cost model's time table).

Output lines (semihosting, text):
``I <image> <ticks> <class> <logit> ...``, ``M <image> <ticks at step 0> ...``,
``S <stack bytes>``, ``H <ticks of an empty mark pair>``, ``E`` at the end.
"""

from __future__ import annotations

import numpy as np

from tinyconv.device.cores import BOARD_MEMORY, Core

#: stack region the program paints and measures (the classifier must fit in it)
STACK_BYTES = 64 * 1024
#: the word painted into the unused stack
PAINT = 0xC0FFEE5A
MAX_MARKS = 256

BOARD_H = r"""#ifndef BOARD_H
#define BOARD_H
#include <stdint.h>
void board_put(const char *text);
void board_exit(int32_t code);
void board_ticks_start(void);
uint64_t board_ticks(void);
void board_paint_stack(void);
uint32_t board_stack_depth(const uint32_t *top);
void board_mark(int32_t step);
extern uint64_t board_marks[];
#endif
"""

BOARD_C = r"""/* Start-up, timing, stack measurement and semihosting output for the test program. */
#include <stdint.h>
#include "board.h"

extern uint32_t _stack_top, _stack_limit, _data_load, _data_start, _data_end,
    _bss_start, _bss_end;
int main(void);

static volatile uint32_t board_wraps;
uint64_t board_marks[@MAX_MARKS@];

static void board_tick(void) { ++board_wraps; }

/* One semihosting call: BKPT 0xAB with the operation in r0 and its argument in r1. */
static int32_t board_semihost(int32_t op, const void *arg)
{
    register int32_t r0 __asm__("r0") = op;
    register const void *r1 __asm__("r1") = arg;
    __asm__ volatile ("bkpt 0xab" : "+r"(r0) : "r"(r1) : "memory");
    return r0;
}

void board_put(const char *text) { (void)board_semihost(0x04, text); }

void board_exit(int32_t code)
{
    static uint32_t block[2];
    block[0] = 0x20026u;        /* ADP_Stopped_ApplicationExit */
    block[1] = (uint32_t)code;
    (void)board_semihost(0x20, block);   /* SYS_EXIT_EXTENDED */
    for (;;) { }
}

#define SYST ((volatile uint32_t *)0xE000E010u)

/* SysTick on the core clock, 24 bits, counting down; its interrupt counts wraps. */
void board_ticks_start(void)
{
    SYST[1] = 0xFFFFFFu;
    SYST[2] = 0u;
    board_wraps = 0u;
    SYST[0] = 7u;
    while (SYST[2] == 0u) { }   /* the first tick loads the reload value */
}

uint64_t board_ticks(void)
{
    uint32_t w, v;
    do {
        w = board_wraps;
        v = SYST[2];
    } while (w != board_wraps);
    return (uint64_t)w * 0x1000000u + (0xFFFFFFu - v);
}

void board_mark(int32_t step)
{
    if (step >= 0 && step < @MAX_MARKS@) board_marks[step] = board_ticks();
}

/* Fill the unused stack below the caller with a pattern (a leaf: no frame of its own). */
void board_paint_stack(void)
{
    uint32_t *sp;
    uint32_t *p;
    __asm__ volatile ("mov %0, sp" : "=r"(sp));
    for (p = &_stack_limit; p < sp - 4; ++p) *p = 0x@PAINT@u;
}

/* Bytes between `top` and the deepest word overwritten since the last paint. */
uint32_t board_stack_depth(const uint32_t *top)
{
    const uint32_t *p = &_stack_limit;
    while (p < top && *p == 0x@PAINT@u) ++p;
    return (uint32_t)((top - p) * 4);
}

static void board_reset(void)
{
    uint32_t *src = &_data_load, *dst = &_data_start;
    while (dst < &_data_end) *dst++ = *src++;
    for (dst = &_bss_start; dst < &_bss_end; ++dst) *dst = 0u;
    board_exit(main());
}

static void board_fault(void)
{
    board_put("F fault\n");
    board_exit(3);
}

__attribute__((section(".vectors"), used))
static void (*const board_vectors[16])(void) = {
    (void (*)(void))&_stack_top, board_reset, board_fault, board_fault, board_fault,
    board_fault, board_fault, 0, 0, 0, 0, board_fault, board_fault, 0, board_fault,
    board_tick,
};
"""

LINK_LD = r"""/* Memory of the @BOARD@ board as QEMU models it: 4 MB code, 4 MB data. */
MEMORY
{
    ROM (rx)  : ORIGIN = @ROM@, LENGTH = @SIZE@
    RAM (rwx) : ORIGIN = @RAM@, LENGTH = @SIZE@
}
SECTIONS
{
    .text : { KEEP(*(.vectors)) *(.text*) . = ALIGN(4); } > ROM
    .rodata : { *(.rodata*) . = ALIGN(4); } > ROM
    .data : { _data_start = .; *(.data*) . = ALIGN(4); _data_end = .; } > RAM AT > ROM
    _data_load = LOADADDR(.data);
    .bss (NOLOAD) : { _bss_start = .; *(.bss*) *(COMMON) . = ALIGN(4); _bss_end = .; } > RAM
    _stack_top = ORIGIN(RAM) + LENGTH(RAM);
    _stack_limit = _stack_top - @STACK@;
    ASSERT(_bss_end <= _stack_limit, "activations and stack do not fit the board's data memory")
}
"""

MAIN_C = r"""/* Runs @P@_classify on @N@ images and prints ticks, class, logits and stack depth. */
#include <stdint.h>
#include "board.h"
#include "@P@.h"

static const uint8_t images[@N@][@U@_INPUT_BYTES] = {
@IMAGES@
};

static char *put_int(char *p, int64_t v)
{
    char digits[24];
    int32_t n = 0;
    uint64_t m = v < 0 ? (uint64_t)(-v) : (uint64_t)v;
    if (v < 0) *p++ = '-';
    do { digits[n++] = (char)('0' + m % 10u); m /= 10u; } while (m);
    while (n) *p++ = digits[--n];
    *p++ = ' ';
    return p;
}

static char line[64 + 8 * @U@_CLASSES + 24 * (@STEPS@ + 2)];

int main(void)
{
    int8_t logits[@U@_CLASSES];
    uint32_t deepest = 0u;
    int32_t i, j;
    board_ticks_start();
    /* the cost of an empty pair of marks, to take out of the step figures */
    board_mark(0);
    board_mark(1);
    {
        char *p = line;
        *p++ = 'H'; *p++ = ' ';
        p = put_int(p, (int64_t)(board_marks[1] - board_marks[0]));
        *p++ = '\n'; *p = 0;
        board_put(line);
    }
    for (i = 0; i < @N@; ++i) {
        uint32_t *top;
        uint64_t start, stop;
        int32_t best;
        char *p = line;
        board_paint_stack();
        __asm__ volatile ("mov %0, sp" : "=r"(top));
        start = board_ticks();
        best = @P@_classify(images[i], logits);
        stop = board_ticks();
        j = (int32_t)board_stack_depth(top);
        if ((uint32_t)j > deepest) deepest = (uint32_t)j;
        *p++ = 'I'; *p++ = ' ';
        p = put_int(p, i);
        p = put_int(p, (int64_t)(stop - start));
        p = put_int(p, best);
        for (j = 0; j < @U@_CLASSES; ++j) p = put_int(p, logits[j]);
        *p++ = '\n'; *p = 0;
        board_put(line);
        if (@MARKS@) {
            p = line;
            *p++ = 'M'; *p++ = ' ';
            p = put_int(p, i);
            for (j = 0; j <= @STEPS@; ++j) p = put_int(p, (int64_t)(board_marks[j] - start));
            p = put_int(p, (int64_t)(stop - start));
            *p++ = '\n'; *p = 0;
            board_put(line);
        }
    }
    {
        char *p = line;
        *p++ = 'S'; *p++ = ' ';
        p = put_int(p, deepest);
        *p++ = '\n'; *p++ = 'E'; *p++ = '\n'; *p = 0;
        board_put(line);
    }
    return 0;
}
"""

MARKS_H = r"""/* Binds the classifier's step marks to the test program's tick recorder. */
#include "board.h"
#define @U@_MARK(step) board_mark(step)
"""


def _fill(text: str, **values) -> str:
    for key, value in values.items():
        text = text.replace(f"@{key}@", str(value))
    return text


def board_c() -> str:
    """``board.c``: start-up, SysTick ticks, stack painting, semihosting."""
    return _fill(BOARD_C, MAX_MARKS=MAX_MARKS, PAINT=f"{PAINT:08X}")


def linker_script(core: Core) -> str:
    """``board.ld`` for the core's board."""
    return _fill(LINK_LD, BOARD=core.board, ROM=f"0x{core.rom:08X}", RAM=f"0x{core.ram:08X}",
                 SIZE=f"0x{BOARD_MEMORY:X}", STACK=f"0x{STACK_BYTES:X}")


def main_c(prefix: str, images: np.ndarray, n_steps: int, marks: bool) -> str:
    """``main.c``: the images as constant data and the measuring loop.

    Parameters
    ----------
    prefix : str
        The classifier's symbol prefix.
    images : ndarray of uint8, shape (n, h, w, c)
    n_steps : int
        Steps of the classifier (the input step included); marks ``0 .. n_steps``.
    marks : bool
        Whether to print the per-step tick marks.
    """
    if n_steps + 1 > MAX_MARKS:
        raise ValueError(f"{n_steps} steps exceed the {MAX_MARKS - 1} the program can mark")
    rows = []
    for image in np.asarray(images, np.uint8).reshape(len(images), -1):
        values = [str(int(v)) for v in image]
        chunks = [", ".join(values[i:i + 24]) for i in range(0, len(values), 24)]
        rows.append("    {\n        " + ",\n        ".join(chunks) + "\n    }")
    return _fill(MAIN_C, P=prefix, U=prefix.upper(), N=len(images), STEPS=n_steps,
                 MARKS=1 if marks else 0, IMAGES=",\n".join(rows))


def marks_h(prefix: str) -> str:
    """The header forced into the classifier's compilation to bind its marks."""
    return _fill(MARKS_H, U=prefix.upper())
