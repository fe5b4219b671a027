"""Every metric against sklearn.metrics on the same inputs (reference: scikit-learn)."""

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
