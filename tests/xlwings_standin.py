"""A small in-memory stand-in for the parts of xlwings' Book/Sheet/Range API that sheetnet's macros use.

Number formats (``Range.number_format``, a format code per cell) and column widths (``Range.column_width``,
in characters) are kept as set, never applied to what a cell shows.

Limits (what it does not do): it evaluates no formula (array formulas are stored as text), knows no
Excel types beyond numbers, texts, booleans, blanks and error values (`CellError`), does not spill, has no recalculation, events,
COM or AppleScript, and parses only A1-style addresses ("B2", "A1:G301", with or without $).
It exists so the macro layer can be driven on Linux, where no Excel runs.

Error cells read as xlwings documents them (``Range.options`` docstring, xlwings 0.28 and later):
``None`` by default, their code such as ``#N/A`` with ``options(err_to_str=True)``.
"""

from __future__ import annotations

import re
from typing import Any

from openpyxl.utils.cell import column_index_from_string, get_column_letter


def _parse(address: str) -> tuple[int, int, int, int]:
    corners = []
    for cell in address.replace("$", "").split(":"):
        found = re.fullmatch(r"([A-Z]+)(\d+)", cell)
        if not found:
            raise ValueError(f"stand-in cannot parse {address!r}")
        corners.append((int(found.group(2)), column_index_from_string(found.group(1))))
    (r1, c1), (r2, c2) = corners[0], corners[-1]
    return r1, c1, r2 - r1 + 1, c2 - c1 + 1


def _as_typed(value: Any) -> Any:
    """A value assigned to Range.value is read like typed input (from memory of Excel's behaviour, not
    checked here): a leading apostrophe keeps the rest as text, '=' starts a formula (shown here as
    #NAME?, so a text written as a formula is visible), and a string that reads as a number becomes one."""
    if value == "" or value is None:
        return None
    if not isinstance(value, str):
        return value
    if value.startswith("'"):
        return value[1:]
    if value.startswith("="):
        return "#NAME?"
    try:
        return float(value)
    except ValueError:
        return value


class CellError:
    """An error value held by a cell (what a formula such as =NA() leaves), like #N/A."""

    def __init__(self, code: str) -> None:
        self.code = code


def _read(value: Any, err_to_str: bool) -> Any:
    if isinstance(value, CellError):
        return value.code if err_to_str else None
    return value


class Rows:
    def __init__(self, count: int) -> None:
        self.count = count


class Range:
    def __init__(
        self, sheet: "Sheet", row: int, column: int, height: int = 1, width: int = 1, ndim: int | None = None, err_to_str: bool = False
    ) -> None:
        self.sheet, self.row, self.column, self.height, self.width, self.ndim = sheet, row, column, height, width, ndim
        self.err_to_str = err_to_str

    def options(self, ndim: int | None = None, err_to_str: bool = False, **_: Any) -> "Range":
        return Range(self.sheet, self.row, self.column, self.height, self.width, ndim, err_to_str)

    @property
    def address(self) -> str:
        first = f"${get_column_letter(self.column)}${self.row}"
        last = f"${get_column_letter(self.column + self.width - 1)}${self.row + self.height - 1}"
        return first if (self.height, self.width) == (1, 1) else f"{first}:{last}"

    @property
    def rows(self) -> Rows:
        return Rows(self.height)

    @property
    def value(self) -> Any:
        cells = self.sheet.cells
        grid = [[_read(cells.get((self.row + i, self.column + j)), self.err_to_str) for j in range(self.width)] for i in range(self.height)]
        if self.ndim == 2:
            return grid
        if self.height == 1 and self.width == 1:
            return grid[0][0]
        return grid[0] if self.height == 1 else grid

    @value.setter
    def value(self, data: Any) -> None:
        rows = data if isinstance(data, list) and data and isinstance(data[0], list) else [[data]]
        for i, row in enumerate(rows):
            for j, v in enumerate(row):
                self.sheet.cells[(self.row + i, self.column + j)] = _as_typed(v)

    def __getitem__(self, key: tuple[int, int]) -> "Range":
        i, j = key
        return Range(self.sheet, self.row + i, self.column + j)

    def offset(self, rows: int = 0, columns: int = 0) -> "Range":
        return Range(self.sheet, self.row + rows, self.column + columns, self.height, self.width)

    @property
    def number_format(self) -> str:
        """Excel's format code of the top-left cell ('General' when none was set), as xlwings reads it."""
        return self.sheet.number_formats.get((self.row, self.column), "General")

    @number_format.setter
    def number_format(self, code: str) -> None:
        for i in range(self.height):
            for j in range(self.width):
                self.sheet.number_formats[(self.row + i, self.column + j)] = code

    @property
    def column_width(self) -> float:
        """Width of the range's first column in characters (xlwings: Range.column_width); Excel's default 8.43."""
        return self.sheet.column_widths.get(self.column, 8.43)

    @column_width.setter
    def column_width(self, characters: float) -> None:
        for j in range(self.width):
            self.sheet.column_widths[self.column + j] = characters

    @property
    def formula_array(self) -> str | None:
        return self.sheet.array_formulas.get((self.row, self.column))

    @formula_array.setter
    def formula_array(self, text: str) -> None:
        self.sheet.array_formulas[(self.row, self.column)] = text


class SheetApi:
    Visible = -1  # xlSheetVisible


class Sheet:
    def __init__(self, book: "Book", name: str) -> None:
        self.book, self.name = book, name
        self.cells: dict[tuple[int, int], Any] = {}
        self.array_formulas: dict[tuple[int, int], str] = {}
        self.number_formats: dict[tuple[int, int], str] = {}
        self.column_widths: dict[int, float] = {}
        self.api = SheetApi()
        self.visible = True

    def range(self, address: str) -> Range:
        return Range(self, *_parse(address))

    def delete(self) -> None:
        self.book.sheets.remove(self)


class Sheets:
    def __init__(self, book: "Book") -> None:
        self.book = book
        self.items: list[Sheet] = []

    def add(self, name: str, after: Sheet | None = None, **_: Any) -> Sheet:
        if name in [s.name for s in self.items]:
            raise ValueError(f"a sheet named {name} exists")
        sheet = Sheet(self.book, name)
        self.items.insert(self.items.index(after) + 1 if after else 0, sheet)
        return sheet

    def remove(self, sheet: Sheet) -> None:
        self.items.remove(sheet)

    def __getitem__(self, key: str | int) -> Sheet:
        if isinstance(key, int):
            return self.items[key]
        return next(s for s in self.items if s.name == key)

    def __len__(self) -> int:
        return len(self.items)

    def __iter__(self):
        return iter(list(self.items))

    @property
    def active(self) -> Sheet:
        return self.items[0]


class Name:
    def __init__(self, book: "Book", name: str, refers_to: str) -> None:
        self.book, self.name, self.refers_to = book, name, refers_to

    @property
    def refers_to_range(self) -> Range:
        sheet, cells = self.refers_to.lstrip("=").rsplit("!", 1)
        return self.book.sheets[sheet.strip("'")].range(cells)

    def delete(self) -> None:
        self.book.names.items.pop(self.name)


class Names:
    def __init__(self, book: "Book") -> None:
        self.book = book
        self.items: dict[str, Name] = {}

    def add(self, name: str, refers_to: str) -> Name:
        self.items[name] = Name(self.book, name, refers_to)
        return self.items[name]

    def __getitem__(self, name: str) -> Name:
        return self.items[name]

    def __contains__(self, name: str) -> bool:
        return name in self.items

    def __iter__(self):
        return iter(list(self.items.values()))


class App:
    status_bar: str | None = None


class Book:
    def __init__(self) -> None:
        self.app = App()
        self.sheets = Sheets(self)
        self.names = Names(self)
        self.selection: Range | None = None

    def table(self, sheet_name: str, rows: list[list[Any]]) -> Range:
        """A sheet holding ``rows`` from A1; returns their range (select it by assigning to .selection)."""
        sheet = self.sheets.add(sheet_name, after=self.sheets[len(self.sheets) - 1] if len(self.sheets) else None)
        sheet.range("A1").value = rows
        return Range(sheet, 1, 1, len(rows), len(rows[0]))
