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
