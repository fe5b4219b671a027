"""sheetnet's defaults against scikit-learn's MLP and a linear model, side by side in one run.

Run by hand:  python tests/benchmarks/vs_reference.py [--quick] [--only NAME] [--seeds N]
              python tests/benchmarks/vs_reference.py --algorithms   (the auto algorithm choice: L-BFGS against Adam)

For each table and seed: a 75/25 holdout split (stratified for classes, the last
quarter for the sunspot lags), the same standardised training rows for every
model (scikit-learn through a StandardScaler fitted on the training rows, and
for regression a scaled target, so nobody has a preparation advantage), the
same hidden layer. sheetnet runs with its default settings (and, on the table split in time
order, inner_folds=ordered, as TRAIN takes it for a holdout of the last rows) twice: with the
table's hidden layer given (like for like with the MLPs), and, on tables below
`defaults.TUNING_ROW_LIMIT` training rows, with the hidden layers left blank,
where cross-validation also weighs a wider layer and no hidden layer (column
"blank", with the hidden layers each seed kept). References:
scikit-learn's MLPRegressor / MLPClassifier with solvers lbfgs and adam (their
defaults otherwise) and LinearRegression / LogisticRegression. Printed per
table: median holdout quality (R^2 or accuracy) of each, sheetnet's margins
(given hidden layer over the best reference; blank over the linear model),
median fit times and the ratio of scikit-learn's fastest MLP solver's time to
sheetnet's, and prediction times for 10,000 rows. BLAS runs on one thread for
everyone. Absolute times are noisy on shared machines: read ratios.

Reference data: scikit-learn's bundled diabetes, breast cancer, wine, iris and
digits datasets and its make_friedman1 / make_classification generators;
statsmodels' bundled fair (any affair, as in statsmodels' logit example),
star98 (share of pupils above the median, from the other columns), engel (food
spending from income), sunspots (the next year's activity from nine lagged
years) and randhie (doctor visits) datasets.
"""

from __future__ import annotations

import argparse
import statistics
import time
import warnings
from typing import Callable, Iterator

import numpy as np
from sklearn import datasets
from sklearn.compose import TransformedTargetRegressor
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.neural_network import MLPClassifier, MLPRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from threadpoolctl import threadpool_limits

import sheetnet

Table = tuple[str, np.ndarray, np.ndarray, str, tuple[int, ...], str]  # name, X, y, kind, hidden, split mode


def _statsmodels_tables() -> Iterator[Table]:
    import statsmodels.api as sm

    fair = sm.datasets.fair.load_pandas().data
    yield "fair", fair.drop(columns="affairs").to_numpy(float), (fair["affairs"] > 0).to_numpy(int), "classes", (16,), "stratified"
    star = sm.datasets.star98.load_pandas().data
    share_above = (star["NABOVE"] / (star["NABOVE"] + star["NBELOW"])).to_numpy(float)
    yield "star98", star.drop(columns=["NABOVE", "NBELOW"]).to_numpy(float), share_above, "regression", (16,), "random"
    engel = sm.datasets.engel.load_pandas().data
    yield "engel", engel[["income"]].to_numpy(float), engel["foodexp"].to_numpy(float), "regression", (16,), "random"
    spots = sm.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(float)
    lags = 9
    lagged = np.column_stack([spots[i:len(spots) - lags + i] for i in range(lags)])
    yield "sunspots (9 lags)", lagged, spots[lags:], "regression", (16,), "ordered"
    rand = sm.datasets.randhie.load_pandas().data
    yield "randhie", rand.drop(columns="mdvis").to_numpy(float), rand["mdvis"].to_numpy(float), "regression", (16,), "random"


def tables(quick: bool) -> Iterator[Table]:
    for name, loader in (("diabetes", datasets.load_diabetes),):
        yield name, *loader(return_X_y=True), "regression", (16,), "random"
    for name, loader in (("breast cancer", datasets.load_breast_cancer), ("wine", datasets.load_wine), ("iris", datasets.load_iris)):
        yield name, *loader(return_X_y=True), "classes", (16,), "stratified"
    yield "digits", *datasets.load_digits(return_X_y=True), "classes", (32,), "stratified"
    sizes = (1_000, 10_000) if quick else (1_000, 10_000, 100_000)
    for rows in sizes:
        yield f"friedman1 {rows // 1000}k", *datasets.make_friedman1(rows, noise=1.0, random_state=0), "regression", (16,), "random"
    for rows in sizes:
        X, y = datasets.make_classification(rows, n_features=20, n_informative=10, random_state=0)
        yield f"classification {rows // 1000}k", X, y, "classes", (16,), "stratified"
    yield from _statsmodels_tables()


def median_time(call: Callable[[], object], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        call()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def reference_model(kind: str, hidden: tuple[int, ...], solver: str, seed: int):
    if solver == "linear":
        core = LinearRegression() if kind == "regression" else LogisticRegression(max_iter=2000)
    elif kind == "regression":
        core = MLPRegressor(hidden_layer_sizes=hidden, solver=solver, random_state=seed, max_iter=200)
    else:
        core = MLPClassifier(hidden_layer_sizes=hidden, solver=solver, random_state=seed, max_iter=200)
    model = make_pipeline(StandardScaler(), core)
    return TransformedTargetRegressor(model, transformer=StandardScaler()) if kind == "regression" else model


def quality(kind: str, predicted, actual) -> float:
    if kind == "regression":
        return sheetnet.metrics.r2(actual, predicted)
    return float(np.mean(np.asarray(predicted) == np.asarray(actual)))


REFERENCES = ("lbfgs", "adam", "linear")


def one_seed(X, y, kind, hidden, mode, seed) -> dict[str, tuple[float, float, object]]:
    """Quality, fit seconds and the fitted model of each contender on one split."""
    labels = y if kind == "classes" else None
    held = sheetnet.holdout_mask(len(y), 0.25, seed, mode, labels)
    Xt, yt, Xh, yh = X[~held], y[~held], X[held], y[held]
    found = {}
    for solver in REFERENCES:
        model = reference_model(kind, hidden, solver, seed)
        seconds = median_time(lambda: model.fit(Xt, yt), 1)
        found[solver] = (quality(kind, model.predict(Xh), yh), seconds, model)
    order = {"inner_folds": "ordered"} if mode == "ordered" else {}  # as TRAIN does when its holdout is the last rows
    contenders = {"sheetnet": hidden}
    if len(yt) < sheetnet.defaults.TUNING_ROW_LIMIT:
        contenders["blank"] = None  # the hidden layers left at their default
    for who, layers in contenders.items():
        box = {}
        seconds = median_time(lambda: box.setdefault("m", sheetnet.fit(Xt, yt, hidden=layers, seed=seed, **order)), 1)
        found[who] = (quality(kind, box["m"].predict(Xh), yh), seconds, box["m"])
    return found


def compare_algorithms() -> None:
    """sheetnet's L-BFGS against its Adam around `defaults.LBFGS_ROW_LIMIT` (one seed, hidden layer of 16, defaults otherwise)."""
    print("| table | training rows | L-BFGS quality | L-BFGS s | Adam quality | Adam s | Adam time / L-BFGS time |")
    print("|---|---|---|---|---|---|---|")
    for rows in (20_000, 50_000, 100_000):
        generated = (
            ("friedman1", *datasets.make_friedman1(rows, noise=1.0, random_state=0), "regression", "random"),
            ("classification", *datasets.make_classification(rows, n_features=20, n_informative=10, random_state=0), "classes", "stratified"),
        )
        for name, X, y, kind, mode in generated:
            held = sheetnet.holdout_mask(len(y), 0.25, 0, mode, y if kind == "classes" else None)
            found = {}
            for algorithm in ("lbfgs", "adam"):
                box = {}
                with threadpool_limits(1, user_api="blas"):
                    seconds = median_time(lambda: box.setdefault("m", sheetnet.fit(X[~held], y[~held], hidden=(16,), seed=0, algorithm=algorithm)), 1)
                found[algorithm] = (quality(kind, box["m"].predict(X[held]), y[held]), seconds)
            (ql, tl), (qa, ta) = found["lbfgs"], found["adam"]
            print(f"| {name} | {int((~held).sum()):,} | {ql:.4f} | {tl:.2f} | {qa:.4f} | {ta:.2f} | {ta / tl:.2f} |", flush=True)


HEADER = (
    "| table | rows x columns | metric | sheetnet | blank (kept, by seed) | MLP lbfgs | MLP adam | linear | margin (best other) | "
    "blank - linear | fit ms sheetnet / blank | fit ms sklearn fastest | fit ratio sheetnet / blank | predict 10k ratio | sheetnet ended |"
)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true", help="one seed, no 100,000-row tables")
    parser.add_argument("--only", default="", help="run only tables whose name contains this")
    parser.add_argument("--seeds", type=int, default=None, help="seeds per table (default 3, --quick 1; tables of 50,000 rows or more: 1)")
    parser.add_argument("--algorithms", action="store_true", help="only compare sheetnet's L-BFGS and Adam around the auto switch")
    args = parser.parse_args()
    warnings.simplefilter("ignore", ConvergenceWarning)
    warnings.simplefilter("ignore", sheetnet.errors.SheetnetWarning)  # digits has constant pixel columns
    if args.algorithms:
        compare_algorithms()
        return
    seeds = args.seeds or (1 if args.quick else 3)
    metric = {"regression": "R^2", "classes": "accuracy"}
    lines = []
    for name, X, y, kind, hidden, mode in tables(args.quick):
        if args.only and args.only not in name:
            continue
        runs = []
        with threadpool_limits(1, user_api="blas"):  # the same one-thread BLAS for everyone
            for seed in range(seeds if len(y) < 50_000 else 1):
                runs.append(one_seed(X, y, kind, hidden, mode, seed))
            q = {who: statistics.median(r[who][0] for r in runs) for who in runs[0]}
            t = {who: statistics.median(r[who][1] for r in runs) for who in runs[0]}
            many = np.resize(X, (10_000, X.shape[1]))
            fastest = min(("lbfgs", "adam"), key=lambda s: t[s])
            ours, ref = runs[0]["sheetnet"][2], runs[0][fastest][2]
            predict_ours = median_time(lambda: ours.predict(many), 7)  # type: ignore[attr-defined]
            predict_ref = median_time(lambda: ref.predict(many), 7)  # type: ignore[attr-defined]
        best = max(REFERENCES, key=lambda s: q[s])
        model = runs[0]["sheetnet"][2]
        if "blank" in q:
            kept = [r["blank"][2].settings["hidden_chosen"] for r in runs]  # type: ignore[attr-defined]
            blank = f"{q['blank']:.3f} ({', '.join(kept)})"
            blank_margin = f"{q['blank'] - q['linear']:+.3f}"
            blank_ms, blank_ratio = f" / {t['blank'] * 1e3:.0f}", f" / {t[fastest] / t['blank']:.1f}x"
        else:
            blank, blank_margin, blank_ms, blank_ratio = "-", "-", "", ""
        line = (
            f"| {name} | {len(y):,} x {X.shape[1]} | {metric[kind]} | {q['sheetnet']:.3f} | {blank} | {q['lbfgs']:.3f} | {q['adam']:.3f} | {q['linear']:.3f} | "
            f"{q['sheetnet'] - q[best]:+.3f} ({best}) | {blank_margin} | {t['sheetnet'] * 1e3:.0f}{blank_ms} | {t[fastest] * 1e3:.0f} ({fastest}) | "
            f"{t[fastest] / t['sheetnet']:.1f}x{blank_ratio} | {predict_ref / predict_ours:.1f}x | {model.algorithm} {model.stopped_by} |"  # type: ignore[attr-defined]
        )
        lines.append(line)
        print(line, flush=True)
    print()
    print(f"medians over {seeds} seed(s) (one for 50,000 rows or more); margin: sheetnet (hidden layer given) minus the best reference; "
          "blank: hidden layers left at the default; fit ratio: scikit-learn's fastest MLP solver's time over sheetnet's")
    print(HEADER)
    print("|" + "---|" * HEADER.count(" | ") + "---|")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
