"""Holdout splits and k-fold cross-validation folds.

A split is a boolean mask over the rows, True for holdout rows. Modes:

- ``random``: a seeded random share of the rows;
- ``stratified``: the same share taken within each class, so the holdout
  keeps the class mix (every class needs two rows or more);
- ``ordered``: the last rows, for time series (no shuffling, no seed).
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from .cell_text import cell_in_words
from .errors import NotEnoughRowsError, SplitError

SPLIT_MODES = ("random", "stratified", "ordered")


def _holdout_count(n: int, share: float) -> int:
    if not 0.0 < share < 1.0:
        raise SplitError(f"the holdout share is {cell_in_words(share)}; give a number between 0 and 1, such as 0.2")
    count = int(round(share * n))
    if n < 2:
        raise NotEnoughRowsError(f"a holdout needs at least 2 rows; the table has {n}")
    return min(max(count, 1), n - 1)


def holdout_mask(
    n_rows: int,
    share: float = 0.2,
    seed: int = 0,
    mode: str = "random",
    labels: Sequence[Any] | np.ndarray | None = None,
) -> np.ndarray:
    """True for the rows held out. ``labels`` are needed for ``stratified``.

    >>> holdout_mask(5, 0.4, mode="ordered").tolist()
    [False, False, False, True, True]
    """
    if mode not in SPLIT_MODES:
        raise SplitError(f"split mode {cell_in_words(mode)} is not known; choose one of: {', '.join(SPLIT_MODES)}")
    count = _holdout_count(n_rows, share)
    mask = np.zeros(n_rows, dtype=bool)
    if mode == "ordered":
        mask[n_rows - count:] = True
        return mask
    rng = np.random.default_rng(seed)
    if mode == "random":
        mask[rng.permutation(n_rows)[:count]] = True
        return mask
    if labels is None or len(labels) != n_rows:
        raise SplitError("a stratified split needs one class label per row; pass the target column")
    groups = _groups(labels)
    for label, rows in groups.items():
        if len(rows) < 2:
            raise SplitError(
                f"class {cell_in_words(label)} has a single row, so it cannot be in both training and holdout rows; "
                "add rows of that class, merge it with another, or use a random split"
            )
        take = int(round(share * len(rows)))
        take = min(max(take, 1), len(rows) - 1)
        mask[rng.permutation(rows)[:take]] = True
    return mask


def _groups(labels: Sequence[Any] | np.ndarray) -> dict[Any, np.ndarray]:
    array = np.asarray(labels)
    if array.dtype.kind in "iub":
        values, inverse = np.unique(array, return_inverse=True)
        order = np.argsort(inverse, kind="stable")
        bounds = np.cumsum(np.bincount(inverse, minlength=len(values)))[:-1]
        return {v: rows for v, rows in zip(values.tolist(), np.split(order, bounds))}
    where: dict[Any, list[int]] = {}
    for i, label in enumerate(labels):
        key = label.item() if isinstance(label, np.generic) else label
        where.setdefault(key, []).append(i)
    return {k: np.array(v) for k, v in where.items()}


def k_folds(
    n_rows: int,
    k: int = 5,
    seed: int = 0,
    labels: Sequence[Any] | np.ndarray | None = None,
) -> list[tuple[np.ndarray, np.ndarray]]:
    """``k`` pairs of (training row indices, test row indices); every row is tested once.

    With ``labels``, folds are stratified: each class is dealt round-robin
    over the folds after shuffling.
    """
    if k < 2:
        raise SplitError(f"cross-validation needs at least 2 folds; got {k}")
    if n_rows < k:
        raise NotEnoughRowsError(f"{k}-fold cross-validation needs at least {k} rows; the table has {n_rows}")
    rng = np.random.default_rng(seed)
    fold_of = np.empty(n_rows, dtype=np.int64)
    if labels is None:
        fold_of[rng.permutation(n_rows)] = np.arange(n_rows) % k
    else:
        offset = 0
        for label, rows in _groups(labels).items():
            if len(rows) < k:
                raise SplitError(
                    f"class {cell_in_words(label)} has {len(rows)} rows, fewer than the {k} folds; use fewer folds or unstratified folds"
                )
            fold_of[rng.permutation(rows)] = (np.arange(len(rows)) + offset) % k
            offset += len(rows)
    everything = np.arange(n_rows)
    return [(everything[fold_of != f], everything[fold_of == f]) for f in range(k)]


def ordered_folds(n_rows: int, k: int = 5) -> list[tuple[np.ndarray, np.ndarray]]:
    """Expanding-window folds for time series: the rows, in order, cut into ``k + 1`` blocks;
    fold f trains on blocks 0 to f and tests on block f + 1, so no fold trains on a row after the rows it tests.

    >>> [(tr.tolist(), te.tolist()) for tr, te in ordered_folds(6, 2)]
    [([0, 1], [2, 3]), ([0, 1, 2, 3], [4, 5])]
    """
    if k < 2:
        raise SplitError(f"cross-validation needs at least 2 folds; got {k}")
    if n_rows < 2 * (k + 1):
        raise NotEnoughRowsError(
            f"{k} ordered folds cut the rows into {k + 1} blocks of 2 rows or more, so they need at least {2 * (k + 1)} rows; "
            f"the table has {n_rows}. Use fewer folds"
        )
    bounds = np.linspace(0, n_rows, k + 2).round().astype(np.int64)
    return [(np.arange(bounds[f + 1]), np.arange(bounds[f + 1], bounds[f + 2])) for f in range(k)]


def grouped_folds(groups: Sequence[Any] | np.ndarray, k: int = 5, seed: int = 0) -> list[tuple[np.ndarray, np.ndarray]]:
    """Folds that keep every group whole (all rows of a customer, a store, a patient in one fold),
    so a fold is never tested on a group it trained on. Groups are dealt largest first, each to the fold
    with the fewest rows so far; the seed breaks ties between groups of equal size.

    >>> [te.tolist() for _, te in grouped_folds(["a", "a", "b", "c", "c", "c"], 2)]
    [[3, 4, 5], [0, 1, 2]]
    """
    if k < 2:
        raise SplitError(f"cross-validation needs at least 2 folds; got {k}")
    for i, value in enumerate(groups):
        if value is None or (isinstance(value, (float, np.floating)) and np.isnan(value)) or (isinstance(value, str) and not value.strip()):
            raise SplitError(f"the group column is blank in data row {i + 1}; give every row its group, or leave such rows out")
    by_group = list(_groups(groups).values())
    if len(by_group) < k:
        raise SplitError(f"{k} grouped folds need at least {k} different groups; the group column has {len(by_group)}. Use fewer folds")
    tie_break = np.random.default_rng(seed).permutation(len(by_group))
    fold_of = np.empty(len(groups), dtype=np.int64)
    filled = np.zeros(k, dtype=np.int64)
    for g in sorted(range(len(by_group)), key=lambda g: (-len(by_group[g]), tie_break[g])):
        fold = int(np.argmin(filled))
        fold_of[by_group[g]] = fold
        filled[fold] += len(by_group[g])
    everything = np.arange(len(groups))
    return [(everything[fold_of != f], everything[fold_of == f]) for f in range(k)]
