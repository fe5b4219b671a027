"""Model search: rank candidate networks by cross-validated score and say which one to use.

Every candidate (hidden layer widths, weight decay, algorithm) is trained and
scored on the same folds with the same seed, so the candidates differ only in
themselves. All candidate-fold fits form one run of jobs for
`sheetnet.parallel`, so they spread over worker processes or a cluster as one
list, with the same scores to the last bit wherever they ran.

Which candidate to use (the rule, stated in every result): the simplest
candidate whose mean score is within one standard error of the best mean, the
"one-standard-error rule" (Breiman, Friedman, Olshen and Stone, Classification
and Regression Trees, 1984; Hastie, Tibshirani and Friedman, The Elements of
Statistical Learning, 2nd ed., section 7.10). Simplest means fewest weights,
then the largest decay. The standard error is the folds' standard deviation
over the square root of the number of folds; folds share training rows, so it
is a yardstick for "no clearer than the noise", not a test.

>>> result = search(X, y, k=5)                       # doctest: +SKIP
>>> result.chosen.candidate, result.rule            # doctest: +SKIP
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from . import defaults
from .cell_text import cell_in_words
from .errors import SettingError
from .evaluation import check_rows, fit_and_score_fold, make_folds, read_once
from .parallel import run_jobs
from .preparation import fit_target, planned_width, read_table, read_target
from .settings import resolve_settings

DEFAULT_HIDDEN: tuple[tuple[int, ...], ...] = ((), (4,), (16,), (16, 8))  # none (a linear or logistic model), fit's default, two layers
DEFAULT_DECAYS: tuple[float, ...] = (1e-4, 1e-2, 1.0)  # the decay setting's default, then stronger by 100x steps
# Which way is better for each metric the search can rank by.
HIGHER_IS_BETTER: dict[str, bool] = {
    "rmse": False, "mae": False, "mape": False, "r2": True,
    "accuracy": True, "balanced_accuracy": True, "roc_auc": True, "log_loss": False, "brier": False,
}
REGRESSION_METRICS = ("rmse", "mae", "mape", "r2")
RULE = "the simplest candidate (fewest weights, then most decay) whose mean {metric} is within one standard error of the best"


@dataclass(frozen=True)
class Candidate:
    """One network to try. ``decay`` and ``algorithm`` None: the search's settings (or their defaults) decide."""

    hidden: tuple[int, ...]
    decay: float | None = None
    algorithm: str | None = None

    def settings(self, base: Mapping[str, Any]) -> dict[str, Any]:
        """The training settings of this candidate: ``base`` with its own decay and algorithm."""
        own = dict(base)
        if self.decay is not None:
            own["decay"] = self.decay
        if self.algorithm is not None:
            own["algorithm"] = self.algorithm
        return own

    def describe(self) -> str:
        """Like ``8-4, decay 0.01, lbfgs`` (``no hidden layer`` for none)."""
        parts = ["-".join(map(str, self.hidden)) if self.hidden else "no hidden layer"]
        if self.decay is not None:
            parts.append(f"decay {self.decay:g}")
        if self.algorithm is not None:
            parts.append(self.algorithm)
        return ", ".join(parts)


def default_candidates() -> tuple[Candidate, ...]:
    """The default grid: `DEFAULT_HIDDEN` x `DEFAULT_DECAYS`, 12 candidates, algorithm by the auto rule."""
    return tuple(Candidate(hidden, decay) for hidden in DEFAULT_HIDDEN for decay in DEFAULT_DECAYS)


@dataclass(frozen=True)
class Scored:
    """A candidate's cross-validated score."""

    candidate: Candidate
    weights: int  # parameters of the network, biases included
    decay: float | None  # the decay it trained with (None: chosen by training itself)
    fold_scores: tuple[float, ...]
    mean: float
    spread: float  # standard deviation over folds (n - 1)
    standard_error: float  # spread / sqrt(folds)


@dataclass(frozen=True)
class SearchResult:
    """Candidates ranked best mean first, the best one, the one to use and the rule that chose it."""

    metric: str
    higher_is_better: bool
    mode: str  # how the folds were made: random, stratified, ordered or grouped
    folds: int
    ranking: tuple[Scored, ...]
    best: Scored
    chosen: Scored
    rule: str

    def rows(self) -> list[list[Any]]:
        """The ranking as a table with a header row, for cells and the terminal (hidden written as TRAIN reads it)."""
        header = ["rank", "hidden", "decay", "algorithm", "weights", f"mean {self.metric}", "spread", "standard error", "choice"]
        rows: list[list[Any]] = [header]
        for place, found in enumerate(self.ranking, start=1):
            notes = (["best mean"] if found is self.best else []) + (["use this"] if found is self.chosen else [])
            rows.append([
                place, ",".join(map(str, found.candidate.hidden)) or "0", "auto" if found.decay is None else found.decay, found.candidate.algorithm or "auto",
                found.weights, found.mean, found.spread, found.standard_error, "; ".join(notes),
            ])
        return rows


def run_order(weights: Sequence[int], folds: int) -> list[tuple[int, int]]:
    """The (candidate, fold) fits in the order they run: fold by fold, the candidates alternately lightest and
    heaviest, so the first fits, which `sheetnet.parallel` times before choosing where the rest run, cost
    about what the average fit does. Each fit has its own seed: the order changes no result.

    >>> run_order([50, 10, 40, 20], 2)  # lightest 1, heaviest 0, then 3 and 2
    [(1, 0), (0, 0), (3, 0), (2, 0), (1, 1), (0, 1), (3, 1), (2, 1)]
    >>> run_order([5, 9, 1], 1)
    [(2, 0), (1, 0), (0, 0)]
    """
    by_weight = sorted(range(len(weights)), key=lambda c: (weights[c], c))
    mixed = [by_weight[i // 2] if i % 2 == 0 else by_weight[-1 - i // 2] for i in range(len(by_weight))]
    return [(c, f) for f in range(folds) for c in mixed]


def network_weights(n_inputs: int, hidden: Sequence[int], n_outputs: int) -> int:
    """Weights and biases of a network with these layer widths.

    >>> network_weights(3, (4,), 1)  # (3 + 1) * 4 + (4 + 1) * 1
    21
    """
    sizes = (n_inputs, *hidden, n_outputs)
    return sum((a + 1) * b for a, b in zip(sizes[:-1], sizes[1:]))


def score_candidate(candidate: Candidate, weights: int, decay: float | None, fold_scores: Sequence[float]) -> Scored:
    """Mean, spread and standard error of one candidate's fold scores."""
    values = np.asarray(fold_scores, dtype=np.float64)
    spread = float(np.std(values, ddof=1)) if len(values) > 1 else 0.0
    return Scored(candidate, weights, decay, tuple(float(v) for v in values), float(values.mean()), spread, spread / math.sqrt(len(values)))


def rank(scored: Sequence[Scored], higher_is_better: bool) -> tuple[tuple[Scored, ...], Scored, Scored]:
    """(ranking best mean first, best, chosen by the one-standard-error rule). Ties keep the simpler first.

    Chosen: among the candidates whose mean is no worse than the best mean by
    more than the best's standard error, the one with the fewest weights, then
    the largest decay, then the better mean.
    """
    sign = -1.0 if higher_is_better else 1.0
    ranking = tuple(sorted(scored, key=lambda s: (sign * s.mean, s.weights, -(s.decay or 0.0))))
    best = ranking[0]
    bar = sign * best.mean + best.standard_error
    close = [s for s in ranking if sign * s.mean <= bar]
    chosen = min(close, key=lambda s: (s.weights, -(s.decay or 0.0), sign * s.mean))
    return ranking, best, chosen


def _decay_of(settings: Mapping[str, Any]) -> float | None:
    decay = settings.get("decay")
    return None if decay is None else float(decay)


def _as_candidate(given: Any) -> Candidate:
    if isinstance(given, Candidate):
        return given
    if isinstance(given, Mapping):
        unknown = set(given) - {"hidden", "decay", "algorithm"}
        if unknown:
            raise SettingError(f"a candidate has {', '.join(sorted(map(str, unknown)))}; a candidate has hidden, decay and algorithm only")
        hidden = given.get("hidden", defaults.DEFAULT_HIDDEN)
        return Candidate(tuple(hidden) if not isinstance(hidden, (int, np.integer)) else (int(hidden),), given.get("decay"), given.get("algorithm"))
    raise SettingError(f"a candidate is {cell_in_words(given)}; give Candidate(hidden, decay, algorithm) or a dict with those keys")


def _check_candidate(candidate: Candidate, base: Mapping[str, Any]) -> dict[str, Any]:
    hidden = candidate.hidden
    if any(isinstance(w, bool) or not isinstance(w, (int, np.integer)) or w < 1 for w in hidden):
        raise SettingError(f"candidate hidden layers {cell_in_words(list(hidden))} are not whole numbers of 1 or more; write them like (8,) or (8, 4)")
    return resolve_settings(candidate.settings(base))  # a bad decay or algorithm is refused before anything trains


def search(
    X: Any,
    y: Any,
    candidates: Sequence[Candidate | Mapping[str, Any]] | None = None,
    k: int = 5,
    seed: int = 0,
    *,
    metric: str | None = None,
    mode: str = "auto",
    groups: Sequence[Any] | np.ndarray | None = None,
    workers: int | None = None,
    **settings: Any,
) -> SearchResult:
    """Rank candidate networks by ``k``-fold cross-validated ``metric`` and say which to use.

    ``candidates``: `Candidate` values or dicts with ``hidden``, ``decay``,
    ``algorithm``; None: `default_candidates` (12). ``metric``: rmse for
    numbers, log_loss for classes unless given (any of `HIGHER_IS_BETTER`).
    ``mode`` and ``groups``: the folds, as in `sheetnet.cross_validate`
    (``ordered`` for time series: every fold trains only on earlier rows).
    ``settings``: training settings every candidate shares. ``workers``: as in
    `sheetnet.parallel.run_jobs` (a cluster when one is set).

    >>> result = sheetnet.search(X, y, [{"hidden": (4,)}, {"hidden": (8,), "decay": 0.01}], k=3)  # doctest: +SKIP
    >>> result.chosen.candidate.describe()                                                   # doctest: +SKIP
    '4'
    """
    chosen_candidates = tuple(_as_candidate(c) for c in (default_candidates() if candidates is None else candidates))
    if not chosen_candidates:
        raise SettingError("the search has no candidates; give at least one, or leave them out for the default grid")
    categories = settings.pop("categories", ())
    workers = resolve_settings({"workers": workers})["workers"]  # as the setting reads it (a cell gives the text '2')
    resolved = [_check_candidate(c, settings) for c in chosen_candidates]
    table, target = read_table(X), read_target(y)
    learned = fit_target(target, resolved[0]["task"])
    metric = metric or ("rmse" if learned.task == "regression" else "log_loss")
    if metric not in HIGHER_IS_BETTER:
        raise SettingError(f"metric {cell_in_words(metric)} is not known; choose one of: {', '.join(HIGHER_IS_BETTER)}")
    if (metric in REGRESSION_METRICS) != (learned.task == "regression"):
        kind = "numbers" if learned.task == "regression" else "classes"
        fitting = [m for m in HIGHER_IS_BETTER if (m in REGRESSION_METRICS) == (learned.task == "regression")]
        raise SettingError(f"metric {metric} does not fit a target learned as {kind}; choose one of: {', '.join(fitting)}")
    check_rows(X, y, resolved[0]["task"], categories)
    used, folds = make_folds(y, k, seed, mode, groups, resolved[0]["task"])
    width = planned_width(table, categories)
    X, y = read_once(X, y)
    if used == "ordered":  # time series: the folds that tune each candidate's network keep the order too
        settings.setdefault("inner_folds", "ordered")
    own = [dict(c.settings(settings), workers=1, categories=categories) for c in chosen_candidates]  # the cores go to the folds
    order = run_order([network_weights(width, c.hidden, learned.outputs) for c in chosen_candidates], len(folds))
    jobs = [(X, y, *folds[f], chosen_candidates[c].hidden, seed, own[c]) for c, f in order]
    found = dict(zip(order, run_jobs(fit_and_score_fold, jobs, workers, "search folds")))
    scored = []
    for c, (candidate, settings_used) in enumerate(zip(chosen_candidates, resolved)):
        fold_scores = [found[c, f][metric] for f in range(len(folds))]
        if any(v is None for v in fold_scores):
            raise SettingError(f"the {metric} is not defined on some folds of this target; rank by another metric, such as "
                               + ("rmse" if learned.task == "regression" else "log_loss"))
        scored.append(score_candidate(candidate, network_weights(width, candidate.hidden, learned.outputs), _decay_of(settings_used), fold_scores))
    ranking, best, chosen = rank(scored, HIGHER_IS_BETTER[metric])
    return SearchResult(metric, HIGHER_IS_BETTER[metric], used, len(folds), ranking, best, chosen, RULE.format(metric=metric))
