"""The demo workbook (``sheetnet demo``) and a trained file's ``sn NAME`` and ``sn card NAME`` sheets,
rendered by LibreOffice headless to PNG pictures (`render_sheets`), to look at.

Run by hand:  .venv/bin/python tests/render_demo.py OUT_FOLDER [--book sheetnet-demo.xlsx]

Without ``--book`` the demo workbook is built first (seed 0). Each scenario sheet gives two pictures:
the top of its table (inputs, split, predictions, native formula) and the panel beside it (metrics
with error bars, the model's summary and its charts); each card sheet one, the read-me one; then a
small invented table is trained with ``sheetnet train`` and its result and card sheets are rendered.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import openpyxl
from openpyxl.utils import get_column_letter
from render_sheets import render, render_missing

PANEL_COLUMNS = 16  # the metrics, the summary and the charts beside a scenario's table
PANEL_ROWS = 115
TABLE_ROWS = 25


def demo_regions(book: Path) -> list[str]:
    """The regions worth looking at in a demo workbook: per scenario its table's top and its panel, every card, the read-me."""
    workbook = openpyxl.load_workbook(book, read_only=False)
    regions = []
    for sheet in workbook.worksheets:
        if sheet.sheet_state != "visible":
            continue
        side = next((c for c in range(1, sheet.max_column + 1) if sheet.cell(4, c).value == "holdout metric"), None)
        if side is not None:
            regions.append(f"{sheet.title}!A1:{get_column_letter(side - 2)}{TABLE_ROWS}")
            regions.append(f"{sheet.title}!{get_column_letter(side)}1:{get_column_letter(side + PANEL_COLUMNS - 1)}{PANEL_ROWS}")
        else:
            regions.append(f"{sheet.title}!A1:{get_column_letter(min(sheet.max_column, 12))}{min(sheet.max_row, 120)}")
    return regions


def trained_book(folder: Path) -> tuple[Path, list[str]]:
    """A small invented table trained with the command line, and the regions of its results and card sheets."""
    import sheetnet_demo

    from sheetnet import cli

    lots = sheetnet_demo.coffee_lot_grades(rows=80, seed=3)
    book = openpyxl.Workbook()
    book.active.title = "Lots"
    book.active.append(list(lots.columns))
    for row in lots.astype(object).values.tolist():
        book.active.append(row)
    path = folder / "lots.xlsx"
    book.save(path)
    code = cli.main(["train", str(path), "--table", f"Lots!A1:G{len(lots) + 1}", "--target", "grade", "--name", "grades",
                     "--set", "ignore=lot", "--set", "epochs=60", "--set", "group=process", "--set", "intended_use=sorting lots for cupping"])
    if code != 0:
        raise RuntimeError("sheetnet train failed")
    saved = openpyxl.load_workbook(path)
    rows = {"sn grades": 45, "sn card grades": 120}  # the results sheet's top, the whole card
    return path, [f"{title}!A1:{get_column_letter(min(saved[title].max_column, 12))}{min(saved[title].max_row, most)}" for title, most in rows.items()]


def render_all(out: Path, book: Path | None = None) -> list[Path]:
    """Every picture this script makes, in ``out``."""
    with tempfile.TemporaryDirectory(prefix="sheetnet-demo-") as scratch:
        folder = Path(scratch)
        if book is None:
            from sheetnet import cli

            book = folder / "sheetnet-demo.xlsx"
            if cli.main(["demo", "--out", str(book)]) != 0:
                raise RuntimeError("sheetnet demo failed")
        pictures = render(book, demo_regions(book), out)
        trained, regions = trained_book(folder)
        return pictures + render(trained, regions, out)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out", type=Path)
    parser.add_argument("--book", type=Path)
    args = parser.parse_args()
    missing = render_missing()
    if missing:
        print(f"cannot render: {missing}", file=sys.stderr)
        return 1
    for picture in render_all(args.out, args.book):
        print(picture)
    return 0


if __name__ == "__main__":
    sys.exit(main())
