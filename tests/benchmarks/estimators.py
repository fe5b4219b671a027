"""The scikit-learn estimators' overhead: SheetnetRegressor/SheetnetClassifier fit and predict beside sheetnet.fit and Model.predict.

Run by hand:  .venv/bin/python tests/benchmarks/estimators.py [--rows 10000] [--repeats 7]

The same table, settings and seed go both ways, alternating call by call so that the
shared machine's noise falls on both alike; medians and the ratio estimator / direct are
printed (a ratio of 1.00 is no overhead). Tables: numbers only (a NumPy array) and a
DataFrame with a text column, on an invented scenario (seeded).
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import pandas as pd

import sheetnet
from sheetnet.estimators import SheetnetClassifier, SheetnetRegressor

SETTINGS = dict(epochs=60, decay=1e-4, validation_share=0, algorithm="lbfgs", precision="float64")


def tables(rows: int, seed: int = 0) -> dict[str, tuple[object, np.ndarray, np.ndarray]]:
    """Numbers (array) and a frame with a text column; a value target and a class target for each."""
    rng = np.random.default_rng(seed)
    numbers = rng.normal(size=(rows, 10))
    value = np.sin(numbers[:, 0]) + numbers[:, 1] * numbers[:, 2] + rng.normal(0, 0.1, rows)
    frame = pd.DataFrame(numbers[:, :6], columns=[f"reading_{j}" for j in range(6)]).assign(line=rng.choice(["north", "south", "east", "west"], rows))
    label = np.where(value > np.median(value), "high", "low")
    return {"array": (numbers, value, label), "frame": (frame, value, label)}


def alternating(first, second, repeats: int) -> tuple[float, float]:
    a, b = [], []
    for _ in range(repeats):
        for action, times in ((first, a), (second, b)):
            start = time.perf_counter()
            action()
            times.append(time.perf_counter() - start)
    return statistics.median(a), statistics.median(b)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=10_000)
    parser.add_argument("--repeats", type=int, default=7)
    options = parser.parse_args()
    print(f"{options.rows:,} rows, hidden (8,), {SETTINGS}; median of {options.repeats}, alternating")
    print(f"{'table':6} {'task':10} {'step':8} {'estimator s':>12} {'direct s':>10} {'ratio':>6}")
    for kind, (X, value, label) in tables(options.rows).items():
        for task, target, estimator in (("regression", value, SheetnetRegressor), ("classes", label, SheetnetClassifier)):
            direct_task = "regression" if task == "regression" else "multiclass"
            wrapped = estimator(hidden=(8,), **SETTINGS)
            fit_wrapped, fit_direct = alternating(
                lambda: wrapped.fit(X, target), lambda: sheetnet.fit(X, target, hidden=(8,), task=direct_task, **SETTINGS), options.repeats
            )
            model = sheetnet.fit(X, target, hidden=(8,), task=direct_task, **SETTINGS)
            predict_wrapped, predict_direct = alternating(lambda: wrapped.predict(X), lambda: model.predict(X), options.repeats)
            for step, (a, b) in (("fit", (fit_wrapped, fit_direct)), ("predict", (predict_wrapped, predict_direct))):
                print(f"{kind:6} {task:10} {step:8} {a:12.4f} {b:10.4f} {a / b:6.2f}")
            onnx_line(kind, task, model, X, options.repeats)
            checks = median_of(lambda: (wrapped._check_target(wrapped._target(target)), wrapped._table(X, reset=True)), 5 * options.repeats)
            print(f"{kind:6} {task:10} {'checks':8} {checks:12.5f} {'':10} {checks / fit_direct:6.3f}   (the estimator's own reading and checks before fit, against fit)")


def median_of(action, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def onnx_line(kind: str, task: str, model: sheetnet.Model, X: object, repeats: int) -> None:
    """The exported graph in onnxruntime (inputs built beforehand) beside Model.predict, when the onnx extra is installed."""
    try:
        import onnxruntime

        from sheetnet.onnx_export import onnx_inputs, to_onnx
    except ImportError:
        return
    session = onnxruntime.InferenceSession(to_onnx(model).SerializeToString(), providers=["CPUExecutionProvider"])
    feeds = onnx_inputs(model, X)
    graph, direct = alternating(lambda: session.run(["prediction"], feeds), lambda: model.predict(X), repeats)
    print(f"{kind:6} {task:10} {'onnx':8} {graph:12.4f} {direct:10.4f} {graph / direct:6.2f}   (onnxruntime, in the estimator column)")


if __name__ == "__main__":
    main()
