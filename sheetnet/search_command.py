"""``sheetnet search BOOK --table ... --target ...``: the model search on a workbook's range, printed.

The range is read as ``sheetnet train`` reads it and answered by the same code
as the cell function SHEETNET.SEARCH (`sheetnet.search_cells`), so the two
rank alike. Nothing is written to the workbook.
"""

from __future__ import annotations

import argparse
import contextlib
import itertools
import shlex
from pathlib import Path
from typing import Any, TextIO

from .cells import Cells


def add_search_parser(commands: Any) -> None:
    """The ``search`` command's arguments, on the command line's subcommands."""
    search = commands.add_parser("search", help="rank candidate networks on a workbook's range by cross-validation and say which to use")
    search.add_argument("book", type=Path, help="the .xlsx or .xlsm file")
    search.add_argument("--table", required=True, help="the table with its header row, like 'Data!A1:F500'")
    search.add_argument("--target", required=True, help="the column to predict")
    search.add_argument("--hidden", action="append", default=[], metavar="WIDTHS",
                        help="hidden layer widths of a candidate, like 8 or 8,4 (0: none); repeat for more. Default: a grid of 12 from none to 16,8")
    search.add_argument("--decay", action="append", default=[], type=float, metavar="DECAY", help="a weight decay to try with every --hidden; repeat for more")
    search.add_argument("--algorithm", action="append", default=[], metavar="NAME", help="an algorithm to try with every --hidden; repeat for more")
    search.add_argument("--folds", default="5", help="5, a count, or ordered (time series), random, stratified, 'grouped COLUMN', then a count (default 5)")
    search.add_argument("--metric", help="what to rank by (default: rmse for numbers, log_loss for classes)")
    search.add_argument("--seed", type=int, default=None, help="seed of the folds and the training (default 0)")
    search.add_argument("--set", action="append", default=[], metavar="NAME=VALUE", help="a training setting every candidate shares; repeat for more")
    search.add_argument("--cluster", metavar="ADDRESS", help="run the fits on the Dask scheduler at ADDRESS, like tcp://10.1.2.3:8786 (default: this machine)")


def candidate_cells(hidden: list[str], decays: list[float], algorithms: list[str]) -> Cells | None:
    """The candidates range for the options given: every --hidden with every --decay and --algorithm; None: the default grid."""
    if not hidden and not decays and not algorithms:
        return None
    rows: Cells = [["hidden", "decay", "algorithm"]]
    choices: tuple[list[Any], list[Any], list[Any]] = (list(hidden) or ["4"], list(decays) or [None], list(algorithms) or [None])
    for widths, decay, algorithm in itertools.product(*choices):
        rows.append([widths, decay, algorithm])
    return rows


def _shown(value: Any) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def run_search(args: argparse.Namespace, out: TextIO) -> int:
    """Read the range, rank the candidates with progress on the terminal, print the ranking and the choice."""
    from . import parallel
    from .errors import SettingError
    from .progress import TerminalProgress, reporting_to
    from .search_cells import search_table
    from .workbook import open_book, read_range

    for pair in args.set:
        if "=" not in pair:
            raise SettingError(f"--set '{pair}' has no '='; write it like --set epochs=500")
    settings = [*args.set] + ([f"metric={args.metric}"] if args.metric else []) + ([f"seed={args.seed}"] if args.seed is not None else [])
    book = open_book(args.book)
    table = read_range(book, args.table)
    line = TerminalProgress()
    with parallel.cluster(args.cluster) if args.cluster else contextlib.nullcontext(), reporting_to(line):
        answer = search_table(table, args.target, candidate_cells(args.hidden, args.decay, args.algorithm), "; ".join(settings), args.folds)
    line.done()
    ranking = [row for row in answer if isinstance(row[0], int) or row[0] == "rank"]
    notes = {row[0]: row[1] for row in answer if row[0] in ("choice rule", "folds")}
    widths = [max(len(_shown(row[j])) for row in ranking) for j in range(len(ranking[0]))]
    out.write(f"{len(ranking) - 1} candidates for {args.target} on {args.table}; {notes['folds']}\n")
    for row in ranking:
        out.write("  " + "  ".join(_shown(v).ljust(w) for v, w in zip(row, widths)).rstrip() + "\n")
    use = next(row for row in ranking[1:] if "use this" in str(row[-1]))
    out.write(f"use: hidden {use[1]}, decay {_shown(use[2])}, algorithm {use[3]}; rule: {notes['choice rule']}\n")
    out.write(f"to train it: {train_command(args, use)}\n")
    return 0


def train_command(args: argparse.Namespace, use: list[Any]) -> str:
    """The ``sheetnet train`` line for the chosen candidate, with the settings every candidate shared (the search's
    own, metric, stays behind), so running it trains what the search ranked."""
    shared = [pair for pair in args.set if pair.split("=", 1)[0].strip().lower() != "metric"]
    chosen = ([] if use[2] == "auto" else [f"decay={use[2]:g}"]) + ([] if use[3] == "auto" else [f"algorithm={use[3]}"])
    words = ["sheetnet", "train", str(args.book), "--table", args.table, "--target", args.target, "--name", "NAME", "--hidden", str(use[1])]
    words += [w for pair in [*shared, *chosen] for w in ("--set", pair)]
    if args.seed is not None:
        words += ["--seed", str(args.seed)]
    return " ".join(shlex.quote(w) if w != "NAME" else w for w in words)

