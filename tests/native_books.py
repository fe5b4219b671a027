"""Workbooks holding a model's native-formula constants and formulas, built with openpyxl alone (texts always
written as text), so LibreOffice proofs and benchmarks do not depend on how the workbook adapter lays a model out."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import openpyxl
import pandas as pd
from openpyxl.utils import get_column_letter
from openpyxl.workbook.defined_name import DefinedName
from openpyxl.worksheet.formula import ArrayFormula

from sheetnet.formulas import formula_constants, native_formula
from sheetnet.model import Model

MODEL_SHEET = "sheetnet_net"
FIRST_CONSTANT_COLUMN = 11


def plain(value: Any) -> Any:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return None
    return value.item() if isinstance(value, np.generic) else value


def _put(sheet, row: int, column: int, value: Any) -> None:
    value = plain(value)
    if value is None:
        return
    cell = sheet.cell(row, column)
    cell.value = value
    if isinstance(value, str):
        cell.data_type = "s"  # text from data is text, never a formula


@dataclass
class Book:
    path: Path
    frame: pd.DataFrame  # the input cells as written, one row per data row
    model: Model  # the model whose formulas the cells hold
    columns: dict[tuple[str, int], int]  # (output, class column) -> sheet column
    formulas: dict[tuple[int, int], str]  # (sheet row, sheet column) -> formula text


def write_book(path: Path, frame: pd.DataFrame, model: Model, outputs: list[str], constants_from: Model | None = None) -> Book:
    """Data on sheet Data from A1 (header row), the constants on a very hidden sheet under defined names,
    native formulas to the right of the data, one per output cell and row."""
    book = openpyxl.Workbook()
    data = book.active
    data.title = "Data"
    names = list(frame.columns)
    for j, name in enumerate(names, start=1):
        _put(data, 1, j, name)
    for i, row in enumerate(frame.itertuples(index=False), start=2):
        for j, value in enumerate(row, start=1):
            _put(data, i, j, value)
    hidden = book.create_sheet(MODEL_SHEET)
    hidden.sheet_state = "veryHidden"
    top = 1
    for constant in formula_constants(constants_from or model, "net"):
        height, width = constant.shape
        for i, values in enumerate(constant.values):
            for j, value in enumerate(values):
                _put(hidden, top + i, FIRST_CONSTANT_COLUMN + j, value)
        first, last = get_column_letter(FIRST_CONSTANT_COLUMN), get_column_letter(FIRST_CONSTANT_COLUMN + width - 1)
        book.defined_names[constant.name] = DefinedName(constant.name, attr_text=f"{MODEL_SHEET}!${first}${top}:${last}${top + height - 1}")
        top += height + 1
    columns: dict[tuple[str, int], int] = {}
    at = len(names) + 2
    for output in outputs:
        for j in range(len(model.classes) if output == "probabilities" else 1):
            columns[(output, j)] = at
            _put(data, 1, at, f"native {output} {j}")
            at += 1
        at += 1
    formulas: dict[tuple[int, int], str] = {}
    for r in range(2, len(frame) + 2):
        refs = {n: f"Data!${get_column_letter(names.index(n) + 1)}{r}" for n in model.input_names}
        for (output, j), column in columns.items():
            text = native_formula(model, "net", refs, output, j)
            where = f"{get_column_letter(column)}{r}"
            data[where] = ArrayFormula(where, text)
            formulas[(r, column)] = text
    book.save(path)
    return Book(path, frame, model, columns, formulas)
