"""The cell path beside the engine, in one run: what the cell functions cost on top of `fit` and `Model.predict`.

Run by hand:  python tests/benchmarks/cell_path.py [--quick] [--skip-header]

Every pair is timed interleaved (one call of each in turn), so both sides meet the same load on a
shared machine; medians are printed with their ratio. The table is invented: ten normal inputs and
y = sin(x1) + x2 * x3 (seeded), given as the 2-D list of cells a spreadsheet hands over.

- PREDICT through `functions.predict` beside `Model.predict` on the same numbers as a float array,
  at 1 and 10,000 rows: the floor (the least any reading of 2-D lists can cost: NumPy converting the
  cells with no look at their types, `np.array(rows, dtype=float)` and `np.fromiter` over a chain),
  PREDICT on the 2-D lists and on the same table by columns (`cells.COLUMN_FORM`), how much of it
  is reading the range (`cells.read_sheet_table`), and the xlwings function (`xl_udfs`: the cells
  converted in and the answer out as in Excel).
- TRAIN at 10,000 rows: a cache hit, and a fresh TRAIN (`functions.train_block`) beside `fit` on
  the float array with the same layers and seed; ABOUT with the table against a block of the byte
  fingerprint and one of the first scheme (whose number texts are written again for a table never seen).
- PREDICT over HTTP: a server in its own process (as the add-in and the Calc extension meet it),
  beside the direct call, with the parts of the request measured alone in this process: reading
  the JSON body, the cell function, writing the answer; the table sent as rows of cells, and by
  columns (`cells.COLUMN_FORM`: each column of numbers as base64 doubles).
- The header: reading a range two data rows tall and 16,384, 40,000 or 100,000 columns wide, and SPLIT on the
  widest range the cell functions take (16,384 columns, a worksheet's width).
"""

from __future__ import annotations

import argparse
import base64
import dataclasses
import itertools
import os
import socket
import statistics
import subprocess
import sys
import time
from typing import Any, Callable

import httpx
import numpy as np
import orjson

from sheetnet import cells, functions, xl_udfs
from sheetnet.block import decode_block, encode_block
from sheetnet.training import fit

TOKEN = "bench-token-0123456789abcdef"


def table(rows: int, seed: int = 0) -> list[list[Any]]:
    rng = np.random.default_rng(seed)
    values = rng.normal(size=(rows, 10))
    target = np.sin(values[:, 0]) + values[:, 1] * values[:, 2]
    return [[f"x{j + 1}" for j in range(10)] + ["y"]] + [[*map(float, row), float(t)] for row, t in zip(values, target)]


def side_by_side(calls: int, *functions_to_time: Callable[[], Any]) -> list[float]:
    """Median seconds of each function, timed in turn within every round."""
    seconds: list[list[float]] = [[] for _ in functions_to_time]
    for _ in range(calls):
        for times, call in zip(seconds, functions_to_time):
            start = time.perf_counter()
            call()
            times.append(time.perf_counter() - start)
    return [statistics.median(times) for times in seconds]


def ms(seconds: float) -> str:
    return f"{seconds * 1e3:.3f}" if seconds < 0.01 else f"{seconds * 1e3:.1f}"


TARGETS: dict[str, tuple[str, str]] = {}  # what the issue asks, and what this run measured


def predict_rows(model: list[list[Any]], calls: int) -> None:
    decoded, _ = decode_block(model)
    through_excel = xl_udfs.UDFS["SHEETNET_PREDICT"]  # the xlwings function: cells converted in, the answer out
    print(
        "| PREDICT rows | Model.predict on an array (ms) | floor: np.array of the lists (ms) | floor: np.fromiter (ms) "
        "| floor: base64 of the columns (ms) | floor: the answer's rows (ms) "
        "| cell function on 2-D lists (ms) | cell function by columns (ms) | lists / predict | floor of lists / predict "
        "| columns / predict | floor of columns / predict | lists - predict (µs) | reading the lists (ms) | xlwings function (ms) |"
    )
    print("|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|")
    for rows in (1, 10_000):
        data = table(rows, seed=1)
        sent = by_columns(data)
        body = data[1:]
        matrix = np.array([row[:10] for row in body], dtype=np.float64)
        functions.predict(model, data)  # the model block decoded once, as in a recalculating sheet
        assert functions.predict(model, sent) == functions.predict(model, data)
        count = calls if rows == 1 else max(25, calls // 10)
        texts = [column["numbers"] for column in sent["columns"]]
        answers = decoded.predict(matrix)
        engine, floor, chained, decoding, answer, cell, columns, reading, excel = side_by_side(
            count,
            lambda: decoded.predict(matrix),
            lambda: np.array(body, dtype=np.float64),
            lambda: np.fromiter(itertools.chain.from_iterable(body), dtype=np.float64, count=11 * len(body)),
            lambda: [base64.b64decode(text, validate=True) for text in texts],
            lambda: [["predicted y"], *([value] for value in answers.tolist())],  # what any cell function answers: a list per row
            lambda: functions.predict(model, data),
            lambda: functions.predict(model, sent),
            lambda: cells.read_sheet_table(data),
            lambda: through_excel(model, data),
        )
        floor_lists = (engine + min(floor, chained) + answer) / engine  # converting the cells, predicting, the answer's rows
        floor_columns = (engine + decoding + answer) / engine
        print(
            f"| {rows:,} | {ms(engine)} | {ms(floor)} | {ms(chained)} | {ms(decoding)} | {ms(answer)} | {ms(cell)} | {ms(columns)} "
            f"| {cell / engine:.1f}x | {floor_lists:.1f}x | {columns / engine:.1f}x | {floor_columns:.1f}x | {(cell - engine) * 1e6:.0f} "
            f"| {ms(reading)} | {ms(excel)} |",
            flush=True,
        )
        if rows == 1:
            TARGETS["PREDICT 1 row, cell function - Model.predict"] = ("within 200 µs", f"{(cell - engine) * 1e6:.0f} µs (by columns {(columns - engine) * 1e6:.0f} µs)")
        else:
            TARGETS["PREDICT 10,000 rows, cell function / Model.predict"] = (
                "within 2x",
                f"2-D lists {cell / engine:.1f}x (floor {floor_lists:.1f}x: converting the cells {min(floor, chained) / engine:.1f}x, "
                f"the answer's rows {answer / engine:.1f}x); by columns {columns / engine:.1f}x (floor {floor_columns:.1f}x)",
            )


def train_rows(calls: int) -> None:
    data = table(10_000)
    matrix = np.array([row[:10] for row in data[1:]], dtype=np.float64)
    y = np.array([row[10] for row in data[1:]])
    block = functions.train(data, "y", "8", "seed=0")  # fills the cache
    hit, = side_by_side(max(5, calls // 20), lambda: functions.train(data, "y", "8", "seed=0"))
    rounds = 5 if calls < 100 else 9
    cell, engine = side_by_side(rounds, lambda: functions.train_block(data, "y", "8", "seed=0"), lambda: fit(matrix, y, (8,), 0))
    print("| TRAIN, 10,000 rows | cell function (ms) | fit (ms) | ratio |")
    print("|---|---|---|---|")
    print(f"| cache hit | {ms(hit)} | {ms(engine)} | {hit / engine:.3f}x |")
    print(f"| fresh | {ms(cell)} | {ms(engine)} | {cell / engine:.2f}x |", flush=True)
    TARGETS["TRAIN cache hit, 10,000 rows"] = ("under 10 ms", f"{ms(hit)} ms")
    TARGETS["TRAIN fresh / fit, 10,000 rows"] = ("within 1.3x", f"{cell / engine:.2f}x")
    model, info = decode_block(block)
    first = cells.first_fingerprint(cells.read_sheet_table(data), [f"x{j + 1}" for j in range(10)] + ["y"], np.ones(10_000, dtype=bool))
    old_block = encode_block(model, dataclasses.replace(info, fingerprint=first))  # as blocks were written before the byte scheme

    def about_old_never_seen() -> None:
        cells.forget_number_texts()
        functions.about(old_block, data)

    assert functions.about(block, data) == functions.about(old_block, data)  # both: data unchanged
    new_scheme, old_seen, old_never = side_by_side(max(9, calls // 20), lambda: functions.about(block, data), lambda: functions.about(old_block, data), about_old_never_seen)
    print(f"| ABOUT with the table: byte fingerprint / first scheme (texts kept) / first scheme (table never seen) | {ms(new_scheme)} / {ms(old_seen)} / {ms(old_never)} | | |", flush=True)


def by_columns(data: list[list[Any]]) -> dict[str, Any]:
    """The range in `cells.COLUMN_FORM`: every column here holds numbers, so each goes as base64 doubles."""
    numbers = np.array(data[1:], dtype="<f8")
    return {"header": data[0], "columns": [{"numbers": base64.b64encode(numbers[:, j].tobytes()).decode("ascii")} for j in range(numbers.shape[1])]}


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def start_server(port: int) -> subprocess.Popen[bytes]:
    code = (
        "import uvicorn; from sheetnet import server; "
        f"uvicorn.run(server.create_app({TOKEN!r}), host='127.0.0.1', port={port}, log_level='warning')"
    )
    process = subprocess.Popen([sys.executable, "-c", code], env={**os.environ, "PYTHONUNBUFFERED": "1"})
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=0.5):
                return process
        except OSError:
            time.sleep(0.1)
    process.kill()
    raise RuntimeError("the benchmark server did not start within 60 s")


def http_rows(model: list[list[Any]], calls: int) -> None:
    port = free_port()
    process = start_server(port)
    try:
        print("| HTTP PREDICT rows | HTTP (ms) | direct (ms) | HTTP / direct | reading the body (ms) | writing the answer (ms) | rest: transport, server, client (ms) |")
        print("|---|---|---|---|---|---|---|")
        headers = {"Authorization": f"Bearer {TOKEN}", "content-type": "application/json"}
        with httpx.Client(base_url=f"http://127.0.0.1:{port}", headers=headers, timeout=60) as client:
            for rows, form in ((1, "rows"), (10_000, "rows"), (1, "columns"), (10_000, "columns")):
                data = table(rows, seed=1)
                sent = data if form == "rows" else by_columns(data)
                body = orjson.dumps({"args": [model, sent]})  # encoded once, as a client holding the range would

                def over_http() -> Any:
                    return orjson.loads(client.post("/v1/functions/SHEETNET.PREDICT", content=body).raise_for_status().content)

                over_http()
                answer = {"result": functions.predict(model, sent)}
                assert answer["result"] == functions.predict(model, data) and over_http()["result"] == answer["result"]
                count = calls if rows == 1 else max(15, calls // 20)
                http, direct, parse, write = side_by_side(
                    count, over_http, lambda: functions.predict(model, sent), lambda: orjson.loads(body), lambda: orjson.dumps(answer)
                )
                rest = http - direct - parse - write
                print(f"| {rows:,} by {form} | {ms(http)} | {ms(direct)} | {http / direct:.1f}x | {ms(parse)} | {ms(write)} | {ms(rest)} |", flush=True)
                target = "under 3 ms" if rows == 1 else "under 30 ms"
                TARGETS[f"HTTP PREDICT {rows:,} row{'s' if rows > 1 else ''}, {'row-wise JSON' if form == 'rows' else 'by columns (add-in, Calc)'}"] = (target, f"{ms(http)} ms")
    finally:
        process.terminate()
        process.wait(10)


def header_widths() -> None:
    print("| header of | reading the range (s) | per 10,000 columns (s) | SPLIT (s) |")
    print("|---|---|---|---|")
    for width in (16_384, 40_000, 100_000):  # the cell functions refuse ranges wider than a worksheet (16,384 columns)
        wide = [[f"c{j}" for j in range(width)], [float(j) for j in range(width)], [float(-j) for j in range(width)]]
        start = time.perf_counter()
        cells.read_sheet_table(wide)
        seconds = time.perf_counter() - start
        split = "refused (wider than a worksheet)"
        if width <= 16_384:
            start = time.perf_counter()
            answer = functions.split(wide)
            split = f"{time.perf_counter() - start:.2f}"
            assert answer[0] == ["split"], answer
        print(f"| {width:,} columns | {seconds:.2f} | {seconds / width * 10_000:.3f} | {split} |", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--quick", action="store_true", help="fewer calls")
    parser.add_argument("--skip-header", action="store_true", help="leave out the wide headers")
    args = parser.parse_args()
    calls = 60 if args.quick else 300
    model = functions.train(table(2000), "y", "8", "seed=0")
    predict_rows(model, calls)
    print()
    train_rows(calls)
    print()
    http_rows(model, calls)
    print()
    print("| target | asked | measured (medians, this run) |")
    print("|---|---|---|")
    for name, (asked, measured) in TARGETS.items():
        print(f"| {name} | {asked} | {measured} |")
    if not args.skip_header:
        print()
        header_widths()


if __name__ == "__main__":
    main()
