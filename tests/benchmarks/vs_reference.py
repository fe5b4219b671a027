"""sheetnet against scikit-learn's MLP on the same data and split, side by side in one run.

Run by hand:  python tests/benchmarks/vs_reference.py [--quick]

For each table: both libraries get the same standardised training rows (scikit-learn
through a StandardScaler fitted on the training rows, and for regression a scaled
target, so neither has a preparation advantage) and the same hidden layer. Every
scikit-learn solver is timed; the reference is its fastest solver. Printed per
table: holdout quality (R^2 or accuracy) of each, fit-time medians and the ratio
scikit-learn / sheetnet, and predict-time medians for 1 row and 10,000 rows.

Reference data: scikit-learn's bundled diabetes, breast cancer, wine and digits
datasets; invented tables of 10,000 x 10 and 100,000 x 20 made here with a seed.
"""

from __future__ import annotations

import argparse
import statistics
import time
import warnings

import numpy as np
from sklearn import datasets
from sklearn.compose import TransformedTargetRegressor
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from threadpoolctl import threadpool_limits

import sheetnet


def invented_table(rows: int, columns: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(rows, columns))
    y = np.sin(X[:, 0]) * 2 + X[:, 1] * X[:, 2] + np.tanh(X[:, 3] - X[:, 4]) + 0.3 * rng.normal(size=rows)
    return X, y


def tables(quick: bool):
    yield "diabetes", *datasets.load_diabetes(return_X_y=True), "regression", (16,)
    yield "breast cancer", *datasets.load_breast_cancer(return_X_y=True), "classes", (16,)
    yield "wine", *datasets.load_wine(return_X_y=True), "classes", (16,)
    yield "digits", *datasets.load_digits(return_X_y=True), "classes", (32,)
    yield "invented 10k x 10", *invented_table(10_000, 10, 1), "regression", (16,)
    if not quick:
        yield "invented 100k x 20", *invented_table(100_000, 20, 2), "regression", (16,)


def median_time(call, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        call()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def reference_model(kind: str, hidden, solver: str, seed: int):
    if kind == "regression":
        net = MLPRegressor(hidden_layer_sizes=hidden, solver=solver, random_state=seed, max_iter=200)
        return TransformedTargetRegressor(make_pipeline(StandardScaler(), net), transformer=StandardScaler())
    return make_pipeline(StandardScaler(), MLPClassifier(hidden_layer_sizes=hidden, solver=solver, random_state=seed, max_iter=200))


def quality(kind: str, predicted, actual) -> float:
    if kind == "regression":
        return sheetnet.metrics.r2(actual, predicted)
    return float(np.mean(np.asarray(predicted) == np.asarray(actual)))


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true", help="leave out the 100,000-row table")
    args = parser.parse_args()
    warnings.simplefilter("ignore", ConvergenceWarning)
    warnings.simplefilter("ignore", sheetnet.errors.SheetnetWarning)  # digits has constant pixel columns
    rows = []
    for name, X, y, kind, hidden in tables(args.quick):
        labels = y if kind == "classes" else None
        held = sheetnet.holdout_mask(len(y), 0.25, 0, "stratified" if labels is not None else "random", labels)
        Xt, yt, Xh, yh = X[~held], y[~held], X[held], y[held]
        repeats = 3 if len(y) <= 20_000 else 1
        with threadpool_limits(1, user_api="blas"):  # the same one-thread BLAS for both
            ref = {}
            for solver in ("lbfgs", "adam"):
                model = reference_model(kind, hidden, solver, 0)
                seconds = median_time(lambda: model.fit(Xt, yt), repeats)
                ref[solver] = (seconds, quality(kind, model.predict(Xh), yh), model)
        ours_model = {}

        def fit_ours():
            ours_model["m"] = sheetnet.fit(Xt, yt, hidden=hidden, seed=0)

        ours_seconds = median_time(fit_ours, repeats)
        ours = ours_model["m"]
        ours_quality = quality(kind, ours.predict(Xh), yh)
        fastest = min(ref, key=lambda s: ref[s][0])
        best_quality = max(ref, key=lambda s: ref[s][1])

        one = Xh[:1]
        many = np.resize(Xh, (10_000, X.shape[1]))
        ref_predict = ref[fastest][2]
        p1_ref = median_time(lambda: ref_predict.predict(one), 200)
        p1_ours = median_time(lambda: ours.predict(one), 200)
        pm_ref = median_time(lambda: ref_predict.predict(many), 20)
        pm_ours = median_time(lambda: ours.predict(many), 20)
        rows.append((name, kind, ref, fastest, best_quality, ours_seconds, ours_quality, ours, p1_ref, p1_ours, pm_ref, pm_ours))
        print(
            f"{name:<20} q sheetnet {ours_quality:.4f} ({ours.algorithm}, {ours.stopped_by} after {ours.epochs}) | "
            + " | ".join(f"q {s} {ref[s][1]:.4f} fit {ref[s][0] * 1e3:.1f} ms" for s in ref)
            + f" | fit sheetnet {ours_seconds * 1e3:.1f} ms",
            flush=True,
        )

    metric = {"regression": "R^2", "classes": "accuracy"}
    print()
    print("| table | metric | sheetnet | sklearn fastest (solver) | sklearn best | fit ms sklearn fastest | fit ms sheetnet | fit ratio | predict 1 row us (sklearn / sheetnet) | predict 10k rows ms (sklearn / sheetnet) |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for name, kind, ref, fastest, best, ours_s, ours_q, _, p1r, p1o, pmr, pmo in rows:
        print(
            f"| {name} | {metric[kind]} | {ours_q:.4f} | {ref[fastest][1]:.4f} ({fastest}) | {ref[best][1]:.4f} ({best}) | "
            f"{ref[fastest][0] * 1e3:.1f} | {ours_s * 1e3:.1f} | {ref[fastest][0] / ours_s:.1f}x | "
            f"{p1r * 1e6:.0f} / {p1o * 1e6:.0f} ({p1r / p1o:.1f}x) | {pmr * 1e3:.2f} / {pmo * 1e3:.2f} ({pmr / pmo:.1f}x) |"
        )


if __name__ == "__main__":
    main()
