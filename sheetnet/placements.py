"""Placements: what sheetnet writes into a workbook, as plain data any door can apply.

The service (`sheetnet.service`) decides every sheet, cell and defined name
sheetnet owns; a door (the file adapter, xlwings, the task pane, the Calc
extension) only applies a `Placements` value in order:

1. drop the defined names in ``drop_names`` and the sheets in ``drop_sheets``
   (both compared case-insensitively, as spreadsheets compare them);
2. create each sheet in ``sheets`` (after the user's sheets, with its visibility);
3. write each `CellBlock` (a string is always text, never a formula, even when
   it starts with ``=``), then each `FormulaBlock` (the only way a formula is written);
4. define each name in ``names`` at workbook level.

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

    def __add__(self, other: "Placements") -> "Placements":
        return Placements(
            self.drop_names + other.drop_names,
            self.drop_sheets + other.drop_sheets,
            self.sheets + other.sheets,
            self.cells + other.cells,
            self.formulas + other.formulas,
            self.names + other.names,
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
    )


def cell_block(sheet: str, top: int, left: int, rows: Iterable[Iterable[Any]]) -> CellBlock:
    """A `CellBlock` from rows of cell values; ``''`` becomes a blank."""
    return CellBlock(sheet, top, left, tuple(tuple(None if v == "" else v for v in row) for row in rows))


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
