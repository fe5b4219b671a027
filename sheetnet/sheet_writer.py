"""Applying `Placements` to an openpyxl workbook in memory.

Used where sheetnet builds a whole new file (the demo, the starter workbook)
and to generate the parts of its own sheets before they go into an existing
file. Strings are always written as text: openpyxl would otherwise store a
string starting with ``=`` as a formula.
"""

from __future__ import annotations

from typing import Any

from openpyxl.workbook.defined_name import DefinedName
from openpyxl.workbook.workbook import Workbook
from openpyxl.worksheet.formula import ArrayFormula
from openpyxl.worksheet.worksheet import Worksheet

from .placements import Placements, column_letters, same_title


def write_text_safe(sheet: Worksheet, row: int, column: int, value: Any) -> None:
    """One cell; a string lands as text whatever it starts with."""
    cell = sheet.cell(row, column)
    cell.value = value
    if isinstance(value, str):
        cell.data_type = "s"


def _sheet(workbook: Workbook, title: str) -> Worksheet:
    for sheet in workbook.worksheets:
        if same_title(sheet.title, title):
            return sheet
    raise KeyError(title)  # internal: placements name only sheets they create or that exist


def apply_to_workbook(workbook: Workbook, placements: Placements) -> None:
    """Apply in the documented order: drop names and sheets, add sheets, cells, formulas, number formats
    and column widths, names."""
    dropped = {n.casefold() for n in placements.drop_names}
    for name in [n for n in workbook.defined_names if n.casefold() in dropped]:
        del workbook.defined_names[name]
    for title in placements.drop_sheets:
        for sheet in list(workbook.worksheets):
            if same_title(sheet.title, title):
                workbook.remove(sheet)
    for plan in placements.sheets:
        sheet = workbook.create_sheet(plan.title)
        sheet.sheet_state = plan.visibility
    for block in placements.cells:
        sheet = _sheet(workbook, block.sheet)
        for i, row in enumerate(block.values):
            for j, value in enumerate(row):
                if value is not None:
                    write_text_safe(sheet, block.top + i, block.left + j, value)
    for formulas in placements.formulas:
        sheet = _sheet(workbook, formulas.sheet)
        for i, row in enumerate(formulas.formulas):
            for j, text in enumerate(row):
                where = f"{column_letters(formulas.left + j)}{formulas.top + i}"
                sheet[where] = ArrayFormula(where, text) if formulas.array else text
    for placed in placements.formats:
        sheet = _sheet(workbook, placed.sheet)
        code = placed.code("excel")
        for r in range(placed.top, placed.bottom + 1):
            for c in range(placed.left, placed.right + 1):
                sheet.cell(r, c).number_format = code
    for width in placements.widths:
        _sheet(workbook, width.sheet).column_dimensions[column_letters(width.column)].width = width.characters
    for name in placements.names:
        workbook.defined_names[name.name] = DefinedName(name.name, attr_text=name.reference)
