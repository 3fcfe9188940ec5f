"""How many images an evaluation pass takes at a time: sized for the cache.

Evaluation is per image (no batch statistics), so the batch only sets how much
of each activation is in flight. Per-image time was lowest where a batch's
largest activation is about twice a core's L2 cache (``benchmarks/sizes.py``,
2-core AMD EPYC with 1 MiB of L2 a core): batches of 8-16 at 64 x 64 and 32-64
at 32 x 32 were up to 1.6x faster per image than 256.
"""

from __future__ import annotations

import numpy as np

#: Bytes of the largest activation of one evaluation batch.
EVAL_BATCH_BYTES = 2 << 20
EVAL_BATCH_LIMITS = (8, 256)


def eval_batch(net) -> int:
    """Images per evaluation batch for ``net``: a power of two, so that the batch's
    largest activation takes about :data:`EVAL_BATCH_BYTES` (within the limits)."""
    largest = max(int(np.prod(shape)) for op in net.ops for shape in (op.in_shape, op.out_shape))
    fit = max(1, EVAL_BATCH_BYTES // (largest * np.dtype(net.dtype).itemsize))
    low, high = EVAL_BATCH_LIMITS
    return int(min(high, max(low, 1 << (int(fit).bit_length() - 1))))
