"""Workbook files: open them, read ranges and stored models, and save what sheetnet placed.

Reading goes through openpyxl (cached values for reading, formulas to tell a
formula without a saved result from a blank), on the very bytes that were
checked (`sheetnet.package.open_package`) and fingerprinted. Everything a
command writes is collected as `Placements` in ``Book.log`` (decided by
`sheetnet.service`, gathered by `sheetnet.workbook_models`) and applied by
`save_book`, which edits the package so that only sheetnet's own parts change
(`sheetnet.package.write_package`) and replaces the file atomically in place
(`sheetnet.file_guard.replace_file`).

A `Book` holds a lock on its file from `open_book` until `Book.close` (or the
end of a ``with open_book(...)`` block, or of `closing_books`, which the command line wraps every command in), so two sheetnet
commands never interleave their reads and writes on one workbook.
"""

from __future__ import annotations

import io
import os
import warnings
import weakref
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import openpyxl
from openpyxl.utils.cell import get_column_letter, quote_sheetname, range_boundaries
from openpyxl.workbook.workbook import Workbook
from openpyxl.worksheet.worksheet import Worksheet

from . import file_guard
from .block import MAGIC
from .errors import InputError, SheetnetError
from .package import RESAVE, Package, PackageError, open_package, write_package
from .placements import PlacementLog

# package parts openpyxl does not model (kept as they are by save_book, which never rewrites them)
UNREAD_PARTS = (
    "xl/charts/", "xl/drawings/", "xl/media/", "xl/pivotTables/", "xl/pivotCache/", "xl/embeddings/",
    "xl/slicers/", "xl/slicerCaches/", "xl/timelines/", "xl/timelineCaches/", "xl/chartsheets/",
    "xl/activeX/", "xl/ctrlProps/", "xl/threadedComments/", "xl/model/", "xl/queryTables/", "xl/connections.xml",
)


class WorkbookError(SheetnetError):
    """A workbook file cannot be read or written as asked."""


@dataclass(eq=False)  # compared and hashed by identity: a book is one open file
class Book:
    """An open workbook: formulas and cached values for reading, the checked package for saving.

    ``path`` is the name the user gave; ``real_path`` the file it leads to (through symbolic links)."""

    path: Path
    formulas: Workbook
    values: Workbook
    log: PlacementLog = field(default_factory=PlacementLog)  # what this command will write, applied by save_book
    package: Package | None = None
    real_path: Path | None = None
    seen: file_guard.Fingerprint | None = None
    lock: file_guard.WorkbookLock | None = None
    opened_sheets: tuple[Any, ...] = ()  # the sheet objects as read: save_book refuses when code replaced them outside the log

    def __post_init__(self) -> None:
        self.opened_sheets = self.opened_sheets or tuple(self.formulas._sheets)
        lock = self.lock
        self._finalizer = weakref.finalize(self, _release, lock)  # a book nobody closed lets its file go when it is freed

    @property
    def keeps_macros(self) -> bool:
        return self.path.suffix.lower() == ".xlsm"

    def close(self) -> None:
        """Let other sheetnet commands at the file."""
        self._finalizer()

    def __enter__(self) -> "Book":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _release(lock: file_guard.WorkbookLock | None) -> None:
    if lock is not None:
        lock.release()


closing_books = file_guard.command_scope  # every book opened inside lets go of its file when the block ends


def open_book(path: str | Path, wait: float | None = None) -> Book:
    """Lock, read, check and fingerprint a workbook; ``wait`` bounds the wait for another sheetnet command
    on the same file (default `file_guard.LOCK_WAIT_SECONDS`)."""
    path = Path(path)
    if not path.exists():
        raise WorkbookError(f"there is no workbook at {path}; check the file name")
    if path.suffix.lower() not in (".xlsx", ".xlsm"):
        raise WorkbookError(f"{path.name} is not an .xlsx or .xlsm workbook; save it in one of those formats first")
    real = Path(os.path.realpath(path))
    if not real.is_file():
        raise WorkbookError(f"{path} is not a file; name the workbook file itself")
    lock = file_guard.WorkbookLock.acquire(real, wait)
    try:
        with open(real, "rb") as stream:
            data = stream.read()
        seen = file_guard.fingerprint(real, data)
        package = open_package(data, path.name)
        formulas, values = _load(data, path.name)
    except BaseException:
        lock.release()
        raise
    return Book(path, formulas, values, package=package, real_path=real, seen=seen, lock=lock)


def _load(data: bytes, label: str) -> tuple[Workbook, Workbook]:
    try:
        with warnings.catch_warnings():
            # openpyxl warns that it would drop what it does not model when saving; sheetnet never saves through it
            warnings.simplefilter("ignore")
            formulas = openpyxl.load_workbook(io.BytesIO(data))
            values = openpyxl.load_workbook(io.BytesIO(data), data_only=True)
    except PackageError:
        raise
    except Exception as error:  # openpyxl raises many kinds on files it cannot read; all mean the same to the user
        detail = str(error).splitlines()[0][:200] if str(error) else type(error).__name__
        raise WorkbookError(f"{label} could not be read as a workbook ({detail}); check that it is not damaged, or {RESAVE}") from None
    return formulas, values


def unread_parts(path: str | Path) -> list[str]:
    """Kinds of parts the file holds that openpyxl does not model (`save_book` keeps them as they are)."""
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


def _bounds(cells: str, sheet: Worksheet) -> tuple[int, int, int, int]:
    """A range's corners; whole columns (A:D) stop at the last used row, whole rows (2:9) at the last used column."""
    min_col, min_row, max_col, max_row = range_boundaries(cells)
    min_col, min_row = min_col or 1, min_row or 1
    max_col = max_col if max_col is not None else sheet.max_column
    max_row = min(max_row if max_row is not None else sheet.max_row, sheet.max_row)
    return min_col, min_row, max_col, max_row


def read_range(book: Book, reference: str) -> list[list[Any]]:
    """The values of a range; a formula whose result was never saved is named, not read as blank."""
    sheet_name, cells = split_reference(reference)
    values = _sheet(book.values, sheet_name)
    formulas = _sheet(book.formulas, sheet_name)
    min_col, min_row, max_col, max_row = _bounds(cells, values)
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

def check_can_save(book: Book) -> None:
    """Refuse, before anything is written, a save that could not complete or would lose someone's work:
    a read-only file or folder, a workbook open in a spreadsheet program, a file changed since it was read.
    A command may call this right after `open_book` to refuse before training."""
    real = book.real_path or book.path
    file_guard.check_can_replace(real, book.path if book.path.is_symlink() else None)
    if book.seen is not None:
        file_guard.check_unchanged(real, book.seen)


def save_book(book: Book) -> tuple[Path, str]:
    """Apply ``book.log`` to the file in place, changing only what sheetnet owns; returns the path and a note
    (empty unless something deserves a word). The previous version is kept as a backup
    (`file_guard.backup_path`); the file keeps its permissions, symbolic links and hard links."""
    if book.package is None or book.real_path is None:
        raise WorkbookError("this workbook was not opened with open_book, so sheetnet cannot save it safely")
    now = tuple(book.formulas._sheets)
    if len(now) != len(book.opened_sheets) or any(a is not b for a, b in zip(now, book.opened_sheets)):
        raise WorkbookError(
            "this command changed the workbook's sheets directly instead of through placements, which the safe save does not carry "
            "(a sheetnet bug: please report it); nothing was written"
        )
    if not book.log.parts:
        return book.path, "nothing to write"
    check_can_save(book)
    parts = list(book.log.parts)
    written = io.BytesIO()
    try:
        write_package(book.package, parts, written)
    except PackageError as error:
        raise WorkbookError(str(error)) from None
    data = written.getvalue()
    file_guard.replace_file(book.real_path, lambda stream: stream.write(data), book.lock)
    book.package = open_package(data, book.path.name)  # a later save starts from what is on disk now
    book.seen = file_guard.fingerprint(book.real_path, data)
    book.log = PlacementLog()
    return book.path, ""


def save_new(workbook: Workbook, target: Path) -> Path:
    """Save a workbook sheetnet built whole (the demo, the starter) atomically; an older file there is kept as a backup."""
    target = Path(os.path.realpath(target)) if Path(target).exists() else Path(target)
    file_guard.replace_file(target, workbook.save)
    return target
