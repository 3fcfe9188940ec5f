"""What a network costs: parameters, MACs, activation memory and int8 flash.

The one source of these numbers for the search's budgets, the report and the
C export. Everything is computed from :func:`tinyconv.arch.expand`, one row per
:class:`~tinyconv.arch.Op`, plus one row for the input quantisation.

Counting rules (the contract in DEVELOPERS.md, "Cost"):

* **parameters** (trained): conv ``k*k*c_in*f + f``; depthwise ``k*k*c + c``;
  dense ``n_in*n_out + n_out``; batch norm ``2c`` (gamma, beta). Batch norm's
  running mean and variance (``2c``) are **state**, counted apart.
* **MACs per image**: conv ``h_out*w_out*k*k*c_in*f``; depthwise
  ``h_out*w_out*k*k*c``; dense ``n_in*n_out``. Pooling, ReLU, batch norm (folded
  at deployment), dropout and flatten count 0: they multiply-accumulate nothing
  in the int8 kernels.
* **flash** (int8 deployment layout, byte for byte what ``export/`` writes):
  the input table of ``256*c`` int8; per conv/dwconv/dense one byte per weight
  (a convolution's filters padded with zeros to a multiple of 4 values) plus 16
  bytes per output channel (one record of int32 bias, multiplier, rounding
  constant and shift); a batch norm directly after conv/dwconv/dense is folded into it and
  costs nothing. A batch norm anywhere else has no int8 form: the exporter
  refuses it, and :attr:`Cost.exportable` is False (its flash counts 0).
* **peak activation memory**: tensors live from the step that writes them
  to the last step that reads them (:mod:`tinyconv.liveness`; the steps are
  the input quantisation and the ops that write a new buffer: conv, dwconv,
  maxpool, avgpool, gap, dense, add). At each step the tensors alive together
  are summed, plus in int8 the scratch its kernel needs (a convolution's two
  int16 patches, ``4 Kp`` bytes, ``Kp`` = ``k k c_in`` rounded up to a multiple
  of 4; see :func:`scratch_bytes`); the peak is the largest such sum. In a
  chain that is the step's input + output; inside a residual block the block's input is alive too, until the addition
  that closes the block reads it. ReLU, batch norm, dropout and flatten work
  in place and add nothing. The C places every tensor and scratch at an
  offset planned from these live ranges, in one buffer of exactly the int8
  peak (:mod:`tinyconv.export.placement`). int8 bytes = elements + scratch;
  float32 bytes = 4 x elements. The input quantisation reads the caller's raw
  pixels (a buffer outside the activation buffer, e.g. the camera's frame) and writes the
  int8 input, so it counts ``h*w*c``.

KB in this package means 1,024 bytes.
"""

from tinyconv.cost_network import (Cost, OpCost, cost_of, folded_flags, input_cost,
                                   op_cost)
from tinyconv.cost_rules import (CHANNEL_BYTES, INPUT_TABLE_ROWS, KB, OP_RULES, OpRule,
                                 is_weighted, op_numbers, rule_of, scratch_bytes,
                                 writes_buffer)
from tinyconv.cost_totals import Totals, totals_of
from tinyconv.cost_training import OPTIMIZER_SLOTS, TrainingMemory, training_memory

__all__ = ["OP_RULES", "OpRule", "rule_of", "writes_buffer", "is_weighted", "op_numbers",
           "OpCost", "Cost", "Totals", "cost_of", "totals_of", "scratch_bytes", "op_cost", "input_cost",
           "folded_flags", "training_memory", "TrainingMemory", "CHANNEL_BYTES",
           "INPUT_TABLE_ROWS", "KB", "OPTIMIZER_SLOTS"]
