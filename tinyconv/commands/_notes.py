"""The commands' own notes: a cold kernel cache (warnings: :mod:`tinyconv.notices`)."""

from __future__ import annotations

#: What the commands print before a run that compiles the engine's kernels.
COLD_KERNELS = ("note: the engine's kernels are not compiled on this machine yet: this run "
                "compiles and caches them first (about 20 s, once)")


def kernels_note() -> str | None:
    """:data:`COLD_KERNELS` when the kernel cache is cold, else None."""
    from tinyconv.kernel_stamp import cold
    return COLD_KERNELS if cold() else None
