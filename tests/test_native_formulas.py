"""Native formulas, proven in a real spreadsheet engine: LibreOffice Calc recalculates the workbooks
sheetnet wrote and every native prediction must equal the engine's own predict (relative difference
below 1e-9). Reference data besides our invented tables: scikit-learn's bundled wine and diabetes data.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
import sheetnet_demo
from libreoffice import MISSING, SOFFICE, recalculate
from sklearn.datasets import load_diabetes, load_wine

from sheetnet import cli
from sheetnet.block import decode_block
from sheetnet.formulas import ALLOWED_FUNCTIONS, FormulaError, functions_used, native_formula
from sheetnet.workbook import open_book, read_model

needs_office = pytest.mark.skipif(SOFFICE is None, reason=MISSING)


def _invented(rows: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "width": rng.normal(20, 4, rows),
        "site": rng.choice(["north", "south", "east"], rows),
        "load": rng.uniform(0, 3, rows),
        "age": rng.integers(1, 30, rows).astype(float),
    })
    frame["output"] = 0.3 * frame["width"] + np.sin(frame["load"]) * 4 + (frame["site"] == "east") * 2 + rng.normal(0, 0.5, rows)
    frame["passed"] = np.where(frame["output"] > frame["output"].median(), "pass", "fail")
    return frame


def _wine() -> pd.DataFrame:
    data = load_wine(as_frame=True).frame
    return data.rename(columns={"target": "cultivar", "od280/od315_of_diluted_wines": "od280_od315"})


def _diabetes() -> pd.DataFrame:
    return load_diabetes(as_frame=True).frame.rename(columns={"target": "progression"})


# name: (table, target, hidden, settings, outputs)
CASES = {
    "regression_tanh": (lambda: _invented(150, 1).drop(columns="passed"), "output", "6", ["activation=tanh"], ["value"]),
    "regression_relu_two_layers_repeats": (
        lambda: _invented(150, 2).drop(columns="passed"), "output", "8,4", ["activation=relu", "repeats=2", "workers=1"], ["value"]
    ),
    "regression_no_hidden_layer": (lambda: _invented(120, 3).drop(columns="passed"), "output", "0", [], ["value"]),
    "binary_logistic": (lambda: _invented(160, 4).drop(columns="output"), "passed", "5", ["activation=logistic"], ["probabilities", "class"]),
    "binary_threshold": (lambda: _invented(160, 5).drop(columns="output"), "passed", "4", ["threshold=0.3"], ["probabilities", "class"]),
    "multiclass_coffee": (lambda: sheetnet_demo.coffee_lot_grades(rows=200, seed=9).drop(columns="lot"), "grade", "6,3", [], ["probabilities", "class"]),
    "multiclass_wine": (_wine, "cultivar", "6", [], ["probabilities", "class"]),
    "regression_diabetes": (_diabetes, "progression", "8", [], ["value"]),
}


def _write(path: Path, frame: pd.DataFrame) -> None:
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Data"
    sheet.append(list(frame.columns))
    for row in frame.astype(object).values.tolist():
        sheet.append(row)
    book.save(path)


def _run(*args: str) -> None:
    assert cli.main(list(args)) == 0


def _build(folder: Path, case: str, seed: int = 0) -> tuple[Path, pd.DataFrame]:
    make, target, hidden, settings, outputs = CASES[case]
    frame = make()
    path = folder / f"{case}.xlsx"
    _write(path, frame)
    table = f"Data!A1:{openpyxl.utils.get_column_letter(len(frame.columns))}{len(frame) + 1}"
    sets = [item for s in settings for item in ("--set", s)]
    _run("train", str(path), "--table", table, "--target", target, "--name", "net", "--hidden", hidden, "--seed", str(seed), "--replace", *sets)
    start = len(frame.columns) + 2
    for output in outputs:
        corner = f"Data!{openpyxl.utils.get_column_letter(start)}1"
        _run("formulas", str(path), "--model", "net", "--table", table, "--to", corner, "--output", output)
        start += 4
    return path, frame


def _expected(path: Path, frame: pd.DataFrame, output: str):
    model, _ = decode_block(read_model(open_book(path), "net"))
    inputs = frame[list(model.input_names)]
    if output == "value" and model.task == "regression":
        return model, model.predict(inputs)
    if output == "probabilities":
        return model, model.predict_proba(inputs)
    return model, model.predict(inputs)


@pytest.fixture(scope="module")
def recalculated(tmp_path_factory):
    if SOFFICE is None:
        pytest.skip(MISSING)
    folder = tmp_path_factory.mktemp("native")
    built = {case: _build(folder, case) for case in CASES}
    # the retrain check: a copy of the first case retrained with another seed into the same names
    retrained = folder / "retrained.xlsx"
    shutil.copy(built["regression_tanh"][0], retrained)
    frame = built["regression_tanh"][1]
    _run("train", str(retrained), "--table", f"Data!A1:E{len(frame) + 1}", "--target", "output", "--name", "net", "--hidden", "6", "--seed", "7", "--replace")
    books = [path for path, _ in built.values()] + [retrained]
    converted = dict(zip([*CASES, "retrained"], recalculate(books, folder / "recalculated")))
    return built, converted, retrained


def _read_outputs(path: Path, frame: pd.DataFrame, first_column: int, width: int) -> list[list[object]]:
    sheet = openpyxl.load_workbook(path, data_only=True)["Data"]
    return [[sheet.cell(r, first_column + j).value for j in range(width)] for r in range(2, len(frame) + 2)]


@needs_office
@pytest.mark.parametrize("case", list(CASES))
def test_native_predictions_equal_the_engine(case, recalculated):
    built, converted, _ = recalculated
    source, frame = built[case]
    column = len(frame.columns) + 2
    for output in CASES[case][4]:
        model, expected = _expected(source, frame, output)
        width = len(model.classes) if output == "probabilities" else 1
        got = _read_outputs(converted[case], frame, column, width)
        if output == "class":
            assert [row[0] for row in got] == [c if isinstance(c, str) else float(c) for c in expected.tolist()]
        else:
            values = np.array(got, dtype=float).reshape(np.shape(expected))
            relative = np.abs(values - expected) / np.maximum(np.abs(expected), 1e-12)
            assert relative.max() < 1e-9, (case, output, relative.max())
        column += 4


@needs_office
def test_the_model_sheet_stays_hidden_and_the_names_resolve(recalculated):
    built, converted, _ = recalculated
    for case in CASES:
        original = openpyxl.load_workbook(built[case][0])
        assert original["sheetnet_net"].sheet_state == "veryHidden"
        after = openpyxl.load_workbook(converted[case])
        assert after["sheetnet_net"].sheet_state == "hidden"  # LibreOffice has no very hidden state
        names = [n for n in original.defined_names if n.startswith("snf_net_")]
        assert names and all(n in after.defined_names for n in names)
        for name in names:
            sheet, cells = list(after.defined_names[name].destinations)[0]
            assert sheet == "sheetnet_net"


@needs_office
def test_no_native_cell_shows_an_error(recalculated):
    built, converted, _ = recalculated
    for case in CASES:
        sheet = openpyxl.load_workbook(converted[case], data_only=True)["Data"]
        frame = built[case][1]
        for row in sheet.iter_rows(min_row=1, max_row=len(frame) + 1, min_col=len(frame.columns) + 2):
            for cell in row:
                assert not (isinstance(cell.value, str) and cell.value.startswith(("#", "Err:"))), (case, cell.coordinate, cell.value)


@needs_office
def test_retraining_into_the_same_names_changes_the_native_values(recalculated):
    built, converted, retrained = recalculated
    source, frame = built["regression_tanh"]
    before = np.array(_read_outputs(converted["regression_tanh"], frame, len(frame.columns) + 2, 1), dtype=float)[:, 0]
    after = np.array(_read_outputs(converted["retrained"], frame, len(frame.columns) + 2, 1), dtype=float)[:, 0]
    _, expected = _expected(retrained, frame, "value")
    assert np.abs(after - before).max() > 1e-3
    np.testing.assert_allclose(after, expected, rtol=1e-9)


# --- formula text, without a spreadsheet engine -------------------------------------------

def test_formulas_use_only_portable_functions(tmp_path):
    frame = sheetnet_demo.coffee_lot_grades(rows=120, seed=2).drop(columns="lot")
    path = tmp_path / "book.xlsx"
    _write(path, frame)
    _run("train", str(path), "--table", "Data!A1:F121", "--target", "grade", "--name", "net", "--hidden", "4,3", "--set", "repeats=2", "--set", "workers=1")
    model, _ = decode_block(read_model(open_book(path), "net"))
    cells = {name: f"Data!$A{2}" for name in model.input_names}
    for output, column in (("class", 0), ("probabilities", 2)):
        formula = native_formula(model, "net", cells, output, column)
        assert functions_used(formula) <= ALLOWED_FUNCTIONS
        assert "LET(" not in formula and len(formula) < 8192


def test_a_network_too_large_for_one_formula_is_refused_with_a_reason():
    import sheetnet

    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(60, 40)), columns=[f"reading_{i}" for i in range(40)])
    model = sheetnet.fit(frame, np.arange(60) % 3, hidden=(30, 30), repeats=3, workers=1, epochs=2, task="multiclass")
    cells = {name: f"Data!$A{2}" for name in model.input_names}
    with pytest.raises(FormulaError, match="beyond the spreadsheet limit of 8,192"):
        native_formula(model, "net", cells, "class")


@needs_office
def test_the_demo_native_column_equals_the_live_predictions(tmp_path):
    from sheetnet.demo_workbook import build_demo_workbook

    path, results = build_demo_workbook(tmp_path / "demo.xlsx", seed=0)
    (converted,) = recalculate([path], tmp_path / "recalculated")
    book = openpyxl.load_workbook(converted, data_only=True)
    for result in results:
        sheet = book[result.scenario.sheet]
        width = len(result.scenario.table.columns)
        header = [c.value for c in sheet[1]]
        live = header.index(f"predicted {result.scenario.target}") + 1
        native = header.index(f"native predicted {result.scenario.target}") + 1
        rows = range(2, len(result.scenario.table) + 2)
        live_values = [sheet.cell(r, live).value for r in rows]
        native_values = [sheet.cell(r, native).value for r in rows]
        assert native > width + 1
        if result.model.task == "regression":
            np.testing.assert_allclose(np.array(native_values, dtype=float), np.array(live_values, dtype=float), rtol=1e-9)
        else:
            assert native_values == live_values
