"""Macros for a live workbook (desktop Excel through xlwings' RunPython, Windows and macOS).

Cell functions must not write to other cells, so storing a model is a macro:
`train_selection` trains the selected table into a very hidden sheet of ours
under a workbook-level defined name; `refresh_models` retrains every stored
model from the range it was trained on (new or changed rows included);
`remove_model` deletes one; `export_formulas` writes native formulas that
predict with no Python. They use only xlwings' open-source Book, Sheet and
Range automation. From VBA, for example::

    RunPython "import sheetnet.xl_macros as m; m.train_selection('grade', 'grades', '6', 'ignore=lot')"

Every macro reports what it did (or what went wrong, and what to do) in
Excel's status bar and returns the same text.
"""

from __future__ import annotations

from typing import Any

from . import functions, service
from .block import MAGIC, decode_block
from .cells import MARKER
from .errors import InputError, SheetnetError
from .placements import Placements, column_letters, same_title
from .xl_udfs import READ_OPTIONS, from_excel

VERY_HIDDEN = 2  # Excel's xlSheetVeryHidden


def _cells(area: Any) -> list[list[Any]]:
    """A range's values as rows, error cells as their codes (``#N/A``), as the functions read them."""
    return from_excel(area.options(ndim=2, **READ_OPTIONS).value)


def _caller(book: Any) -> Any:
    if book is not None:
        return book
    import xlwings as xw

    return xw.Book.caller()


def _report(book: Any, text: str) -> str:
    try:
        book.app.status_bar = text
    except Exception:  # a status bar is a courtesy; no Excel, no bar
        pass
    return text


def _model_names(book: Any) -> list[str]:
    found = []
    for defined in book.names:
        try:
            first = defined.refers_to_range[0, 0].value if hasattr(defined.refers_to_range, "__getitem__") else None
        except Exception:
            continue
        if first == MAGIC:
            found.append(defined.name)
    return sorted(found)


def _stored_name(book: Any, name: str) -> str | None:
    return next((n for n in _model_names(book) if same_title(n, name)), None)


def _hide(sheet: Any, visibility: str) -> None:
    if visibility == "visible":
        return
    try:
        sheet.api.Visible = VERY_HIDDEN if visibility == "veryHidden" else 0  # Windows: very hidden is not even listed under Unhide
    except Exception:
        sheet.visible = False  # macOS: plain hidden is what the automation offers


def _as_text(value: Any) -> Any:
    # a string assigned to Range.value is read like typed input ('=...' a formula, '1/2' a date); a leading
    # apostrophe keeps every string exactly as text
    return "'" + value if isinstance(value, str) else value


def check_replaceable(book: Any, placements: Placements) -> None:
    """Refuse (`InputError`, the service's words) before anything changes when a sheet the placements
    drop exists and sheetnet did not write it (its A1 is not one of our marks)."""
    for title in placements.drop_sheets:
        for sheet in list(book.sheets):
            if same_title(sheet.name, title):
                service.check_owned_sheet(sheet.name, sheet.range("A1").value, exists=True)


def apply_placements(book: Any, placements: Placements) -> None:
    """Apply the service's placements through xlwings, in the documented order; refused as a whole
    (`check_replaceable`) when it would replace a sheet of the user's."""
    check_replaceable(book, placements)
    dropped = {n.casefold() for n in placements.drop_names}
    for defined in list(book.names):
        if defined.name.casefold() in dropped:
            defined.delete()
    for title in placements.drop_sheets:
        for sheet in list(book.sheets):
            if same_title(sheet.name, title):
                sheet.delete()
    created = {}
    for plan in placements.sheets:
        created[plan.title.casefold()] = (book.sheets.add(plan.title, after=book.sheets[len(book.sheets) - 1]), plan.visibility)
    sheets = {s.name.casefold(): s for s in book.sheets}
    for block in placements.cells:
        rows = [[None if v is None else _as_text(v) for v in row] for row in block.values]
        sheets[block.sheet.casefold()].range(f"{column_letters(block.left)}{block.top}").value = rows
    for formulas in placements.formulas:
        sheet = sheets[formulas.sheet.casefold()]
        for i, row in enumerate(formulas.formulas):
            for j, text in enumerate(row):
                cell = sheet.range(f"{column_letters(formulas.left + j)}{formulas.top + i}")
                if formulas.array:
                    cell.formula_array = text
                else:
                    cell.formula = text
    for style in placements.formats:  # Range.number_format takes Excel's format code
        corner = f"{column_letters(style.left)}{style.top}:{column_letters(style.right)}{style.bottom}"
        sheets[style.sheet.casefold()].range(corner).number_format = style.code("excel")
    for width in placements.widths:  # Range.column_width is in characters, as the placements give it
        sheets[width.sheet.casefold()].range(f"{column_letters(width.column)}1").column_width = width.characters
    for name in placements.names:
        book.names.add(name.name, "=" + name.reference)
    for sheet, visibility in created.values():
        _hide(sheet, visibility)


def _read(book: Any, address: str) -> list[list[Any]]:
    sheet_name, cells = address.rsplit("!", 1)
    sheet_name = sheet_name.strip()
    if sheet_name.startswith("'") and sheet_name.endswith("'"):
        sheet_name = sheet_name[1:-1].replace("''", "'")
    return _cells(book.sheets[sheet_name].range(cells))


def _summary(name: str, block: list[list[Any]]) -> str:
    summary = dict((row[0], row[1]) for row in functions.raising(functions.about)(block)[1:])
    metric = next((f"{k} {v:.4g}" for k, v in summary.items() if str(k).startswith("holdout ") and isinstance(v, float)), "no holdout")
    return f"sheetnet: model {name} trained ({summary['task']}, {summary['layers']}, stopped by {summary['stopped by']}; {metric})"


def train_selection(target: str, name: str, hidden: Any = service.DEFAULT_HIDDEN, settings: Any = "",
                    holdout: float = service.DEFAULT_HOLDOUT, mode: str = "auto", seed: int | None = None, book: Any = None) -> str:
    """Train the selected table (header row included) and store the model under ``name``.
    ``seed`` seeds the split and the training (default: the seed setting, else 0)."""
    book = _caller(book)
    try:
        service.check_model_name(name)
        check_replaceable(book, service.removal_placements(name, []))  # refused before training, not after
        selection = book.selection
        table = _cells(selection)
        address = f"'{selection.sheet.name}'!{selection.address}"
        trained = service.train_model(service.TrainRequest(table, target, hidden, settings, holdout, mode, seed, address))
        apply_placements(book, service.model_placements(name, trained.block, [n.name for n in book.names]))
        return _report(book, _summary(name, trained.block))
    except SheetnetError as error:
        return _report(book, f"{MARKER} {error}")


def refresh_models(book: Any = None, dry_run: bool = False) -> str:
    """Retrain every stored model whose source range changed since training, with the settings it was given."""
    book = _caller(book)
    outcomes = []
    for name in _model_names(book):
        block = _cells(book.names[name].refers_to_range)
        outcome = service.refresh_model(name, block, lambda address: _read(book, address), dry_run)
        if outcome.trained is not None:
            try:
                apply_placements(book, service.model_placements(name, outcome.trained.block, [n.name for n in book.names]))
            except SheetnetError as error:
                outcome = service.RefreshOutcome(name, "failed", str(error))
        outcomes.append(outcome)
    return _report(book, service.refresh_summary(outcomes))


def remove_model(name: str, book: Any = None) -> str:
    """Delete a stored model, its hidden sheet and its native-formula names."""
    book = _caller(book)
    stored = _stored_name(book, name)
    if stored is None:
        return _report(book, f"{MARKER} the workbook has no model named '{name}'")
    try:
        apply_placements(book, service.removal_placements(stored, [n.name for n in book.names]))
    except SheetnetError as error:
        return _report(book, f"{MARKER} {error}")
    return _report(book, f"sheetnet: model {stored} removed")


def export_formulas(name: str, to: str, output: str = "value", book: Any = None) -> str:
    """Native formulas for every row of the model's training range, written from the cell ``to`` down."""
    book = _caller(book)
    try:
        stored = _stored_name(book, name)
        if stored is None:
            raise InputError(f"the workbook has no model named '{name}'")
        block = _cells(book.names[stored].refers_to_range)
        _, info = decode_block(block)
        if info.source is None:
            raise InputError(f"model {stored} does not record the range it was trained on; train it with train_selection first")
        sheet_name, cells = info.source[0].rsplit("!", 1)
        sheet_name = sheet_name.strip("'")
        source = book.sheets[sheet_name].range(cells)
        grid = _cells(source)
        data_rows = [i for i, row in enumerate(grid[1:], start=1) if any(v not in (None, "") for v in row)]
        target_sheet, target_cell = to.rsplit("!", 1) if "!" in to else (book.sheets.active.name, to)
        corner = book.sheets[target_sheet.strip("'")].range(target_cell)
        placements, count = service.native_formula_placements(
            stored, block, grid[0], data_rows, (sheet_name, source.column, source.row), (corner.sheet.name, corner.row, corner.column), output
        )
        apply_placements(book, placements)
        return _report(book, f"sheetnet: {count} native formulas for model {stored} written from {to}")
    except SheetnetError as error:
        return _report(book, f"{MARKER} {error}")
