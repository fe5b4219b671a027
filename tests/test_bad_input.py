"""Bad input that used to mislead or crash: each case gets a message in spreadsheet words that says what to do.

The tables are small invented scenarios made here from a seeded generator.
"""

import datetime
import doctest
import importlib

import numpy as np
import pytest

from sheetnet import cells, functions
from sheetnet.cell_text import cell_in_words, labels_in_words, number_in_words
from sheetnet.cells import MARKER, as_grid, number_from_text, parse_hidden
from sheetnet.errors import InputError, SettingError, SizeError
from sheetnet.limits import MAX_PARAMETERS, check_class_count, check_network_size, parameter_count
from sheetnet.model import Model


def _table(rows=40, seed=0):
    """Invented: a small workshop's jobs, hours from size and crew, and a 1-5 customer rating."""
    rng = np.random.default_rng(seed)
    size = rng.uniform(1, 10, rows)
    crew = rng.integers(1, 4, rows).astype(float)
    hours = 2.0 * size / crew + rng.normal(0, 0.3, rows)
    rating = np.clip(np.round(5 - hours / 4 + rng.normal(0, 0.5, rows)), 1, 5)
    return [["size", "crew", "hours", "rating"]] + [[float(a), float(b), float(c), float(d)] for a, b, c, d in zip(size, crew, hours, rating)]


def _message(answer):
    assert len(answer) == 1 and len(answer[0]) == 1, answer
    text = answer[0][0]
    assert text.startswith(MARKER + " "), text
    assert "unexpected" not in text and "report" not in text, text  # a proper message, not the bug message
    return text[len(MARKER) + 1:]


def _has(text, *phrases):
    for phrase in phrases:
        assert phrase in text, text


def _about(block):
    return dict(map(tuple, functions.about(block)[1:]))


@pytest.fixture(scope="module")
def table():
    return _table()


@pytest.fixture(scope="module")
def hours_model(table):
    block = functions.train(table, "hours", 3, "inputs=size,crew; epochs=50")
    assert block[0][0] == "sheetnet model block", block
    return block


# --- one text for one bad cell, whichever door asks --------------------------------------------

def test_a_bad_cell_reads_the_same_from_the_cell_the_raising_version_and_train_block(table):
    bad = [list(r) for r in table]
    bad[5][0] = "about six"  # range row 6: the header is row 1 of the table
    in_cell = _message(functions.train(bad, "hours", 3, "inputs=size,crew; epochs=20"))
    with pytest.raises(InputError) as raised:
        functions.raising(functions.train)(bad, "hours", 3, "inputs=size,crew; epochs=20")
    with pytest.raises(InputError) as from_block:
        functions.train_block(bad, "hours", 3, "inputs=size,crew; epochs=20")
    assert in_cell == str(raised.value) == str(from_block.value)
    assert in_cell == "column 'size', row 6 of the table: text in a numeric column ('about six'); type a number, or clear the text and remove the row"
    assert from_block.value.range_row == 6 and from_block.value.column == "size" and from_block.value.value == "about six"


def test_unknown_categories_and_blank_targets_read_the_same_through_every_door():
    rows = [["shift", "load", "late"]] + [[("day", "night")[i % 2], float(i % 7), ("yes", "no")[(i // 3) % 2]] for i in range(30)]
    block = functions.train(rows, "late", 2, "epochs=20")
    new = [list(r) for r in rows[:6]]
    new[4][0] = "weekend"
    in_cell = _message(functions.predict(block, new))
    with pytest.raises(InputError) as raised:
        functions.raising(functions.predict)(block, new)
    assert in_cell == str(raised.value)
    _has(in_cell, "column 'shift', row 5 of the table: category 'weekend' was not in the training rows (known: day, night)")
    blank = [list(r) for r in rows]
    blank[9][2] = None
    with pytest.raises(InputError) as from_block:
        functions.train_block(blank, "late", 2, "epochs=20")
    assert _message(functions.train(blank, "late", 2, "epochs=20")) == str(from_block.value)
    _has(str(from_block.value), "column 'late', row 10 of the table: the cell is blank or not a number (blank)")


def test_lags_name_the_row_as_the_range_shows_it_through_every_door():
    series = [["sales"], [1.0], [2.0], ["many"], [4.0]]
    with pytest.raises(InputError) as raised:
        functions.raising(functions.lags)(series, 1)
    assert _message(functions.lags(series, 1)) == str(raised.value)
    _has(str(raised.value), "column 'sales', row 4 of the table: not a number in a numeric series ('many')")


# --- stray text and numbers typed as text -------------------------------------------------------

def test_one_stray_text_in_a_numeric_target_is_a_bad_cell_not_a_forty_class_model(table):
    bad = [list(r) for r in table]
    bad[12][2] = "n/a"
    text = _message(functions.train(bad, "hours", 3, "inputs=size,crew; epochs=20"))
    _has(text, "column 'hours', row 13 of the table: text in a numeric column ('n/a')", "type a number or clear the cell", "task=multiclass")


def test_one_stray_text_in_a_numeric_input_is_a_bad_cell(table):
    bad = [list(r) for r in table]
    bad[30][1] = "n/a"
    text = _message(functions.train(bad, "hours", 3, "inputs=size,crew; epochs=20"))
    _has(text, "column 'crew', row 31 of the table: text in a numeric column ('n/a')")


@pytest.mark.parametrize("typed", ["12%", "1,234", "32,1", " 7 ", "1 234"])
def test_numbers_typed_as_text_are_named_with_the_fix(table, typed):
    bad = [list(r) for r in table]
    for row in bad[1:]:
        row[0] = typed if row is bad[3] else f"{row[0]:.2f}"  # a whole column of numbers typed as text
    text = _message(functions.train(bad, "hours", 3, "inputs=size,crew; epochs=20"))
    _has(text, "column 'size', row 2 of the table: a number typed as text", "convert the column to numbers", "numbers_in_text=point", "categories=size")
    assert "identifier" not in text and "not in the training rows" not in text


def test_number_text_reading_follows_the_decimal_mark():
    assert number_from_text("12%", "point") == pytest.approx(0.12)
    assert number_from_text("1,234", "point") == 1234.0
    assert number_from_text("1,234", "comma") == pytest.approx(1.234)
    assert number_from_text("32,1", "comma") == pytest.approx(32.1)
    assert number_from_text("32,1", "point") is None  # a comma with one digit after it is no thousands separator
    assert number_from_text("1 234", "point") == 1234.0
    assert number_from_text("1.234,5", "comma") == pytest.approx(1234.5)
    assert number_from_text("-0.5", "point") == -0.5
    assert number_from_text("1 2", "point") is None and number_from_text("n/a", "point") is None


def test_numbers_in_text_read_them_the_same_in_train_predict_score_and_explain(table):
    as_text = [list(r) for r in table]
    for row in as_text[1:]:
        row[0] = f"{row[0] * 100:.4f}%"  # the same sizes, typed as percentages of one
    with_numbers = [list(r) for r in table]
    for row in with_numbers[1:]:
        row[0] = float(f"{row[0] * 100:.4f}") / 100
    settings = "inputs=size,crew; epochs=60"
    read = functions.train(as_text, "hours", 3, settings + "; numbers_in_text=point")
    plain = functions.train(with_numbers, "hours", 3, settings)
    assert read[0][0] == "sheetnet model block", read
    read_values, plain_values = functions.predict(read, as_text), functions.predict(plain, with_numbers)
    assert read_values[0] == plain_values[0] == ["predicted hours"]
    # the same sizes up to the last bit (12.3456% / 100 and 0.123456 may round apart)
    np.testing.assert_allclose([r[0] for r in read_values[1:]], [r[0] for r in plain_values[1:]], rtol=1e-9)
    scored = dict(map(tuple, functions.score(read, as_text)[1:]))
    assert scored["rmse"] == pytest.approx(dict(map(tuple, functions.score(plain, with_numbers)[1:]))["rmse"], rel=1e-12)
    assert functions.explain(read, as_text)[1][0] in ("size", "crew")
    # a model trained on numbers names text numbers at every door instead of answering blanks or misleading categories
    for answer in (functions.predict(plain, as_text), functions.score(plain, as_text), functions.explain(plain, as_text)):
        _has(_message(answer), "column 'size', row 2 of the table: a number typed as text", "retrain the model with the setting numbers_in_text=point")


def test_numbers_in_text_with_a_decimal_comma_and_the_wrong_mark(table):
    comma = [list(r) for r in table]
    for row in comma[1:]:
        row[0] = f"{row[0]:.3f}".replace(".", ",")
    block = functions.train(comma, "hours", 3, "inputs=size,crew; epochs=20; numbers_in_text=comma")
    assert block[0][0] == "sheetnet model block", block
    mixed = [list(r) for r in comma]
    mixed[7][0] = "1,234.5"
    text = _message(functions.train(mixed, "hours", 3, "inputs=size,crew; epochs=20; numbers_in_text=comma"))
    _has(text, "column 'size', row 8 of the table: this text reads as a number only with a decimal point ('1,234.5')", "numbers_in_text=point")
    _has(_message(functions.train(comma, "hours", 3, "numbers_in_text=maybe")), "setting 'numbers_in_text' got 'maybe'", "point", "comma")


def test_codes_typed_as_text_stay_categories_when_listed(table):
    coded = [list(r) for r in table]
    for row in coded[1:]:
        row[1] = str(int(row[1]))  # crew codes '1', '2', '3' typed as text
    block = functions.train(coded, "hours", 3, "inputs=size,crew; epochs=20; categories=crew")
    assert _about(block)["layers"] == "4-3-1"  # size, and one input per crew code


# --- how the task was chosen ----------------------------------------------------------------------

def test_about_says_how_a_rating_target_became_classes_and_how_to_override(table):
    about = _about(functions.train(table, "rating", 3, "inputs=size,crew; epochs=20"))
    assert about["task"] == "multiclass"
    _has(about["task chosen"], "multiclass, chosen automatically", "whole numbers", "read as classes", "task=regression")
    again = _about(functions.train(table, "rating", 3, "inputs=size,crew; epochs=20; task=regression"))
    assert again["task"] == "regression" and again["task chosen"] == "regression, as the setting task=regression asked"
    hours = _about(functions.train(table, "hours", 3, "inputs=size,crew; epochs=20"))
    _has(hours["task chosen"], "regression, chosen automatically", "task=multiclass")


# --- sizes checked before anything large is made ------------------------------------------------

def test_a_huge_hidden_layer_is_refused_before_training(table, monkeypatch):
    monkeypatch.setattr(functions, "fit", lambda *a, **k: pytest.fail("fit must not start"))
    text = _message(functions.train(table, "hours", "100000000", "inputs=size,crew"))
    assert text == (
        "a network of 2-100000000-1 has 400,000,001 weights, more than the 2,000,000 sheetnet trains; "
        "use fewer or narrower hidden layers, such as 8 or 16,8"
    )


def test_rows_times_inputs_are_checked_before_training(monkeypatch):
    monkeypatch.setattr(functions, "fit", lambda *a, **k: pytest.fail("fit must not start"))
    rows = [["part", "weight"]] + [[f"p{i % 4000}", float(i % 13)] for i in range(16_000)]
    text = _message(functions.train(rows, "weight", 2))
    _has(text, "16,000 rows times 4,000 inputs (each category of a text column is one input)", "more than the 50,000,000")


def test_a_classifier_with_ten_thousand_classes_is_refused():
    rows = [["code", "label"]] + [[float(i), f"c{i}"] for i in range(10_000)]
    text = _message(functions.train(rows, "label", 2, "epochs=1"))
    _has(text, "the target has 10,000 different values (c0, c1, c10, c100, c1000 and 9,995 more), more than the 200 classes", "task=regression")


def test_network_size_limits_directly():
    assert parameter_count((3, 4, 1)) == (3 + 1) * 4 + (4 + 1) * 1
    check_network_size(1000, 10, (50, 50), 3)
    with pytest.raises(SizeError, match="more than the 2,000,000 sheetnet trains"):
        check_network_size(10, 1000, (MAX_PARAMETERS // 1000,), 1)
    with pytest.raises(SizeError, match="21 hidden layers are more than the 20"):
        check_network_size(10, 2, (4,) * 21, 1)
    with pytest.raises(SizeError, match="201 different values"):
        check_class_count(201, "a, b")


def test_lags_longer_than_the_series_are_refused():
    series = [["visits"], [3.0], [4.0], [5.0], [6.0], [7.0]]
    text = _message(functions.lags(series, 50))
    assert text == (
        "a lag of 50 is as long as the series or longer (it has 5 values below its header), so its column would be blank; "
        "use lags up to 4, or select a longer series"
    )
    _has(_message(functions.lags(series, "1,5")), "a lag of 5")
    assert functions.lags(series, 4)[0] == ["visits lag 1", "visits lag 2", "visits lag 3", "visits lag 4"]
    _has(_message(functions.lags(series, 1e12)), "a lag of 1,000,000,000,000")


# --- hidden layers --------------------------------------------------------------------------------

@pytest.mark.parametrize("text, widths", [
    ("8,4", (8, 4)), ("8, 4", (8, 4)), ("8 4", (8, 4)), ("8;4", (8, 4)), (8.0, (8,)), ("0", ()), (None, None), ("", None)])
def test_hidden_layers_that_are_read(text, widths):
    assert parse_hidden(text) == widths


@pytest.mark.parametrize("text, phrase", [
    ("8,,4", "have an empty place between separators"),
    ("8,", "have an empty place between separators"),
    ("8,0,4", "hold the width 0"),
    ("inf", "hold the width infinity"),
    ("nan", "hold the width blank"),
    ("2.5", "hold the width 2.5"),
    ("-3", "hold the width -3"),
    ("eight", "are not numbers"),
    (True, "hidden layers got TRUE"),
])
def test_hidden_layers_that_are_refused_with_the_fix(text, phrase):
    with pytest.raises(SettingError) as refused:
        parse_hidden(text)
    _has(str(refused.value), phrase, "write the widths of the hidden layers like 8 or 8,4")


def test_hidden_8_comma_comma_4_does_not_train_8_4(table):
    _has(_message(functions.train(table, "hours", "8,,4", "inputs=size,crew; epochs=5")), "hidden layers '8,,4' have an empty place")


# --- values too large ----------------------------------------------------------------------------

def test_a_value_too_large_to_scale_is_refused_at_training_naming_the_cell(table):
    bad = [list(r) for r in table]
    bad[4][0] = 1e308
    text = _message(functions.train(bad, "hours", 3, "inputs=size,crew; epochs=5"))
    _has(text, "column 'size', row 5 of the table: the number is too large to work with (1E+308)", "up to 1E+100", "rescale")
    bad[4][0] = 1.0
    bad[9][2] = -3e150
    _has(_message(functions.train(bad, "hours", 3, "inputs=size,crew; epochs=5")), "column 'hours', row 10 of the table: the number is too large", "(-3E+150)")


def test_predict_on_huge_inputs_gives_a_message_not_blanks(table, hours_model):
    huge = [list(r) for r in table[:6]]
    huge[3][1] = 1e200
    _has(_message(functions.predict(hours_model, huge)), "column 'crew', row 4 of the table: the number is too large to work with (1E+200)")


def test_a_row_the_network_cannot_answer_is_named_not_left_blank(table, hours_model, monkeypatch):
    rows = [list(r) for r in table[:6]]
    rows[2][0] = 95.0  # far beyond the training sizes (1 to 10)
    real = Model.predict

    def overflowing(self, X):
        values = real(self, X)
        values[1] = np.inf  # what an overflowing network gives; the second data row is range row 3
        return values

    monkeypatch.setattr(Model, "predict", overflowing)
    text = _message(functions.predict(hours_model, rows))
    _has(text, "column 'size', row 3 of the table: the model gives no finite answer for this row", "(95)", "the training rows held 1.")


# --- plain mistakes that used to get the bug message ------------------------------------------------

def test_seeds_that_are_not_whole_numbers_of_zero_or_more(table):
    assert _message(functions.split(table, 0.2, -1)) == "the seed is -1; give a whole number of 0 or more"
    assert _message(functions.split(table, 0.2, float("inf"))) == "the seed is infinity; give a finite number"
    assert _message(functions.split(table, 0.2, 1.5)) == "the seed is 1.5; give a whole number of 0 or more"
    _has(_message(functions.train(table, "hours", 3, "seed=-2")), "the seed is '-2'; give a whole number of 0 or more")


def test_an_infinite_lag_count():
    assert _message(functions.lags([["s"], [1.0], [2.0]], float("inf"))) == "the number of lags is infinity; give a finite number"


def test_a_skip_model_on_a_table_missing_a_column(table):
    block = functions.train(table, "hours", 2, "inputs=size,crew; blank_rows=skip; epochs=10")
    for call in (functions.predict, functions.score, functions.explain, functions.about):
        _has(_message(call(block, [row[:1] for row in table])), "the table has no column named 'crew'; its columns are: size")


def test_an_empty_model_argument_and_deep_nesting(table):
    assert _message(functions.predict([[]], table)) == "the model range has no cells; select a range with a header row and data rows"
    deep: list = [[1.0]]
    for _ in range(3000):
        deep = [deep]
    _has(_message(functions.predict(deep, table)), "row 1, column 1 of the model range holds a list of values rather than one value")
    _has(_message(functions.train(deep, "y")), "of the table range holds a list of values rather than one value")
    _has(_message(functions.split(table, [[0.2, 0.3]])), "the holdout share takes one cell, but it got a range of several cells")
    _has(_message(functions.train(table, [["hours", "size"]])), "the target takes one cell")
    assert functions.split(table, [[0.25]])[0] == ["split"]  # a 1 x 1 range is its cell


def test_as_grid_reads_column_like_ranges_and_refuses_nesting_without_type_errors():
    assert as_grid([["a"], 2, (3,), np.array([4.0])], "table") == [["a"], [2], [3], [4.0]]
    assert as_grid(np.array([[1.0, 2.0], [3.0, 4.0]]), "table") == [[1.0, 2.0], [3.0, 4.0]]
    assert as_grid([[1, 2], [3]], "table") == [[1, 2], [3, None]]
    column = [["x"]] + [[None]] * 100_000  # a whole column selected: one header and blanks
    assert len(as_grid(column, "table")) == 100_001
    for nested in ([[[1, [2]]]], [[{"a": 1}]], [[object()]], {"a": 1}):
        with pytest.raises(InputError):
            as_grid(nested, "table")
    with pytest.raises(InputError, match="range is empty"):
        as_grid([], "table")


# --- evaluation that could mislead ------------------------------------------------------------------

def test_score_says_which_rows_it_scored(table):
    split = functions.split(table, 0.25, 1)
    with_holdout = functions.train(table, "hours", 3, "inputs=size,crew; epochs=30", split)
    without = functions.train(table, "hours", 3, "inputs=size,crew; epochs=30")
    scored = lambda block, *more: dict(map(tuple, functions.score(block, table, *more)[1:]))  # noqa: E731
    assert scored(with_holdout, split)["rows scored"] == "holdout rows"
    assert scored(with_holdout, split)["rows"] == 10
    assert scored(with_holdout)["rows scored"] == "training rows: optimistic, score a holdout instead"
    assert scored(without)["rows scored"] == "training rows: optimistic, score a holdout instead"
    assert scored(without, split)["rows scored"] == "training rows: optimistic, score a holdout instead"  # no row was held out in training
    other = _table(rows=30, seed=9)
    answer = dict(map(tuple, functions.score(without, other)[1:]))
    assert answer["rows scored"] == "every row given, with no split: optimistic if the model was trained on them; score a holdout instead"


def test_mape_is_left_out_with_the_reason_when_the_target_crosses_zero():
    rng = np.random.default_rng(4)
    x = rng.uniform(-1, 1, 60)
    rows = [["x", "change"]] + [[float(a), float(2 * a + rng.normal(0, 0.1))] for a in x]
    block = functions.train(rows, "change", 3, "epochs=40")
    answer = dict(map(tuple, functions.score(block, rows)[1:]))
    assert "mape" not in answer
    _has(answer["mape left out"], "cross zero", "use MAE or RMSE")
    assert set(answer) >= {"rmse", "mae", "r2"}


def test_roc_auc_is_left_out_when_the_scored_rows_hold_one_class():
    rows = [["load", "late"]] + [[float(i), "yes" if i >= 15 else "no"] for i in range(30)]
    block = functions.train(rows, "late", 2, "epochs=30")
    answer = dict(map(tuple, functions.score(block, rows[:1] + rows[1:10])[1:]))
    assert "roc_auc" not in answer
    _has(answer["roc_auc left out"], "only one of the two classes")


# --- values in spreadsheet words --------------------------------------------------------------------

def test_cell_values_in_spreadsheet_words():
    assert [cell_in_words(v) for v in (None, float("nan"), np.float64(np.nan), "", 3.0, np.float64(2.5), np.int64(7), True, np.bool_(False))] == [
        "blank", "blank", "blank", "blank", "3", "2.5", "7", "TRUE", "FALSE",
    ]
    assert cell_in_words(datetime.datetime(2026, 3, 1)) == "2026-03-01"
    assert cell_in_words(datetime.datetime(2026, 3, 1, 14, 30)) == "2026-03-01 14:30:00"
    assert cell_in_words(datetime.date(2026, 3, 1)) == "2026-03-01"
    assert cell_in_words("n/a") == "'n/a'" and cell_in_words("#n/a") == "#N/A"
    assert cell_in_words([1, 2]) == "a list of values"
    assert cell_in_words("x" * 100) == "'" + "x" * 57 + "...'"
    assert [number_in_words(v) for v in (1e308, -3e150, 1e-5, 0.1, 123456789.0, float("inf"))] == [
        "1E+308", "-3E+150", "1E-05", "0.1", "123456789", "infinity",
    ]
    assert labels_in_words([1, 2.5, "b", True]) == "1, 2.5, b, TRUE"


def test_messages_built_from_cell_values_show_no_python_spelling(table):
    bad = [list(r) for r in table]
    bad[3][0] = datetime.datetime(2026, 3, 1)
    _has(_message(functions.train(bad, "hours", 3, "inputs=size,crew")), "(2026-03-01)")
    blank = [list(r) for r in table]
    blank[6][2] = None
    _has(_message(functions.train(blank, "hours", 3, "inputs=size,crew")), "(blank)")
    marks = functions.split(table, 0.2, 0)
    marks[4][0] = None
    _has(_message(functions.train(table, "hours", 3, "inputs=size,crew", marks)), "the split has blank in row 5 of the table")
    labels = [list(r) for r in table]
    labels[1][3] = 9.0  # one job of its own class
    _has(_message(functions.split(labels, 0.2, 0, "stratified rating")), "class '9' has a single row")
    for text in (_message(functions.train(bad, "hours", 3, "inputs=size,crew")), _message(functions.split(labels, 0.2, 0, "stratified rating"))):
        for python in ("None", "nan", "np.float64", "datetime."):
            assert python not in text, text


@pytest.mark.parametrize("module", ["sheetnet.cell_text", "sheetnet.limits", "sheetnet.cells"])
def test_docstring_examples_run(module):
    result = doctest.testmod(importlib.import_module(module))
    assert result.attempted > 0 and result.failed == 0


def test_the_cell_options_include_numbers_in_text():
    assert "numbers_in_text" in functions.CELL_OPTIONS
    assert cells.NUMBERS_IN_TEXT == ("error", "point", "comma")
