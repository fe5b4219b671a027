"""The model search on a range of cells: what SHEETNET.SEARCH and ``sheetnet search`` answer.

The table is read exactly as TRAIN reads it (the same settings, inputs,
ignore, categories, blank_rows and numbers_in_text; the same messages), then
`sheetnet.search.search` ranks the candidates. Raises `SheetnetError`; the
cell function turns that into its ``#SHEETNET!`` cell.

Arguments as cells:

- ``candidates``: a range whose header row names any of ``hidden``, ``decay``,
  ``algorithm``, one candidate per row below (a blank cell: the settings'
  value); blank: the default grid of 12.
- ``settings``: TRAIN's settings, plus ``metric`` (what to rank by).
- ``folds``: blank (5 folds, auto), a count like ``10``, or a mode with an
  optional count: ``ordered`` (time series), ``random``, ``stratified``,
  ``grouped COLUMN`` (rows of one group stay together; the column is left
  out of the inputs), like ``ordered 4`` or ``grouped store 5``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .cell_text import cell_in_words, label_in_words
from .cells import Cells, as_grid, is_blank, numeric_frame, one_value, parse_hidden, parse_settings, read_sheet_table
from .defaults import DEFAULT_HIDDEN
from .errors import InputError, SettingError
from .preparation import fit_preparation, fit_target, read_table, read_target
from .search import Candidate, search
from .settings import resolve_settings

FOLDS_FIX = "write the folds like 5, ordered, 'ordered 4', random, stratified or 'grouped store 5'"
CANDIDATE_COLUMNS = ("hidden", "decay", "algorithm")
DEFAULT_FOLDS = 5


def parse_folds(value: Any) -> tuple[int, str, str | None]:
    """(folds, mode, group column) from the folds cell.

    >>> parse_folds(None), parse_folds(10), parse_folds("ordered 4"), parse_folds("grouped store name 3")
    ((5, 'auto', None), (10, 'auto', None), (4, 'ordered', None), (3, 'grouped', 'store name'))
    """
    if is_blank(value):
        return DEFAULT_FOLDS, "auto", None
    if isinstance(value, (int, float, np.number)) and not isinstance(value, bool):
        return _fold_count(value), "auto", None
    words = str(value).split()
    count = DEFAULT_FOLDS
    if len(words) > 1 and _is_number(words[-1]):
        count = _fold_count(words.pop())
    if len(words) == 1 and _is_number(words[0]):
        return _fold_count(words[0]), "auto", None
    mode = words[0].lower()
    if mode == "grouped":
        if len(words) < 2:
            raise SettingError(f"grouped folds need the column that holds the groups: {FOLDS_FIX}")
        return count, mode, " ".join(words[1:])
    if mode not in ("auto", "random", "stratified", "ordered") or len(words) > 1:
        raise SettingError(f"the folds {cell_in_words(value)} are not understood; {FOLDS_FIX}")
    return count, mode, None


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _fold_count(value: Any) -> int:
    number = float(value)
    if number != int(number) or number < 2 or number > 100:
        raise SettingError(f"the number of folds is {cell_in_words(value)}; give a whole number from 2 to 100, like 5")
    return int(number)


def parse_candidates(value: Any) -> list[Candidate] | None:
    """The candidates range as `Candidate` values; None (the default grid) when blank."""
    if value is None or is_blank(value):
        return None
    grid = as_grid(value, "candidates")
    header = [str(cell).strip().lower() if not is_blank(cell) else "" for cell in grid[0]]
    for name in header:
        if name and name not in CANDIDATE_COLUMNS:
            raise SettingError(
                f"the candidates' header has {cell_in_words(name)}; name the columns hidden, decay and algorithm (any of them), one candidate per row below"
            )
    if not any(header):
        raise SettingError("the candidates need a header row naming hidden, decay or algorithm, then one candidate per row")
    found = []
    for row in grid[1:]:
        cells = {name: cell for name, cell in zip(header, row) if name}
        if all(is_blank(cell) for cell in cells.values()):
            continue
        widths = parse_hidden(cells.get("hidden"))
        hidden = DEFAULT_HIDDEN if widths is None else widths  # a candidate is one network: blank is the default layer
        decay = None if is_blank(cells.get("decay")) else resolve_settings({"decay": cells["decay"]})["decay"]
        algorithm = None if is_blank(cells.get("algorithm")) else resolve_settings({"algorithm": cells["algorithm"]})["algorithm"]
        found.append(Candidate(hidden, decay, algorithm))
    if not found:
        raise SettingError("the candidates range has a header but no candidate below it; add rows, or leave the argument blank for the default grid")
    return found


def search_table(table: Any, target: Any, candidates: Any = None, settings: Any = None, folds: Any = None) -> Cells:
    """The candidates ranked by cross-validated score as cells: a header, one row per candidate, then the rule."""
    from . import functions as cell_layer  # TRAIN's reading steps, shared so both read a table the same way

    sheet = read_sheet_table(table)
    target = one_value(target, "target")
    if is_blank(target):
        raise InputError(f"no target given; name the column to predict, one of: {', '.join(map(str, sheet.frame.columns))}")
    target_name = str(target).strip()
    sheet.column(target_name)
    parsed = parse_settings(settings)
    metric = parsed.pop("metric", None)
    options, engine_settings = cell_layer._options(parsed)
    k, mode, group_column = parse_folds(one_value(folds, "folds"))
    if group_column is not None:
        sheet.column(group_column)
    chosen = cell_layer._name_list(options.get("inputs"))
    ignored = set(cell_layer._name_list(options.get("ignore")))
    inputs = chosen or [c for c in sheet.frame.columns if c not in (target_name, group_column) and c not in ignored]
    if target_name in inputs:
        raise SettingError(f"'{target_name}' is the target, so it cannot also be an input; remove it from the setting inputs")
    if not inputs:
        raise InputError("no input columns are left; the table needs at least one column besides the target")
    needed = [*inputs, target_name] + ([group_column] if group_column else [])
    used = cell_layer._rows_used(sheet, needed, options["blank_rows"] == "skip")
    seed = cell_layer._whole_number(options.get("seed", 0), "seed")
    categories = cell_layer._name_list(options.get("categories"))
    readable = cell_layer._numbers_for_training(sheet, inputs, target_name, categories, options["numbers_in_text"], engine_settings)
    frame = cell_layer._inputs_frame(readable, inputs, used)
    cell_layer._check_no_identifiers(frame)
    y = numeric_frame(readable.frame.loc[used, [target_name]])[target_name].to_numpy()
    groups = [label_in_words(v) for v in sheet.frame.loc[used, group_column]] if group_column else None
    wanted = parse_candidates(candidates)

    def checked_search() -> Any:
        # every cell is checked on all rows first, so a bad cell is named at its row, not at its row inside a fold
        prepared = read_table(frame)
        fit_preparation(prepared, categories).transform_columns(prepared.columns)
        task = resolve_settings(engine_settings)["task"]
        fit_target(read_target(y), task).encode(read_target(y))
        for candidate in wanted or []:
            cell_layer._check_sizes(frame, y, candidate.hidden, categories, engine_settings)
        return search(frame, y, wanted, k, seed, metric=metric, mode=mode, groups=groups, categories=categories, **engine_settings)

    result = cell_layer._in_sheet_rows(sheet.data_rows[used], target_name, checked_search)
    rows = result.rows()
    width = len(rows[0])
    rows.append(["choice rule", result.rule] + [""] * (width - 2))
    rows.append(["folds", f"{result.folds} folds, {result.mode}" + (f" by {group_column}" if group_column else "")] + [""] * (width - 2))
    return rows
