"""Pictures of results people would rather look at than read: loss curves,
predicted against actual, confusion matrices. Written as PNG files.

Uses matplotlib's object-oriented API with the Agg canvas directly (no
pyplot, no global state, no screen needed).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Sequence

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .model import Model

INK = "#263238"
TRAINING = "#1565c0"
VALIDATION = "#ef6c00"
HIGHLIGHT = "#2e7d32"


def _save(figure: Figure, path: str | Path) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    FigureCanvasAgg(figure)
    figure.savefig(path, dpi=110, bbox_inches="tight")
    return path


def loss_curve_figure(model: Model, title: str = "Training curve") -> Figure:
    """Training (and validation) loss of the model's first member at its recorded epochs, the kept epoch marked."""
    member = model.members[0]
    figure = Figure(figsize=(6.4, 3.8))
    axes = figure.add_subplot()
    # a model read from a block keeps at most 200 points per curve, so each curve brings its own epochs
    axes.plot(np.asarray(member.training_epochs), member.training_curve, color=TRAINING, label="training loss")
    if member.validation_curve:
        axes.plot(np.asarray(member.validation_epochs), member.validation_curve, color=VALIDATION, label="validation loss")
        axes.axvline(member.best_epoch, color=HIGHLIGHT, linestyle="--", linewidth=1, label=f"kept: epoch {member.best_epoch}")
    if member.training_curve and min(member.training_curve) > 0:
        axes.set_yscale("log")
    axes.set_xlabel("epoch")
    axes.set_ylabel("loss")
    axes.set_title(f"{title}\n{model.algorithm}, stopped by '{member.stopped_by}' after {member.epochs} epochs", color=INK, fontsize=10)
    axes.legend(frameon=False)
    axes.grid(alpha=0.3)
    return figure


def loss_curve_picture(model: Model, path: str | Path, title: str = "Training curve") -> Path:
    """The loss curve (`loss_curve_figure`) as a PNG file."""
    return _save(loss_curve_figure(model, title), path)


def predicted_vs_actual_picture(actual: Sequence[float], predicted: Sequence[float], path: str | Path, title: str = "Predicted against actual") -> Path:
    """Scatter of predictions against actual values with the line of perfect prediction."""
    actual_values = np.asarray(actual, dtype=np.float64)
    predicted_values = np.asarray(predicted, dtype=np.float64)
    figure = Figure(figsize=(4.8, 4.6))
    axes = figure.add_subplot()
    low = float(min(actual_values.min(), predicted_values.min()))
    high = float(max(actual_values.max(), predicted_values.max()))
    axes.plot([low, high], [low, high], color=INK, linewidth=1, alpha=0.6, label="perfect prediction")
    axes.scatter(actual_values, predicted_values, s=14, color=TRAINING, alpha=0.7, label="holdout rows")
    rmse = float(np.sqrt(np.mean((actual_values - predicted_values) ** 2)))
    axes.set_xlabel("actual")
    axes.set_ylabel("predicted")
    axes.set_title(f"{title}\nRMSE {rmse:.4g} on {len(actual_values)} rows", color=INK, fontsize=10)
    axes.set_aspect("equal", adjustable="datalim")
    axes.legend(frameon=False, loc="upper left")
    axes.grid(alpha=0.3)
    return _save(figure, path)


def confusion_picture(confusion: np.ndarray, classes: Sequence[Any], path: str | Path, title: str = "Confusion matrix") -> Path:
    """Counts of actual (rows) against predicted (columns) classes, each cell labelled."""
    confusion = np.asarray(confusion)
    figure = Figure(figsize=(4.2 + 0.3 * len(classes), 3.8 + 0.3 * len(classes)))
    axes = figure.add_subplot()
    axes.imshow(confusion, cmap="Blues")
    labels = [str(c) for c in classes]
    axes.set_xticks(range(len(labels)), labels)
    axes.set_yticks(range(len(labels)), labels)
    axes.set_xlabel("predicted class")
    axes.set_ylabel("actual class")
    top = confusion.max() if confusion.size else 0
    for i in range(confusion.shape[0]):
        for j in range(confusion.shape[1]):
            axes.text(j, i, str(confusion[i, j]), ha="center", va="center", color="white" if confusion[i, j] > top / 2 else INK)
    accuracy = np.trace(confusion) / max(confusion.sum(), 1)
    axes.set_title(f"{title}\naccuracy {accuracy:.3f} on {confusion.sum()} rows", color=INK, fontsize=10)
    return _save(figure, path)
