"""Pictures of results people would rather look at than read: loss curves,
predicted against actual, confusion matrices, importance bars, partial-dependence
curves, residuals against predicted, calibration curves. Written as PNG files.

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


def importance_picture(found: Sequence[tuple[str, float, float]], path: str | Path, loss: str = "RMSE", title: str = "What the model relies on") -> Path:
    """Horizontal bars of permutation importance (`sheetnet.evaluation.permutation_importance`), largest on top, spread as error bars."""
    names = [name for name, _, _ in found][::-1]
    means = [mean for _, mean, _ in found][::-1]
    spreads = [spread for _, _, spread in found][::-1]
    figure = Figure(figsize=(6.0, 1.2 + 0.38 * len(names)))
    axes = figure.add_subplot()
    axes.barh(names, means, xerr=spreads, color=TRAINING, ecolor=INK, capsize=3)
    axes.axvline(0, color=INK, linewidth=0.8)
    axes.set_xlabel(f"{loss} increase when the input is shuffled")
    axes.set_title(title, color=INK, fontsize=10)
    axes.grid(alpha=0.3, axis="x")
    return _save(figure, path)


def partial_dependence_picture(curves: Sequence[tuple[str, np.ndarray, np.ndarray]], path: str | Path, answer: str = "predicted value") -> Path:
    """One panel per input: the model's average answer (`sheetnet.dependence.partial_dependence`) over the input's grid."""
    figure = Figure(figsize=(3.2 * max(len(curves), 1), 3.2))
    for k, (name, grid, average) in enumerate(curves, start=1):
        axes = figure.add_subplot(1, max(len(curves), 1), k)
        values = np.asarray(average)
        axes.plot(grid, values if values.ndim == 1 else values, color=TRAINING if values.ndim == 1 else None, marker="o", markersize=3)
        axes.set_xlabel(name)
        if k == 1:
            axes.set_ylabel(f"average {answer}")
        axes.grid(alpha=0.3)
    figure.suptitle("Partial dependence: the average answer as one input changes", color=INK, fontsize=10)
    return _save(figure, path)


def residuals_picture(actual: Sequence[float], predicted: Sequence[float], path: str | Path, half_width: float | None = None) -> Path:
    """Residuals (actual - predicted) against predicted values; the conformal band drawn when given."""
    a, p = np.asarray(actual, dtype=np.float64), np.asarray(predicted, dtype=np.float64)
    figure = Figure(figsize=(5.6, 3.8))
    axes = figure.add_subplot()
    axes.axhline(0, color=INK, linewidth=1, alpha=0.6)
    if half_width is not None:
        axes.axhspan(-half_width, half_width, color=HIGHLIGHT, alpha=0.12, label=f"prediction interval, ± {half_width:.3g}")
    axes.scatter(p, a - p, s=14, color=TRAINING, alpha=0.75, label="holdout rows")
    axes.set_xlabel("predicted")
    axes.set_ylabel("actual - predicted")
    axes.set_title(f"Residuals against predicted, {len(a)} rows", color=INK, fontsize=10)
    axes.legend(frameon=False)
    axes.grid(alpha=0.3)
    return _save(figure, path)


def calibration_picture(table: Sequence[tuple[float, float, int, float, float]], path: str | Path, positive: str = "the positive class") -> Path:
    """Observed share against mean predicted probability per bin (`sheetnet.uncertainty.reliability_table`), the diagonal for reference."""
    figure = Figure(figsize=(4.8, 4.6))
    axes = figure.add_subplot()
    axes.plot([0, 1], [0, 1], color=INK, linewidth=1, alpha=0.6, label="perfectly calibrated")
    predicted = [row[3] for row in table]
    observed = [row[4] for row in table]
    sizes = [12 + 3 * row[2] ** 0.5 for row in table]
    axes.plot(predicted, observed, color=TRAINING, linewidth=1)
    axes.scatter(predicted, observed, s=sizes, color=TRAINING, label="bins (dot size: rows)")
    axes.set_xlim(0, 1)
    axes.set_ylim(0, 1)
    axes.set_xlabel(f"mean predicted probability of {positive}")
    axes.set_ylabel("observed share")
    axes.set_title(f"Calibration on {sum(row[2] for row in table)} rows", color=INK, fontsize=10)
    axes.legend(frameon=False, loc="upper left")
    axes.grid(alpha=0.3)
    return _save(figure, path)
