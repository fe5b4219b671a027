"""Training algorithms over a flat parameter vector.

Each algorithm takes an objective (``loss, grad = objective(theta, start, stop)``
over contiguous rows, with ``objective.n_rows`` and ``objective.shuffle(rng)``),
a starting vector and a `Monitor`, and returns the final vector and the name
of the stopping rule that ended it. Each docstring states its update rule and
the paper it follows.

`OPTIMIZERS` is the one table of algorithms, keyed by the name the setting
``algorithm`` takes: each entry holds the function and which settings feed
which of its arguments. `run` looks an algorithm up and calls it; adding one
is one function and one entry (the setting's choices follow from the table).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Callable, Mapping, Protocol

import numpy as np
from scipy.optimize import minimize

from .stopping import Monitor


class BatchObjective(Protocol):
    n_rows: int

    def __call__(self, theta: np.ndarray, start: int = 0, stop: int | None = None) -> tuple[float, np.ndarray]: ...

    def shuffle(self, rng: np.random.Generator) -> None: ...


def _batch_bounds(n_rows: int, batch_rows: int) -> list[tuple[int, int]]:
    size = n_rows if batch_rows <= 0 else min(batch_rows, n_rows)
    return [(start, min(start + size, n_rows)) for start in range(0, n_rows, size)]


def _minibatch_epochs(
    objective: BatchObjective,
    theta: np.ndarray,
    monitor: Monitor,
    rng: np.random.Generator,
    batch_rows: int,
    step: Callable[[np.ndarray, np.ndarray], None],
) -> tuple[np.ndarray, str]:
    """Epochs of batch updates ``step(theta, grad)`` (in place) until a stopping rule fires.

    Rows are reshuffled each epoch unless there is one batch; the epoch's loss
    and gradient reported to the monitor are the row-weighted means over its batches.
    """
    bounds = _batch_bounds(objective.n_rows, batch_rows)
    while True:
        if len(bounds) > 1:
            objective.shuffle(rng)
        epoch_loss = 0.0
        epoch_grad = np.zeros_like(theta)
        for start, stop in bounds:
            loss, grad = objective(theta, start, stop)
            step(theta, grad)
            weight = (stop - start) / objective.n_rows
            epoch_loss += weight * loss
            epoch_grad += weight * grad
        reason = monitor.end_epoch(theta, epoch_loss, float(np.max(np.abs(epoch_grad))))
        if reason:
            return monitor.final_theta(theta), reason


def gradient_descent(
    objective: BatchObjective,
    theta: np.ndarray,
    monitor: Monitor,
    rng: np.random.Generator,
    rate: float,
    momentum: float,
    batch_rows: int,
) -> tuple[np.ndarray, str]:
    """Gradient descent with momentum (Rumelhart, Hinton & Williams 1986).

    Per batch: ``v <- momentum * v - rate * g``; ``theta <- theta + v``.
    ``batch_rows`` 0 is full-batch, 1 is the per-row update, anything between
    is mini-batch; rows are reshuffled each epoch unless full-batch.
    """
    velocity = np.zeros_like(theta)

    def step(theta: np.ndarray, grad: np.ndarray) -> None:
        nonlocal velocity  # updated in place; declared so the augmented assignments reach it
        velocity *= momentum
        velocity -= rate * grad
        theta += velocity

    return _minibatch_epochs(objective, theta.copy(), monitor, rng, batch_rows, step)


def rprop(
    objective: BatchObjective,
    theta: np.ndarray,
    monitor: Monitor,
    improved: bool,
    increase: float,
    decrease: float,
    step_init: float,
    step_max: float,
    step_min: float,
) -> tuple[np.ndarray, str]:
    """Resilient backpropagation with weight backtracking, full-batch.

    Each parameter has its own step ``Delta``. With ``p = g_prev * g``:
    ``p > 0``: ``Delta <- min(Delta * eta+, Delta_max)``, ``dw = -sign(g) Delta``;
    ``p < 0``: ``Delta <- max(Delta * eta-, Delta_min)``, the previous step is
    undone (``dw = -dw_prev``) and ``g`` is set to 0 so the next step does not
    adapt; ``p = 0``: ``dw = -sign(g) Delta``.

    ``improved=False`` is Rprop+ (Riedmiller & Braun 1993, as written out by
    Igel & Huesken 2000). ``improved=True`` is iRprop+ (Igel & Huesken 2000):
    the previous step is undone only if the loss rose (``E_t > E_{t-1}``).
    """
    theta = theta.copy()
    step = np.full_like(theta, step_init)
    previous_grad = np.zeros_like(theta)
    previous_change = np.zeros_like(theta)
    previous_loss = np.inf
    while True:
        loss, grad = objective(theta)
        reason = monitor.end_epoch(theta, loss, float(np.max(np.abs(grad))))
        if reason:
            return monitor.final_theta(theta), reason
        product = previous_grad * grad
        grew = product > 0
        flipped = product < 0
        step[grew] = np.minimum(step[grew] * increase, step_max)
        step[flipped] = np.maximum(step[flipped] * decrease, step_min)
        change = -np.sign(grad) * step
        if improved:
            change[flipped] = -previous_change[flipped] if loss > previous_loss else 0.0
        else:
            change[flipped] = -previous_change[flipped]
        grad[flipped] = 0.0
        theta += change
        previous_grad = grad
        previous_change = change
        previous_loss = loss


def lbfgs(
    objective: BatchObjective,
    theta: np.ndarray,
    monitor: Monitor,
    memory: int,
    tolerance: float,
) -> tuple[np.ndarray, str]:
    """Limited-memory BFGS (Liu & Nocedal 1989) through SciPy's L-BFGS-B.

    SciPy keeps ``memory`` correction pairs to approximate the inverse Hessian
    and takes a line-searched step along ``-H g`` each iteration; this wrapper
    hands it the analytic gradient and counts one epoch per iteration.
    """
    last_grad = {"value": np.inf}
    stop: dict[str, str | None] = {"reason": None}

    def loss_and_grad(vector: np.ndarray) -> tuple[float, np.ndarray]:
        loss, grad = objective(vector)
        last_grad["value"] = float(np.max(np.abs(grad)))
        return loss, grad

    def callback(intermediate_result) -> None:  # SciPy passes an OptimizeResult by this name
        reason = monitor.end_epoch(intermediate_result.x, intermediate_result.fun, last_grad["value"])
        if reason:
            stop["reason"] = reason
            raise StopIteration

    result = minimize(
        loss_and_grad,
        theta,
        jac=True,
        method="L-BFGS-B",
        callback=callback,
        options={
            "maxiter": monitor.rules.epochs + 1,  # the monitor ends it at `epochs`
            "maxfun": 20 * (monitor.rules.epochs + 1),
            "maxcor": memory,
            "ftol": tolerance * 1e-3,  # SciPy's own end only when truly flat; patience handles the rest
            "gtol": monitor.rules.gradient_threshold,
        },
    )
    reason = stop["reason"]
    if reason is None and monitor.epochs == 0:  # SciPy ended before its first iteration: record the start
        monitor.end_epoch(result.x, float(result.fun), last_grad["value"])
    if reason is None:
        message = str(result.message).upper()
        reason = "gradient" if "GRADIENT" in message else "stalled"
    return monitor.final_theta(result.x), reason


def adam(
    objective: BatchObjective,
    theta: np.ndarray,
    monitor: Monitor,
    rng: np.random.Generator,
    rate: float,
    beta1: float,
    beta2: float,
    epsilon: float,
    batch_rows: int,
) -> tuple[np.ndarray, str]:
    """Adam (Kingma & Ba 2015, Algorithm 1) on shuffled mini-batches.

    Per batch, step ``t``: ``m <- b1 m + (1 - b1) g``; ``v <- b2 v + (1 - b2) g^2``;
    ``m_hat = m / (1 - b1^t)``; ``v_hat = v / (1 - b2^t)``;
    ``theta <- theta - rate * m_hat / (sqrt(v_hat) + eps)``.
    """
    m = np.zeros_like(theta)
    v = np.zeros_like(theta)
    scratch = np.empty_like(theta)
    t = 0

    def step(theta: np.ndarray, grad: np.ndarray) -> None:
        nonlocal t, m, v, scratch  # the arrays are updated in place
        t += 1
        m *= beta1
        m += (1.0 - beta1) * grad
        v *= beta2
        np.multiply(grad, grad, out=scratch)
        scratch *= 1.0 - beta2
        v += scratch
        # rate * m_hat / (sqrt(v_hat) + eps), written without temporaries for m_hat, v_hat
        np.sqrt(v / (1.0 - beta2**t), out=scratch)
        scratch += epsilon
        theta -= (rate / (1.0 - beta1**t)) * m / scratch

    return _minibatch_epochs(objective, theta.copy(), monitor, rng, batch_rows, step)


@dataclass(frozen=True)
class Optimizer:
    """One entry of `OPTIMIZERS`: the function, and which settings it reads.

    ``reads`` maps each argument of ``function`` to the setting that supplies
    it (``rate`` and ``batch`` as `sheetnet.training.plan_training` resolved
    them); ``fixed`` holds arguments that tell variants apart. A mini-batch
    method also takes the random generator that shuffles the rows.
    """

    function: Callable[..., tuple[np.ndarray, str]]
    reads: Mapping[str, str]
    fixed: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}))
    mini_batches: bool = False  # takes ``rng`` and updates per batch of ``batch`` rows


def _entry(
    function: Callable[..., tuple[np.ndarray, str]], reads: dict[str, str], fixed: dict[str, Any] | None = None, mini_batches: bool = False
) -> Optimizer:
    return Optimizer(function, MappingProxyType(reads), MappingProxyType(fixed or {}), mini_batches)


_RPROP_READS = {
    "increase": "rprop_increase", "decrease": "rprop_decrease", "step_init": "rprop_step",
    "step_max": "rprop_step_max", "step_min": "rprop_step_min",
}

# in the order the setting 'algorithm' lists its choices
OPTIMIZERS: Mapping[str, Optimizer] = MappingProxyType({
    "gd": _entry(gradient_descent, {"rate": "rate", "momentum": "momentum", "batch_rows": "batch"}, mini_batches=True),
    "rprop+": _entry(rprop, _RPROP_READS, {"improved": False}),
    "irprop+": _entry(rprop, _RPROP_READS, {"improved": True}),
    "lbfgs": _entry(lbfgs, {"memory": "lbfgs_memory", "tolerance": "tolerance"}),
    "adam": _entry(
        adam,
        {"rate": "rate", "beta1": "adam_beta1", "beta2": "adam_beta2", "epsilon": "adam_epsilon", "batch_rows": "batch"},
        mini_batches=True,
    ),
})


def run(
    algorithm: str,
    objective: BatchObjective,
    theta: np.ndarray,
    monitor: Monitor,
    rng: np.random.Generator,
    settings: Mapping[str, Any],
) -> tuple[np.ndarray, str]:
    """Train with the algorithm named ``algorithm``, its arguments read from ``settings`` by the table."""
    entry = OPTIMIZERS[algorithm]
    arguments = {argument: settings[setting] for argument, setting in entry.reads.items()}
    if entry.mini_batches:
        arguments["rng"] = rng
    return entry.function(objective, theta, monitor, **entry.fixed, **arguments)
