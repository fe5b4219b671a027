"""Every metric against sklearn.metrics on the same inputs (reference: scikit-learn)."""

import warnings

import numpy as np
import pytest
from sklearn import metrics as reference

from sheetnet import metrics


@pytest.fixture
def regression_pair(rng):
    actual = rng.normal(10, 3, 80)
    return actual, actual + rng.normal(0, 1.5, 80)


def test_regression_metrics_equal_scikit_learn(regression_pair):
    actual, predicted = regression_pair
    found = metrics.regression_metrics(actual, predicted)
    assert found["rmse"] == pytest.approx(np.sqrt(reference.mean_squared_error(actual, predicted)), rel=1e-12)
    assert found["mae"] == pytest.approx(reference.mean_absolute_error(actual, predicted), rel=1e-12)
    assert found["mape"] == pytest.approx(reference.mean_absolute_percentage_error(actual, predicted), rel=1e-12)
    assert found["r2"] == pytest.approx(reference.r2_score(actual, predicted), rel=1e-12)


def test_mape_is_undefined_when_an_actual_value_is_zero():
    assert metrics.mape([0.0, 2.0], [1.0, 2.0]) is None
    # scikit-learn's mean_absolute_percentage_error divides by max(|y|, machine epsilon) instead (its documented
    # behaviour), so one zero actual value makes the mean astronomically large: the reason sheetnet leaves MAPE out
    assert reference.mean_absolute_percentage_error([0.0, 2.0], [1.0, 2.0]) > 1e14
    assert "an actual value is 0" in metrics.mape_left_out_reason([0.0, 2.0])


def test_mape_is_left_out_for_targets_that_cross_or_come_near_zero():
    crossing = np.array([-3.0, -1.0, 2.0, 5.0])
    assert metrics.mape(crossing, crossing + 0.5) is None
    assert "cross zero" in metrics.mape_left_out_reason(crossing)
    near = np.array([100.0, 120.0, 0.2, 90.0])  # 0.2 is below 1% of the mean size (about 78)
    assert metrics.mape(near, near + 1.0) is None
    reason = metrics.mape_left_out_reason(near)
    assert reason.startswith("some actual values lie near 0 (the smallest size is 0.2, against a typical size of 77.5)")  # 310.2 / 4, to 3 digits
    negative = np.array([-10.0, -12.0, -9.0])  # all one sign and well away from 0: defined, and equal to the reference
    assert metrics.mape_left_out_reason(negative) is None
    assert metrics.mape(negative, negative + 1.0) == pytest.approx(reference.mean_absolute_percentage_error(negative, negative + 1.0), rel=1e-12)


def test_regression_metrics_keep_a_none_for_an_undefined_mape():
    found = metrics.regression_metrics([-1.0, 1.0, 2.0], [-1.5, 1.0, 2.5])
    assert found["mape"] is None
    assert found["rmse"] == pytest.approx(np.sqrt(reference.mean_squared_error([-1.0, 1.0, 2.0], [-1.5, 1.0, 2.5])), rel=1e-12)
    assert found["mae"] == pytest.approx(reference.mean_absolute_error([-1.0, 1.0, 2.0], [-1.5, 1.0, 2.5]), rel=1e-12)
    assert found["r2"] == pytest.approx(reference.r2_score([-1.0, 1.0, 2.0], [-1.5, 1.0, 2.5]), rel=1e-12)


def test_roc_auc_is_none_for_one_class_where_the_reference_has_no_value():
    # scikit-learn's roc_auc_score has no value either with one class present: the installed version warns and
    # returns NaN (older versions raised ValueError); sheetnet returns None and SCORE names the reason
    assert metrics.roc_auc(np.array([True, True, True]), np.array([0.2, 0.5, 0.9])) is None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            value = reference.roc_auc_score([1, 1, 1], [0.2, 0.5, 0.9])
        except ValueError:
            value = float("nan")
    assert np.isnan(value)


def _classification_case(rng, n_classes, rows=120):
    actual = rng.integers(0, n_classes, rows)
    logits = rng.normal(size=(rows, n_classes)) + 1.5 * np.eye(n_classes)[actual]
    probabilities = np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True)
    return actual, probabilities


@pytest.mark.parametrize("n_classes", [2, 3, 5])
def test_classification_metrics_equal_scikit_learn(n_classes, rng):
    actual, probabilities = _classification_case(rng, n_classes)
    predicted = probabilities.argmax(axis=1)
    labels = [f"c{i}" for i in range(n_classes)]
    found = metrics.classification_metrics(actual, probabilities, labels)
    assert found["accuracy"] == pytest.approx(reference.accuracy_score(actual, predicted), rel=1e-12)
    assert found["balanced_accuracy"] == pytest.approx(reference.balanced_accuracy_score(actual, predicted), rel=1e-12)
    precision, recall, f1, support = reference.precision_recall_fscore_support(actual, predicted, labels=range(n_classes), zero_division=0)
    for i, label in enumerate(labels):
        assert found["per_class"][label]["precision"] == pytest.approx(precision[i], rel=1e-12)
        assert found["per_class"][label]["recall"] == pytest.approx(recall[i], rel=1e-12)
        assert found["per_class"][label]["f1"] == pytest.approx(f1[i], rel=1e-12)
        assert found["per_class"][label]["rows"] == support[i]
    np.testing.assert_array_equal(found["confusion"], reference.confusion_matrix(actual, predicted, labels=range(n_classes)))
    assert found["log_loss"] == pytest.approx(reference.log_loss(actual, probabilities, labels=range(n_classes)), rel=1e-12)
    if n_classes == 2:
        assert found["roc_auc"] == pytest.approx(reference.roc_auc_score(actual, probabilities[:, 1]), rel=1e-12)
        assert found["brier"] == pytest.approx(reference.brier_score_loss(actual, probabilities[:, 1]), rel=1e-12)
    else:
        assert "roc_auc" not in found
        assert found["brier"] == pytest.approx(reference.brier_score_loss(actual, probabilities, labels=range(n_classes)), rel=1e-12)


def test_roc_auc_counts_ties_half(rng):
    # tied scores: the reference treats each tied positive/negative pair as one half
    actual = np.array([0, 1, 0, 1, 1, 0])
    score = np.array([0.2, 0.2, 0.5, 0.5, 0.9, 0.1])
    assert metrics.roc_auc(actual == 1, score) == pytest.approx(reference.roc_auc_score(actual, score), rel=1e-12)


def test_metrics_of_a_class_never_predicted_are_zero_not_nan():
    actual = np.array([0, 1, 2, 2])
    probabilities = np.array([[0.9, 0.05, 0.05], [0.8, 0.1, 0.1], [0.1, 0.1, 0.8], [0.1, 0.1, 0.8]])
    found = metrics.classification_metrics(actual, probabilities, ["a", "b", "c"])
    assert found["per_class"]["b"] == {"precision": 0.0, "recall": 0.0, "f1": 0.0, "rows": 1}
