"""Build the starter workbook: python workbook_template/build_template.py [OUT.xlsx]

Sheets: Data (an invented table of coffee lots), Settings (a two-column
settings table), Formulas (an example of every cell function, written as
live formulas), and a very hidden model sheet holding a model trained on the
data, under the defined name starter_model, so PREDICT, SCORE, EXPLAIN and
ABOUT examples have a model to use.
"""

from __future__ import annotations

import sys
from pathlib import Path

import openpyxl
import sheetnet_demo
from openpyxl.styles import Font, PatternFill

from sheetnet import functions
from sheetnet.registry import REGISTRY
from sheetnet.service import model_placements
from sheetnet.sheet_writer import apply_to_workbook
from sheetnet.workbook import save_new

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "sheetnet-starter.xlsx"
HEADER = PatternFill("solid", fgColor="DCE6F0")
SETTINGS = [("epochs", 500), ("activation", "tanh"), ("ignore", "lot"), ("seed", 0)]


def examples(rows: int) -> dict[str, str]:
    """One live formula per cell function, over the starter's ranges."""
    data = f"Data!$A$1:$G${rows + 1}"
    split = f"Formulas!$A$3:$A${rows + 3}"
    return {
        "SHEETNET.SPLIT": f'=SHEETNET.SPLIT({data}, 0.2, 0, "stratified grade")',
        "SHEETNET.TRAIN": f'=SHEETNET.TRAIN({data}, "grade", "6", Settings!$A$2:$B${len(SETTINGS) + 1}, {split})',
        "SHEETNET.PREDICT": f'=SHEETNET.PREDICT(starter_model, {data}, "value, flag")',
        "SHEETNET.SCORE": f'=SHEETNET.SCORE(starter_model, {data}, {split}, "90%")',
        "SHEETNET.GROUPS": f'=SHEETNET.GROUPS(starter_model, {data}, "process", {split})',
        "SHEETNET.EXPLAIN": f"=SHEETNET.EXPLAIN(starter_model, {data})",
        "SHEETNET.ABOUT": f"=SHEETNET.ABOUT(starter_model, {data})",
        "SHEETNET.LAGS": f"=SHEETNET.LAGS(Data!$D$1:$D${rows + 1}, 3)",
        "SHEETNET.SEARCH": f'=SHEETNET.SEARCH({data}, "grade", "", "ignore=lot; epochs=200", 3)',
    }


def build(out: Path = DEFAULT_OUT, rows: int = 150) -> Path:
    table = sheetnet_demo.coffee_lot_grades(rows=rows, seed=21)
    cells = [list(table.columns)] + table.astype(object).values.tolist()
    workbook = openpyxl.Workbook()
    data = workbook.active
    data.title = "Data"
    for row in cells:
        data.append(row)
    for cell in data[1]:
        cell.font, cell.fill = Font(bold=True), HEADER

    settings = workbook.create_sheet("Settings")
    settings.append(["setting", "value"])
    for name, value in SETTINGS:
        settings.append([name, value])
    settings["D1"] = "Any training setting may be added here; `sheetnet settings` lists them all."

    formulas = workbook.create_sheet("Formulas")
    formulas["A1"] = "Live formulas need a sheetnet bridge (see workbook_template/README.md); without one they show a name error."
    column = 1
    for name, formula in examples(rows).items():
        label = formulas.cell(2, column, name)
        label.font, label.fill = Font(bold=True), HEADER
        formulas.cell(3, column, formula)
        column += 6  # room for each answer to spill to the right

    split = functions.raising(functions.split)(cells, 0.2, 0, "stratified grade")
    settings_range = [[name, value] for name, value in SETTINGS]
    block = functions.train_block(cells, "grade", "6", settings_range, split)
    apply_to_workbook(workbook, model_placements("starter_model", block, list(workbook.defined_names)))
    missing = {f.name for f in REGISTRY} - set(examples(rows))
    if missing:
        raise SystemExit(f"the starter lacks examples for {sorted(missing)}")
    return save_new(workbook, out)


if __name__ == "__main__":
    print(build(Path(sys.argv[1]) if len(sys.argv) > 1 else DEFAULT_OUT))
