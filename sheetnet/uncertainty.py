"""How far to trust a number: conformal prediction intervals and sets, bootstrap error bars, reliability.

Pure NumPy, no I/O.

- Split-conformal prediction (Vovk, Gammerman & Shafer 2005, "Algorithmic
  Learning in a Random World"; Lei, G'Sell, Rinaldo, Tibshirani & Wasserman
  2018, "Distribution-free predictive inference for regression"): on ``n``
  rows the network did not train on, take each row's nonconformity score
  and keep the ``ceil((n + 1) * level)``-th smallest as the quantile ``q``.
  For a new row exchangeable with those rows, the truth lies in the
  interval (regression) or set (classes) with probability at least
  ``level`` (and below ``level + 1 / (n + 1)`` when scores do not tie).
  Regression scores are absolute residuals, so the interval is the
  prediction plus or minus ``q``. Class scores are one minus the
  probability of the true class (Sadinle, Lei & Wasserman 2019), so the set
  holds every class whose probability is at least ``1 - q``.
- Percentile bootstrap (Efron & Tibshirani 1993, "An Introduction to the
  Bootstrap", ch. 13): resample the scored rows with replacement, compute
  the metric on each resample, and take the ``(1 - level) / 2`` and
  ``(1 + level) / 2`` quantiles of the resampled metrics. The resamples are
  one index matrix (resamples x rows, `resample_indices`, drawn in one call:
  the same indices as drawing each resample in turn from the same seed);
  `metric_error_bars` counts how often each row is drawn into each resample
  and computes every metric of every resample at once as counts-weighted
  sums (matrix-vector products; `resampled_regression_metrics`,
  `resampled_class_metrics`, the definitions of `sheetnet.metrics`). The
  resamples are the ones drawing them in turn gives; the intervals agree
  with computing each resample's metrics in turn to about 1e-13 (sums
  are taken in another order), not bit for bit.
- Reliability table (a calibration check, common practice, no source): predicted
  probabilities cut into equal-width bins (the last bin closed), each with its
  rows, mean predicted probability and observed share; SCORE's ``reliability``
  argument shows it in cells.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable, Mapping

import numpy as np

from .errors import InputError, SettingError

DEFAULT_LEVEL = 0.9
BOOTSTRAP_RESAMPLES = 1000
BOOTSTRAP_SEED = 0
BOOTSTRAP_METHOD = "percentile bootstrap over the scored rows"
SCORES = ("absolute residual", "one minus probability of the true class")


@dataclass(frozen=True)
class Conformal:
    """A split-conformal calibration: ``quantile`` of the nonconformity ``score`` over ``rows`` held-out rows.

    Regression: the interval is prediction +- quantile (in the target's units).
    Classes: the set holds each class with probability >= 1 - quantile.
    """

    level: float  # nominal coverage, 0.9 for 90 %
    rows: int  # calibration rows (rows the network did not train on)
    quantile: float
    score: str  # one of SCORES


def read_level(value: Any, what: str = "interval level") -> float:
    """A coverage level from a cell: 0.9, 90, '90%' or blank (the default, 90 %)."""
    if value is None or (isinstance(value, str) and not value.strip()) or (isinstance(value, float) and math.isnan(value)):
        return DEFAULT_LEVEL
    text = str(value).strip()
    percent = text.endswith("%")
    try:
        number = float(text.rstrip("%").strip()) if isinstance(value, str) else float(value)
    except (TypeError, ValueError):
        raise SettingError(f"the {what} is '{text}'; give a share like 0.9 or a percentage like 90%") from None
    if isinstance(value, bool) or not math.isfinite(number):
        raise SettingError(f"the {what} is '{text}'; give a share like 0.9 or a percentage like 90%")
    if percent or number > 1:
        number /= 100
    if not 0.5 <= number < 1:
        raise SettingError(f"the {what} is '{text}'; give a level from 50% up to (not including) 100%, like 90%")
    return number


def rows_needed(level: float) -> int:
    """The fewest calibration rows that give a finite quantile at ``level``: (n + 1) * level <= n."""
    return math.ceil(level / (1 - level) - 1e-9)


def conformal_quantile(scores: Any, level: float) -> float:
    """The ``ceil((n + 1) * level)``-th smallest score (Lei et al. 2018, section 2.2).

    >>> conformal_quantile([0.1, 0.4, 0.2, 0.3, 0.5, 0.9, 0.7, 0.6, 0.8], 0.9)
    0.9
    """
    values = np.sort(np.asarray(scores, dtype=np.float64).ravel())
    n = len(values)
    k = math.ceil((n + 1) * level - 1e-9)
    if k > n:
        raise InputError(
            f"an interval at {level:.0%} needs at least {rows_needed(level)} rows the network did not train on, and there are {n}; "
            "hold out more rows (a larger holdout share) or choose a lower level"
        )
    return float(values[k - 1])


def calibrate_values(actual: Any, predicted: Any, level: float = DEFAULT_LEVEL) -> Conformal:
    """Regression calibration from held-out actual values and predictions, shape (rows,)."""
    residuals = np.abs(np.asarray(actual, dtype=np.float64) - np.asarray(predicted, dtype=np.float64))
    return Conformal(level, len(residuals), conformal_quantile(residuals, level), SCORES[0])


def calibrate_classes(actual_index: Any, probabilities: Any, level: float = DEFAULT_LEVEL) -> Conformal:
    """Class calibration from held-out class indices (rows,) and probabilities (rows, classes)."""
    p = np.asarray(probabilities, dtype=np.float64)
    index = np.asarray(actual_index, dtype=np.int64)
    scores = 1.0 - p[np.arange(len(index)), index]
    return Conformal(level, len(index), conformal_quantile(scores, level), SCORES[1])


def interval(predicted: Any, conformal: Conformal) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper ends, shape (rows,) each: prediction -+ the conformal quantile."""
    values = np.asarray(predicted, dtype=np.float64)
    return values - conformal.quantile, values + conformal.quantile


def prediction_sets(probabilities: Any, conformal: Conformal) -> np.ndarray:
    """Boolean (rows, classes): True where the class belongs to the row's conformal set."""
    return np.asarray(probabilities, dtype=np.float64) >= 1.0 - conformal.quantile - 1e-12


def bootstrap_intervals(
    metric: Callable[[np.ndarray], Mapping[str, Any]],
    rows: int,
    level: float = DEFAULT_LEVEL,
    resamples: int = BOOTSTRAP_RESAMPLES,
    seed: int = BOOTSTRAP_SEED,
) -> dict[str, tuple[float, float]]:
    """Percentile bootstrap intervals of every number ``metric`` returns.

    ``metric(indices)`` computes the metrics on the rows at ``indices`` (a
    resample with replacement of ``range(rows)``); metrics that are None or
    not a float on a resample (MAPE near zero, AUC with one class) use the
    resamples where they are defined, and are left out when fewer than half are.
    """
    draws: dict[str, list[float]] = {}
    for indices in resample_indices(rows, resamples, seed):
        found = metric(indices)
        for name, value in found.items():
            if isinstance(value, float) and math.isfinite(value):
                draws.setdefault(name, []).append(value)
    return _percentiles({name: np.asarray(values) for name, values in draws.items()}, level, resamples)


def resample_indices(rows: int, resamples: int = BOOTSTRAP_RESAMPLES, seed: int = BOOTSTRAP_SEED) -> np.ndarray:
    """Bootstrap resamples of ``range(rows)`` with replacement, shape (resamples, rows), one per line."""
    if rows < 2:
        raise InputError("an error bar needs at least 2 scored rows; score more rows")
    return np.random.default_rng(seed).integers(0, rows, (resamples, rows))


def resample_counts(rows: int, resamples: int = BOOTSTRAP_RESAMPLES, seed: int = BOOTSTRAP_SEED) -> np.ndarray:
    """How often each row is drawn into each resample of `resample_indices`, shape (resamples, rows), as floats."""
    indices = resample_indices(rows, resamples, seed)
    flat = (indices + rows * np.arange(resamples)[:, None]).ravel()
    return np.bincount(flat, minlength=resamples * rows).reshape(resamples, rows).astype(np.float64)


def batched_bootstrap_intervals(
    metrics: Callable[[np.ndarray], Mapping[str, np.ndarray]],
    rows: int,
    level: float = DEFAULT_LEVEL,
    resamples: int = BOOTSTRAP_RESAMPLES,
    seed: int = BOOTSTRAP_SEED,
) -> dict[str, tuple[float, float]]:
    """`bootstrap_intervals` with every resample at once: ``metrics(counts)`` gets `resample_counts` (how
    often each row is in each resample, the same resamples) and returns, per metric, one value per
    resample (NaN where undefined on it)."""
    from .network import one_blas_thread

    with one_blas_thread():  # matrix-vector products: a second thread only adds hand-overs on busy cores
        found = metrics(resample_counts(rows, resamples, seed))
    return _percentiles({name: values[np.isfinite(values)] for name, values in found.items()}, level, resamples)


def _percentiles(draws: Mapping[str, np.ndarray], level: float, resamples: int) -> dict[str, tuple[float, float]]:
    low, high = (1 - level) / 2, (1 + level) / 2
    return {
        name: (float(np.quantile(values, low)), float(np.quantile(values, high)))
        for name, values in draws.items()
        if len(values) * 2 >= resamples
    }


def resampled_regression_metrics(actual: Any, predicted: Any, counts: np.ndarray) -> dict[str, np.ndarray]:
    """RMSE, MAE, MAPE and R^2 of each resample (a line of ``counts``), as `sheetnet.metrics` defines them:
    a mean over a resample is the counts-weighted mean over the rows. MAPE is NaN on a resample where
    `metrics.mape_left_out_reason` would leave it out."""
    from .metrics import NEAR_ZERO_SHARE

    a = np.asarray(actual, dtype=np.float64)
    error = a - np.asarray(predicted, dtype=np.float64)
    n = counts.shape[1]
    size = np.abs(a)
    squared = counts @ error**2 / n
    undefined = (counts @ (a == 0) > 0) | ((counts @ (a < 0) > 0) & (counts @ (a > 0) > 0))
    near = np.flatnonzero(size < NEAR_ZERO_SHARE * size.max())  # only these rows can be near zero against a resample's mean size
    if len(near):
        smallest = np.where(counts[:, near] > 0, size[near], np.inf).min(axis=1)
        undefined |= smallest < NEAR_ZERO_SHARE * (counts @ size / n)
    with np.errstate(divide="ignore", invalid="ignore"):
        mape = np.where(undefined, np.nan, counts @ (np.abs(error) / size) / n)
    centred = a - a.mean()  # sums of squares about each resample's mean, from sums about one centre (little cancellation)
    shift = counts @ centred / n
    total = np.maximum(counts @ centred**2 - n * shift**2, 0.0)
    residual = squared * n
    with np.errstate(divide="ignore", invalid="ignore"):
        r2 = np.where(total <= 1e-12 * (counts @ centred**2), np.where(residual == 0, 1.0, 0.0), 1.0 - residual / total)
    return {"rmse": np.sqrt(squared), "mae": counts @ np.abs(error) / n, "mape": mape, "r2": r2}


def resampled_class_metrics(actual_index: Any, probabilities: Any, decided: Any, counts: np.ndarray) -> dict[str, np.ndarray]:
    """Accuracy, balanced accuracy, log-loss, Brier score (and ROC AUC for two classes) of each resample
    (a line of ``counts``), as `sheetnet.metrics.classification_metrics` defines them; AUC is NaN where a
    resample holds one class."""
    index = np.asarray(actual_index, dtype=np.int64)
    p = np.asarray(probabilities, dtype=np.float64)
    hit = (np.asarray(decided, dtype=np.int64) == index).astype(np.float64)
    n = counts.shape[1]
    eps = np.finfo(np.float64).eps
    clipped = np.clip(p, eps, 1 - eps)
    clipped = clipped / clipped.sum(axis=1, keepdims=True)
    row_log_loss = -np.log(clipped[np.arange(len(index)), index])
    if p.shape[1] == 2:
        row_brier = (p[:, 1] - (index == 1)) ** 2
    else:
        row_brier = np.sum((p - np.eye(p.shape[1])[index]) ** 2, axis=1)
    one_hot = np.eye(p.shape[1])[index]  # rows x classes
    per_class = counts @ one_hot
    with np.errstate(divide="ignore", invalid="ignore"):
        recall = np.where(per_class > 0, (counts @ (one_hot * hit[:, None])) / per_class, np.nan)
    found = {
        "accuracy": counts @ hit / n,
        "balanced_accuracy": np.nanmean(recall, axis=1),
        "log_loss": counts @ row_log_loss / n,
        "brier": counts @ row_brier / n,
    }
    if p.shape[1] == 2:
        found["roc_auc"] = _resampled_auc(index == 1, p[:, 1], counts)
    return found


def _resampled_auc(positive: np.ndarray, score: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Mann-Whitney AUC of each resample, ties counted half: per distinct score (ascending), the positives
    drawn there times the negatives drawn below it plus half those drawn at it, over positives times negatives."""
    order = np.argsort(score, kind="stable")
    ordered, is_positive = score[order], positive[order].astype(np.float64)
    weights = np.take(counts, order, axis=1)
    n_pos = weights @ is_positive
    n_neg = counts.shape[1] - n_pos  # every resample draws as many rows as there are
    starts = np.flatnonzero(np.r_[True, ordered[1:] != ordered[:-1]])  # first row of each distinct score
    if len(starts) == len(ordered):  # no ties (the usual case): a row's own score holds no negative besides itself
        neg = weights * (1.0 - is_positive)
        below = np.cumsum(neg, axis=1)
        pairs = np.einsum("ij,ij,j->i", weights, below, is_positive)
    else:
        pos = np.add.reduceat(weights * is_positive, starts, axis=1)
        neg = np.add.reduceat(weights * (1.0 - is_positive), starts, axis=1)
        pairs = np.sum(pos * (np.cumsum(neg, axis=1) - 0.5 * neg), axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        auc = pairs / (n_pos * n_neg)
    return np.where((n_pos == 0) | (n_neg == 0), np.nan, auc)


def reliability_table(actual_positive: Any, probability: Any, bins: int = 10) -> list[tuple[float, float, int, float, float]]:
    """Per equal-width bin of predicted probability: (from, to, rows, mean predicted, observed share).

    Empty bins are left out. A well-calibrated model has mean predicted near observed share.
    """
    p = np.asarray(probability, dtype=np.float64).ravel()
    hit = np.asarray(actual_positive, dtype=np.float64).ravel()
    edges = np.linspace(0.0, 1.0, bins + 1)
    which = np.clip(np.searchsorted(edges, p, side="right") - 1, 0, bins - 1)
    table = []
    for b in range(bins):
        inside = which == b
        if inside.any():
            table.append((float(edges[b]), float(edges[b + 1]), int(inside.sum()), float(p[inside].mean()), float(hit[inside].mean())))
    return table


DEFAULT_BINS = 10
MAX_BINS = 50


def read_bins(value: Any) -> int | None:
    """A reliability table's bins from a cell: blank or FALSE for none, TRUE for `DEFAULT_BINS`, else 2 to `MAX_BINS`."""
    if value is None or value is False or (isinstance(value, str) and not value.strip()) or (isinstance(value, float) and math.isnan(value)):
        return None
    if value is True:
        return DEFAULT_BINS
    try:
        number = float(str(value).strip()) if isinstance(value, str) else float(value)
    except (TypeError, ValueError):
        number = float("nan")
    if not (math.isfinite(number) and number.is_integer() and 2 <= number <= MAX_BINS):
        raise SettingError(f"the reliability bins are '{value}'; give a whole number from 2 to {MAX_BINS}, TRUE for {DEFAULT_BINS}, or leave it blank")
    return int(number)


# --- on a model ---------------------------------------------------------------------------

def calibrate(model: Any, X: Any, y: Any, level: float = DEFAULT_LEVEL) -> Conformal:
    """Split-conformal calibration of ``model`` on rows ``X``, ``y`` it did not train on.

    >>> conformal = calibrate(model, X_holdout, y_holdout, 0.9)      # doctest: +SKIP
    >>> low, high = predict_interval(model, conformal, X_new)        # doctest: +SKIP
    """
    from .preparation import numbers_of, read_target

    actual = read_target(y)
    if model.task == "regression":
        return calibrate_values(numbers_of("target", actual), model.predict(X), level)
    return calibrate_classes(model.target.class_indices(actual), model.predict_proba(X), level)


def predict_interval(model: Any, conformal: Conformal, X: Any) -> tuple[np.ndarray, np.ndarray]:
    """Conformal prediction interval of a regression model: (low, high), shape (rows,) each."""
    if model.task != "regression":
        raise SettingError("an interval is for models that predict numbers; for classes use the prediction set (output set)")
    return interval(model.predict(X), conformal)


def predict_sets(model: Any, conformal: Conformal, X: Any) -> np.ndarray:
    """Conformal prediction sets of a classifier: boolean (rows, classes) in the order of ``model.classes``."""
    if model.task == "regression":
        raise SettingError("a prediction set is for models that predict classes; for numbers use the interval (output interval)")
    return prediction_sets(model.predict_proba(X), conformal)


def metric_error_bars(
    model: Any, X: Any, y: Any, level: float = DEFAULT_LEVEL, resamples: int = BOOTSTRAP_RESAMPLES, seed: int = BOOTSTRAP_SEED
) -> dict[str, tuple[float, float]]:
    """Percentile-bootstrap intervals of the scalar metrics `sheetnet.score` gives, over the rows ``X``, ``y``.

    The network runs once; the metrics of every resample are computed at once from the kept predictions.
    """
    from .preparation import numbers_of, read_target

    actual = read_target(y)
    if model.task == "regression":
        a, p = numbers_of("target", actual), model.predict(X)
        return batched_bootstrap_intervals(lambda rows: resampled_regression_metrics(a, p, rows), len(a), level, resamples, seed)
    index = model.target.class_indices(actual)
    probabilities = model.predict_proba(X)
    decided = (probabilities[:, 1] >= model.threshold).astype(np.int64) if model.task == "binary" else probabilities.argmax(axis=1)
    return batched_bootstrap_intervals(lambda rows: resampled_class_metrics(index, probabilities, decided, rows), len(index), level, resamples, seed)


def model_reliability(model: Any, X: Any, y: Any, bins: int = DEFAULT_BINS) -> tuple[str, list[tuple[float, float, int, float, float]]]:
    """The reliability table of a classifier over rows ``X``, ``y``, and what it bins: for two classes the
    probability of the second (positive) class against the share of rows in it; for more, the probability
    of the class the model picks against the share of rows where that pick is right."""
    from .preparation import read_target

    if model.task == "regression":
        raise SettingError("a reliability table is for models that predict classes; leave the reliability argument blank for a model of numbers")
    index = model.target.class_indices(read_target(y))
    probabilities = model.predict_proba(X)
    if model.task == "binary":
        return "positive", reliability_table(index == 1, probabilities[:, 1], bins)
    return "picked", reliability_table(probabilities.argmax(axis=1) == index, probabilities.max(axis=1), bins)
