"""Metric and setting labels in words for people, beside the identifiers code keeps using.

`METRIC_LABELS` maps each metric identifier (``balanced_accuracy``) to its
label (``Balanced accuracy``); `metric_in_words` writes a value the way a
reader expects it (``MAPE 36.6 %``, ``RMSE 2.31``). Number formats for cells
live here too, so every sheet sheetnet writes shows the same digits.
"""

from __future__ import annotations

import math
from typing import Any

METRIC_LABELS = {
    "rmse": "RMSE",
    "mae": "MAE",
    "mape": "MAPE",
    "r2": "R²",
    "accuracy": "Accuracy",
    "balanced_accuracy": "Balanced accuracy",
    "log_loss": "Log-loss",
    "brier": "Brier score",
    "roc_auc": "ROC AUC",
    "precision": "Precision",
    "recall": "Recall",
    "f1": "F1",
    "positive_rate": "Predicted positive rate",
    "actual_positive_rate": "Actual positive rate",
    "true_positive_rate": "True-positive rate",
    "false_positive_rate": "False-positive rate",
    "mean_actual": "Mean actual",
    "mean_predicted": "Mean predicted",
    "mean_error": "Mean error (predicted - actual)",
}
PERCENT_METRICS = frozenset({
    "mape", "accuracy", "balanced_accuracy", "precision", "recall", "positive_rate", "actual_positive_rate",
    "true_positive_rate", "false_positive_rate",
})  # shares people read as percentages
PERCENT_FORMAT = "0.0%"  # Excel's codes of the formats below (the demo's openpyxl cells)
METRIC_FORMAT = "0.000"
PROBABILITY_FORMAT = "0.000"
PERCENT = "percent1"  # our names of them (`sheetnet.placements.NUMBER_FORMATS`), for placements
METRIC = "decimal3"


def metric_label(name: str) -> str:
    """``balanced_accuracy`` -> ``Balanced accuracy``; an unknown identifier is shown with spaces."""
    return METRIC_LABELS.get(name, name.replace("_", " ").capitalize())


def percent_in_words(share: float) -> str:
    """A share as people write a percentage: 0.9 -> '90 %', 0.366 -> '36.6 %'."""
    return f"{share * 100:.3g} %"


def value_in_words(name: str, value: Any) -> str:
    """A metric's value as people read it: a percentage for shares, else 3 significant digits."""
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not math.isfinite(float(value)):
        return str(value)
    if name in PERCENT_METRICS:
        return percent_in_words(float(value))
    return f"{float(value):.3g}"


def metric_in_words(name: str, value: Any) -> str:
    """``mape``, 0.366 -> ``MAPE 36.6 %``."""
    return f"{metric_label(name)} {value_in_words(name, value)}"


def number_format(name: str) -> str:
    """Our number format (a `sheetnet.placements.NUMBER_FORMATS` name) of a metric's value."""
    return PERCENT if name in PERCENT_METRICS else METRIC


def excel_format(name: str) -> str:
    """Excel's code of a metric's number format: ``0.0%`` for shares, ``0.000`` for the rest."""
    return PERCENT_FORMAT if name in PERCENT_METRICS else METRIC_FORMAT
