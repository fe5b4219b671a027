"""The bootstrap error bars TRAIN computes on its holdout rows: every resample at once (one index
matrix, metrics along its rows) beside the resample-by-resample loop it replaced.

Run by hand:  .venv/bin/python tests/benchmarks/bootstrap.py [--rows 10000] [--repeats 5]

A 10,000-row table (the default) holds out 20 %, so each bootstrap resamples 2,000 rows 1,000 times.
Both ways run on the same trained model and held-out rows, alternating call by call so that the
shared machine's noise falls on both alike; medians and the ratio loop / batched are printed, for a
value target and a class target, then the whole TRAIN cell function with its holdout both ways. The intervals of both ways are
compared too (they agree to about 1e-15: the same resamples, sums taken along a matrix's rows).
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

import sheetnet
from sheetnet import functions
from sheetnet import uncertainty as u
from sheetnet.metrics import classification_metrics, regression_metrics


def looped(model, X, y):
    """The former way: each resample in turn through sheetnet.metrics."""
    if model.task == "regression":
        a, p = np.asarray(y, dtype=np.float64), model.predict(X)
        return u.bootstrap_intervals(lambda rows: regression_metrics(a[rows], p[rows]), len(a))
    index = model.target.class_indices(np.asarray(y, dtype=object))
    probabilities = model.predict_proba(X)
    decided = (probabilities[:, 1] >= model.threshold).astype(np.int64) if model.task == "binary" else probabilities.argmax(axis=1)
    return u.bootstrap_intervals(lambda rows: classification_metrics(index[rows], probabilities[rows], model.classes, decided[rows]), len(index))


def alternating(first, second, repeats: int) -> tuple[float, float]:
    a, b = [], []
    for _ in range(repeats):
        for action, times in ((first, a), (second, b)):
            start = time.perf_counter()
            action()
            times.append(time.perf_counter() - start)
    return statistics.median(a), statistics.median(b)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=10_000)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    X = rng.normal(size=(args.rows, 6))
    value = np.sin(X[:, 0]) + X[:, 1] * X[:, 2] + 5 + rng.normal(0, 0.1, args.rows)  # an invented reading, away from 0 so MAPE counts
    label = np.where(value > np.median(value), "high", "low").astype(object)
    held = args.rows // 5
    print(f"bootstrap of {held:,} held-out rows, {u.BOOTSTRAP_RESAMPLES} resamples; median of {args.repeats}")
    for name, y in (("value", value), ("classes", label)):
        model = sheetnet.fit(X[held:], y[held:], (4,), seed=0, epochs=30, validation_share=0)
        slow, fast = alternating(lambda: looped(model, X[:held], y[:held]), lambda: u.metric_error_bars(model, X[:held], y[:held]), args.repeats)
        a, b = looped(model, X[:held], y[:held]), u.metric_error_bars(model, X[:held], y[:held])
        worst = max(abs(x - z) / max(abs(x), 1e-300) for k in a for x, z in zip(a[k], b[k]))
        print(f"  {name:8} loop {slow * 1000:8.1f} ms   batched {fast * 1000:7.1f} ms   loop / batched {slow / fast:5.1f}   "
              f"largest relative difference {worst:.1e}")
    for name, y in (("value", value), ("classes", label)):
        table = [[f"x{j}" for j in range(6)] + ["y"]] + [[*map(float, row), t if isinstance(t, str) else float(t)] for row, t in zip(X, y)]
        split = functions.split(table, 0.2, 0)
        settings = "epochs=30; validation_share=0"
        batched = functions.metric_error_bars

        def before() -> None:
            functions.metric_error_bars = lambda model, frame, actual, level: looped(model, frame, actual)
            try:
                functions.train_block(table, "y", "4", settings, split)
            finally:
                functions.metric_error_bars = batched

        old, new = alternating(before, lambda: functions.train_block(table, "y", "4", settings, split), args.repeats)
        print(f"  TRAIN of {args.rows:,} rows ({name}, 20 % held out): with the loop {old:.2f} s, batched {new:.2f} s, saved {old - new:.2f} s")

if __name__ == "__main__":
    main()
