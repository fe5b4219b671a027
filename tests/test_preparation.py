"""Preparation: what must not change the predictions, checked with generated cases (hypothesis)."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import sheetnet
from sheetnet import errors
from sheetnet.preparation import fit_preparation, fit_target, numbers_of, planned_width, read_table, read_target, task_choice_in_words

FAST = dict(epochs=25, validation_share=0)
few_examples = settings(max_examples=12, deadline=None)


def _table(seed: int, rows: int = 60) -> tuple[pd.DataFrame, np.ndarray]:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(
        {
            "speed": rng.normal(50, 10, rows),
            "load": rng.uniform(0, 5, rows),
            "site": rng.choice(["north", "south", "east"], rows),
        }
    )
    y = 0.1 * frame["speed"] - frame["load"] ** 2 + (frame["site"] == "east") + rng.normal(0, 0.2, rows)
    return frame, y.to_numpy()


@few_examples
@given(seed=st.integers(0, 10_000), order=st.permutations(["speed", "load", "site"]))
def test_column_order_at_prediction_does_not_matter(seed, order):
    frame, y = _table(seed)
    model = sheetnet.fit(frame, y, hidden=(3,), seed=seed, **FAST)
    np.testing.assert_array_equal(model.predict(frame), model.predict(frame[list(order)]))


@few_examples
@given(seed=st.integers(0, 10_000), data=st.data())
def test_row_order_at_prediction_only_reorders_the_predictions(seed, data):
    frame, y = _table(seed)
    model = sheetnet.fit(frame, y, hidden=(3,), seed=seed, **FAST)
    order = np.array(data.draw(st.permutations(list(range(len(frame))))))
    np.testing.assert_array_equal(model.predict(frame.iloc[order]), model.predict(frame)[order])


@few_examples
@given(
    seed=st.integers(0, 10_000),
    factor=st.floats(1e-3, 1e3),
    shift=st.floats(-1e3, 1e3),
)
def test_rescaling_an_input_column_does_not_change_predictions(seed, factor, shift):
    # standardisation learned on the training rows removes any positive affine change of units
    frame, y = _table(seed)
    moved = frame.assign(speed=frame["speed"] * factor + shift)
    original = sheetnet.fit(frame, y, hidden=(3,), seed=seed, **FAST).predict(frame)
    rescaled = sheetnet.fit(moved, y, hidden=(3,), seed=seed, **FAST).predict(moved)
    np.testing.assert_allclose(rescaled, original, rtol=1e-7, atol=1e-7 * np.abs(original).max())


@few_examples
@given(seed=st.integers(0, 10_000), factor=st.floats(1e-3, 1e3), shift=st.floats(-1e4, 1e4))
def test_rescaling_a_regression_target_rescales_the_predictions(seed, factor, shift):
    frame, y = _table(seed)
    base = sheetnet.fit(frame, y, hidden=(3,), seed=seed, **FAST).predict(frame)
    moved = sheetnet.fit(frame, y * factor + shift, hidden=(3,), seed=seed, **FAST).predict(frame)
    np.testing.assert_allclose(moved, base * factor + shift, rtol=1e-7, atol=1e-7 * (abs(shift) + factor * np.abs(base).max()))


LABEL_SETS = [
    ("a", "b", "c"),
    (1, 2, 3),
    (-5.5, 0.25, 7.0),
    ("grade 1", "grade 2", "grade 3"),
]


@few_examples
@given(seed=st.integers(0, 10_000), labels=st.sampled_from(LABEL_SETS))
def test_class_labels_of_any_type_give_the_same_probabilities(seed, labels):
    # order-preserving relabelling maps class k to output k, so training is identical
    frame, y = _table(seed)
    index = np.digitize(y, np.quantile(y, [1 / 3, 2 / 3]))
    reference = sheetnet.fit(frame, np.array(["a", "b", "c"])[index], hidden=(3,), seed=seed, task="multiclass", **FAST)
    relabelled = sheetnet.fit(frame, [labels[i] for i in index], hidden=(3,), seed=seed, task="multiclass", **FAST)
    np.testing.assert_array_equal(relabelled.predict_proba(frame), reference.predict_proba(frame))
    assert relabelled.predict(frame).tolist() == [labels[i] for i in reference.target.class_indices(reference.predict(frame))]


@few_examples
@given(
    values=st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=3, max_size=40).filter(lambda v: np.std(v) > 1e-3 * (1 + np.abs(v).max()))
)
def test_standardised_training_columns_have_mean_zero_and_unit_spread(values):
    prep = fit_preparation(read_table(np.array(values).reshape(-1, 1)))
    column = prep.transform(np.array(values).reshape(-1, 1))[:, 0]
    assert abs(column.mean()) < 1e-9
    assert column.std() == pytest.approx(1.0, rel=1e-9)


@few_examples
@given(cells=st.lists(st.sampled_from(["red", "green", "blue", "grey"]), min_size=2, max_size=30).filter(lambda c: len(set(c)) > 1))
def test_one_hot_columns_hold_exactly_one_one_per_row(cells):
    frame = pd.DataFrame({"colour": cells})
    prep = fit_preparation(read_table(frame))
    encoded = prep.transform(frame)
    assert encoded.shape == (len(cells), len(set(cells)))
    np.testing.assert_array_equal(encoded.sum(axis=1), 1.0)
    names = prep.encoded_names()
    assert [names[j] for j in encoded.argmax(axis=1)] == [f"colour={c}" for c in cells]


def test_numbers_in_a_mostly_text_column_become_categories():
    frame = pd.DataFrame({"zone": ["A", "B", 3, "A", "B"]})
    prep = fit_preparation(read_table(frame))
    assert prep.inputs[0].categories == ("3", "A", "B")


def test_task_detection_rules():
    assert fit_target(read_target(np.arange(100) % 3)).task == "multiclass"
    assert fit_target(read_target(np.arange(100) % 2 + 0.5)).task == "binary"  # two values: always classes
    assert fit_target(read_target(np.linspace(0, 1, 100))).task == "regression"
    assert fit_target(read_target(np.arange(20) % 6)).task == "regression"  # too few rows per value for classes
    assert fit_target(read_target(["x", "y", "z", "x"])).task == "multiclass"


def test_list_rows_of_unequal_length_are_named():
    with pytest.raises(errors.InputError, match="row 2 has 1 cells but row 1 has 2"):
        read_table([[1, 2], [3]])


def test_duplicate_column_names_are_refused():
    frame = pd.DataFrame([[1, 2], [3, 4]], columns=["a", "a"])
    with pytest.raises(errors.InputError, match="two columns named 'a'"):
        read_table(frame)


def test_a_stray_text_in_a_numeric_target_is_a_bad_cell_not_a_class():
    values = [float(v) for v in np.linspace(1, 40, 40)]
    values[7] = "n/a"
    with pytest.raises(errors.BadValueError) as refused:
        fit_target(read_target(values))
    assert (refused.value.column, refused.value.row, refused.value.value) == ("target", 8, "n/a")
    assert str(refused.value).startswith("column 'target', row 8: text in a numeric column ('n/a'); type a number")
    assert fit_target(read_target(values), "multiclass").task == "multiclass"  # asked for: every value is a class
    mostly_text = ["x", "y", "x", "y", 3]
    assert fit_target(read_target(mostly_text)).classes == (3, "x", "y")


def test_too_many_classes_and_constant_targets_are_named_in_words():
    with pytest.raises(errors.SizeError, match="the target has 300 different values"):
        fit_target(read_target([f"id{i}" for i in range(300)]))
    with pytest.raises(errors.ConstantColumnError, match=r"the same value \(2\.5\) in every training row"):
        fit_target(read_target(np.full(10, 2.5)))


def test_the_task_choice_in_words_names_the_rule_and_the_override():
    assert task_choice_in_words("regression", "regression", ()) == "regression, as the setting task=regression asked"
    assert task_choice_in_words("binary", "multiclass", ("no", "yes")).startswith("binary: the setting task=multiclass asked for classes")
    assert "task=multiclass" in task_choice_in_words("regression", "auto", ())
    assert task_choice_in_words("binary", "auto", ("no", "yes")).endswith("so the model tells which of the two applies")
    assert "task=regression" in task_choice_in_words("binary", "auto", (0, 1))
    assert "holds text with 3 different values (a, b, c)" in task_choice_in_words("multiclass", "auto", ("a", "b", "c"))


def test_planned_width_counts_one_input_per_category():
    frame = pd.DataFrame({"speed": [1.0, 2.0, 3.0, 4.0], "site": ["n", "s", "e", "n"], "code": [1.0, 2.0, 1.0, 7.0]})
    assert planned_width(read_table(frame)) == 1 + 3 + 1
    assert planned_width(read_table(frame), categories=["code"]) == 1 + 3 + 3
    assert planned_width(read_table(frame), categories=["code"]) == fit_preparation(read_table(frame), ["code"]).width


def test_numbers_too_large_to_scale_are_named():
    with pytest.raises(errors.BadValueError, match=r"column 'load', row 3: the number is too large to work with \(1E\+200\)"):
        numbers_of("load", np.array([1.0, 2.0, 1e200]))
    with pytest.raises(errors.BadValueError, match=r"row 2: the number is too large"):
        numbers_of("load", np.array([1.0, -1e101], dtype=object))


# --- input containers: each is read by rows, or refused in words ---------------------------------

def _numbers(rows: int = 40) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(7)
    X = rng.normal(size=(rows, 3))
    return X, X[:, 0] - 2 * X[:, 1] + rng.normal(0, 0.1, rows)


def test_a_polars_frame_is_read_by_rows_with_its_names():
    pl = pytest.importorskip("polars", reason="polars is a test-only extra (pip install '.[dev]')")
    X, y = _numbers()
    columns = {"a": X[:, 0], "b": X[:, 1], "c": X[:, 2], "site": np.where(X[:, 2] > 0, "hill", "vale").tolist()}
    model = sheetnet.fit(pl.DataFrame(columns), pl.Series("y", y), hidden=(3,), **FAST)
    assert model.input_names == ("a", "b", "c", "site") and model.preparation.named
    frame = pd.DataFrame(columns)
    np.testing.assert_array_equal(model.predict(pl.DataFrame(columns)), sheetnet.fit(frame, y, hidden=(3,), **FAST).predict(frame))


def test_a_polars_category_column_is_a_category_input():
    pl = pytest.importorskip("polars", reason="polars is a test-only extra (pip install '.[dev]')")
    frame = pl.DataFrame({"size": [1.0, 2.0, 3.0, 4.0] * 5, "kind": pl.Series(["a", "b"] * 10, dtype=pl.Categorical)})
    prep = fit_preparation(read_table(frame))
    assert [type(spec).__name__ for spec in prep.inputs] == ["NumericInput", "CategoryInput"]


def test_a_sparse_matrix_is_refused_with_what_to_do():
    from scipy import sparse

    X, y = _numbers()
    with pytest.raises(errors.InputError, match=r"the inputs are a sparse matrix \(40 by 3\); .*X\.toarray\(\)"):
        sheetnet.fit(sparse.csr_matrix(X), y)
    with pytest.raises(errors.InputError, match="the target is a sparse matrix"):
        sheetnet.fit(X, sparse.csr_matrix(y.reshape(-1, 1)))


class _OnlyArray:
    """An array-like offering nothing but __array__ (as some other libraries' arrays do)."""

    def __init__(self, values: np.ndarray) -> None:
        self.values = values

    def __array__(self, dtype=None, copy=None):
        return self.values


def test_an_object_offering_only_array_is_read():
    X, y = _numbers()
    model = sheetnet.fit(_OnlyArray(X), _OnlyArray(y), hidden=(2,), **FAST)
    np.testing.assert_allclose(model.predict(_OnlyArray(X)), model.predict(X), rtol=1e-12)  # arrays take the folded fast path


def test_durations_are_numbers_of_days():
    frame = pd.DataFrame({"wait": pd.to_timedelta([12, 36, 60, 84], unit="h")})
    (column,) = read_table(frame).columns
    assert column.tolist() == [0.5, 1.5, 2.5, 3.5]
    import datetime

    assert numbers_of("wait", np.array([datetime.timedelta(hours=6)], dtype=object)).tolist() == [0.25]
    with pytest.raises(errors.BadValueError, match="column 'wait', row 2: the cell is blank"):
        numbers_of("wait", read_table(pd.DataFrame({"wait": pd.to_timedelta([1, None], unit="D")})).columns[0])


def test_an_integer_category_dtype_is_a_category_input():
    frame = pd.DataFrame({"grade": pd.Categorical([1, 2, 3, 1] * 5), "size": np.arange(20.0)})
    prep = fit_preparation(read_table(frame))
    assert prep.inputs[0].categories == ("1", "2", "3")  # type: ignore[union-attr]
    assert planned_width(read_table(frame)) == 4


def test_dates_of_any_resolution_stay_dates():
    frame = pd.DataFrame({"day": pd.to_datetime(["2026-01-01", "2026-02-01", "2026-03-01", "2026-04-01"]), "n": [1.0, 2, 3, 4]})
    with pytest.raises(errors.BadValueError, match="column 'day', row 1: a date or time in a numeric column"):
        sheetnet.fit(frame, [1.0, 2.0, 3.5, 4.0], **FAST)


def test_a_table_without_columns_is_reported_as_such():
    with pytest.raises(errors.NotEnoughRowsError, match="the table has no input columns"):
        sheetnet.fit(np.empty((12, 0)), np.arange(12.0))
    assert read_table(pd.DataFrame(index=range(5))).n_rows == 5


def test_a_missing_target_says_so():
    X, _ = _numbers()
    with pytest.raises(errors.InputError, match="the target is missing: .* the target y is None; pass one value or label per input row"):
        sheetnet.fit(X, None)
    with pytest.raises(errors.InputError, match="no inputs were given"):
        sheetnet.fit(None, [1, 2, 3, 4])


def test_complex_numbers_and_cells_holding_several_values_are_refused():
    with pytest.raises(errors.InputError, match=r"column 'x1' holds complex numbers \(Complex data not supported\)"):
        read_table(np.array([[1 + 2j], [3 + 0j]]))
    X = np.arange(20.0).reshape(10, 2).astype(object)
    X[3, 1] = {"a": 1}
    with pytest.raises(errors.CellTypeError, match="column 'x2', row 4: the cell holds a dict, not one value") as raised:
        sheetnet.fit(X, np.arange(10.0), **FAST)
    assert isinstance(raised.value, TypeError)


def test_pandas_missing_values_are_blank_cells():
    frame = pd.DataFrame({"count": pd.array([1, None, 3, 4], dtype="Int64")})
    with pytest.raises(errors.BadValueError, match="column 'count', row 2: the cell is blank or not a number"):
        sheetnet.fit(frame, [1.0, 2.0, 3.0, 4.5], **FAST)
