"""The file door's writes: models, result sheets and native formulas placed into an open `Book`.

Every rule (sheet names, defined names, where the block and the constants go)
comes from `sheetnet.service`; this module checks the request against what the
file holds now and adds the service's placements to ``book.log``. Nothing is
written until `sheetnet.workbook.save_book`.
"""

from __future__ import annotations

from typing import Any

from openpyxl.utils.cell import get_column_letter, quote_sheetname, range_boundaries

from . import service
from .block import MAGIC, decode_block
from .errors import InputError
from .formulas import formula_constants
from .workbook import Book, _sheet, defined_name, model_names, read_model, read_range, split_reference


def check_storable(book: Book, name: str, replace: bool = False) -> None:
    """Refuse, before any training, a model name the workbook cannot take."""
    service.check_model_name(name)
    existing = defined_name(book, name)
    if existing is not None and existing.casefold() not in {m.casefold() for m in model_names(book)}:
        raise InputError(f"the name '{existing}' in the workbook belongs to something else, not a sheetnet model; choose another model name")
    if existing is not None and not replace:
        raise InputError(f"the workbook already has a model '{existing}'; choose another model name, or ask to replace it (--replace)")
    sheet = service.model_sheet_name(name)
    current = next((s for s in book.formulas.worksheets if service.same_title(s.title, sheet)), None)
    if current is not None and current["A1"].value != MAGIC:
        raise InputError(service.not_ours_message(current.title))
    card = service.card_sheet_name(name)
    current = next((s for s in book.formulas.worksheets if service.same_title(s.title, card)), None)
    service.check_owned_sheet(card, None if current is None else current["A1"].value, exists=current is not None)
    for other in model_names(book):
        destinations = list(book.formulas.defined_names[other].destinations)
        if not service.same_title(other, name) and destinations and service.same_title(destinations[0][0], sheet):
            raise InputError(f"the model '{other}' already lives on the sheet '{sheet}'; choose a model name that differs in its first characters")


def store_model(book: Book, name: str, block: list[list[Any]], replace: bool = False) -> str:
    """Place a block on its hidden sheet under a workbook-level defined name; returns the reference."""
    check_storable(book, name, replace)
    placements = service.model_placements(name, block, list(book.formulas.defined_names))
    book.log.add(placements)
    return placements.names[0].reference


def results_sheet(book: Book, title: str, blocks: list[tuple[int, int, list[list[Any]]]]) -> str:
    """Place a visible sheet of ours (refused if the user has a sheet of that name); returns its title."""
    current = next((s for s in book.formulas.worksheets if service.same_title(s.title, title)), None)
    service.check_owned_sheet(title, None if current is None else current["A1"].value, exists=current is not None)
    book.log.add(service.results_placements(title, blocks))
    return title


def check_empty(book: Book, reference: str, height: int, width: int) -> tuple[str, int, int]:
    """The sheet, top row and left column of a user-named target range, refused unless it is empty."""
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
    return sheet.title, min_row, min_col


def write_native_formulas(book: Book, name: str, table_reference: str, to: str | None, output: str) -> tuple[str, int]:
    """One native formula per output cell for each data row of the table; returns where and how many rows.
    The model's constants are placed again too, so the formulas always find them."""
    from .cells import is_blank

    block = read_model(book, name)
    grid = read_range(book, table_reference)
    sheet_name, cells = split_reference(table_reference)
    min_col, min_row = range_boundaries(cells)[:2]
    data_rows = [i for i, row in enumerate(grid[1:], start=1) if not all(is_blank(v) for v in row)]
    stored_name = defined_name(book, name) or name
    width = 1
    model, _ = decode_block(block)
    if output == "probabilities" and model.task != "regression":
        width = len(model.classes)
    elif output == "interval":
        width = 2  # the low and the high end
    if to:
        target_sheet, top, left = check_empty(book, to, len(grid), width)
    else:
        target_sheet = results_sheet(book, service.results_sheet_name(stored_name, "formulas"), [])
        top, left = 3, 1
    if service.names_of_model(stored_name, book.formulas.defined_names) == [stored_name]:  # constants missing: place them
        book.log.add(service.model_placements(stored_name, block, list(book.formulas.defined_names)))
    placements, rows = service.native_formula_placements(
        stored_name, block, grid[0], data_rows, (_sheet(book.formulas, sheet_name).title, min_col, min_row), (target_sheet, top, left), output
    )
    book.log.add(placements)
    return f"{target_sheet}!{get_column_letter(left)}{top}", rows


def changed_constants(book: Book, name: str) -> list[str]:
    """Names of the model's native-formula constants whose cells differ from what its block implies."""
    stored_name = defined_name(book, name) or name
    model, info = decode_block(read_model(book, name))
    expected = {c.name.casefold(): c for c in formula_constants(model, stored_name, info.conformal)}
    stored = {n.casefold(): n for n in service.names_of_model(stored_name, book.formulas.defined_names) if not service.same_title(n, stored_name)}
    changed = sorted(stored[k] for k in set(stored) - set(expected)) + sorted(expected[k].name for k in set(expected) - set(stored)) if stored else []
    for key in sorted(set(stored) & set(expected)):
        sheet, cells = list(book.formulas.defined_names[stored[key]].destinations)[0]
        values = read_range(book, f"{quote_sheetname(sheet)}!{cells}")
        if not _same_cells(values, expected[key].values):
            changed.append(stored[key])
    return changed


def stored_constants(book: Book, name: str) -> dict[str, list[list[Any]]]:
    """The model's native-formula constants as the file holds them: defined name to rows of cells."""
    stored_name = defined_name(book, name) or name
    found = {}
    for constant in service.names_of_model(stored_name, book.formulas.defined_names):
        if service.same_title(constant, stored_name):
            continue
        sheet, cells = list(book.formulas.defined_names[constant].destinations)[0]
        found[constant] = read_range(book, f"{quote_sheetname(sheet)}!{cells}")
    return found


def native_formula_problems(book: Book, name: str, rows: Any = None, row_numbers: list[int] | None = None, max_rows: int = 1000) -> list[str]:
    """Evaluate the native formulas sheetnet writes for a model over its constants as stored, and
    compare with the model: over ``rows`` (a frame of the model's inputs), or rows built from the model."""
    from .formula_eval import check_native_formulas, sample_rows

    stored_name = defined_name(book, name) or name
    model, _ = decode_block(read_model(book, name))
    constants = stored_constants(book, name) or {c.name: [list(r) for r in c.values] for c in formula_constants(model, stored_name)}
    sample = rows is None
    frame = sample_rows(model) if sample else rows
    outputs = ["value"] if model.task == "regression" else ["class", "probabilities"]
    problems: list[str] = []
    for output in outputs:
        found = check_native_formulas(
            model, stored_name, constants, frame, output, row_numbers=None if sample else row_numbers,
            row_word="sample row" if sample else "row", max_rows=max_rows,
        )
        problems += [f"{output}: {p}" for p in found]
    return problems


def table_rows_for_check(book: Book, name: str, table_reference: str) -> tuple[Any, list[int]]:
    """The model's input columns over a table's data rows, cells as the sheet holds them, with their sheet rows."""
    import pandas as pd

    from .cells import is_blank

    model, _ = decode_block(read_model(book, name))
    grid = read_range(book, table_reference)
    top = range_boundaries(split_reference(table_reference)[1])[1]
    header = [str(v).strip() if v is not None else "" for v in grid[0]]
    kept = [(i, row) for i, row in enumerate(grid[1:], start=1) if not all(is_blank(v) for v in row)]
    frame = pd.DataFrame({n: [row[header.index(n)] for _, row in kept] for n in model.input_names if n in header}, dtype=object)
    return frame, [top + i for i, _ in kept]


def _same_cells(got: list[list[Any]], wanted: tuple[tuple[Any, ...], ...]) -> bool:
    def same(g: Any, w: Any) -> bool:
        if isinstance(g, (int, float)) and isinstance(w, float) and not isinstance(g, bool):
            return abs(g - w) <= 1e-14 * max(abs(w), 1e-300)  # a file may keep 15 significant digits (LibreOffice does): up to 5e-15 off
        return bool(g == w)

    return len(got) == len(wanted) and all(len(g) == len(w) and all(map(same, g, w)) for g, w in zip(got, wanted))
