"""Model search, repeats and folds: one process against local worker processes, a local Dask cluster and the auto choice.

    .venv/bin/python tests/benchmarks/search.py            # 3 rounds
    .venv/bin/python tests/benchmarks/search.py --rounds 1 # a quick look

Cases, each run every way in the same round (rounds interleaved, so a busy
machine slows every way alike), medians and ratios against one process:

- search: the default 12 candidates x 5 folds on a 10,000-row table;
- repeats: one fit of 4 networks (issue 14's case);
- folds: 5-fold cross-validation of one network;
- repeats long: 8 networks of 1,000 epochs each (no early stop), jobs long enough for processes to pay.

Ways: ``one process`` (workers=1), ``2 processes`` (workers=2, whether or
not they pay), ``cluster`` (a distributed.LocalCluster on loopback, 2 worker
processes of 1 thread; search only), ``auto`` (workers left out: what
sheetnet.parallel chooses, shown with its reason). Every way must give the
same results to the last bit; the script says so or stops. Never run by pytest.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

import numpy as np

import sheetnet
from sheetnet import parallel


def invented_table(rows: int, seed: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """An invented oven line: bake minutes from dough mass, oven load, humidity, ... with a curve and an interaction."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(rows, 6))
    y = 2.0 * np.sin(X[:, 0]) + X[:, 1] * X[:, 2] + 0.5 * X[:, 3] + 0.3 * rng.normal(size=rows)
    return X, y


def timed(call):
    started = time.perf_counter()
    result = call()
    return time.perf_counter() - started, result


def fingerprint(result) -> bytes:
    """Everything a run answers, as bytes, so different ways can be compared to the last bit."""
    if isinstance(result, sheetnet.Model):
        return b"".join(m.theta.tobytes() for m in result.members)
    if isinstance(result, dict):
        return np.array([f["rmse"] for f in result["folds"]]).tobytes()
    return np.array([s.fold_scores for s in result.ranking]).tobytes()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--rows", type=int, default=10_000)
    args = parser.parse_args()
    X, y = invented_table(args.rows)
    cases = {
        "search 12x5": lambda workers: sheetnet.search(X, y, k=5, workers=workers),
        "repeats 4": lambda workers: sheetnet.fit(X, y, hidden=(8,), repeats=4, workers=workers),
        "folds 5": lambda workers: sheetnet.cross_validate(X, y, k=5, hidden=(8,), workers=workers),
        # long jobs (about 2 s each: 1,000 epochs, no early stop), where processes can repay their start
        "repeats 8 long": lambda workers: sheetnet.fit(X, y, hidden=(16,), repeats=8, epochs=1000, patience=100_000, tolerance=0.0, decay=0.01, workers=workers),
    }
    ways = {"one process": 1, "2 processes": 2, "auto": None}

    from distributed import Client, LocalCluster

    started = time.perf_counter()
    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None, silence_logs=40)
    client = Client(cluster)
    client.run(lambda: None)
    cluster_start = time.perf_counter() - started

    load = os.getloadavg()
    print(f"sheetnet.parallel benchmark: {args.rows:,} rows x 6, {args.rounds} rounds; usable cores {parallel.usable_cores()}, "
          f"free now {parallel.free_cores()}, load {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}; LocalCluster started in {cluster_start:.1f} s")
    times: dict[tuple[str, str], list[float]] = {}
    reasons: dict[str, str] = {}
    answers: dict[str, bytes] = {}
    for round_number in range(args.rounds):
        for case, run in cases.items():
            plan = dict(ways)
            for way, workers in plan.items():
                seconds, result = timed(lambda: run(workers))
                times.setdefault((case, way), []).append(seconds)
                if way == "auto" and parallel.last_placement is not None:
                    reasons[case] = f"{parallel.last_placement.where} ({parallel.last_placement.reason})"
                check = answers.setdefault(case, fingerprint(result))
                if check != fingerprint(result):
                    raise SystemExit(f"{case}: {way} gave different results from one process")
            if case.startswith("search"):
                with parallel.cluster(cluster.scheduler_address):
                    seconds, result = timed(lambda: run(None))
                times.setdefault((case, "cluster"), []).append(seconds)
                if answers[case] != fingerprint(result):
                    raise SystemExit(f"{case}: the cluster gave different results from one process")
        print(f"  round {round_number + 1} done (load {os.getloadavg()[0]:.2f})")

    print(f"\n{'case':<14} {'way':<12} {'median s':>9} {'ratio to one process':>21}   rounds (s)")
    for case in cases:
        base = statistics.median(times[(case, "one process")])
        for way in ("one process", "2 processes", "cluster", "auto"):
            if (case, way) not in times:
                continue
            values = times[(case, way)]
            median = statistics.median(values)
            print(f"{case:<14} {way:<12} {median:>9.2f} {median / base:>21.2f}   {' '.join(f'{v:.2f}' for v in values)}")
        print(f"{'':<14} auto chose: {reasons.get(case, '?')}")
    print("\nevery way gave results identical to one process (checked to the last bit)")
    parallel.close_clusters()
    client.close()
    cluster.close()


if __name__ == "__main__":
    main()
