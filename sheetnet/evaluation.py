"""Honest evaluation: scoring on rows the model never saw, cross-validation (random, stratified, ordered or
grouped folds), permutation importance."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

from .cell_text import cell_in_words
from .errors import LengthMismatchError, SplitError
from .metrics import classification_metrics, regression_metrics
from .model import Model
from .parallel import run_jobs
from .preparation import RawTable, fit_preparation, fit_target, numbers_of, read_table, read_target
from .splits import grouped_folds, holdout_mask, k_folds, ordered_folds
from .training import fit


def take_rows(data: Any, rows: np.ndarray) -> Any:
    """The given rows (indices or a boolean mask) of a table.

    A pandas object or a NumPy array keeps its type. Every other container
    `read_table` takes (a polars table, a list of rows, an object with
    ``__array__``) is read by it once and its rows come back as a
    `RawTable`, which `fit`, `score` and `predict` read as they read the
    original; what `read_table` refuses (a sparse matrix) is refused here with
    the same message. For a target use `take_target`.
    """
    rows = np.flatnonzero(rows) if np.asarray(rows).dtype == bool else np.asarray(rows)
    try:
        import pandas as pd

        if isinstance(data, (pd.DataFrame, pd.Series)):
            return data.iloc[rows]
    except ImportError:  # pragma: no cover
        pass
    if isinstance(data, np.ndarray):
        return data[rows]
    table = read_table(data)
    return RawTable(table.names, tuple(column[rows] for column in table.columns), table.named, len(rows), table.marked_categories)


def read_once(X: Any, y: Any) -> tuple[Any, np.ndarray]:
    """``X`` and ``y`` as the fold jobs take them: a pandas table or NumPy array as it is, any other table read by
    `read_table` once (so a job neither reads it again nor needs its library), the target read by `read_target`."""
    try:
        import pandas as pd

        keep = isinstance(X, (pd.DataFrame, pd.Series, np.ndarray))
    except ImportError:  # pragma: no cover
        keep = isinstance(X, np.ndarray)
    return (X if keep else read_table(X)), read_target(y)


def take_target(y: Any, rows: np.ndarray) -> np.ndarray:
    """The given rows (indices or a boolean mask) of a target, read by `read_target` (any container it takes)."""
    rows = np.flatnonzero(rows) if np.asarray(rows).dtype == bool else np.asarray(rows)
    return read_target(y)[rows]


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
    model = fit(take_rows(X, ~held), take_target(y, ~held), hidden, seed, **settings)
    return HoldoutResult(model, held, score(model, take_rows(X, held), take_target(y, held)))


FOLD_MODES = ("auto", "random", "stratified", "ordered", "grouped")


def make_folds(
    y: Any,
    k: int = 5,
    seed: int = 0,
    mode: str = "auto",
    groups: Sequence[Any] | np.ndarray | None = None,
    task: str = "auto",
) -> tuple[str, list[tuple[np.ndarray, np.ndarray]]]:
    """The folds cross-validation uses, and the mode they were made by.

    Modes: ``random``; ``stratified`` (each fold keeps the class mix);
    ``ordered`` for time series (expanding window: each fold trains only on
    rows before the rows it tests); ``grouped`` (``groups``: one label per row;
    a group is never split between training and test rows); ``auto``:
    grouped when ``groups`` are given, else stratified when the target is
    learned as classes, else random.
    """
    if mode not in FOLD_MODES:
        raise SplitError(f"fold mode {cell_in_words(mode)} is not known; choose one of: {', '.join(FOLD_MODES)}")
    n = len(read_target(y))
    if groups is not None:
        if mode not in ("auto", "grouped"):
            raise SplitError(f"groups were given with fold mode {mode}; use mode grouped (or auto) with groups, or leave the groups out")
        if len(groups) != n:
            raise LengthMismatchError(f"{len(groups)} group labels but {n} rows; give one group label per row")
        folds = grouped_folds(groups, k, seed)
        _check_fold_classes(folds, _class_labels(y, task), "grouped")
        return "grouped", folds
    if mode == "grouped":
        raise SplitError("grouped folds need the groups: one label per row (like a customer or store column), given as groups=")
    if mode == "ordered":
        folds = ordered_folds(n, k)
        _check_fold_classes(folds, _class_labels(y, task), "ordered")
        return "ordered", folds
    labels = _class_labels(y, task) if mode in ("auto", "stratified") else None
    if mode == "stratified" and labels is None:
        raise SplitError("stratified folds are for targets learned as classes; this target is learned as numbers, so use mode random")
    return ("random" if labels is None else "stratified"), k_folds(n, k, seed, labels)


def _check_fold_classes(folds: list[tuple[np.ndarray, np.ndarray]], labels: np.ndarray | None, mode: str) -> None:
    """Ordered and grouped folds cannot spread classes evenly: refuse folds that would train on one class,
    or test a class their training rows never had, with the fold's rows in words (not a row inside the fold)."""
    if labels is None:
        return
    for number, (train_rows, test_rows) in enumerate(folds, start=1):
        seen = set(labels[train_rows].tolist())
        where = f"{mode} fold {number} of {len(folds)} trains on {len(train_rows)} rows and tests {len(test_rows)}"
        if len(seen) < 2:
            raise SplitError(f"{where}, but its training rows hold a single class; use fewer folds, or random or stratified folds")
        if set(labels[test_rows].tolist()) - seen:
            raise SplitError(
                f"{where}, and they hold a class its training rows never had; use fewer folds, or random or stratified folds"
                + (", or move rows of that class earlier" if mode == "ordered" else "")
            )


def check_rows(X: Any, y: Any, task: str = "auto", categories: Sequence[str] = ()) -> None:
    """Check every cell of ``X`` and ``y`` once on all rows, so that a bad cell is named at its row in the
    whole table rather than at its row inside a fold. Raises what `fit` raises."""
    table = read_table(X)
    target = read_target(y)
    if len(target) != table.n_rows:
        raise LengthMismatchError(f"the inputs have {table.n_rows} rows but the target has {len(target)}; give one target value per input row")
    fit_preparation(table, categories).transform_columns(table.columns)
    fit_target(target, task).encode(target)


def fit_and_score_fold(
    X: Any, y: Any, train_rows: np.ndarray, test_rows: np.ndarray, hidden: Any, seed: int, settings: dict[str, Any]
) -> dict[str, Any]:
    """Train on ``train_rows``, score on ``test_rows``: one fold, a job `sheetnet.parallel` can run anywhere."""
    model = fit(take_rows(X, train_rows), take_target(y, train_rows), hidden, seed, **settings)
    return score(model, take_rows(X, test_rows), take_target(y, test_rows))


def summarise_folds(scores: Sequence[dict[str, Any]]) -> tuple[dict[str, float], dict[str, float]]:
    """Mean and standard deviation (n - 1) over folds of each scalar metric, folds where it is undefined left out."""
    scalar = [name for name, value in scores[0].items() if isinstance(value, float)]
    mean, spread = {}, {}
    for name in scalar:
        values = [f[name] for f in scores if f[name] is not None]
        mean[name] = float(np.mean(values))
        spread[name] = float(np.std(values, ddof=1)) if len(values) > 1 else 0.0
    return mean, spread


def cross_validate(
    X: Any,
    y: Any,
    k: int = 5,
    seed: int = 0,
    hidden: int | Sequence[int] = (4,),
    workers: int | None = None,
    *,
    mode: str = "auto",
    groups: Sequence[Any] | np.ndarray | None = None,
    **settings: Any,
) -> dict[str, Any]:
    """k-fold cross-validation: metrics per fold, their mean and their spread.

    ``mode``: see `make_folds` (``ordered`` for time series, ``groups=`` for
    grouped rows). Every fold trains with the same ``seed``. Folds run where
    `sheetnet.parallel` finds them fastest (``workers``: None decides, 1 runs
    them here, N in N processes; a cluster when one is set), with the same
    results to the last bit anywhere. Returns ``{"folds": [metrics, ...],
    "mean": {name: mean}, "spread": {name: standard deviation}, "mode": mode,
    "rows": [(training rows, test rows), ...]}`` over the scalar metrics.

    >>> result = cross_validate(X, y, k=5, mode="ordered")   # doctest: +SKIP
    >>> result["mean"]["rmse"], result["spread"]["rmse"]      # doctest: +SKIP
    """
    check_rows(X, y, settings.get("task", "auto"), settings.get("categories", ()))
    used, folds = make_folds(y, k, seed, mode, groups, settings.get("task", "auto"))
    inner = dict(settings, workers=1)  # the cores go to the folds, not to repeats inside them
    if used == "ordered":  # time series: the folds that tune each fold's network keep the order too
        inner.setdefault("inner_folds", "ordered")
    X, y = read_once(X, y)
    jobs = [(X, y, train_rows, test_rows, hidden, seed, inner) for train_rows, test_rows in folds]
    scores = run_jobs(fit_and_score_fold, jobs, workers, "folds")
    mean, spread = summarise_folds(scores)
    return {"folds": scores, "mean": mean, "spread": spread, "mode": used, "rows": [(len(tr), len(te)) for tr, te in folds]}


def _loss_for_importance(model: Model, X: Any, actual: np.ndarray) -> float:
    result = score(model, X, actual)
    return result["rmse"] if model.task == "regression" else result["log_loss"]


def _column_rises(model: Model, columns: list[np.ndarray], j: int, actual: np.ndarray, baseline: float, repeats: int, seed: Any) -> list[float]:
    """The loss increases of ``repeats`` shuffles of column ``j``: one job per column."""
    rng = np.random.default_rng(seed)
    rises = []
    for _ in range(repeats):
        shuffled = list(columns)
        shuffled[j] = columns[j][rng.permutation(len(actual))]
        rises.append(_loss_for_importance(model, _as_named(shuffled, model), actual) - baseline)
    return rises


def permutation_importance(
    model: Model,
    X: Any,
    y: Any,
    repeats: int = 5,
    seed: int = 0,
    workers: int | None = None,
) -> list[tuple[str, float, float]]:
    """How much worse the model gets when one input column is shuffled (Breiman 2001).

    The loss is RMSE for regression and log-loss for classes. Each column's
    shuffles have a seed of their own (spawned from ``seed``), so the columns
    run where `sheetnet.parallel` finds them fastest with the same answer.
    Returns ``(column, mean increase, standard deviation over repeats)`` for
    each input column, largest increase first.
    """
    actual = read_target(y)
    table = read_table(X)
    if len(actual) != table.n_rows:
        raise LengthMismatchError(f"{table.n_rows} input rows but {len(actual)} target values; give one target value per row")
    columns = list(model.preparation.columns_in_order(X))
    baseline = _loss_for_importance(model, _as_named(columns, model), actual)
    seeds = np.random.SeedSequence(int(seed)).spawn(len(model.input_names))
    jobs = [(model, columns, j, actual, baseline, repeats, seeds[j]) for j in range(len(model.input_names))]
    rises = run_jobs(_column_rises, jobs, workers, "importance")
    results = [(name, float(np.mean(r)), float(np.std(r))) for name, r in zip(model.input_names, rises)]
    return sorted(results, key=lambda item: -item[1])


def _as_named(columns: Sequence[np.ndarray], model: Model) -> Any:
    import pandas as pd

    frame = pd.DataFrame({name: col for name, col in zip(model.input_names, columns)})
    return frame if model.preparation.named else frame.to_numpy(dtype=object) if not model.preparation.all_numeric else frame.to_numpy(dtype=np.float64)
