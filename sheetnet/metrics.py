"""Error metrics for regression and classification, pure NumPy.

Definitions follow the usual textbook forms (and agree with
``sklearn.metrics``, which the tests check):

- RMSE ``sqrt(mean((y - p)^2))``; MAE ``mean(|y - p|)``; MAPE
  ``mean(|y - p| / |y|)`` as a share, left out (None, with the reason from
  `mape_left_out_reason`) when an actual value is 0, the actual values cross
  zero, or some lie near zero against the typical size, where percentage
  errors are undefined or explode; R^2 ``1 - SS_res / SS_tot``.
- Accuracy; balanced accuracy (mean recall over classes); precision, recall
  and F1 per class (0 where undefined); ROC AUC for two classes (Mann-Whitney
  form, ties counted half); log-loss (mean negative log probability of the
  true class, probabilities clipped to [eps, 1 - eps]); Brier score (mean
  squared difference between probabilities and one-hot truth: for two classes
  the positive class alone, the traditional form); confusion matrix (rows:
  actual class, columns: predicted class).
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np
from scipy.stats import rankdata

from .cell_text import number_in_words
from .errors import InputError


def _pair(actual: Any, predicted: Any) -> tuple[np.ndarray, np.ndarray]:
    a = np.asarray(actual, dtype=np.float64).ravel()
    p = np.asarray(predicted, dtype=np.float64).ravel()
    if a.shape != p.shape:
        raise InputError(f"{len(a)} actual values but {len(p)} predictions; pass one prediction per row")
    if len(a) == 0:
        raise InputError("no rows to score; pass at least one row")
    return a, p


def rmse(actual: Any, predicted: Any) -> float:
    a, p = _pair(actual, predicted)
    return float(np.sqrt(np.mean((a - p) ** 2)))


def mae(actual: Any, predicted: Any) -> float:
    a, p = _pair(actual, predicted)
    return float(np.mean(np.abs(a - p)))


NEAR_ZERO_SHARE = 0.01  # an actual value below this share of the mean absolute actual value counts as near zero
ROC_AUC_LEFT_OUT = "the scored rows hold only one of the two classes, so there is no ranking of one against the other to measure"


def mape_left_out_reason(actual: Any) -> str | None:
    """Why MAPE is not meaningful for these actual values, or None when it is."""
    a = np.asarray(actual, dtype=np.float64).ravel()
    size = np.abs(a)
    if np.any(a == 0):
        return "an actual value is 0, where a percentage error is undefined; use MAE or RMSE"
    if a.min() < 0 < a.max():
        return "the actual values cross zero, so percentage errors are not comparable and explode near 0; use MAE or RMSE"
    typical = float(size.mean())
    if size.min() < NEAR_ZERO_SHARE * typical:
        return (
            f"some actual values lie near 0 (the smallest size is {_rounded(size.min())}, against a typical size of {_rounded(typical)}), "
            "where percentage errors explode; use MAE or RMSE"
        )
    return None


def _rounded(value: float) -> str:
    return number_in_words(float(f"{value:.3g}"))


def mape(actual: Any, predicted: Any) -> float | None:
    """Mean absolute percentage error as a share (0.1 is 10 %); None when `mape_left_out_reason` has a reason."""
    a, p = _pair(actual, predicted)
    if mape_left_out_reason(a) is not None:
        return None
    return float(np.mean(np.abs(a - p) / np.abs(a)))


def r2(actual: Any, predicted: Any) -> float:
    a, p = _pair(actual, predicted)
    total = float(np.sum((a - a.mean()) ** 2))
    residual = float(np.sum((a - p) ** 2))
    if total == 0:
        return 1.0 if residual == 0 else 0.0
    return 1.0 - residual / total


def regression_metrics(actual: Any, predicted: Any) -> dict[str, float | None]:
    """RMSE, MAE, MAPE (None when undefined) and R^2 in one dict."""
    return {"rmse": rmse(actual, predicted), "mae": mae(actual, predicted), "mape": mape(actual, predicted), "r2": r2(actual, predicted)}


def confusion_matrix(actual_index: np.ndarray, predicted_index: np.ndarray, n_classes: int) -> np.ndarray:
    """Counts, shape (classes, classes): row = actual class, column = predicted class."""
    matrix = np.zeros((n_classes, n_classes), dtype=np.int64)
    np.add.at(matrix, (np.asarray(actual_index), np.asarray(predicted_index)), 1)
    return matrix


def roc_auc(actual_positive: np.ndarray, score: np.ndarray) -> float | None:
    """Area under the ROC curve; None when only one class is present."""
    positive = np.asarray(actual_positive, dtype=bool)
    n_pos = int(positive.sum())
    n_neg = len(positive) - n_pos
    if n_pos == 0 or n_neg == 0:
        return None
    ranks = rankdata(score)
    return float((ranks[positive].sum() - n_pos * (n_pos + 1) / 2) / (n_pos * n_neg))


def log_loss(actual_index: np.ndarray, probabilities: np.ndarray) -> float:
    eps = np.finfo(np.float64).eps
    p = np.clip(np.asarray(probabilities, dtype=np.float64), eps, 1 - eps)
    p = p / p.sum(axis=1, keepdims=True)
    return float(-np.mean(np.log(p[np.arange(len(p)), actual_index])))


def brier(actual_index: np.ndarray, probabilities: np.ndarray) -> float:
    p = np.asarray(probabilities, dtype=np.float64)
    if p.shape[1] == 2:
        return float(np.mean((p[:, 1] - (np.asarray(actual_index) == 1)) ** 2))
    truth = np.eye(p.shape[1])[actual_index]
    return float(np.mean(np.sum((p - truth) ** 2, axis=1)))


def _safe_divide(top: np.ndarray, bottom: np.ndarray) -> np.ndarray:
    out = np.zeros_like(top, dtype=np.float64)
    np.divide(top, bottom, out=out, where=bottom > 0)
    return out


def classification_metrics(
    actual_index: np.ndarray,
    probabilities: np.ndarray,
    classes: Sequence[Any],
    predicted_index: np.ndarray | None = None,
) -> dict[str, Any]:
    """Every classification metric from class indices and probabilities (rows, classes).

    ``predicted_index`` defaults to the most probable class; binary models pass
    their threshold decision.
    """
    actual_index = np.asarray(actual_index, dtype=np.int64)
    probabilities = np.asarray(probabilities, dtype=np.float64)
    if probabilities.ndim != 2 or probabilities.shape != (len(actual_index), len(classes)):
        raise InputError(f"probabilities have shape {probabilities.shape}; expected ({len(actual_index)}, {len(classes)})")
    if predicted_index is None:
        predicted_index = probabilities.argmax(axis=1)
    k = len(classes)
    matrix = confusion_matrix(actual_index, predicted_index, k)
    hits = np.diag(matrix).astype(np.float64)
    actual_counts = matrix.sum(axis=1)
    predicted_counts = matrix.sum(axis=0)
    precision = _safe_divide(hits, predicted_counts)
    recall = _safe_divide(hits, actual_counts)
    f1 = _safe_divide(2 * precision * recall, precision + recall)
    present = actual_counts > 0
    result: dict[str, Any] = {
        "accuracy": float(hits.sum() / len(actual_index)),
        "balanced_accuracy": float(recall[present].mean()),
        "log_loss": log_loss(actual_index, probabilities),
        "brier": brier(actual_index, probabilities),
        "per_class": {
            classes[i]: {"precision": float(precision[i]), "recall": float(recall[i]), "f1": float(f1[i]), "rows": int(actual_counts[i])}
            for i in range(k)
        },
        "confusion": matrix,
    }
    if k == 2:
        result["roc_auc"] = roc_auc(actual_index == 1, probabilities[:, 1])
    return result
