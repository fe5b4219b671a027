"""Round-trip time of SHEETNET.PREDICT over HTTP on loopback, beside the direct Python call, in one run.

Run by hand:  python tests/benchmarks/server.py [--calls 200]

A server is started in-process on 127.0.0.1 (uvicorn, one worker thread pool); a 10-8-1 model
predicts 1 row and 10,000 rows, the table sent as row-wise JSON and by columns (`cells.COLUMN_FORM`,
numbers as base64 doubles: what the add-in and the Calc extension send); medians and 95th percentiles
of both paths are printed, and the medians beside the issue's targets (one row under 3 ms, 10,000
rows under 30 ms). The HTTP time includes sending the encoded request (encoded once beforehand) and
decoding the answer.
The same model's placements (POST /v1/placements, what the task pane asks before storing a model)
are timed the same way beside `service.model_placements`. Last, what the request budget costs: counting
the cells and rows of the 10,000-row body on its bytes (`limits.check_request_body`, done for every
body before it is parsed) beside parsing it.
"""

from __future__ import annotations

import argparse
import base64
import statistics
import sys
import time
from pathlib import Path
from typing import Any

import httpx
import numpy as np
import orjson

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # the tests' server helper
from local_server import serving  # noqa: E402

from sheetnet import functions, limits, server, service  # noqa: E402

TOKEN = "bench-token-0123456789abcdef"


def table(rows: int, seed: int = 0) -> list[list[object]]:
    rng = np.random.default_rng(seed)
    values = rng.normal(size=(rows, 10))
    target = np.sin(values[:, 0]) + values[:, 1] * values[:, 2]
    return [[f"x{j + 1}" for j in range(10)] + ["y"]] + [[*map(float, row), float(t)] for row, t in zip(values, target)]


def by_columns(data: list[list[object]]) -> dict[str, object]:
    """The range in `cells.COLUMN_FORM`: every column here holds numbers, so each goes as base64 doubles."""
    numbers = np.array(data[1:], dtype="<f8")
    return {"header": data[0], "columns": [{"numbers": base64.b64encode(numbers[:, j].tobytes()).decode("ascii")} for j in range(numbers.shape[1])]}


def timings(call, count: int) -> tuple[float, float]:
    seconds = []
    for _ in range(count):
        start = time.perf_counter()
        call()
        seconds.append(time.perf_counter() - start)
    seconds.sort()
    return statistics.median(seconds), seconds[int(0.95 * (len(seconds) - 1))]


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--calls", type=int, default=200)
    args = parser.parse_args()
    with serving(server.create_app(TOKEN)) as base:
        measure(base, args.calls)


def measure(base: str, calls: int) -> None:
    model = functions.train(table(2000), "y", "8", "seed=0")
    print("| rows, sent | HTTP median (ms) | HTTP p95 (ms) | direct median (ms) | direct p95 (ms) | HTTP / direct (median) | target | met |")
    print("|---|---|---|---|---|---|---|---|")
    headers = {"content-type": "application/json"}
    with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {TOKEN}"}, timeout=60) as client:
        for rows in (1, 10_000):
            data = table(rows, seed=1)
            for form, sent in (("row-wise JSON", data), ("by columns", by_columns(data))):
                body = orjson.dumps({"args": [model, sent]})  # encoded once, as a client holding the range would

                def call() -> Any:
                    return orjson.loads(client.post("/v1/functions/SHEETNET.PREDICT", content=body, headers=headers).raise_for_status().content)

                assert call()["result"] == functions.predict(model, data)  # warm up; both forms answer the same
                count = calls if rows == 1 else max(20, calls // 10)
                http = timings(call, count)
                direct = timings(lambda: functions.predict(model, sent), count)
                target = 3e-3 if rows == 1 else 30e-3
                print(
                    f"| {rows:,}, {form} | {http[0] * 1e3:.2f} | {http[1] * 1e3:.2f} | {direct[0] * 1e3:.2f} | {direct[1] * 1e3:.2f} "
                    f"| {http[0] / direct[0]:.1f}x | under {target * 1e3:.0f} ms | {'yes' if http[0] < target else 'no'} |",
                    flush=True,
                )
        names = ["rates", "model", "snf_model_m1_b1"]
        placements_body = orjson.dumps({"name": "model", "block": model, "existing_names": names})

        def placements_call() -> None:
            orjson.loads(client.post("/v1/placements", content=placements_body, headers=headers).raise_for_status().content)

        placements_call()
        http = timings(placements_call, calls)
        direct = timings(lambda: service.model_placements("model", model, names).to_json(), calls)
        print(f"| placements ({len(model)}-row block) | {http[0] * 1e3:.2f} | {http[1] * 1e3:.2f} | {direct[0] * 1e3:.2f} | {direct[1] * 1e3:.2f} | {http[0] / direct[0]:.1f}x |", flush=True)
    body = orjson.dumps({"args": [model, table(10_000, seed=1)]})
    counted = timings(lambda: limits.check_request_body(body), calls)
    parsed = timings(lambda: orjson.loads(body), calls)
    print(f"\nbudget check of the 10,000-row body ({len(body) / 1e6:.1f} MB): median {counted[0] * 1e3:.2f} ms, "
          f"parsing it {parsed[0] * 1e3:.2f} ms ({counted[0] / parsed[0]:.2f}x)", flush=True)


if __name__ == "__main__":
    main()
