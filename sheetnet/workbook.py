"""Workbook files: open them, read ranges and stored models, and save what sheetnet placed.

Reading goes through openpyxl (cached values for reading, formulas to tell a
formula without a saved result from a blank). Everything a command writes is
collected as `Placements` in ``Book.log`` (decided by `sheetnet.service`,
gathered by `sheetnet.workbook_models`) and applied by `save_book` in one
atomic save that keeps the file's permissions and a backup.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import openpyxl
from openpyxl.utils.cell import get_column_letter, quote_sheetname, range_boundaries
from openpyxl.workbook.workbook import Workbook
from openpyxl.worksheet.worksheet import Worksheet

from .block import MAGIC
from .errors import InputError, SheetnetError
from .placements import PlacementLog
from .sheet_writer import apply_to_workbook

# package parts openpyxl does not carry through a save (it keeps the VBA project with keep_vba=True)
UNREAD_PARTS = (
    "xl/charts/", "xl/drawings/", "xl/media/", "xl/pivotTables/", "xl/pivotCache/", "xl/embeddings/",
    "xl/slicers/", "xl/slicerCaches/", "xl/timelines/", "xl/timelineCaches/", "xl/chartsheets/",
    "xl/activeX/", "xl/ctrlProps/", "xl/threadedComments/", "xl/model/", "xl/queryTables/", "xl/connections.xml",
)


class WorkbookError(SheetnetError):
    """A workbook file cannot be read or written as asked."""


@dataclass
class Book:
    """An open workbook: formulas kept for saving, cached values for reading."""

    path: Path
    formulas: Workbook
    values: Workbook
    log: PlacementLog = field(default_factory=PlacementLog)  # what this command will write, applied by save_book

    @property
    def keeps_macros(self) -> bool:
        return self.path.suffix.lower() == ".xlsm"


def open_book(path: str | Path) -> Book:
    path = Path(path)
    if not path.exists():
        raise WorkbookError(f"there is no workbook at {path}; check the file name")
    if path.suffix.lower() not in (".xlsx", ".xlsm"):
        raise WorkbookError(f"{path.name} is not an .xlsx or .xlsm workbook; save it in one of those formats first")
    macros = path.suffix.lower() == ".xlsm"
    try:
        formulas = openpyxl.load_workbook(path, keep_vba=macros)
        values = openpyxl.load_workbook(path, data_only=True, keep_vba=macros)
    except (zipfile.BadZipFile, KeyError, OSError, ValueError) as error:
        raise WorkbookError(f"{path.name} could not be read as a workbook ({error}); check that it is not damaged or open elsewhere") from None
    return Book(path, formulas, values)


def unread_parts(path: str | Path) -> list[str]:
    """Parts of the file that openpyxl would drop when saving it."""
    with zipfile.ZipFile(path) as package:
        names = package.namelist()
    return sorted({prefix.rstrip("/").split("/")[-1] for prefix in UNREAD_PARTS for name in names if name.startswith(prefix)})


# --- ranges -------------------------------------------------------------------------------

def split_reference(reference: str) -> tuple[str, str]:
    """``Data!A1:F500`` or ``'My data'!A1:F500`` as (sheet, cells)."""
    if "!" not in reference:
        raise InputError(f"the range '{reference}' names no sheet; write it like Data!A1:F500")
    sheet, cells = reference.rsplit("!", 1)
    sheet = sheet.strip()
    if sheet.startswith("'") and sheet.endswith("'"):
        sheet = sheet[1:-1].replace("''", "'")
    try:
        range_boundaries(cells.replace("$", ""))
    except (ValueError, TypeError):
        raise InputError(f"'{cells}' in '{reference}' is not a cell range; write it like A1:F500") from None
    return sheet, cells.replace("$", "")


def _sheet(workbook: Workbook, name: str) -> Worksheet:
    if name not in workbook.sheetnames:
        raise InputError(f"the workbook has no sheet named '{name}'; its sheets are: {', '.join(workbook.sheetnames)}")
    return workbook[name]


def read_range(book: Book, reference: str) -> list[list[Any]]:
    """The values of a range; a formula whose result was never saved is named, not read as blank."""
    sheet_name, cells = split_reference(reference)
    min_col, min_row, max_col, max_row = range_boundaries(cells)
    values = _sheet(book.values, sheet_name)
    formulas = _sheet(book.formulas, sheet_name)
    max_row = min(max_row, values.max_row)  # whole-column ranges stop at the last used row
    grid = []
    for r in range(min_row, max_row + 1):
        row = []
        for c in range(min_col, max_col + 1):
            value = values.cell(r, c).value
            if value is None and formulas.cell(r, c).data_type == "f":
                raise InputError(
                    f"cell {sheet_name}!{get_column_letter(c)}{r} holds a formula whose result was never saved in the file; "
                    "open the workbook in a spreadsheet program, let it calculate, save it, then run sheetnet again"
                )
            row.append(value)
        grid.append(row)
    return grid


# --- models -------------------------------------------------------------------------------

def model_names(book: Book) -> list[str]:
    """Defined names in the workbook that point at a sheetnet model block."""
    found = []
    for name, defined in book.formulas.defined_names.items():
        try:
            destinations = list(defined.destinations)
        except (AttributeError, ValueError, TypeError):
            continue
        if len(destinations) == 1:
            sheet, cells = destinations[0]
            if sheet in book.values.sheetnames:
                first = book.values[sheet][cells.replace("$", "").split(":")[0]].value
                if first == MAGIC:
                    found.append(name)
    return sorted(found)


def defined_name(book: Book, name: str) -> str | None:
    """The workbook's spelling of a defined name, found ignoring case as spreadsheets do."""
    folded = name.casefold()
    return next((n for n in book.formulas.defined_names if n.casefold() == folded), None)


def read_model(book: Book, name: str) -> list[list[Any]]:
    """The block stored under a defined name (compared ignoring case)."""
    found = defined_name(book, name)
    if found is None:
        known = model_names(book)
        raise InputError(f"the workbook has no model named '{name}'" + (f"; its models are: {', '.join(known)}" if known else "; train one first"))
    destinations = list(book.formulas.defined_names[found].destinations)
    if len(destinations) != 1:
        raise InputError(f"the defined name '{name}' does not point at one range, so it is not a sheetnet model")
    sheet, cells = destinations[0]
    return read_range(book, f"{quote_sheetname(sheet)}!{cells}")


# --- saving -------------------------------------------------------------------------------

def save_book(book: Book) -> tuple[Path, str]:
    """Save without losing anything; returns where it went and why, if not over the original."""
    for part in book.log.parts:  # interim: placements applied through openpyxl; the package writer replaces this
        apply_to_workbook(book.formulas, part)
    lost = unread_parts(book.path)
    target = book.path
    note = ""
    if lost:
        target = _free_name(book.path)
        note = (
            f"{book.path.name} holds parts that openpyxl cannot keep ({', '.join(lost)}), so it was left untouched "
            f"and the result was written to {target.name}"
        )
    return save_new(book.formulas, target), note


def save_new(workbook: Workbook, target: Path) -> Path:
    """Save atomically: a temporary file beside the target, renamed over it; the old file kept as .bak."""
    handle, temporary = tempfile.mkstemp(prefix=".sheetnet-", suffix=target.suffix, dir=target.parent)
    os.close(handle)
    try:
        workbook.save(temporary)
        with open(temporary, "rb") as written:
            os.fsync(written.fileno())
        if target.exists():
            shutil.copy2(target, target.with_name(target.name + ".bak"))
            shutil.copymode(target, temporary)  # the file keeps the permissions it had
        else:
            umask = os.umask(0)
            os.umask(umask)
            os.chmod(temporary, 0o666 & ~umask)
        os.replace(temporary, target)
    finally:
        if os.path.exists(temporary):
            os.unlink(temporary)
    return target


def _free_name(path: Path) -> Path:
    for n in range(1, 1000):
        candidate = path.with_name(f"{path.stem}-sheetnet{'' if n == 1 else n}{path.suffix}")
        if not candidate.exists():
            return candidate
    raise WorkbookError(f"no free file name beside {path.name}; tidy up the folder")
