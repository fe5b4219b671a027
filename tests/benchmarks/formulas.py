"""How long LibreOffice Calc takes to recalculate 10,000 native predictions, beside the engine's predict.

Run by hand:  python tests/benchmarks/formulas.py [--rows 10000] [--repeats 3]

Networks: 10-8-1 (regression) and 20-16-8-3 (three classes, the winning label per row).
For each: the median time of a LibreOffice round trip (start, load, recalculate, save) of a
workbook with one native formula per row, the same round trip for the workbook with its
formulas left out (the cost of starting the office and reading the file), and the median
time of the engine's in-process predict on the same rows.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # the tests' LibreOffice helper
from libreoffice import SOFFICE, recalculate  # noqa: E402

from sheetnet import cli  # noqa: E402
from sheetnet.block import decode_block  # noqa: E402
from sheetnet.workbook import open_book, read_model  # noqa: E402


def invented(rows: int, inputs: int, classes: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(rng.normal(size=(rows, inputs)), columns=[f"x{j + 1}" for j in range(inputs)])
    signal = np.sin(frame["x1"]) + frame["x2"] * frame["x3"]
    frame["y"] = signal + 0.1 * rng.normal(size=rows) if classes == 1 else np.digitize(signal, np.quantile(signal, [1 / 3, 2 / 3]))
    if classes > 1:
        frame["y"] = np.array(["low", "mid", "high"])[frame["y"]]
    return frame


def build(folder: Path, name: str, frame: pd.DataFrame, hidden: str, with_formulas: bool) -> Path:
    path = folder / f"{name}{'' if with_formulas else '-plain'}.xlsx"
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Data"
    sheet.append(list(frame.columns))
    for row in frame.astype(object).values.tolist():
        sheet.append(row)
    book.save(path)
    last = openpyxl.utils.get_column_letter(len(frame.columns))
    table = f"Data!A1:{last}{len(frame) + 1}"
    quiet = open("/dev/null", "w")
    stdout, sys.stdout = sys.stdout, quiet
    try:
        cli.main(["train", str(path), "--table", table, "--target", "y", "--name", "net", "--hidden", hidden, "--holdout", "0", "--set", "epochs=50"])
        if with_formulas:
            cli.main(["formulas", str(path), "--model", "net", "--table", table, "--to", f"Data!{openpyxl.utils.get_column_letter(len(frame.columns) + 2)}1"])
    finally:
        sys.stdout = stdout
    return path


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
    networks = [("10-8-1", invented(args.rows, 10, 1, 1), "8"), ("20-16-8-3", invented(args.rows, 20, 3, 2), "16,8")]
    print("| network | rows | LibreOffice round trip with formulas (s) | without formulas (s) | formulas alone (s) | engine predict (ms) | formula length |")
    print("|---|---|---|---|---|---|---|")
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        for name, frame, hidden in networks:
            with_formulas = build(folder, name, frame, hidden, True)
            plain = build(folder, name, frame, hidden, False)
            full = median_seconds(lambda: recalculate([with_formulas], folder / "out"), args.repeats)
            empty = median_seconds(lambda: recalculate([plain], folder / "out-plain"), args.repeats)
            model, _ = decode_block(read_model(open_book(plain), "net"))
            inputs = frame[list(model.input_names)]
            engine = median_seconds(lambda: model.predict(inputs), 20)
            length = len(openpyxl.load_workbook(with_formulas)["Data"].cell(2, len(frame.columns) + 2).value.text)
            print(f"| {name} | {args.rows:,} | {full:.2f} | {empty:.2f} | {full - empty:.2f} | {engine * 1e3:.2f} | {length:,} |", flush=True)


if __name__ == "__main__":
    main()
