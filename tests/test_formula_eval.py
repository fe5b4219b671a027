"""The evaluator of native formulas: the spreadsheet rules it follows, and native formulas evaluated over
their constants against the engine's own predict. Values of spreadsheet rules (precedence, error values,
comparisons of mixed kinds) are common practice, no source; LibreOffice agreeing with this evaluator on
whole native formulas is proven in tests/test_native_formulas.py.
"""

from __future__ import annotations

import datetime

import numpy as np
import pandas as pd
import pytest
from category_kinds import CATEGORIES, FEW, INPUTS, kinds_frame

import sheetnet
from sheetnet.formula_eval import (
    DIV0,
    NA,
    NAME,
    NUM,
    REF,
    VALUE,
    ErrorValue,
    FormulaSyntaxError,
    check_native_formulas,
    evaluate,
    evaluate_array,
    parse,
    sample_rows,
)
from sheetnet.formulas import formula_constants, native_formula


def _eval(text: str, names=None, cells=None):
    return evaluate(text, names or {}, cells or {})


# --- the language ----------------------------------------------------------------------------

@pytest.mark.parametrize("text, value", [
    ("=1+2*3", 7.0),
    ("=(1+2)*3", 9.0),
    ("=-2^2", 4.0),  # negation binds tighter than ^ in spreadsheets
    ("=2^3^2", 64.0),  # ^ is evaluated left to right
    ("=--TRUE+1", 2.0),
    ("=10/4-1", 1.5),
    ('="a"&"b"', "ab"),
    ('="say ""hi"""', 'say "hi"'),
    ("=1.5E2", 150.0),
    ("=.5", 0.5),
])
def test_arithmetic_and_precedence(text, value):
    assert _eval(text) == value


@pytest.mark.parametrize("text, value", [
    ('="a"="A"', True),  # texts compare ignoring case
    ('=1="1"', False),  # a number never equals a text
    ('=1<"0"', True),  # numbers sort before texts
    ('="z"<TRUE', True),  # texts sort before logicals
    ("=0.1+0.2=0.3", True),  # numbers equal to about 15 digits are equal
    ("=1=1.000001", False),
    ("=2>=2", True),
    ("=2<>2", False),
    ("=A1=0", True),  # a blank is 0 to a number
    ('=A1=""', True),  # and "" to a text
])
def test_comparisons(text, value):
    assert _eval(text) is value


@pytest.mark.parametrize("text, error", [
    ("=1/0", DIV0),
    ("=EXP(1000)", NUM),
    ("=NA()+1", NA),
    ('="a"*2', VALUE),  # text is never read as a number
    ("=unknown_name+1", NAME),
    ("=INDEX(w,3,1)", REF),
    ("=MATCH(5,w,0)", NA),
    ("=MMULT(w,w)", VALUE),  # 1x2 times 1x2 does not fit
    ("=IF(NA(),1,2)", NA),
])
def test_error_values(text, error):
    assert _eval(text, {"w": [[1.0, 2.0]]}) == error


def test_if_evaluates_only_the_branch_it_picks_and_works_element_wise():
    assert _eval("=IF(TRUE,1,1/0)") == 1.0
    assert _eval("=IF(1>2,NA())") is False
    names = {"w": [[1.0, -2.0, 3.0]]}
    assert evaluate_array("=IF(w>0,w,0)", names, {}) == ((1.0, 0.0, 3.0),)


def test_functions_over_rectangles():
    names = {"w": [[1.0, 2.0], [3.0, 4.0]], "v": [[1.0, "x", True, None]], "k": [["north", "South"]]}
    assert evaluate_array("=MMULT(w,w)", names, {}) == ((7.0, 10.0), (15.0, 22.0))
    assert evaluate_array("=INDEX(w,2,0)", names, {}) == ((3.0, 4.0),)
    assert evaluate_array("=INDEX(w,0,2)", names, {}) == ((2.0,), (4.0,))
    assert _eval("=INDEX(w,2,1)", names) == 3.0
    assert _eval("=INDEX(k,2)", names) == "South"  # one row: the second argument picks the cell
    assert _eval("=SUM(v)", names) == 1.0  # text, logicals and blanks inside a range are skipped
    assert _eval("=COUNT(v)", names) == 1.0
    assert _eval("=MAX(w)", names) == 4.0
    assert _eval('=MATCH("south",k,0)', names) == 2.0
    assert evaluate_array("=TANH(w)-ABS(-w)", names, {})[1][1] == pytest.approx(np.tanh(4.0) - 4.0, rel=1e-15)
    assert _eval('=TRIM("  a   b  ")') == "a b"
    assert evaluate_array("=ISNUMBER(v)", names, {}) == ((True, False, False, False),)
    assert evaluate_array("=ISLOGICAL(v)", names, {}) == ((False, False, True, False),)


def test_shapes_are_fitted_as_in_array_formulas():
    names = {"row": [[1.0, 2.0, 3.0]], "col": [[10.0], [20.0]], "pair": [[1.0, 1.0]]}
    assert evaluate_array("=row+col", names, {}) == ((11.0, 12.0, 13.0), (21.0, 22.0, 23.0))
    assert evaluate_array("=row*2", names, {}) == ((2.0, 4.0, 6.0),)
    assert evaluate_array("=row+pair", names, {}) == ((2.0, 3.0, NA),)  # beyond the shorter operand: #N/A


def test_cell_references_in_any_spelling():
    cells = {"'My data'!$B$7": 2.0, "Data!a2": "x"}
    assert _eval("='my data'!B7*3", cells=cells) == 6.0
    assert _eval('=Data!$A$2&"y"', cells=cells) == "xy"
    assert _eval("=Data!C9", cells=cells) == 0.0  # a cell not given is blank
    assert _eval("=Data!A3", cells={"Data!A3": datetime.date(1900, 3, 1)}) == 61.0  # dates are serial numbers
    assert parse("=Data!$A2+snf_x_m1_W1n").references == {"data!A2"}
    assert parse("=Data!$A2+snf_x_m1_W1n").names == {"snf_x_m1_w1n"}


@pytest.mark.parametrize("text, where", [
    ("=1+", "the end"),
    ("=(1", "the end"),
    ("=1 2", "'2'"),
    ("=SQRT(4)", "SQRT"),
    ("=MATCH(1,w)", "match type 0"),
    ("=INDEX(w)", "INDEX takes 2 to 3"),
    ("=1 ~ 2", "character 4"),
])
def test_what_it_cannot_read_is_refused_with_a_reason(text, where):
    with pytest.raises(FormulaSyntaxError, match=where):
        _eval(text, {"w": [[1.0]]})


def test_formula_text_is_never_run_as_python():
    with pytest.raises(FormulaSyntaxError):
        _eval("=__import__('os')")
    with pytest.raises(FormulaSyntaxError, match="too deeply"):
        _eval("=" + "(" * 5000 + "1" + ")" * 5000)


# --- native formulas against predict ---------------------------------------------------------

MODELS = {  # name: (inputs, target, hidden, settings)
    "regression": (INPUTS, "reading", (5,), {"activation": "relu"}),
    "regression_repeats": (INPUTS, "reading", (4, 3), {"activation": "tanh", "repeats": 2, "workers": 1}),
    "regression_no_hidden": (INPUTS, "reading", (), {}),
    "binary": (INPUTS, "passed", (4,), {"activation": "logistic", "threshold": 0.4}),
    "binary_repeats": (INPUTS, "passed", (3,), {"repeats": 3, "workers": 1}),
    "multiclass": (INPUTS, "grade", (4,), {}),
    "multiclass_repeats": (FEW, "grade", (3,), {"repeats": 2, "workers": 1}),
}


@pytest.fixture(scope="module")
def models():
    frame = kinds_frame(240, 3)
    return frame, {
        name: sheetnet.fit(
            frame[inputs], frame[target], hidden=hidden, seed=2, categories=[c for c in CATEGORIES if c in inputs], epochs=60, **settings
        )
        for name, (inputs, target, hidden, settings) in MODELS.items()
    }


def _outputs(model):
    return ["value"] if model.task == "regression" else ["value", "class", "probabilities"]


def _stored(model, name="net"):
    return {c.name: c.values for c in formula_constants(model, name)}


@pytest.mark.parametrize("case", list(MODELS))
def test_native_formulas_evaluate_to_predict(case, models):
    frame, fitted = models
    model = fitted[case]
    inputs = list(model.input_names)
    rows = frame[inputs].head(60)
    cells = {name: f"Data!${chr(65 + j)}2" for j, name in enumerate(inputs)}
    names = _stored(model)
    for output in _outputs(model):
        width = len(model.classes) if output == "probabilities" else 1
        formulas = [native_formula(model, "net", cells, output, j) for j in range(width)]
        got = [[evaluate(f, names, {cells[n]: rows[n].iloc[i] for n in inputs}) for f in formulas] for i in range(len(rows))]
        if output == "probabilities":
            expected = model.predict_proba(rows)
            np.testing.assert_allclose(np.array(got, dtype=float), expected, rtol=1e-12, atol=1e-15)
        elif model.task == "regression":
            np.testing.assert_allclose(np.array(got, dtype=float)[:, 0], model.predict(rows), rtol=1e-12)
        else:
            assert [row[0] for row in got] == model.predict(rows).tolist()
        assert check_native_formulas(model, "net", names, rows, output) == []


def test_every_kind_of_category_cell_is_read_as_the_engine_reads_it(models):
    frame, fitted = models
    model = fitted["regression"]
    row = frame[INPUTS].iloc[[0]].copy()
    cells = {name: f"Data!${chr(65 + j)}2" for j, name in enumerate(INPUTS)}
    formula = native_formula(model, "net", cells)
    names = _stored(model)

    def native(**changes):
        values = {cells[n]: changes.get(n, row[n].iloc[0]) for n in INPUTS}
        return evaluate(formula, names, values)

    def engine(**changes):
        changed = row.astype(object).copy()
        for key, value in changes.items():
            changed.iat[0, INPUTS.index(key)] = value
        return float(model.predict(changed)[0])

    same = [  # each pair reads as one category to the engine
        ({"occupation": 3.0}, {"occupation": "3"}),
        ({"occupation": 3.0}, {"occupation": " 3 "}),
        ({"dose": 2.5}, {"dose": "2.5"}),
        ({"dose": 1e-07}, {"dose": "1e-07"}),
        ({"sealed": True}, {"sealed": "TRUE"}),
        ({"batch": 3.0}, {"batch": "3"}),
        ({"site": "=1+1"}, {"site": " =1+1"}),
        ({"site": "east"}, {"site": " east "}),
        ({"batch": "b  c"}, {"batch": "b  c"}),
    ]
    for first, second in same:
        assert native(**first) == pytest.approx(engine(**first), rel=1e-12), first
        assert native(**second) == pytest.approx(engine(**second), rel=1e-12), second
        assert engine(**first) == engine(**second)
    refused = [{"occupation": 7.0}, {"occupation": "3.0"}, {"occupation": None}, {"site": "3"}, {"site": "7"},
               {"site": 3.0}, {"dose": 0.25}, {"sealed": 1.0}, {"width": None}, {"width": "20"}, {"site": "#N/A"}]
    for change in refused:
        assert native(**change) == NA, change
        with pytest.raises(sheetnet.SheetnetError):
            engine(**change)


def test_categories_a_spreadsheet_cannot_tell_apart_give_na_not_a_wrong_row():
    rng = np.random.default_rng(5)
    frame = pd.DataFrame({"x": rng.normal(size=80), "kind": rng.choice(["North", "north", "south"], 80)})
    model = sheetnet.fit(frame, frame["x"] + (frame["kind"] == "North"), hidden=(2,), seed=0, epochs=20)
    formula = native_formula(model, "net", {"x": "A2", "kind": "B2"})
    names = _stored(model)
    assert evaluate(formula, names, {"A2": 0.5, "B2": "North"}) == NA
    assert evaluate(formula, names, {"A2": 0.5, "B2": "south"}) == pytest.approx(float(model.predict([[0.5, "south"]])[0]), rel=1e-12)
    problems = check_native_formulas(model, "net", names, pd.DataFrame({"x": [0.5, 0.5], "kind": ["North", "south"]}))
    assert len(problems) == 1 and problems[0].startswith("row 1: the native formula gives #N/A but the model predicts ")


def test_the_check_names_rows_and_numbers_when_a_constant_was_edited(models):
    frame, fitted = models
    model = fitted["binary"]
    names = _stored(model)
    bias = "snf_net_m1_b2"
    edited = dict(names, **{bias: ((names[bias][0][0] + 3.0,),)})
    problems = check_native_formulas(model, "net", edited, frame[INPUTS].head(40), "probabilities", row_numbers=range(2, 42), limit=3)
    assert len(problems) == 4 and problems[-1].startswith("... and ") and problems[-1].endswith(" more rows differ")
    assert problems[0].startswith("row 2: the native formulas give 0.") and " but the model gives the probabilities 0." in problems[0]
    spread = check_native_formulas(model, "net", edited, frame[INPUTS].head(40), "probabilities", row_numbers=range(2, 42), max_rows=3)
    assert [p.split(":")[0] for p in spread] == ["row 2", "row 22", "row 41"]
    classes = check_native_formulas(model, "net", edited, frame[INPUTS].head(40), "class")
    assert classes and all(" but the model predicts 'pass'" in p or " but the model predicts 'fail'" in p for p in classes[:-1])


def test_the_check_reports_a_missing_name_and_a_row_only_the_formula_accepts(models):
    frame, fitted = models
    model = fitted["regression"]
    names = _stored(model)
    del names["snf_net_cats4"]
    assert check_native_formulas(model, "net", names, frame[INPUTS].head(3)) == [
        "the workbook has no defined name snf_net_cats4, which the native formulas of 'net' read; "
        "store the model again so its formula constants are written"
    ]
    names = _stored(model)
    names["snf_net_m1_W2"] = names["snf_net_m1_W2"][:2]
    assert check_native_formulas(model, "net", names, frame[INPUTS].head(3)) == [
        "the defined name snf_net_m1_W2 covers 2 x 1 cells but the native formulas of 'net' need 5 x 1; "
        "store the model again so its formula constants are written"
    ]
    rows = frame[INPUTS].head(2).astype(object)
    rows.iat[1, 0] = datetime.date(2024, 1, 5)  # a number to a spreadsheet, refused by the engine
    problems = check_native_formulas(model, "net", _stored(model), rows, row_word="sample row")
    assert len(problems) == 1
    assert problems[0].startswith("sample row 2: the native formula gives ") and "but the model refuses the row (column 'width'" in problems[0]


def test_the_check_accepts_unknown_categories_as_na(models):
    frame, fitted = models
    rows = frame[INPUTS].head(4).astype(object)
    rows.iat[1, 3] = "west"
    rows.iat[2, 1] = None
    rows.iat[3, 0] = "wide"
    for model in fitted.values():
        for output in _outputs(model):
            assert check_native_formulas(model, "net", _stored(model), rows, output) == []


def test_sample_rows_cover_the_inputs_of_a_model(models):
    _, fitted = models
    model = fitted["multiclass"]
    rows = sample_rows(model, count=10, seed=1)
    assert list(rows.columns) == INPUTS and len(rows) == 12  # the widest category input has 6 categories, each in two forms
    width = model.preparation.inputs[0]
    assert rows["width"].iloc[0] == width.low and rows["width"].iloc[1] == width.high
    assert all(width.low <= v <= width.high for v in rows["width"])
    assert set(rows["occupation"]) == {1.0, 2.0, 3.0, 4.0, 5.0, 6.0, "1", "2", "3", "4", "5", "6"}
    assert {True, False, "TRUE", "FALSE"} == set(rows["sealed"])
    assert set(rows["batch"][:4]) == {2.5, 3.0, "a", "b  c"} and set(rows["batch"][4:8]) == {"2.5", "3", "a", "b  c"}
    for model in fitted.values():
        for output in _outputs(model):
            assert check_native_formulas(model, "net", _stored(model), sample_rows(model), output) == []


@pytest.mark.parametrize("module", ["sheetnet.formula_eval", "sheetnet.formulas"])
def test_docstring_examples_run(module):
    import doctest
    import importlib

    result = doctest.testmod(importlib.import_module(module))
    assert result.attempted > 0 and result.failed == 0


def test_an_error_value_shows_its_code():
    assert str(ErrorValue("#N/A")) == "#N/A" and NA == ErrorValue("#N/A")
