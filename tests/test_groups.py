"""Metrics by group against a hand count on a small table."""

import pytest

from sheetnet.groups import GAP_CAUTION, group_metrics

# eight invented loan decisions in two groups; 1 = approved (the positive class)
GROUPS = ["north", "north", "north", "north", "south", "south", "south", "south"]
ACTUAL = [1, 1, 0, 0, 1, 0, 0, 0]
PREDICTED = [1, 0, 1, 0, 1, 1, 1, 0]


def test_binary_rates_equal_a_hand_count():
    report = group_metrics("binary", GROUPS, ACTUAL, PREDICTED)
    assert report.groups == ("north", "south") and report.rows == (4, 4)
    north, south = report.values
    # north: hits at rows 1 and 4 -> accuracy 2/4; actual positives 2/4; predicted positives 2/4;
    # of the 2 positives 1 predicted positive -> TPR 1/2; of the 2 negatives 1 predicted positive -> FPR 1/2
    assert north == {"accuracy": 0.5, "actual_positive_rate": 0.5, "positive_rate": 0.5, "true_positive_rate": 0.5, "false_positive_rate": 0.5}
    # south: hits at rows 5 and 8 -> 2/4; actual positives 1/4; predicted positives 3/4; TPR 1/1; FPR 2/3
    assert south == {
        "accuracy": 0.5, "actual_positive_rate": 0.25, "positive_rate": 0.75, "true_positive_rate": 1.0, "false_positive_rate": pytest.approx(2 / 3),
    }
    gaps = {g.metric: g for g in report.gaps}
    assert gaps["positive_rate"].size == 0.25 and (gaps["positive_rate"].highest, gaps["positive_rate"].lowest) == ("south", "north")
    assert gaps["false_positive_rate"].size == pytest.approx(2 / 3 - 1 / 2)
    assert gaps["accuracy"].size == 0.0


def test_a_rate_over_no_rows_is_left_out_of_the_gap():
    report = group_metrics("binary", ["a", "a", "b", "b", "c"], [0, 0, 1, 0, 1], [1, 0, 1, 0, 0])
    a, b, c = report.values
    assert a["true_positive_rate"] is None and a["false_positive_rate"] == 0.5  # group a has no actual positives
    assert c["false_positive_rate"] is None and c["true_positive_rate"] == 0.0
    tpr = next(g for g in report.gaps if g.metric == "true_positive_rate")
    assert (tpr.size, tpr.highest, tpr.lowest) == (1.0, "b", "c")


def test_regression_by_group_by_hand():
    report = group_metrics("regression", ["x", "y", "x", "y"], [10.0, 20.0, 14.0, 30.0], [12.0, 20.0, 13.0, 26.0])
    x, y = report.values
    assert x == {"mean_actual": 12.0, "mean_predicted": 12.5, "mean_error": 0.5, "rmse": pytest.approx((2.5) ** 0.5), "mae": 1.5}
    assert y == {"mean_actual": 25.0, "mean_predicted": 23.0, "mean_error": -2.0, "rmse": pytest.approx(8 ** 0.5), "mae": 2.0}
    assert next(g for g in report.gaps if g.metric == "mae").size == 0.5


def test_many_classes_by_group():
    report = group_metrics("multiclass", ["p", "p", "p", "q"], [0, 1, 2, 2], [0, 1, 1, 2])
    assert report.values[0] == {"accuracy": pytest.approx(2 / 3), "balanced_accuracy": pytest.approx(2 / 3)}
    assert report.values[1] == {"accuracy": 1.0, "balanced_accuracy": 1.0}


def test_the_caution_asks_for_judgement_and_local_law():
    assert "judgement" in GAP_CAUTION and "local law" in GAP_CAUTION
