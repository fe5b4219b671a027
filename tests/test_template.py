"""The starter workbook: built by its script, with an example of every cell function."""

import importlib.util
from pathlib import Path

import openpyxl

from sheetnet.block import decode_block
from sheetnet.registry import REGISTRY
from sheetnet.workbook import open_book, read_model

TEMPLATE = Path(__file__).resolve().parents[1] / "workbook_template"


def _builder():
    spec = importlib.util.spec_from_file_location("build_template", TEMPLATE / "build_template.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_the_script_builds_the_starter_with_every_function(tmp_path):
    path = _builder().build(tmp_path / "starter.xlsx")
    book = openpyxl.load_workbook(path)
    assert book.sheetnames[:3] == ["Data", "Settings", "Formulas"]
    formulas = book["Formulas"]
    written = {formulas.cell(2, c).value: formulas.cell(3, c).value for c in range(1, formulas.max_column + 1) if formulas.cell(2, c).value}
    assert set(written) == {f.name for f in REGISTRY}
    for name, formula in written.items():
        assert formula.startswith(f"={name}(")
    sheet, _ = list(book.defined_names["starter_model"].destinations)[0]
    assert book[sheet].sheet_state == "veryHidden"
    model, info = decode_block(read_model(open_book(path), "starter_model"))
    assert info.target == "grade" and model.classes == ("A", "B", "C")


def test_the_committed_starter_holds_a_sound_model():
    model, info = decode_block(read_model(open_book(TEMPLATE / "sheetnet-starter.xlsx"), "starter_model"))
    assert info.training_rows + info.holdout_rows == 150
