"""Search-space files: which networks to try, and the budgets they must fit.

A space file is TOML (read with the standard library's :mod:`tomllib`). Only
``[input]`` is required; every other table and key is optional, and every key
is a list of choices unless its comment says "one value". An example, whose
comments give the default of each optional key::

    format = 1                      # one value: the version of this format (1)
    description = "tiles, 8 marks"  # one value: free text ("")

    [input]
    sizes = [32, "32x24"]           # a side (square) or "HxW"
    modes = ["rgb", "gray"]         # rgb, gray, ycc, hsv, or stacked such as "rgb+hsv":
                                    # every size in every mode
    # specs = ["32x32rgb", "16x16gray"]  # instead of sizes and modes: just these

    [stages]
    count = [0, 1, 2]               # how many conv stages a candidate has ([0])
    filters = [[4, 8], [8, 16]]     # filter choices per stage (a list per stage),
                                    # or one list for every stage: [8, 16]
    # widths = [[4, 8], [16, 32]]   # instead of filters: whole plans; a candidate
                                    # with n stages uses a plan's first n widths
    kernel = [3]                    # odd sizes; one list, or a list per stage ([3])
    conv = ["standard", "depthwise"]  # standard | depthwise (["standard"])
    pool = ["max"]                  # max | avg | none | stride (["max"])
    pool_window = 2                   # one value: size and stride of the pooling (2)
    shared = ["kernel", "conv", "pool"]  # chosen once per candidate for all its
                                    # stages, not stage by stage (all three)
    widening = true                 # one value: filters never decrease from a
                                    # stage to the next (true)

    [head]
    kind = ["gap", "flatten"]       # gap | flatten (["flatten"])
    hidden = [0, 32]                # hidden dense widths; 0 = none ([0])

    [options]
    batch_norm = [false, true]      # true: bn after every conv and hidden dense ([false])
    dropout = [0, 20]               # percent, before the classifier; 0 = none ([0])

    [blocks]                        # residual blocks inside the stages (search/space_blocks.py)
    count = [0, 1]                  # blocks after each stage's convolution ([0])
    kind = ["bottleneck", "pair"]   # inverted bottleneck or plain pair (["bottleneck"])
    expansion = [2, 4]              # a bottleneck's widening ([4])

    [budget]                        # one value each; leave a key out for no limit
    max_params = 50000              # trained parameters
    max_macs = 1000000              # multiply-accumulates per image
    max_peak_kb = 32                # int8 peak activation memory (KB = 1,024 bytes)
    max_flash_kb = 256              # int8 deployment layout
    max_ms = 50                     # milliseconds per image on the [device] (model)

    [device]                        # the part the time is for (needed by max_ms)
    core = "cortex-m4"              # cortex-m3, cortex-m4, cortex-m7, cortex-m33
    clock_mhz = 80                  # default: the core's assumed clock

    [training]                      # recipes: see search/recipes.py (the run's setting)
    augment = ["none", "shift2+mirror"]  # augmentation texts (tinyconv/augment.py)
    copies = [1, 4]                 # copies of each image an epoch passes over
    lr = [0.003, 0.01]              # learning rates
    weight_decay = [0, 1e-4]        # decoupled weight decay
    schedule = ["constant"]         # constant | step | cosine

What a stage is, in the architecture text form (:mod:`tinyconv.arch`), for
``f`` filters and kernel ``k``:

* ``standard``: ``c{f}k{k}``; ``depthwise``: ``dw{k}-c{f}k1`` (depthwise then
  a 1x1 convolution);
* ``pool``: ``max`` appends ``p{pool_window}``, ``avg`` appends ``a{pool_window}``,
  ``none`` nothing, ``stride`` gives the stage's first convolution stride 2;
* with batch norm, ``bn`` follows every convolution (and the hidden dense layer);
* residual blocks (``[blocks]``, :mod:`search.space_blocks`) come after the
  stage's convolution, before its pooling.

The head: ``gap`` appends global average pooling (only when a stage exists and
the map is larger than 1x1: otherwise it is the same network as ``flatten``,
which is the implicit head); a hidden width ``n > 0`` appends ``d{n}``; dropout
``p > 0`` appends ``x{p}``. The final dense layer to the classes is implicit.
For example ``count = 2``, filters 8 then 16, depthwise, max pooling, gap,
hidden 32 and batch norm give ``dw3-bn-c8k1-bn-p2-dw3-bn-c16k1-bn-p2-gap-d32-bn``.

Enumeration (:func:`enumerate_space`) is deterministic: inputs (sizes, then
modes, in file order; or specs in order), stage count, the shared choices, the
width plans, the per-stage choices (stage 1 slowest), the block plans (counts
stage by stage, then kind and expansion), head kind, hidden width, batch
norm, dropout. A text seen before is dropped (equivalent candidates
appear once), and so are combinations that do not fit their input (e.g.
pooling a 2x2 map by 4). :func:`subsample` draws a seeded subset when there are
more candidates than wanted, and :func:`filter_budget` keeps those within a
:class:`Budget`, counting what each limit removed. A budget given on the
command line replaces the file's with :func:`dataclasses.replace`, e.g.
``replace(space.budget, max_macs=500_000)``.

Errors (:class:`SpaceError`, an ``InputError``) name the file, the key, its
value and the rule; unknown keys are refused with the list of known ones.

This module is the space's public face; the parts live beside it:
:mod:`search.space_types` (:class:`Space`, :class:`StageChoices`,
:class:`SpaceError`), :mod:`search.space_read` (TOML and the checks of every
key), :mod:`search.space_enumerate` (:func:`enumerate_space`),
:mod:`search.space_sample` (:func:`subsample`) and :mod:`search.space_blocks`
(the ``[blocks]`` table).
"""

from __future__ import annotations

from search.budget import Budget, Filtered, filter_budget
from search.space_enumerate import enumerate_space
from search.space_read import builtin_space_text, load_space, space_from_text
from search.space_sample import subsample
from search.space_types import (CONV_KINDS, HEAD_KINDS, MAX_STAGES, POOL_KINDS, SHAREABLE,
                                Space, SpaceError, StageChoices)

__all__ = ["SpaceError", "Space", "StageChoices", "Budget", "Filtered", "load_space",
           "space_from_text",
           "builtin_space_text", "enumerate_space", "subsample", "filter_budget",
           "CONV_KINDS", "POOL_KINDS", "HEAD_KINDS", "SHAREABLE", "MAX_STAGES"]
