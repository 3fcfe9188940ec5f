"""The demo's settings: the workshop-tile data, the demo space and its search.

``tinyconv demo`` runs :func:`demo_request`; the benchmarks read the same
settings. Folds, seed and halving rate are the search's defaults
(:mod:`search.config`).
"""

from __future__ import annotations

from pathlib import Path

#: The space the demo searches.
SPACE = "builtin:demo"
#: Data, candidates and epochs of the full and the quick demo. On these tiles a
#: network says little about its final accuracy before about 9 epochs (rank
#: correlation with the 27-epoch accuracy: 0.14 after 3 epochs, 0.51 after 9),
#: so the full demo's shortest rung is 9 epochs. The quick demo, a smoke run of
#: a few epochs, learns faster at a learning rate of 0.01.
FULL = {"data": "builtin:tiles?n=80&size=32&seed=0", "max_candidates": 40, "top_epochs": 27,
        "base_epochs": 9}
QUICK = {"data": "builtin:tiles?n=40&size=32&seed=0", "max_candidates": 6, "top_epochs": 9,
         "base_epochs": 3, "lr": 0.01}
#: The demo trains with the search's default recipe (search.config.DEFAULT_TRAINING)
#: and the augmentation its space file names for tiles; the quick demo's rate is
#: its own (above).
TRAINING: dict = {}
#: The part the demo's space times candidates on; the export measures the pick there
#: under QEMU when the Arm cross-compiler and QEMU are installed.
DEVICE = {"core": "cortex-m4", "clock_mhz": 80.0}


def demo_request(out: Path, quick: bool, workers: int | None):
    """The SearchRequest of the demo."""
    from search.session import SearchRequest
    setting = QUICK if quick else FULL
    return SearchRequest(data=setting["data"], space=SPACE, out=out,
                         top_epochs=setting["top_epochs"],
                         base_epochs=setting["base_epochs"],
                         max_candidates=setting["max_candidates"],
                         training={**TRAINING, **({"lr": setting["lr"]} if "lr" in setting else {})},
                         workers=workers)
