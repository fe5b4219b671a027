"""Honest evaluation: scoring on rows the model never saw, cross-validation, permutation importance."""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from .errors import LengthMismatchError
from .metrics import classification_metrics, regression_metrics
from .model import Model
from .preparation import fit_target, numbers_of, read_table, read_target
from .splits import holdout_mask, k_folds
from .training import fit


def take_rows(data: Any, rows: np.ndarray) -> Any:
    """The given rows (indices or a boolean mask) of a table or target, keeping its type."""
    rows = np.flatnonzero(rows) if np.asarray(rows).dtype == bool else np.asarray(rows)
    try:
        import pandas as pd

        if isinstance(data, (pd.DataFrame, pd.Series)):
            return data.iloc[rows]
    except ImportError:  # pragma: no cover
        pass
    if isinstance(data, np.ndarray):
        return data[rows]
    listed = list(data)
    return [listed[i] for i in rows]


def score(model: Model, X: Any, y: Any) -> dict[str, Any]:
    """Metrics of ``model`` on rows ``X`` with true values ``y``.

    Regression: rmse, mae, mape, r2. Classification: accuracy,
    balanced_accuracy, per_class precision/recall/f1, roc_auc (two classes),
    log_loss, brier and the confusion matrix (rows actual, columns predicted,
    in the order of ``model.classes``).
    """
    actual = read_target(y)
    if len(actual) != read_table(X).n_rows:
        raise LengthMismatchError(f"{read_table(X).n_rows} input rows but {len(actual)} target values; give one target value per row")
    if model.task == "regression":
        return regression_metrics(numbers_of("target", actual), model.predict(X))
    index = model.target.class_indices(actual)
    probabilities = model.predict_proba(X)
    decided = (probabilities[:, 1] >= model.threshold).astype(np.int64) if model.task == "binary" else None
    return classification_metrics(index, probabilities, model.classes, decided)


@dataclass(frozen=True)
class HoldoutResult:
    model: Model
    holdout: np.ndarray  # True for the rows held out
    metrics: dict[str, Any]


def _class_labels(y: Any, task: str) -> np.ndarray | None:
    target = fit_target(read_target(y), task)
    return None if target.task == "regression" else target.class_indices(read_target(y))


def auto_split_mode(y: Any, task: str = "auto") -> str:
    """What holdout mode "auto" means, for every door: stratified when the target is learned
    as classes (by the task setting or its auto rule), else random."""
    return "random" if _class_labels(y, task) is None else "stratified"


def holdout_evaluation(
    X: Any,
    y: Any,
    share: float = 0.2,
    mode: str = "auto",
    seed: int = 0,
    hidden: int | Sequence[int] = (4,),
    **settings: Any,
) -> HoldoutResult:
    """Hold out a share of rows, train on the rest, score on the held-out rows.

    ``mode`` auto is stratified for classes and random for regression; pass
    ``ordered`` for time series (the last rows are held out).
    """
    n = len(read_target(y))
    if mode == "auto":
        mode = auto_split_mode(y, settings.get("task", "auto"))
    labels = _class_labels(y, settings.get("task", "auto")) if mode == "stratified" else None
    held = holdout_mask(n, share, seed, mode, labels)
    model = fit(take_rows(X, ~held), take_rows(y, ~held), hidden, seed, **settings)
    return HoldoutResult(model, held, score(model, take_rows(X, held), take_rows(y, held)))


def _fit_and_score_fold(X: Any, y: Any, train_rows: np.ndarray, test_rows: np.ndarray, hidden: Any, seed: int, settings: dict[str, Any]) -> dict[str, Any]:
    model = fit(take_rows(X, train_rows), take_rows(y, train_rows), hidden, seed, **settings)
    return score(model, take_rows(X, test_rows), take_rows(y, test_rows))


def cross_validate(
    X: Any,
    y: Any,
    k: int = 5,
    seed: int = 0,
    hidden: int | Sequence[int] = (4,),
    workers: int | None = None,
    **settings: Any,
) -> dict[str, Any]:
    """k-fold cross-validation (stratified for classes): metrics per fold and their mean.

    Folds train in parallel processes, ``workers`` of them (default: one per
    core; 1 runs them here, one after another). Returns
    ``{"folds": [metrics, ...], "mean": {name: mean over folds}}`` with the
    mean taken over the scalar metrics only.
    """
    n = len(read_target(y))
    labels = _class_labels(y, settings.get("task", "auto"))
    folds = k_folds(n, k, seed, labels)
    inner = dict(settings, workers=1)  # the cores go to the folds, not to repeats inside them
    workers = min(workers or os.cpu_count() or 1, k)
    if workers > 1:
        from joblib import Parallel, delayed

        scores = list(Parallel(n_jobs=workers)(delayed(_fit_and_score_fold)(X, y, tr, te, hidden, seed, inner) for tr, te in folds))
    else:
        scores = [_fit_and_score_fold(X, y, tr, te, hidden, seed, inner) for tr, te in folds]
    scalar = [name for name, value in scores[0].items() if isinstance(value, float)]
    mean = {name: float(np.mean([f[name] for f in scores if f[name] is not None])) for name in scalar}
    return {"folds": scores, "mean": mean}


def _loss_for_importance(model: Model, X: Any, actual: np.ndarray) -> float:
    result = score(model, X, actual)
    return result["rmse"] if model.task == "regression" else result["log_loss"]


def permutation_importance(
    model: Model,
    X: Any,
    y: Any,
    repeats: int = 5,
    seed: int = 0,
) -> list[tuple[str, float, float]]:
    """How much worse the model gets when one input column is shuffled (Breiman 2001).

    The loss is RMSE for regression and log-loss for classes. Returns
    ``(column, mean increase, standard deviation over repeats)`` for each
    input column, largest increase first.
    """
    actual = read_target(y)
    table = read_table(X)
    columns = model.preparation.columns_in_order(X)
    baseline = _loss_for_importance(model, _as_named(columns, model), actual)
    rng = np.random.default_rng(seed)
    results = []
    for j, name in enumerate(model.input_names):
        rises = []
        for _ in range(repeats):
            shuffled = list(columns)
            shuffled[j] = columns[j][rng.permutation(table.n_rows)]
            rises.append(_loss_for_importance(model, _as_named(shuffled, model), actual) - baseline)
        results.append((name, float(np.mean(rises)), float(np.std(rises))))
    return sorted(results, key=lambda item: -item[1])


def _as_named(columns: Sequence[np.ndarray], model: Model) -> Any:
    import pandas as pd

    frame = pd.DataFrame({name: col for name, col in zip(model.input_names, columns)})
    return frame if model.preparation.named else frame.to_numpy(dtype=object) if not model.preparation.all_numeric else frame.to_numpy(dtype=np.float64)
