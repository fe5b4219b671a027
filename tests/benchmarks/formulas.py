"""How long LibreOffice Calc takes to recalculate 10,000 native predictions, beside the engine's predict and
sheetnet's own formula evaluator checking the same rows.

Run by hand:  python tests/benchmarks/formulas.py [--rows 10000] [--repeats 3]

Networks: 10-8-1 (regression), 20-16-8-3 (three classes, the winning label per row), and 6-8-1 over
invented readings with four category inputs (numbers, decimals, logicals and mixed cells as categories).
For each: the median time of a LibreOffice round trip (start, load, recalculate, save) of a workbook with
one native formula per row, the same round trip for the workbook without its formulas (the cost of
starting the office and reading the file), the median time of the engine's in-process predict on the
same rows, and the time of `check_native_formulas` evaluating every row's formula over the constants
(one run: it is the slow one). The workbooks are built with openpyxl by tests/native_books.py.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # the tests' helpers
from category_kinds import CATEGORIES, INPUTS, kinds_frame  # noqa: E402
from libreoffice import SOFFICE, recalculate  # noqa: E402
from native_books import write_book  # noqa: E402

import sheetnet  # noqa: E402
from sheetnet.formula_eval import check_native_formulas  # noqa: E402
from sheetnet.formulas import formula_constants  # noqa: E402


def invented(rows: int, inputs: int, classes: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(rng.normal(size=(rows, inputs)), columns=[f"x{j + 1}" for j in range(inputs)])
    signal = np.sin(frame["x1"]) + frame["x2"] * frame["x3"]
    frame["y"] = signal + 0.1 * rng.normal(size=rows) if classes == 1 else np.digitize(signal, np.quantile(signal, [1 / 3, 2 / 3]))
    if classes > 1:
        frame["y"] = np.array(["low", "mid", "high"])[frame["y"]]
    return frame


def median_seconds(call, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        call()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=10_000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    if SOFFICE is None:
        raise SystemExit("LibreOffice is not installed: apt-get install libreoffice-calc-nogui")
    kinds = kinds_frame(args.rows, 1)
    networks = [  # name, inputs, target, hidden, categories, output
        ("10-8-1", invented(args.rows, 10, 1, 1), None, (8,), [], "value"),
        ("20-16-8-3", invented(args.rows, 20, 3, 2), None, (16, 8), [], "class"),
        ("6-8-1, 4 category inputs", kinds.rename(columns={"reading": "y"}), INPUTS, (8,), CATEGORIES, "value"),
    ]
    print("| network | rows | LibreOffice round trip with formulas (s) | without formulas (s) | formulas alone (s) "
          "| engine predict (ms) | evaluator check (s) | formula length |")
    print("|---|---|---|---|---|---|---|---|")
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        for name, frame, inputs, hidden, categories, output in networks:
            inputs = inputs or [c for c in frame.columns if c != "y"]
            model = sheetnet.fit(frame[inputs], frame["y"], hidden=hidden, seed=0, categories=categories, epochs=50)
            rows = frame[inputs].astype(object)
            with_formulas = write_book(folder / f"{name}.xlsx", rows, model, [output])
            plain = write_book(folder / f"{name}-plain.xlsx", rows, model, [])
            full = median_seconds(lambda: recalculate([with_formulas.path], folder / "out"), args.repeats)
            empty = median_seconds(lambda: recalculate([plain.path], folder / "out-plain"), args.repeats)
            engine = median_seconds(lambda: model.predict(rows), 20)
            constants = {c.name: c.values for c in formula_constants(model, "net")}
            start = time.perf_counter()
            problems = check_native_formulas(model, "net", constants, rows, output)
            checked = time.perf_counter() - start
            assert problems == [], problems[:3]
            length = len(next(iter(with_formulas.formulas.values())))
            print(f"| {name} | {args.rows:,} | {full:.2f} | {empty:.2f} | {full - empty:.2f} | {engine * 1e3:.2f} | {checked:.2f} | {length:,} |", flush=True)


if __name__ == "__main__":
    main()
