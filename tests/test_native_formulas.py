"""Native formulas, proven in a real spreadsheet engine: LibreOffice Calc recalculates workbooks holding a
model's formula constants and one native formula per output cell, and every native prediction must equal
the engine's own predict (relative difference below 1e-12); rows the engine refuses must show #N/A; the
evaluator in sheetnet.formula_eval must show what LibreOffice shows. The workbooks are built with openpyxl
by tests/native_books.py (texts always written as text), so these tests depend on formulas.py alone, not on how the
workbook adapter lays a model out. Reference data besides our invented tables: scikit-learn's bundled
wine and diabetes data.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import openpyxl
import pandas as pd
import pytest
import sheetnet_demo
from category_kinds import CATEGORIES, FEW, INPUTS, kinds_frame
from libreoffice import MISSING, SOFFICE, recalculate
from native_books import MODEL_SHEET, Book, plain, write_book
from openpyxl.utils import get_column_letter
from sklearn.datasets import load_diabetes, load_wine

import sheetnet
from sheetnet.formula_eval import ErrorValue, cell_value, evaluate, name_grids, parse, reference_key
from sheetnet.formulas import (
    ALLOWED_FUNCTIONS,
    FormulaError,
    category_lookup,
    category_number,
    formula_constants,
    functions_used,
    native_formula,
)
from sheetnet.model import Model

needs_office = pytest.mark.skipif(SOFFICE is None, reason=MISSING)


# --- the cases --------------------------------------------------------------------------------

def _special_rows(frame: pd.DataFrame) -> pd.DataFrame:
    """Rows beyond the training rows: every kind of cell a category can be read from, and cells the engine refuses.
    (Not here: cells differing from a category only in case, which a spreadsheet reads as that category.)"""
    base = frame.iloc[0].to_dict()
    changes = [
        {"occupation": "3"}, {"occupation": " 3 "}, {"occupation": 6.0}, {"dose": "2.5"}, {"dose": 1e-07}, {"dose": "1e-07"},
        {"sealed": "TRUE"}, {"sealed": False}, {"site": " east "}, {"site": "=1+1"}, {"site": "007"},
        {"site": "3.0"}, {"site": '=HYPERLINK("http://example.invalid","x")'}, {"batch": 3}, {"batch": "3"},
        {"batch": "b  c"}, {"batch": 2.5}, {"batch": "2.5"},
        # refused by the engine
        {"occupation": 7.0}, {"occupation": "3.0"}, {"occupation": None}, {"site": "west"}, {"site": "3"}, {"site": 3.0},
        {"site": "#N/A"}, {"dose": 0.25}, {"width": None}, {"width": "20"}, {"sealed": 1.0}, {"batch": "2.50"},
    ]
    rows = [dict(base, **change) for change in changes]
    return pd.DataFrame(rows, columns=frame.columns).astype(object)


def _wine() -> pd.DataFrame:  # scikit-learn's bundled wine data
    data = load_wine(as_frame=True).frame
    return data.rename(columns={"target": "cultivar", "od280/od315_of_diluted_wines": "od280_od315"})


def _diabetes() -> pd.DataFrame:  # scikit-learn's bundled diabetes data
    return load_diabetes(as_frame=True).frame.rename(columns={"target": "progression"})


# name: (table, inputs (None: all but the target), target, hidden, settings, outputs)
CASES: dict[str, tuple[Any, Any, str, tuple[int, ...], dict[str, Any], list[str]]] = {
    "kinds_regression_relu": (lambda: kinds_frame(160, 1), INPUTS, "reading", (5,), {"activation": "relu"}, ["value"]),
    "kinds_regression_two_layers_repeats": (lambda: kinds_frame(160, 2), INPUTS, "reading", (4, 3), {"repeats": 2, "workers": 1}, ["value"]),
    "kinds_regression_no_hidden_layer": (lambda: kinds_frame(120, 3), INPUTS, "reading", (), {}, ["value"]),
    "kinds_binary_threshold": (lambda: kinds_frame(160, 4), INPUTS, "passed", (4,), {"activation": "logistic", "threshold": 0.4}, ["probabilities", "class"]),
    "kinds_binary_repeats": (lambda: kinds_frame(160, 5), INPUTS, "passed", (3,), {"repeats": 3, "workers": 1}, ["probabilities", "value"]),
    "kinds_binary_logical_labels": (
        lambda: kinds_frame(160, 6).assign(high=lambda f: f["reading"] > f["reading"].median()), INPUTS, "high", (3,), {}, ["class"]
    ),
    "kinds_multiclass": (lambda: kinds_frame(200, 7), INPUTS, "grade", (4,), {}, ["probabilities", "class"]),
    "kinds_multiclass_repeats": (lambda: kinds_frame(200, 8), FEW, "grade", (3,), {"repeats": 2, "workers": 1}, ["probabilities", "class"]),
    "multiclass_coffee": (lambda: sheetnet_demo.coffee_lot_grades(rows=200, seed=9).drop(columns="lot"), None, "grade", (6, 3), {}, ["probabilities", "class"]),
    "multiclass_wine": (_wine, None, "cultivar", (6,), {}, ["probabilities", "class"]),
    "regression_diabetes": (_diabetes, None, "progression", (8,), {}, ["value"]),
}


def _train(case: str, seed: int = 0) -> tuple[pd.DataFrame, Model]:
    make, inputs, target, hidden, settings, _ = CASES[case]
    frame = make()
    inputs = inputs or [c for c in frame.columns if c != target]
    categories = [c for c in CATEGORIES if c in inputs]
    model = sheetnet.fit(frame[inputs], frame[target], hidden=hidden, seed=seed, categories=categories, epochs=80, **settings)
    sheet_rows = frame[inputs].astype(object)
    if set(INPUTS) <= set(frame.columns):
        special = _special_rows(frame[INPUTS])[inputs]
    else:
        special = sheet_rows.iloc[[0]].copy()
        special.iat[0, 0] = None  # a blank number: refused
    return pd.concat([sheet_rows, special], ignore_index=True), model


def _expected(model: Model, frame: pd.DataFrame, output: str) -> list[list[Any] | None]:
    """Per row the cells the formulas should show, or None where the engine refuses the row."""
    out: list[list[Any] | None] = []
    for i in range(len(frame)):
        row = frame.iloc[[i]]
        try:
            if output == "probabilities":
                out.append([float(p) for p in model.predict_proba(row)[0]])
            else:
                label = model.predict(row)[0]
                out.append([_label(label)])
        except sheetnet.SheetnetError:
            out.append(None)
    return out


def _label(label: Any) -> Any:
    label = plain(label)
    if isinstance(label, bool):
        return "TRUE" if label else "FALSE"
    return float(label) if isinstance(label, (int, float)) else label


@pytest.fixture(scope="module")
def recalculated(tmp_path_factory):
    if SOFFICE is None:
        pytest.skip(MISSING)
    folder = tmp_path_factory.mktemp("native")
    books: dict[str, Book] = {}
    for case, (_, _, _, _, _, outputs) in CASES.items():
        frame, model = _train(case)
        books[case] = write_book(folder / f"{case}.xlsx", frame, model, outputs)
    # the same formulas over the constants of a model retrained with another seed into the same names
    frame, first = _train("kinds_regression_relu")
    _, second = _train("kinds_regression_relu", seed=7)
    refs = {name: f"Data!$A{j}" for j, name in enumerate(first.input_names, start=2)}
    assert native_formula(first, "net", refs) == native_formula(second, "net", refs)  # so the formulas stay as written
    books["retrained"] = write_book(folder / "retrained.xlsx", frame, first, ["value"], constants_from=second)
    books["retrained"].model = second
    converted = dict(zip(books, recalculate([b.path for b in books.values()], folder / "recalculated")))
    return books, converted


def _shown(path: Path, book: Book) -> dict[tuple[int, int], Any]:
    sheet = openpyxl.load_workbook(path, data_only=True)["Data"]
    return {(r, c): sheet.cell(r, c).value for r, c in book.formulas}


def _close(got: Any, wanted: Any) -> bool:
    if isinstance(wanted, float):
        return isinstance(got, (int, float)) and not isinstance(got, bool) and abs(got - wanted) <= 1e-12 * max(abs(wanted), 1e-300)
    return bool(got == wanted)


@needs_office
@pytest.mark.parametrize("case", [*CASES, "retrained"])
def test_native_predictions_equal_the_engine_and_refused_rows_show_na(case, recalculated):
    books, converted = recalculated
    book = books[case]
    shown = _shown(converted[case], book)
    for output in dict.fromkeys(o for o, _ in book.columns):
        expected = _expected(book.model, book.frame, output)
        width = len(book.model.classes) if output == "probabilities" else 1
        refused = 0
        for i, wanted in enumerate(expected):
            got = [shown[(i + 2, book.columns[(output, j)])] for j in range(width)]
            if wanted is None:
                refused += 1
                assert got == ["#N/A"] * width, (case, output, i + 2, got)
            else:
                assert all(map(_close, got, wanted)), (case, output, i + 2, got, wanted)
        assert 0 < refused < len(book.frame) - 100  # rows the engine refuses, and many it predicts


@needs_office
@pytest.mark.parametrize("case", [*CASES, "retrained"])
def test_the_evaluator_shows_what_libreoffice_shows(case, recalculated):
    books, converted = recalculated
    book = books[case]
    shown = _shown(converted[case], book)
    stored = openpyxl.load_workbook(book.path)  # constants and input cells as the file holds them
    names = {}
    for name, defined in stored.defined_names.items():
        sheet, cells = next(iter(defined.destinations))
        names[name] = [[cell.value for cell in row] for row in stored[sheet][cells.replace("$", "")]]
    data = stored["Data"]
    grids, constant_parts = name_grids(names), {}  # what `evaluate` does, with the names converted once
    checked = [(r, c) for r, c in book.formulas if r < 22 or r >= len(book.frame) - 30]  # the special rows and some others
    for r, c in checked:
        text = book.formulas[(r, c)]
        cells = {reference_key(f"Data!{get_column_letter(j)}{r}"): cell_value(data.cell(r, j).value) for j in range(1, len(book.frame.columns) + 1)}
        mine = parse(text).run(grids, cells, constant_parts)[0, 0]
        mine = 0.0 if mine is None else mine.item() if isinstance(mine, np.generic) else mine
        if (r, c) == next(iter(book.formulas)):
            assert mine == evaluate(text, names, cells)
        theirs = shown[(r, c)]
        if isinstance(mine, ErrorValue):
            assert theirs == mine.code, (case, r, c, theirs, mine)
        else:
            assert _close(theirs, mine), (case, r, c, theirs, mine)


@needs_office
def test_texts_that_look_like_formulas_or_numbers_stay_text(recalculated):
    books, converted = recalculated
    book = books["kinds_multiclass"]
    after = openpyxl.load_workbook(converted["kinds_multiclass"])
    column = list(book.frame.columns).index("site") + 1
    texts = {after["Data"].cell(r, column).value for r in range(2, len(book.frame) + 2)}
    assert {"=1+1", '=HYPERLINK("http://example.invalid","x")', "007", "3.0"} <= texts
    hidden = after[MODEL_SHEET]
    constants = {cell.value for row in hidden.iter_rows() for cell in row if isinstance(cell.value, str)}
    assert {"=1+1", '=HYPERLINK("http://example.invalid","x")', "007", "3.0", "3"} <= constants
    assert all(cell.data_type == "s" for row in hidden.iter_rows() for cell in row if isinstance(cell.value, str))


@needs_office
def test_the_model_sheet_stays_hidden_and_the_names_resolve(recalculated):
    books, converted = recalculated
    for case, book in books.items():
        original = openpyxl.load_workbook(book.path)
        assert original[MODEL_SHEET].sheet_state == "veryHidden"
        after = openpyxl.load_workbook(converted[case])
        assert after[MODEL_SHEET].sheet_state == "hidden"  # LibreOffice has no very hidden state
        names = [n for n in original.defined_names if n.startswith("snf_net_")]
        assert names and all(n in after.defined_names for n in names)
        assert all(next(iter(after.defined_names[n].destinations))[0] == MODEL_SHEET for n in names)


@needs_office
def test_retraining_into_the_same_names_changes_the_native_values(recalculated):
    books, converted = recalculated
    before = _shown(converted["kinds_regression_relu"], books["kinds_regression_relu"])
    after = _shown(converted["retrained"], books["retrained"])
    assert books["retrained"].formulas == books["kinds_regression_relu"].formulas
    moved = [abs(after[k] - before[k]) for k in before if isinstance(before[k], float)]
    assert moved and max(moved) > 1e-3


# --- formula text, without a spreadsheet engine -------------------------------------------

def test_category_keys_and_the_numbers_they_are_read_from():
    assert [category_number(k) for k in ["3", "-12", "0", "2.5", "1e-07", "100000000000000000000"]] == [3.0, -12.0, 0.0, 2.5, 1e-07, 1e20]
    # texts no number reads as: the engine writes 3.0 as '3', 1000.0 as '1000', -0.0 as '0'
    assert [category_number(k) for k in ["3.0", "007", "1e3", "3_000", "-0", "nan", "inf", " 3", "TRUE", "north"]] == [None] * 10
    assert category_lookup(["2.5", "=1+1", "TRUE", "a  b"]) == (("2.5", "=1+1", "TRUE", "a b", 2.5), (0, 1, 2, 3, 0))
    # keys a spreadsheet cannot tell apart are unmatchable
    assert category_lookup(["0.3", "0.30000000000000004", "X", "x"]) == (("0.3", "0.30000000000000004", " X", " x"), (0, 1, 2, 3))


def test_weights_of_a_category_read_from_a_number_appear_twice():
    frame = kinds_frame(80, 11)
    model = sheetnet.fit(frame[["width", "occupation"]], frame["reading"], hidden=(2,), seed=0, categories=["occupation"], epochs=5)
    constants = {c.name: c.values for c in formula_constants(model, "net")}
    assert constants["snf_net_cats2"] == (("1", "2", "3", "4", "5", "6", 1.0, 2.0, 3.0, 4.0, 5.0, 6.0),)
    first_layer = model.weights(0)[0][0]
    np.testing.assert_array_equal(np.array(constants["snf_net_m1_W1c2"]), np.vstack([first_layer[1:7], first_layer[1:7]]))


def test_formulas_use_only_portable_functions():
    frame = kinds_frame(120, 2)
    model = sheetnet.fit(frame[FEW], frame["grade"], hidden=(4,), seed=0, categories=["occupation"], repeats=2, workers=1, epochs=5)
    cells = {name: "Data!$A2" for name in model.input_names}
    for output, column in (("class", 0), ("probabilities", 2), ("value", 0)):
        formula = native_formula(model, "net", cells, output, column)
        assert functions_used(formula) <= ALLOWED_FUNCTIONS
        assert "LET(" not in formula and len(formula) <= 8192


def test_a_network_too_large_for_one_formula_is_refused_with_a_reason():
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(60, 40)), columns=[f"reading_{i}" for i in range(40)])
    model = sheetnet.fit(frame, np.arange(60) % 3, hidden=(30, 30), repeats=3, workers=1, epochs=2, task="multiclass")
    cells = {name: "Data!$A2" for name in model.input_names}
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


@needs_office
def test_native_interval_equals_predict_interval_in_libreoffice(tmp_path):
    """The interval's ends as native formulas (prediction minus and plus the stored conformal half-width)
    equal PREDICT's interval output, through the service's placements as every door applies them."""
    from sheetnet import functions, service
    from sheetnet.sheet_writer import apply_to_workbook

    frame = sheetnet_demo.parcel_table(sheetnet_demo.depot_parcel_weeks(weeks=150, seed=4)).drop(columns="week starting")
    table = [list(frame.columns)] + frame.astype(object).values.tolist()
    target = table[0][-1]
    split = functions.raising(functions.split)(table, 0.3, 1)
    block = functions.train_block(table, target, "3", "epochs=60; interval_level=85%", split)
    book = openpyxl.Workbook()
    data = book.active
    data.title = "Data"
    for row in table:
        data.append(row)
    apply_to_workbook(book, service.model_placements("parcels", block))
    placements, rows = service.native_formula_placements(
        "parcels", block, table[0], list(range(1, len(table))), ("Data", 1, 1), ("Data", 1, len(table[0]) + 2), "interval"
    )
    apply_to_workbook(book, placements)
    path = tmp_path / "interval.xlsx"
    book.save(path)
    (converted,) = recalculate([path], tmp_path / "recalculated")
    shown = openpyxl.load_workbook(converted, data_only=True)["Data"]
    live = functions.predict(block, table, "interval")
    assert [shown.cell(1, len(table[0]) + 2 + j).value for j in (0, 1)] == [f"native {target} low (85 % interval)", f"native {target} high (85 % interval)"]
    for r in range(2, len(table) + 1):
        got = [shown.cell(r, len(table[0]) + 2 + j).value for j in (0, 1)]
        np.testing.assert_allclose(got, live[r - 1], rtol=1e-9)


def test_interval_formulas_refuse_classes():
    frame = sheetnet_demo.coffee_lot_grades(rows=60, seed=2).drop(columns="lot")
    model = sheetnet.fit(frame.drop(columns="grade"), frame["grade"], hidden=(2,), epochs=5)
    with pytest.raises(FormulaError, match="for models that predict numbers"):
        native_formula(model, "net", {name: "Data!$A2" for name in model.input_names}, "interval")
