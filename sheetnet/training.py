"""`fit`: validate the data, prepare it, train one or more networks, return a `Model`.

Randomness enters through the ``seed`` argument only: it seeds one
`numpy.random.SeedSequence` whose children drive each repeat's starting
weights, inner validation rows and batch order (and, after them, the inner
cross-validation that chooses the decay), so the same data, settings and
seed give identical weights.

Small tables (below `defaults.TUNING_ROW_LIMIT` training rows, decay left at
none): early stopping on a small inner validation share is noisy and trains
on fewer rows, so instead the weight decay is chosen by k-fold
cross-validation on the training rows (`choose_decay`), and the network is
then trained on every training row with that decay until the training loss
stalls. On the benchmark's small tables this lifted, for example, diabetes
R^2 from 0.46 to 0.51 and make_classification (750 training rows) accuracy
from 0.77 to 0.89 (tests/benchmarks/vs_reference.py).

When ``hidden`` is also left at its default (None: `defaults.DEFAULT_HIDDEN`),
the same cross-validation weighs the same preparation with no hidden layer
(a linear, logistic or softmax regression) and with the narrower
`defaults.NARROW_HIDDEN`, each with every decay of `DECAY_CHOICES`: the
network with the lowest loss wins, and no hidden layer is kept instead when
its loss is within one standard error of the winner's (the
one-standard-error rule). The model's settings then record the
choice: ``decay`` as used and ``hidden_chosen`` ("none" or the widths kept,
like "4"), which the model card lists with the other settings (ABOUT shows
the layer sizes). Hidden layers given explicitly are always kept.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, Sequence

import numpy as np

from . import network, optimizers
from .cell_text import cell_in_words
from .defaults import (
    ADAM_BATCH_ROWS,
    AUTO_RATES,
    AUTO_VALIDATION_SHARE,
    DECAY_CHOICES,
    DEFAULT_DECAY,
    DEFAULT_HIDDEN,
    FLOAT32_ROW_LIMIT,
    LBFGS_ROW_LIMIT,
    MIN_ROWS,
    NARROW_HIDDEN,
    TINY_TABLE_DECAY,
    TUNING_FOLDS,
    TUNING_MIN_ROWS,
    TUNING_ROW_LIMIT,
    VALIDATION_ROW_LIMIT,
)
from .errors import LengthMismatchError, NotEnoughRowsError, SettingError, TrainingError
from .limits import check_network_size
from .model import Member, Model
from .parallel import run_jobs
from .preparation import fit_preparation, fit_target, read_table, read_target
from .settings import resolve_settings
from .splits import holdout_mask, k_folds, ordered_folds
from .stopping import Monitor, ProgressCallback, StoppingRules


@dataclass(frozen=True)
class Plan:
    """The choices `fit` made from the settings and the data size."""

    algorithm: str
    dtype: str
    validation_share: float
    rate: float
    batch_rows: int
    decay: float | None = None  # None: chosen by inner cross-validation (see `choose_decay`)
    folds: int = 0  # folds of that cross-validation


def plan_training(n_rows: int, settings: dict[str, Any]) -> Plan:
    """Resolve the 'auto' choices for a table of ``n_rows`` training rows (the numbers live in `sheetnet.defaults`)."""
    algorithm = settings["algorithm"]
    if algorithm == "auto":
        algorithm = "lbfgs" if n_rows < LBFGS_ROW_LIMIT else "adam"
    dtype = settings["precision"]
    if dtype == "auto":
        dtype = "float32" if n_rows >= FLOAT32_ROW_LIMIT else "float64"
    share = settings["validation_share"]
    if share is None:
        share = AUTO_VALIDATION_SHARE if n_rows >= VALIDATION_ROW_LIMIT else 0.0
    rate = settings["rate"]
    if rate is None:
        rate = AUTO_RATES.get(algorithm, 0.0)
    batch = settings["batch"]
    if batch is None:
        batch = ADAM_BATCH_ROWS if algorithm == "adam" else 0
    decay = settings["decay"]
    folds = 0
    if decay is None and n_rows < TUNING_MIN_ROWS:
        decay = TINY_TABLE_DECAY
    elif decay is None and n_rows < TUNING_ROW_LIMIT:
        folds = TUNING_FOLDS
        if settings["validation_share"] is None:
            share = 0.0  # the folds decide, and the final fit uses every row
    elif decay is None:
        decay = DEFAULT_DECAY
    return Plan(algorithm, dtype, float(share), float(rate), int(batch), decay, folds)


def _check_hidden(hidden: int | Sequence[int]) -> tuple[int, ...]:
    layers = (hidden,) if isinstance(hidden, (int, np.integer)) else tuple(hidden)
    for width in layers:
        if isinstance(width, bool) or not isinstance(width, (int, np.integer)) or width < 1:
            raise SettingError(f"hidden layer sizes must be whole numbers of 1 or more; got {cell_in_words(hidden)} (for example (8,) or (8, 4))")
    return tuple(int(w) for w in layers)


def _validation_rows(n_rows: int, share: float, rng: np.random.Generator, labels: np.ndarray | None) -> np.ndarray:
    """Mask of inner validation rows for early stopping (stratified for classes when possible)."""
    if share <= 0 or int(round(share * n_rows)) < 1:
        return np.zeros(n_rows, dtype=bool)
    seed = int(rng.integers(2**32))
    if labels is not None:
        counts = np.unique(labels, return_counts=True)[1]
        if counts.min() >= 2:
            return holdout_mask(n_rows, share, seed, "stratified", labels)
    return holdout_mask(n_rows, share, seed, "random")


def _inner_folds(
    n_rows: int, folds: int, rng: np.random.Generator, labels: np.ndarray | None, order: str = "shuffled"
) -> list[tuple[np.ndarray, np.ndarray]]:
    """The folds of the inner cross-validation: shuffled (stratified for classes when every class fills every fold),
    or ``ordered``, expanding windows over rows in time order (`splits.ordered_folds`)."""
    seed = int(rng.integers(2**32))  # drawn either way, so what follows draws the same
    if order == "ordered":
        return ordered_folds(n_rows, folds)
    if labels is not None and np.unique(labels, return_counts=True)[1].min() >= folds:
        return k_folds(n_rows, folds, seed, labels)
    return k_folds(n_rows, folds, seed)


def _stopping_rules(settings: dict[str, Any]) -> StoppingRules:
    return StoppingRules(
        epochs=settings["epochs"],
        target_loss=settings["target_loss"],
        gradient_threshold=settings["gradient_threshold"],
        tolerance=settings["tolerance"],
        patience=settings["patience"],
    )


@dataclass(frozen=True)
class Candidate:
    """One network weighed by the inner cross-validation: hidden layer widths (``()``: none) and weight decay."""

    hidden: tuple[int, ...]
    decay: float


@dataclass(frozen=True)
class CrossValidationChoice:
    """What the inner cross-validation kept, and each candidate's mean validation loss (weighted by fold rows)."""

    kept: Candidate
    candidates: tuple[Candidate, ...]
    losses: tuple[float, ...]  # one per candidate, in its order

    @property
    def decay(self) -> float:
        return self.kept.decay


def candidates_of(hidden: tuple[int, ...], blank: bool) -> tuple[Candidate, ...]:
    """The networks the inner cross-validation weighs: ``hidden`` with each of `DECAY_CHOICES`; when the hidden
    layers were left ``blank``, also `NARROW_HIDDEN` and no hidden layer (a linear, logistic or softmax regression),
    each with every decay."""
    shapes = tuple(dict.fromkeys((hidden, NARROW_HIDDEN, ()))) if blank else (hidden,)
    return tuple(Candidate(shape, decay) for shape in shapes for decay in DECAY_CHOICES)


def fold_losses(
    inputs: np.ndarray,
    outputs: np.ndarray,
    ends: tuple[int, int],
    activation: str,
    head: str,
    settings: dict[str, Any],
    plan: Plan,
    starts: dict[tuple[int, ...], np.ndarray],
    candidates: tuple[Candidate, ...],
    train_rows: np.ndarray,
    test_rows: np.ndarray,
    seed: int,
) -> list[float]:
    """Best mean loss on ``test_rows`` of each candidate trained on ``train_rows``, stopping early on the test rows.

    Every candidate of one shape starts from that shape's weights in ``starts``.
    A loss is infinite when training diverged: such a candidate is never kept.
    """
    dtype = np.float32 if plan.dtype == "float32" else np.float64
    optimizer = optimizers.OPTIMIZERS[plan.algorithm]
    chosen = {**settings, "rate": plan.rate, "batch": plan.batch_rows}
    found = []
    for candidate in candidates:
        sizes = (ends[0], *candidate.hidden, ends[1])
        train = network.Objective(
            sizes, activation, head, inputs[train_rows], outputs[train_rows], candidate.decay, dtype,
            batch_rows=plan.batch_rows if optimizer.mini_batches else None,
        )
        check = network.Objective(sizes, activation, head, inputs[test_rows], outputs[test_rows], 0.0, dtype)
        monitor = Monitor(_stopping_rules(settings), check.data_loss)
        with network.one_blas_thread():
            _, reason = optimizers.run(plan.algorithm, train, starts[candidate.hidden], monitor, np.random.default_rng(seed), chosen)
        curve = np.asarray(monitor.validation_curve)
        found.append(float(curve.min()) if reason != "diverged" and np.isfinite(curve).all() else np.inf)
    return found


def choose_decay(
    inputs: np.ndarray,
    outputs: np.ndarray,
    labels: np.ndarray | None,
    ends: tuple[int, int],
    candidates: tuple[Candidate, ...],
    activation: str,
    head: str,
    settings: dict[str, Any],
    plan: Plan,
    rng: np.random.Generator,
) -> CrossValidationChoice:
    """Pick the weight decay (and, when ``candidates`` hold two shapes, the hidden layers) by ``plan.folds``-fold
    cross-validation on the training rows.

    Each candidate is trained on each fold's other rows from its shape's
    starting weights (drawn once from ``rng``), watching the fold's rows for
    early stopping (`fold_losses`); the candidate with the lowest mean best
    validation loss (weighted by fold rows) wins, the earlier one on a tie.
    When it has hidden layers and a candidate without any is within one
    standard error of it (the spread of the winner's fold losses over
    sqrt(folds)), the simpler one is kept instead: the one-standard-error rule
    (Breiman, Friedman, Olshen & Stone 1984, Classification and Regression
    Trees; Hastie, Tibshirani & Friedman 2009, The Elements of Statistical
    Learning, section 7.10; both cited from memory). The folds are independent jobs, run where
    `sheetnet.parallel.run_jobs` finds them fastest.
    """
    folds = _inner_folds(len(inputs), plan.folds, rng, labels, settings["inner_folds"])  # first: they do not depend on the shapes
    seed = int(rng.integers(2**32))
    shapes = dict.fromkeys(c.hidden for c in candidates)
    starts = {shape: network.initial_parameters((ends[0], *shape, ends[1]), activation, rng) for shape in shapes}
    jobs = [
        (inputs, outputs, ends, activation, head, settings, plan, starts, candidates, train_rows, test_rows, seed)
        for train_rows, test_rows in folds
    ]
    losses = np.array(run_jobs(fold_losses, jobs, settings["workers"], "decay folds")).T  # (candidates, folds)
    shares = np.array([len(test_rows) for _, test_rows in folds]) / len(inputs)
    mean_losses = losses @ shares
    best = int(np.argmin(mean_losses))
    kept = candidates[best]
    simple = [i for i, c in enumerate(candidates) if not c.hidden]
    if kept.hidden and simple and np.isfinite(mean_losses[best]):
        standard_error = float(np.std(losses[best], ddof=1)) / np.sqrt(len(folds))
        nearest = min(simple, key=lambda i: mean_losses[i])
        if mean_losses[nearest] <= mean_losses[best] + standard_error:
            kept = candidates[nearest]
    return CrossValidationChoice(kept, candidates, tuple(float(v) for v in mean_losses))


def train_member(
    inputs: np.ndarray,
    outputs: np.ndarray,
    labels: np.ndarray | None,
    sizes: tuple[int, ...],
    activation: str,
    head: str,
    settings: dict[str, Any],
    plan: Plan,
    seed: np.random.SeedSequence,
    progress: ProgressCallback | None = None,
) -> Member:
    """Train one network on prepared arrays; pure apart from the progress callback."""
    rng = np.random.default_rng(seed)
    theta = network.initial_parameters(sizes, activation, rng)
    assert plan.decay is not None, "fit chooses the decay before training members"
    held = _validation_rows(len(inputs), plan.validation_share, rng, labels)
    dtype = np.float32 if plan.dtype == "float32" else np.float64
    optimizer = optimizers.OPTIMIZERS[plan.algorithm]
    train = network.Objective(
        sizes, activation, head, inputs[~held], outputs[~held], plan.decay, dtype,
        batch_rows=plan.batch_rows if optimizer.mini_batches else None,
    )
    validation_loss = None
    if held.any():
        check = network.Objective(sizes, activation, head, inputs[held], outputs[held], 0.0, dtype)
        validation_loss = check.data_loss
    monitor = Monitor(_stopping_rules(settings), validation_loss, progress)
    chosen = {**settings, "rate": plan.rate, "batch": plan.batch_rows}  # the plan's resolution of the auto choices
    with network.one_blas_thread():
        theta, reason = optimizers.run(plan.algorithm, train, theta, monitor, rng, chosen)
    theta = np.array(theta, dtype=np.float64)
    if reason == "diverged" or not np.isfinite(theta).all():
        raise TrainingError(
            f"training diverged at epoch {monitor.epochs} with algorithm {plan.algorithm}: the loss became infinite or not a number; "
            "lower the setting 'rate', or use algorithm 'lbfgs' or 'irprop+', which choose their own step sizes"
        )
    theta.setflags(write=False)
    best = monitor.best_epoch if held.any() and monitor.best_theta is not None else monitor.epochs
    return Member(theta, reason, monitor.epochs, tuple(monitor.training_curve), tuple(monitor.validation_curve), best)


def fit(
    X: Any,
    y: Any,
    hidden: int | Sequence[int] | None = None,
    seed: int = 0,
    *,
    categories: Sequence[str] = (),
    progress: ProgressCallback | None = None,
    **settings: Any,
) -> Model:
    """Train a feed-forward network on rows ``X`` to predict ``y``.

    ``X``: NumPy array, pandas DataFrame (columns kept by name) or list of rows,
    shape (rows, columns); text columns become categories, and ``categories``
    names numeric-looking columns to treat as categories too. ``y``: one value
    or label per row. ``hidden``: widths of the hidden layers, ``()`` for none;
    None (the default) is `defaults.DEFAULT_HIDDEN`, and on a small table with
    the decay left at none also lets cross-validation keep no hidden layer
    (see the module text).
    ``settings``: see `sheetnet.settings.SETTINGS`. ``progress`` is called after
    each epoch (only when training a single network).

    >>> import sheetnet
    >>> model = sheetnet.fit([[0, 0], [0, 1], [1, 0], [1, 1]], [0, 1, 1, 0], hidden=(3,), seed=1)
    >>> model.predict([[0, 1], [1, 1]]).tolist()
    [1, 0]
    """
    resolved = resolve_settings(settings)
    layers = _check_hidden(DEFAULT_HIDDEN if hidden is None else hidden)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise SettingError(f"seed must be a whole number of 0 or more; got {cell_in_words(seed)}")
    table = read_table(X)
    target_values = read_target(y)
    if len(target_values) != table.n_rows:
        raise LengthMismatchError(
            f"the inputs have {table.n_rows} rows but the target has {len(target_values)}; give one target value per input row"
        )
    if table.n_rows < MIN_ROWS:
        raise NotEnoughRowsError(f"training needs at least {MIN_ROWS} rows; got {table.n_rows}. Add rows")
    if not table.names:
        raise NotEnoughRowsError("the table has no input columns; add at least one column to learn from")

    target = fit_target(target_values, resolved["task"])
    preparation = fit_preparation(table, categories)
    check_network_size(table.n_rows, preparation.width, layers, target.outputs)  # before any large array is made
    inputs = preparation.transform_columns(table.columns)
    outputs = target.encode(target_values)
    labels = target.class_indices(target_values) if target.task != "regression" else None
    sizes = (preparation.width, *layers, target.outputs)
    plan = plan_training(table.n_rows, resolved)

    root = np.random.SeedSequence(int(seed))
    seeds = root.spawn(resolved["repeats"])
    chose_shape = False
    if plan.decay is None:  # after the members' seeds, so choosing the decay leaves them as they were
        tuning = np.random.default_rng(root.spawn(1)[0])
        candidates = candidates_of(layers, blank=hidden is None)
        chose_shape = len({c.hidden for c in candidates}) > 1
        ends = (sizes[0], sizes[-1])
        choice = choose_decay(inputs, outputs, labels, ends, candidates, resolved["activation"], target.head, resolved, plan, tuning)
        plan = dataclasses.replace(plan, decay=choice.decay)
        sizes = (sizes[0], *choice.kept.hidden, sizes[-1])
    args = (inputs, outputs, labels, sizes, resolved["activation"], target.head, resolved, plan)
    if len(seeds) == 1:  # one network: here, with its progress per epoch
        members: tuple[Member, ...] = (train_member(*args, seeds[0], progress=progress),)
    else:  # where sheetnet.parallel finds them fastest; each repeat has its own seed, so the weights are the same anywhere
        members = tuple(run_jobs(train_member, [(*args, s) for s in seeds], resolved["workers"], "repeats"))

    used = dict(resolved)
    used.update(algorithm=plan.algorithm, precision=plan.dtype, validation_share=plan.validation_share, rate=plan.rate, batch=plan.batch_rows, decay=plan.decay)
    if chose_shape:  # the hidden layers were left at their default and cross-validation weighed none as well
        used["hidden_chosen"] = ",".join(str(w) for w in sizes[1:-1]) or "none"
    return Model(preparation, target, sizes, resolved["activation"], members, plan.algorithm, MappingProxyType(used), int(seed))
