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

from . import functions
from .block import MAGIC, WIDTH, decode_block
from .cells import MARKER, read_sheet_table
from .errors import InputError, SheetnetError
from .formulas import formula_constants, name_prefix, native_formula
from .workbook import CONSTANTS_COLUMN, MODEL_SHEET_PREFIX, check_model_name
from .xl_udfs import from_excel

VERY_HIDDEN = 2  # Excel's xlSheetVeryHidden


def _caller(book: Any) -> Any:
    if book is not None:
        return book
    import xlwings as xw

    return xw.Book.caller()


def _column_letters(number: int) -> str:
    letters = ""
    while number:
        number, rest = divmod(number - 1, 26)
        letters = chr(65 + rest) + letters
    return letters


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


def _hide(sheet: Any) -> None:
    try:
        sheet.api.Visible = VERY_HIDDEN  # Windows: not even listed under Unhide
    except Exception:
        sheet.visible = False  # macOS: plain hidden is what the automation offers


def _store(book: Any, name: str, block: list[list[Any]]) -> None:
    sheet_name = (MODEL_SHEET_PREFIX + name)[:31]
    names = [s.name for s in book.sheets]
    if sheet_name in names:
        book.sheets[sheet_name].delete()
    sheet = book.sheets.add(sheet_name, after=book.sheets[len(book.sheets) - 1])
    sheet.range("A1").value = block
    book.names.add(name, f"='{sheet_name}'!$A$1:${_column_letters(WIDTH)}${len(block)}")
    model, _ = decode_block(block)
    for defined in list(book.names):
        if defined.name.startswith(name_prefix(name)):
            defined.delete()
    row = 1
    for constant in formula_constants(model, name):
        height, width = constant.shape
        first = f"${_column_letters(CONSTANTS_COLUMN)}${row}"
        last = f"${_column_letters(CONSTANTS_COLUMN + width - 1)}${row + height - 1}"
        sheet.range(f"{_column_letters(CONSTANTS_COLUMN)}{row}").value = [list(r) for r in constant.values]
        book.names.add(constant.name, f"='{sheet_name}'!{first}:{last}")
        row += height + 1
    _hide(sheet)


def _train(book: Any, address: str, table: list[list[Any]], target: str, name: str, hidden: Any, settings: Any,
           holdout: float, mode: str, seed: int) -> str:
    split = None
    targets = read_sheet_table(table).column(target)  # names a missing column
    if holdout > 0:
        if mode == "auto":
            mode = f"stratified {target}" if any(isinstance(v, str) for v in targets) else "random"
        split = functions.raising(functions.split)(table, holdout, seed, mode)
    block = functions.train_block(table, target, hidden, settings, split, source=(address, holdout, mode, seed))
    _store(book, name, block)
    summary = dict((row[0], row[1]) for row in functions.raising(functions.about)(block)[1:])
    metric = next((f"{k} {v:.4g}" for k, v in summary.items() if str(k).startswith("holdout ") and isinstance(v, float)), "no holdout")
    return f"sheetnet: model {name} trained ({summary['layers']}, stopped by {summary['stopped by']}; {metric})"


def train_selection(target: str, name: str, hidden: Any = "4", settings: Any = "", holdout: float = 0.2, mode: str = "auto",
                    seed: int = 0, book: Any = None) -> str:
    """Train the selected table (header row included) and store the model under ``name``."""
    book = _caller(book)
    try:
        check_model_name(name)
        selection = book.selection
        table = from_excel(selection.options(ndim=2).value)
        address = f"'{selection.sheet.name}'!{selection.address}"
        return _report(book, _train(book, address, table, target, name, hidden, settings, holdout, mode, seed))
    except SheetnetError as error:
        return _report(book, f"{MARKER} {error}")


def refresh_models(book: Any = None) -> str:
    """Retrain every stored model on the range it was trained from, with the same choices."""
    book = _caller(book)
    done, skipped = [], []
    for name in _model_names(book):
        try:
            model, info = decode_block(from_excel(book.names[name].refers_to_range.options(ndim=2).value))
            if info.source is None:
                skipped.append(name)
                continue
            address, holdout, mode, seed = info.source
            sheet_name, cells = address.rsplit("!", 1)
            table = from_excel(book.sheets[sheet_name.strip("'")].range(cells).options(ndim=2).value)
            categories = [spec.name for spec in model.preparation.inputs if not hasattr(spec, "mean")]
            keep = ("activation", "algorithm", "epochs", "decay", "repeats", "threshold", "patience", "validation_share")
            settings = [[k, v] for k, v in model.settings.items() if k in keep]
            settings += [["inputs", ", ".join(model.input_names)], ["seed", model.seed], ["blank_rows", info.blank_rows]]
            if categories:
                settings.append(["categories", ", ".join(categories)])
            hidden = ",".join(map(str, model.hidden)) or "0"
            _train(book, address, table, info.target, name, hidden, settings, holdout, mode, seed)
            done.append(name)
        except SheetnetError as error:
            return _report(book, f"{MARKER} model {name}: {error}")
    note = f"; not from a known range, left as they are: {', '.join(skipped)}" if skipped else ""
    return _report(book, f"sheetnet: retrained {', '.join(done) or 'no models'}{note}")


def remove_model(name: str, book: Any = None) -> str:
    """Delete a stored model, its hidden sheet and its native-formula names."""
    book = _caller(book)
    if name not in _model_names(book):
        return _report(book, f"{MARKER} the workbook has no model named '{name}'")
    for defined in list(book.names):
        if defined.name == name or defined.name.startswith(name_prefix(name)):
            defined.delete()
    sheet_name = (MODEL_SHEET_PREFIX + name)[:31]
    if sheet_name in [s.name for s in book.sheets]:
        book.sheets[sheet_name].delete()
    return _report(book, f"sheetnet: model {name} removed")


def export_formulas(name: str, to: str, output: str = "value", book: Any = None) -> str:
    """Native formulas for every row of the model's training range, written from the cell ``to`` down."""
    book = _caller(book)
    try:
        if name not in _model_names(book):
            raise InputError(f"the workbook has no model named '{name}'")
        model, info = decode_block(from_excel(book.names[name].refers_to_range.options(ndim=2).value))
        if info.source is None:
            raise InputError(f"model {name} does not record the range it was trained on; train it with train_selection first")
        sheet_name, cells = info.source[0].rsplit("!", 1)
        source = book.sheets[sheet_name.strip("'")].range(cells)
        header = [str(v) for v in source.options(ndim=2).value[0]]
        first_row, first_column = source.row, source.column
        target_sheet, target_cell = to.rsplit("!", 1) if "!" in to else (book.sheets.active.name, to)
        corner = book.sheets[target_sheet.strip("'")].range(target_cell)
        corner.value = [[f"native {output} {info.target}"]]
        count = source.rows.count if hasattr(source.rows, "count") else len(source.options(ndim=2).value)
        for i in range(1, count):
            refs = {n: f"'{sheet_name.strip(chr(39))}'!${_column_letters(first_column + header.index(n))}{first_row + i}" for n in model.input_names}
            corner.offset(i, 0).formula_array = native_formula(model, name, refs, output)
        return _report(book, f"sheetnet: {count - 1} native formulas for model {name} written from {to}")
    except SheetnetError as error:
        return _report(book, f"{MARKER} {error}")
