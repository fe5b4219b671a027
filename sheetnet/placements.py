"""Placements: what sheetnet writes into a workbook, as plain data any door can apply.

The service (`sheetnet.service`) decides every sheet, cell and defined name
sheetnet owns; a door (the file adapter, xlwings, the task pane, the Calc
extension) only applies a `Placements` value in order:

1. drop the defined names in ``drop_names`` and the sheets in ``drop_sheets``
   (both compared case-insensitively, as spreadsheets compare them);
2. create each sheet in ``sheets`` (after the user's sheets, with its visibility);
3. write each `CellBlock` (a string is always text, never a formula, even when
   it starts with ``=``), then each `FormulaBlock` (the only way a formula is written),
   then each `FormatPlacement` (a number format of ours, `NUMBER_FORMATS`, on a
   rectangle) and each `ColumnWidth`; formats and widths go only on sheets listed in
   ``sheets`` (sheetnet never restyles a user's sheet);
4. define each name in ``names`` at workbook level.

Before step 1 a door reads A1 of every sheet in ``drop_sheets`` that exists and
refuses the whole request, with `not_ours_message`, unless A1 holds one of
`OWNED_MARKS` (what sheetnet writes in A1 of each sheet of its own): nothing of a
user's is replaced. The file door does so in `sheetnet.service.check_owned_sheet`.

`Placements.to_json` / `placements_from_json` carry the same value to the
task pane and the Calc extension, which run no sheetnet code.
Rows and columns are counted from 1, as in a spreadsheet.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable, Literal

Visibility = Literal["visible", "hidden", "veryHidden"]
Value = float | int | bool | str | None  # None: leave the cell blank
VISIBILITIES = ("visible", "hidden", "veryHidden")
# what A1 of a sheet sheetnet writes holds: a model sheet's block starts with the first, a visible sheet with the second
OWNED_MARKS = ("sheetnet model block", "sheetnet results")
NOT_OURS = "the workbook has a sheet '{title}' that sheetnet did not write; rename that sheet or choose another model name"

# Number formats under names of our own, and each host's code for them. Excel's codes (openpyxl, xlwings'
# Range.number_format, Office.js' Range.numberFormat) are written in the en-US syntax whatever the user's locale;
# Calc's are looked up in its en-US locale (NumberFormats.queryKey), where dates are spelled in capitals.
NUMBER_FORMATS: dict[str, dict[str, str]] = {
    "percent0": {"excel": "0%", "calc": "0%"},
    "percent1": {"excel": "0.0%", "calc": "0.0%"},
    "decimal1": {"excel": "0.0", "calc": "0.0"},
    "decimal2": {"excel": "0.00", "calc": "0.00"},
    "decimal3": {"excel": "0.000", "calc": "0.000"},
    "decimal4": {"excel": "0.0000", "calc": "0.0000"},
    "integer": {"excel": "0", "calc": "0"},
    "date": {"excel": "yyyy-mm-dd", "calc": "YYYY-MM-DD"},
}
HOSTS = ("excel", "calc")


def not_ours_message(title: str) -> str:
    """The one refusal every door gives for a sheet it would replace that sheetnet did not write."""
    return NOT_OURS.format(title=title)


def column_letters(number: int) -> str:
    """1 -> A, 27 -> AA."""
    letters = ""
    while number:
        number, rest = divmod(number - 1, 26)
        letters = chr(65 + rest) + letters
    return letters


def same_title(a: str, b: str) -> bool:
    """Sheet titles and defined names are compared ignoring case, as spreadsheets compare them."""
    return a.casefold() == b.casefold()


def quote_sheet(title: str) -> str:
    """A sheet name as a formula or a defined name writes it: always quoted, quotes doubled."""
    return "'" + title.replace("'", "''") + "'"


@dataclass(frozen=True)
class SheetPlan:
    """A sheet sheetnet owns, created afresh (any sheet of that name was dropped first)."""

    title: str
    visibility: Visibility = "visible"


@dataclass(frozen=True)
class CellBlock:
    """Values written from the cell (top, left) right and down; strings are text, never formulas."""

    sheet: str
    top: int
    left: int
    values: tuple[tuple[Value, ...], ...]

    @property
    def height(self) -> int:
        return len(self.values)

    @property
    def width(self) -> int:
        return max((len(r) for r in self.values), default=0)


@dataclass(frozen=True)
class FormulaBlock:
    """Formulas written from (top, left); each one a single-cell array formula when ``array``."""

    sheet: str
    top: int
    left: int
    formulas: tuple[tuple[str, ...], ...]  # each starts with '='
    array: bool = True


@dataclass(frozen=True)
class FormatPlacement:
    """One of our number formats (a key of `NUMBER_FORMATS`) on the rectangle (top, left) to (bottom, right)."""

    sheet: str
    top: int
    left: int
    bottom: int
    right: int
    format: str

    def __post_init__(self) -> None:
        assert self.format in NUMBER_FORMATS, self.format  # internal: the service names only formats of ours

    def code(self, host: str) -> str:
        """The host's format code: ``percent1`` is ``0.0%`` in Excel and in Calc."""
        return NUMBER_FORMATS[self.format][host]


@dataclass(frozen=True)
class ColumnWidth:
    """A column's width in characters of the default font (Excel's unit; each door converts)."""

    sheet: str
    column: int
    characters: float

    @property
    def pixels(self) -> int:
        """On screen at 96 dpi: ECMA-376 Part 1, 18.3.1.13 (col), characters of the default font's
        widest digit (7 pixels in Excel's default font) plus 5 pixels of margin."""
        return round(7 * self.characters + 5)

    @property
    def points(self) -> float:
        """Office.js' unit (Range.format.columnWidth): 3/4 of a pixel at 96 dpi."""
        return self.pixels * 0.75

    @property
    def hundredths_mm(self) -> int:
        """Calc's unit (a column's Width): 1/100 mm."""
        return round(self.pixels * 2540 / 96)


@dataclass(frozen=True)
class NamePlacement:
    """A workbook-level defined name for the rectangle (top, left) to (bottom, right)."""

    name: str
    sheet: str
    top: int
    left: int
    bottom: int
    right: int

    @property
    def reference(self) -> str:
        """Like ``'sheetnet_grades'!$A$1:$I$40``."""
        first = f"${column_letters(self.left)}${self.top}"
        last = f"${column_letters(self.right)}${self.bottom}"
        return f"{quote_sheet(self.sheet)}!{first}:{last}"


@dataclass(frozen=True)
class Placements:
    """Everything one request writes; see the module docstring for the order of application."""

    drop_names: tuple[str, ...] = ()
    drop_sheets: tuple[str, ...] = ()
    sheets: tuple[SheetPlan, ...] = ()
    cells: tuple[CellBlock, ...] = ()
    formulas: tuple[FormulaBlock, ...] = ()
    names: tuple[NamePlacement, ...] = ()
    formats: tuple[FormatPlacement, ...] = ()
    widths: tuple[ColumnWidth, ...] = ()

    def __add__(self, other: "Placements") -> "Placements":
        return Placements(
            self.drop_names + other.drop_names,
            self.drop_sheets + other.drop_sheets,
            self.sheets + other.sheets,
            self.cells + other.cells,
            self.formulas + other.formulas,
            self.names + other.names,
            self.formats + other.formats,
            self.widths + other.widths,
        )

    @property
    def owned_sheets(self) -> tuple[str, ...]:
        return tuple(s.title for s in self.sheets)

    def to_json(self) -> dict[str, Any]:
        """Plain JSON types only; blanks as null."""
        return {
            "drop_names": list(self.drop_names),
            "drop_sheets": list(self.drop_sheets),
            "sheets": [{"title": s.title, "visibility": s.visibility} for s in self.sheets],
            "cells": [{"sheet": c.sheet, "top": c.top, "left": c.left, "values": [list(r) for r in c.values]} for c in self.cells],
            "formulas": [
                {"sheet": f.sheet, "top": f.top, "left": f.left, "formulas": [list(r) for r in f.formulas], "array": f.array} for f in self.formulas
            ],
            "names": [
                {"name": n.name, "sheet": n.sheet, "top": n.top, "left": n.left, "bottom": n.bottom, "right": n.right, "reference": n.reference}
                for n in self.names
            ],
            "formats": [
                {"sheet": f.sheet, "top": f.top, "left": f.left, "bottom": f.bottom, "right": f.right, "format": f.format,
                 **{host: f.code(host) for host in HOSTS}}
                for f in self.formats
            ],
            "widths": [
                {"sheet": w.sheet, "column": w.column, "characters": w.characters, "points": w.points, "calc": w.hundredths_mm} for w in self.widths
            ],
            "owned_marks": list(OWNED_MARKS),
            "not_ours": NOT_OURS,  # '{title}' stands for the sheet's title
        }


def placements_from_json(data: dict[str, Any]) -> Placements:
    """The inverse of `Placements.to_json` (for tests and doors written in Python)."""
    return Placements(
        tuple(data.get("drop_names", ())),
        tuple(data.get("drop_sheets", ())),
        tuple(SheetPlan(s["title"], s["visibility"]) for s in data.get("sheets", ())),
        tuple(CellBlock(c["sheet"], c["top"], c["left"], tuple(tuple(r) for r in c["values"])) for c in data.get("cells", ())),
        tuple(FormulaBlock(f["sheet"], f["top"], f["left"], tuple(tuple(r) for r in f["formulas"]), f["array"]) for f in data.get("formulas", ())),
        tuple(NamePlacement(n["name"], n["sheet"], n["top"], n["left"], n["bottom"], n["right"]) for n in data.get("names", ())),
        tuple(FormatPlacement(f["sheet"], f["top"], f["left"], f["bottom"], f["right"], f["format"]) for f in data.get("formats", ())),
        tuple(ColumnWidth(w["sheet"], w["column"], w["characters"]) for w in data.get("widths", ())),
    )


@dataclass(frozen=True)
class Shown:
    """A number to be shown with one of our formats, inside rows handed to `formatted_block`:
    ``Shown(0.853, "percent1")`` is the number 0.853 in a cell that shows 85.3%."""

    value: float | int
    format: str


def cell_block(sheet: str, top: int, left: int, rows: Iterable[Iterable[Any]]) -> CellBlock:
    """A `CellBlock` from rows of cell values; ``''`` becomes a blank, a `Shown` its number."""
    return CellBlock(sheet, top, left, tuple(tuple(_plain(v) for v in row) for row in rows))


def _plain(value: Any) -> Value:
    if isinstance(value, Shown):
        return value.value
    return None if value == "" else value


def block_formats(sheet: str, top: int, left: int, rows: Iterable[Iterable[Any]]) -> tuple[FormatPlacement, ...]:
    """The formats of the `Shown` cells in ``rows`` placed from (top, left), a column's run of
    neighbouring cells with the same format as one rectangle (so a door sets it once)."""
    runs: dict[int, list[list[Any]]] = {}  # column -> [first row, last row, format] runs
    for i, row in enumerate(rows):
        for j, value in enumerate(row):
            if not isinstance(value, Shown):
                continue
            column_runs = runs.setdefault(left + j, [])
            if column_runs and column_runs[-1][1] == top + i - 1 and column_runs[-1][2] == value.format:
                column_runs[-1][1] = top + i
            else:
                column_runs.append([top + i, top + i, value.format])
    return tuple(FormatPlacement(sheet, first, column, last, column, name) for column, found in sorted(runs.items()) for first, last, name in found)


@dataclass
class PlacementLog:
    """Collects placements for one save (the file adapter keeps one per open workbook)."""

    parts: list[Placements] = field(default_factory=list)

    def add(self, placements: Placements) -> None:
        self.parts.append(placements)

    def merged(self) -> Placements:
        total = Placements()
        for part in self.parts:
            total = total + part
        return total
