"""Stopping rules, watched once per epoch by every training algorithm.

An epoch is one pass over the training rows (one iteration for L-BFGS and
Rprop, which use all rows at each step). The rules, checked in this order:

- ``target_loss``: the training loss is at or below the target;
- ``gradient``: the largest absolute partial derivative is at or below the threshold;
- ``validation``: early stopping -- the loss on the inner validation rows has
  not improved by ``tolerance`` (relative) for ``patience`` epochs; the
  parameters of the best validation epoch are kept;
- ``stalled``: with no validation rows, the training loss has not improved by
  ``tolerance`` (relative) for ``patience`` epochs;
- ``epochs``: the most epochs were used.

An algorithm may also end by itself (L-BFGS when its line search cannot
improve further); it then reports ``stalled``. A training loss that becomes
infinite, or a million times that of the first epoch, ends training as
``diverged``, which `fit` turns into a `TrainingError`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from . import defaults
from .progress import check_stop

STOP_REASONS = ("target_loss", "gradient", "validation", "stalled", "epochs")
DIVERGED_FACTOR = 1e6  # a training loss this many times the first epoch's means the steps are too large

# progress(epoch, most_epochs, training_loss, validation_loss or None)
ProgressCallback = Callable[[int, int, float, float | None], None]


@dataclass(frozen=True)
class StoppingRules:
    """The rules' limits; the defaults are the settings' defaults."""

    epochs: int = defaults.EPOCHS
    target_loss: float = defaults.TARGET_LOSS
    gradient_threshold: float = defaults.GRADIENT_THRESHOLD
    tolerance: float = defaults.TOLERANCE
    patience: int = defaults.PATIENCE


@dataclass
class Monitor:
    """Records the loss curves and decides when to stop.

    ``validation_loss(theta)`` gives the mean loss on the inner validation
    rows, or is None when there are none.
    """

    rules: StoppingRules
    validation_loss: Callable[[np.ndarray], float] | None = None
    progress: ProgressCallback | None = None
    training_curve: list[float] = field(default_factory=list)
    validation_curve: list[float] = field(default_factory=list)
    best_theta: np.ndarray | None = None
    best_epoch: int = 0
    _best: float = np.inf
    _waited: int = 0

    @property
    def epochs(self) -> int:
        return len(self.training_curve)

    def end_epoch(self, theta: np.ndarray, training_loss: float, gradient_size: float) -> str | None:
        """Record one epoch; return the name of the rule that stops training, or None."""
        check_stop()  # a cancelled server job stops here, whatever network it is training
        self.training_curve.append(float(training_loss))
        watched = float(training_loss)
        validation = None
        if self.validation_loss is not None:
            validation = float(self.validation_loss(theta))
            self.validation_curve.append(validation)
            watched = validation
        if watched < self._best - self.rules.tolerance * abs(self._best if np.isfinite(self._best) else watched):
            self._best = watched
            self._waited = 0
            if self.validation_loss is not None:
                self.best_theta = np.array(theta, dtype=np.float64, copy=True)
                self.best_epoch = self.epochs
        else:
            self._waited += 1
        if self.progress is not None:
            self.progress(self.epochs, self.rules.epochs, float(training_loss), validation)

        if not np.isfinite(training_loss) or training_loss > DIVERGED_FACTOR * self.training_curve[0]:
            return "diverged"
        if self.rules.target_loss > 0 and training_loss <= self.rules.target_loss:
            return "target_loss"
        if gradient_size <= self.rules.gradient_threshold:
            return "gradient"
        if self._waited >= self.rules.patience:
            return "validation" if self.validation_loss is not None else "stalled"
        if self.epochs >= self.rules.epochs:
            return "epochs"
        return None

    def final_theta(self, theta: np.ndarray) -> np.ndarray:
        """The parameters to keep: those of the best validation epoch when early stopping ran."""
        if self.validation_loss is not None and self.best_theta is not None:
            return self.best_theta
        return theta
