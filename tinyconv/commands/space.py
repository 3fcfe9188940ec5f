"""``tinyconv space DATA [--write FILE]``: a commented starter search space for the data.

The general space that ``tinyconv search`` uses when no ``--space`` is given,
sized for DATA's image size, colour and classes and for the budgets given
(:mod:`search.starter`), printed or written to FILE to edit. Says how many
candidates it holds and how many fit the budgets. Exit 0 done, 2 bad input
(a FILE that exists already is refused, never overwritten).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from tinyconv.commands.search import DATA_HELP, add_budget_options, budgets_from


def configure(parser: argparse.ArgumentParser) -> None:
    """Add this command's arguments."""
    parser.add_argument("data", metavar="DATA", help=DATA_HELP)
    parser.add_argument("--write", default=None, metavar="FILE",
                        help="write the space to FILE (a new file) instead of printing it")
    parser.add_argument("--skip-bad", action="store_true",
                        help="leave out unreadable images instead of stopping")
    add_budget_options(parser)


def run(args: argparse.Namespace) -> int:
    """Size the general space for the data, then print or write it."""
    from search.session import GENERAL_SPACE, data_spec, merged_budget
    from search.space import enumerate_space, filter_budget, space_from_text
    from search.starter import data_shape, starter_text
    from tinyconv.data import load_data
    from tinyconv.errors import InputError
    from tinyconv.files import write_bytes_whole

    target = Path(args.write) if args.write else None
    if target is not None and target.exists():
        raise InputError(f"--write {target}: the file exists already; give a new file name, "
                         "or remove it first (it is never overwritten)")
    budget = merged_budget(None, budgets_from(args))
    dataset = load_data(args.data, skip_bad=args.skip_bad)
    text = starter_text(data_shape(dataset, data_spec(args.data)), budget)
    space = space_from_text(text, GENERAL_SPACE)
    filtered = filter_budget(enumerate_space(space), space.budget, dataset.n_classes)
    told = (f"{filtered.n_candidates} candidates, {len(filtered.survivors)} within the "
            "budgets")
    if target is None:
        sys.stdout.write(text)
        print(f"# {told}", file=sys.stderr)
        return 0
    write_bytes_whole(target, text.encode("utf-8"), then="give --write a folder you can write")
    print(f"wrote {target}: {told}; search it with: tinyconv search {args.data} --space "
          f"{target} --out RUN_FOLDER")
    return 0
