"""Workbook files through openpyxl: read ranges, keep model blocks on very hidden
sheets under defined names, write results to sheets of ours, and save safely.

Safety rules: results go only to sheets sheetnet owns (their first cell says
so) or to a range the user names that is empty; a model of the same name is
replaced only on request; a workbook holding parts openpyxl would drop on
saving (charts, images, pivot tables, ...) is never overwritten: the result
goes to a new file beside it. Saves are atomic (a temporary file renamed over
the original) and the previous file is kept as ``BOOK.bak``.
"""

from __future__ import annotations

import os
import re
import shutil
import tempfile
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import openpyxl
from openpyxl.utils.cell import get_column_letter, quote_sheetname, range_boundaries
from openpyxl.workbook.defined_name import DefinedName
from openpyxl.workbook.workbook import Workbook
from openpyxl.worksheet.worksheet import Worksheet

from .block import MAGIC, WIDTH
from .errors import InputError, SheetnetError

OWNED_MARK = "sheetnet results"  # first cell of every visible sheet sheetnet writes
MODEL_SHEET_PREFIX = "sheetnet_"
# package parts openpyxl does not carry through a save (it keeps the VBA project with keep_vba=True)
UNREAD_PARTS = (
    "xl/charts/", "xl/drawings/", "xl/media/", "xl/pivotTables/", "xl/pivotCache/", "xl/embeddings/",
    "xl/slicers/", "xl/slicerCaches/", "xl/timelines/", "xl/timelineCaches/", "xl/chartsheets/",
    "xl/activeX/", "xl/ctrlProps/", "xl/threadedComments/", "xl/model/", "xl/queryTables/", "xl/connections.xml",
)
NAME_PATTERN = re.compile(r"^[A-Za-z_][A-Za-z0-9_.]{0,200}$")
ADDRESS_LIKE = re.compile(r"^([A-Za-z]{1,3}[0-9]+|[Rr][0-9]*[Cc]?[0-9]*|[Cc][0-9]*)$")


class WorkbookError(SheetnetError):
    """A workbook file cannot be read or written as asked."""


@dataclass
class Book:
    """An open workbook: formulas kept for saving, cached values for reading."""

    path: Path
    formulas: Workbook
    values: Workbook

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


def check_model_name(name: str) -> str:
    if not NAME_PATTERN.match(name) or ADDRESS_LIKE.match(name):
        raise InputError(
            f"'{name}' cannot be a model name; use letters, digits, '_' and '.', start with a letter, "
            "and avoid names that look like cell addresses (such as AB12)"
        )
    return name


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


def read_model(book: Book, name: str) -> list[list[Any]]:
    """The block stored under a defined name."""
    if name not in book.formulas.defined_names:
        known = model_names(book)
        raise InputError(f"the workbook has no model named '{name}'" + (f"; its models are: {', '.join(known)}" if known else "; train one first"))
    destinations = list(book.formulas.defined_names[name].destinations)
    if len(destinations) != 1:
        raise InputError(f"the defined name '{name}' does not point at one range, so it is not a sheetnet model")
    sheet, cells = destinations[0]
    return read_range(book, f"{quote_sheetname(sheet)}!{cells}")


def store_model(book: Book, name: str, block: list[list[Any]], replace: bool = False) -> str:
    """Write a block onto a very hidden sheet of ours under a workbook-level defined name."""
    check_model_name(name)
    if name in book.formulas.defined_names and not replace:
        raise InputError(f"the workbook already has a name '{name}'; choose another model name, or ask to replace it (--replace)")
    if name in book.formulas.defined_names and name not in model_names(book):
        raise InputError(f"the name '{name}' in the workbook belongs to something else, not a sheetnet model; choose another model name")
    sheet_name = (MODEL_SHEET_PREFIX + name)[:31]
    for workbook in (book.formulas, book.values):
        if sheet_name in workbook.sheetnames:
            del workbook[sheet_name]
        sheet = workbook.create_sheet(sheet_name)
        sheet.sheet_state = "veryHidden"
        for row in block:
            sheet.append([None if v == "" else v for v in row])
    reference = f"{quote_sheetname(sheet_name)}!$A$1:${get_column_letter(WIDTH)}${len(block)}"
    book.formulas.defined_names[name] = DefinedName(name, attr_text=reference)
    _store_constants(book, name, sheet_name, block)
    return reference


CONSTANTS_COLUMN = WIDTH + 2  # the native formulas' constants start two columns right of the block


def _store_constants(book: Book, name: str, sheet_name: str, block: list[list[Any]]) -> None:
    """Lay out the named ranges native formulas read, beside the block; replaces the model's old ones."""
    from .block import decode_block
    from .formulas import formula_constants, name_prefix

    model, _ = decode_block(block)
    prefix = name_prefix(name)
    for old in [n for n in book.formulas.defined_names if n.startswith(prefix)]:
        del book.formulas.defined_names[old]
    row = 1
    for constant in formula_constants(model, name):
        height, width = constant.shape
        for workbook in (book.formulas, book.values):
            sheet = workbook[sheet_name]
            for i, values in enumerate(constant.values):
                for j, value in enumerate(values):
                    sheet.cell(row + i, CONSTANTS_COLUMN + j, value)
        first = f"${get_column_letter(CONSTANTS_COLUMN)}${row}"
        last = f"${get_column_letter(CONSTANTS_COLUMN + width - 1)}${row + height - 1}"
        book.formulas.defined_names[constant.name] = DefinedName(constant.name, attr_text=f"{quote_sheetname(sheet_name)}!{first}:{last}")
        row += height + 1


def write_native_formulas(book: Book, name: str, table_reference: str, to: str | None, output: str) -> tuple[str, int]:
    """One native formula per output cell for each data row of the table; returns where and how many rows."""
    from openpyxl.worksheet.formula import ArrayFormula

    from .block import decode_block
    from .cells import is_blank
    from .formulas import native_formula

    model, info = decode_block(read_model(book, name))
    if name_prefix_missing(book, name):
        _store_constants(book, name, list(book.formulas.defined_names[name].destinations)[0][0], read_model(book, name))
    grid = read_range(book, table_reference)
    sheet_name, cells = split_reference(table_reference)
    min_col, min_row = range_boundaries(cells)[:2]
    header = [str(v).strip() if v is not None else "" for v in grid[0]]
    missing = [n for n in model.input_names if n not in header]
    if missing:
        raise InputError(f"the table has no column named {', '.join(repr(m) for m in missing)}; the model needs {', '.join(model.input_names)}")
    columns = {n: get_column_letter(min_col + header.index(n)) for n in model.input_names}
    if output == "probabilities" and model.task != "regression":
        titles = [f"native P({c})" for c in model.classes]
    else:
        titles = [f"native {'class' if output == 'class' else 'predicted'} {info.target}"]
    if to:
        sheet, corner = check_empty(book, to, len(grid), len(titles))
    else:
        sheet, corner = owned_sheet(book, f"sn formulas {name}"), "A3"
    start_col, start_row = range_boundaries(corner + ":" + corner)[:2]
    for j, title in enumerate(titles):
        sheet.cell(start_row, start_col + j, title)
    quoted = quote_sheetname(sheet_name)
    written = 0
    for i, row in enumerate(grid[1:], start=1):
        if all(is_blank(v) for v in row):
            continue
        refs = {n: f"{quoted}!${col}{min_row + i}" for n, col in columns.items()}
        for j in range(len(titles)):
            target = f"{get_column_letter(start_col + j)}{start_row + i}"
            sheet[target] = ArrayFormula(target, native_formula(model, name, refs, output, j))
        written += 1
    return f"{sheet.title}!{corner}", written


def changed_constants(book: Book, name: str) -> list[str]:
    """Names of the model's native-formula constants whose cells differ from what its block implies."""
    from .block import decode_block
    from .formulas import formula_constants, name_prefix

    model, _ = decode_block(read_model(book, name))
    expected = {c.name: c for c in formula_constants(model, name)}
    stored = {n for n in book.formulas.defined_names if n.startswith(name_prefix(name))}
    changed = sorted(stored ^ set(expected)) if stored else []
    for constant_name in sorted(stored & set(expected)):
        sheet, cells = list(book.formulas.defined_names[constant_name].destinations)[0]
        values = read_range(book, f"{quote_sheetname(sheet)}!{cells}")
        if not _same_cells(values, expected[constant_name].values):
            changed.append(constant_name)
    return changed


def _same_cells(got: list[list[Any]], wanted: tuple[tuple[Any, ...], ...]) -> bool:
    def same(g: Any, w: Any) -> bool:
        if isinstance(g, (int, float)) and isinstance(w, float) and not isinstance(g, bool):
            return abs(g - w) <= 1e-15 * max(abs(w), 1e-300)  # a file keeps numbers to about 15 digits
        return bool(g == w)

    return len(got) == len(wanted) and all(len(g) == len(w) and all(map(same, g, w)) for g, w in zip(got, wanted))


def name_prefix_missing(book: Book, name: str) -> bool:
    from .formulas import name_prefix

    return not any(n.startswith(name_prefix(name)) for n in book.formulas.defined_names)


# --- our visible sheets ---------------------------------------------------------------------

def owned_sheet(book: Book, title: str) -> Worksheet:
    """A fresh visible sheet of ours: replaced if sheetnet made it, refused if the user did."""
    title = title[:31]
    if title in book.formulas.sheetnames:
        existing = book.formulas[title]
        if existing["A1"].value != OWNED_MARK:
            raise InputError(f"the workbook has a sheet '{title}' that sheetnet did not write; rename that sheet or choose another model name")
        index = book.formulas.sheetnames.index(title)
        del book.formulas[title]
        sheet = book.formulas.create_sheet(title, index)
    else:
        sheet = book.formulas.create_sheet(title)
    sheet["A1"] = OWNED_MARK
    return sheet


def write_block(sheet: Worksheet, top_left: str, rows: list[list[Any]]) -> None:
    column, row = range_boundaries(top_left + ":" + top_left)[:2]
    for i, values in enumerate(rows):
        for j, value in enumerate(values):
            sheet.cell(row + i, column + j, None if value == "" else value)


def check_empty(book: Book, reference: str, height: int, width: int) -> tuple[Worksheet, str]:
    """The sheet and top-left cell of a user-named target range, refused unless it is empty."""
    sheet_name, cells = split_reference(reference)
    sheet = _sheet(book.formulas, sheet_name)
    min_col, min_row = range_boundaries(cells)[:2]
    for r in range(min_row, min_row + height):
        for c in range(min_col, min_col + width):
            if sheet.cell(r, c).value is not None:
                raise InputError(
                    f"cell {sheet_name}!{get_column_letter(c)}{r} is not empty; sheetnet writes only into empty cells: "
                    "clear the range or name another one"
                )
    return sheet, f"{get_column_letter(min_col)}{min_row}"


# --- saving -------------------------------------------------------------------------------

def save_book(book: Book) -> tuple[Path, str]:
    """Save without losing anything; returns where it went and why, if not over the original."""
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
