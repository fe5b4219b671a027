"""How a model lives in a workbook, decided once for every door.

The command line on files, the xlwings macros, the local server with the task
pane, and the Calc extension all ask this module: which sheet and which
defined names a model gets, where its block and native-formula constants go
(as `Placements`), what "auto" holdout mode means, how a seed is used, and how
a stored model is refreshed or checked. The doors only read ranges and apply
placements. Nothing here touches a file.

Names: model names and sheet names are compared case-insensitively, as
spreadsheets compare them. A model's hidden sheet is ``sheetnet_NAME``; a name
too long for a sheet title (31 characters) gets a stable short form, its
first characters plus ``~`` and six hex digits of the name's SHA-256, so two
long names never share a sheet.
"""

from __future__ import annotations

import hashlib
import re
from typing import Any, Iterable

from .block import WIDTH, decode_block
from .errors import InputError
from .formulas import formula_constants, name_prefix
from .placements import CellBlock, NamePlacement, Placements, SheetPlan, cell_block, same_title

MODEL_SHEET_PREFIX = "sheetnet_"
RESULTS_SHEET_PREFIX = "sn "
SHEET_TITLE_LIMIT = 31  # characters, a spreadsheet's limit for a sheet name
CONSTANTS_COLUMN = WIDTH + 2  # native-formula constants start two columns right of the block
OWNED_MARK = "sheetnet results"  # first cell of every visible sheet sheetnet writes
NAME_PATTERN = re.compile(r"^[A-Za-z_][A-Za-z0-9_.]{0,200}$")
ADDRESS_LIKE = re.compile(r"^([A-Za-z]{1,3}[0-9]+|[Rr][0-9]*[Cc]?[0-9]*|[Cc][0-9]*)$")
# what follows a model's prefix in its constants' names (see `formulas.formula_constants`)
CONSTANT_SUFFIX = re.compile(r"_(m\d+_(W\d+n|W\d+c\d+|W\d+|b\d+)|cats\d+|target|classes|threshold)$", re.IGNORECASE)


def check_model_name(name: str) -> str:
    """The name itself, or an `InputError` saying what a model name may be."""
    if not isinstance(name, str) or not NAME_PATTERN.match(name) or ADDRESS_LIKE.match(name):
        raise InputError(
            f"'{name}' cannot be a model name; use letters, digits, '_' and '.', start with a letter, "
            "and avoid names that look like cell addresses (such as AB12)"
        )
    return name


def _sheet_title(prefix: str, name: str) -> str:
    full = prefix + name
    if len(full) <= SHEET_TITLE_LIMIT:
        return full
    digest = hashlib.sha256(name.casefold().encode("utf-8")).hexdigest()[:6]
    return f"{prefix}{name[:SHEET_TITLE_LIMIT - len(prefix) - 7]}~{digest}"


def model_sheet_name(name: str) -> str:
    """The very hidden sheet holding a model's block and constants.

    >>> model_sheet_name("grades")
    'sheetnet_grades'
    """
    return _sheet_title(MODEL_SHEET_PREFIX, name)


def results_sheet_name(name: str, kind: str = "") -> str:
    """A visible sheet of ours: ``sn NAME`` (training results), ``sn predict NAME``, ``sn formulas NAME``."""
    return _sheet_title(RESULTS_SHEET_PREFIX + (f"{kind} " if kind else ""), name)


def constant_owner(defined_name: str) -> str | None:
    """The model (case-folded) whose native-formula constant this defined name is, if any."""
    if not defined_name.lower().startswith("snf_"):
        return None
    match = CONSTANT_SUFFIX.search(defined_name)
    if match is None:
        return None
    return defined_name[4:match.start()].casefold() or None


def names_of_model(name: str, existing_names: Iterable[str]) -> list[str]:
    """The workbook's defined names that belong to a model: its own and its constants'."""
    folded = name.casefold()
    return [n for n in existing_names if n.casefold() == folded or constant_owner(n) == folded]


def model_placements(name: str, block: list[list[Any]], existing_names: Iterable[str] = ()) -> Placements:
    """Everything a stored model writes: its very hidden sheet with the block at A1 and the
    native-formula constants from column K, the defined name of the block, one name per constant.
    ``existing_names`` are the workbook's defined names now (the model's old ones are dropped)."""
    check_model_name(name)
    model, _ = decode_block(block)
    sheet = model_sheet_name(name)
    cells: list[CellBlock] = [cell_block(sheet, 1, 1, block)]
    names = [NamePlacement(name, sheet, 1, 1, len(block), WIDTH)]
    row = 1
    for constant in formula_constants(model, name):
        height, width = constant.shape
        cells.append(cell_block(sheet, row, CONSTANTS_COLUMN, constant.values))
        names.append(NamePlacement(constant.name, sheet, row, CONSTANTS_COLUMN, row + height - 1, CONSTANTS_COLUMN + width - 1))
        row += height + 1
    return Placements(
        drop_names=tuple(names_of_model(name, existing_names)),
        drop_sheets=(sheet,),
        sheets=(SheetPlan(sheet, "veryHidden"),),
        cells=tuple(cells),
        names=tuple(names),
    )


def removal_placements(name: str, existing_names: Iterable[str]) -> Placements:
    """What removing a stored model drops: its names and its hidden sheet."""
    return Placements(drop_names=tuple(names_of_model(name, existing_names)), drop_sheets=(model_sheet_name(name),))


__all__ = [
    "CONSTANTS_COLUMN", "MODEL_SHEET_PREFIX", "OWNED_MARK", "check_model_name", "constant_owner", "model_placements",
    "model_sheet_name", "name_prefix", "names_of_model", "removal_placements", "results_sheet_name", "same_title",
]
