"""Metrics by group: how a model does for each value of a group column, and the largest gap.

Pure NumPy, no I/O. A gap between groups is a fact about these rows, not a
verdict: whether it is acceptable needs a person's judgement and depends on
local law (see `GAP_CAUTION`).

Per group, regression: rows, mean actual, mean predicted, mean error
(predicted - actual), RMSE, MAE. Two classes (the second class counts as
positive): rows, accuracy, actual and predicted positive rates, true-positive
rate (recall of the positives) and false-positive rate (share of the
negatives predicted positive); a rate over no rows is None. More classes:
rows, accuracy, balanced accuracy.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from .errors import InputError

GAP_CAUTION = (
    "a gap between groups is a measurement on these rows, not a verdict: whether it is fair needs a person's judgement "
    "and the local law on the decisions the model supports (credit, hiring, medical or safety decisions above all); "
    "small groups give unsteady rates"
)
REGRESSION_METRICS = ("mean_actual", "mean_predicted", "mean_error", "rmse", "mae")
BINARY_METRICS = ("accuracy", "actual_positive_rate", "positive_rate", "true_positive_rate", "false_positive_rate")
MULTICLASS_METRICS = ("accuracy", "balanced_accuracy")


@dataclass(frozen=True)
class Gap:
    metric: str
    size: float  # highest minus lowest over the groups where the metric is defined
    highest: Any  # group label
    lowest: Any


@dataclass(frozen=True)
class GroupReport:
    metrics: tuple[str, ...]
    groups: tuple[Any, ...]  # labels, in order of first appearance
    rows: tuple[int, ...]
    values: tuple[dict[str, float | None], ...]  # one per group
    gaps: tuple[Gap, ...]  # one per metric defined in two groups or more


def _share(top: np.ndarray, bottom: np.ndarray) -> float | None:
    return float(top.sum() / bottom.sum()) if bottom.sum() else None


def _regression(actual: np.ndarray, predicted: np.ndarray) -> dict[str, float | None]:
    error = predicted - actual
    return {
        "mean_actual": float(actual.mean()), "mean_predicted": float(predicted.mean()), "mean_error": float(error.mean()),
        "rmse": float(np.sqrt(np.mean(error ** 2))), "mae": float(np.mean(np.abs(error))),
    }


def _binary(actual: np.ndarray, predicted: np.ndarray) -> dict[str, float | None]:
    positive, said = actual == 1, predicted == 1
    return {
        "accuracy": float(np.mean(actual == predicted)),
        "actual_positive_rate": float(positive.mean()),
        "positive_rate": float(said.mean()),
        "true_positive_rate": _share(said & positive, positive),
        "false_positive_rate": _share(said & ~positive, ~positive),
    }


def _multiclass(actual: np.ndarray, predicted: np.ndarray) -> dict[str, float | None]:
    recalls = [float(np.mean(predicted[actual == k] == k)) for k in np.unique(actual)]
    return {"accuracy": float(np.mean(actual == predicted)), "balanced_accuracy": float(np.mean(recalls))}


def group_metrics(task: str, groups: Sequence[Any], actual: Any, predicted: Any) -> GroupReport:
    """Per-group metrics and the largest gap of each.

    ``task``: regression, binary or multiclass. ``groups``: one label per row.
    ``actual``, ``predicted``: values (regression) or class indices (classes, 1
    is the positive class of two), shape (rows,).

    >>> report = group_metrics("binary", ["a", "a", "b", "b"], [1, 0, 1, 0], [1, 1, 0, 0])
    >>> [v["positive_rate"] for v in report.values]
    [1.0, 0.0]
    """
    labels = list(groups)
    a = np.asarray(actual, dtype=np.float64 if task == "regression" else np.int64)
    p = np.asarray(predicted, dtype=np.float64 if task == "regression" else np.int64)
    if not len(labels) == len(a) == len(p):
        raise InputError(f"{len(labels)} group labels for {len(a)} rows; give one group per row")
    if not labels:
        raise InputError("no rows to compare by group; pass at least one row")
    order = list(dict.fromkeys(labels))
    names = REGRESSION_METRICS if task == "regression" else BINARY_METRICS if task == "binary" else MULTICLASS_METRICS
    measure = _regression if task == "regression" else _binary if task == "binary" else _multiclass
    position = {g: k for k, g in enumerate(order)}
    index = np.array([position[g] for g in labels])
    values, rows = [], []
    for k in range(len(order)):
        inside = index == k
        rows.append(int(inside.sum()))
        values.append(measure(a[inside], p[inside]))
    gaps = []
    for name in names:
        defined = [(float(v[name]), g) for v, g in zip(values, order) if v[name] is not None]  # type: ignore[arg-type]
        if len(defined) >= 2:
            high, low = max(defined, key=lambda pair: pair[0]), min(defined, key=lambda pair: pair[0])
            gaps.append(Gap(name, high[0] - low[0], high[1], low[1]))
    return GroupReport(tuple(names), tuple(order), tuple(rows), tuple(values), tuple(gaps))
