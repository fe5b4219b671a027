"""Signing and verifying a model block beside decoding it (run by hand; prints medians and ratios).

    .venv/bin/python tests/benchmarks/signing.py [--repeats 3]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import pandas as pd

import sheetnet
from sheetnet import functions
from sheetnet.block import BlockInfo, decode_block, encode_block
from sheetnet.signing import check_signature, make_key, sign_block


def median_seconds(action, repeats: int = 100) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeats", type=int, default=3, help="networks in the model (each adds a weights record)")
    repeats = parser.parse_args().repeats
    rng = np.random.default_rng(0)
    frame = pd.DataFrame({f"x{i}": rng.normal(size=400) for i in range(8)})
    model = sheetnet.fit(frame, rng.normal(size=400), hidden=(16, 8), epochs=50, repeats=repeats, workers=1)
    cells = encode_block(model, BlockInfo("y", "2026-01-01T00:00:00Z", "bench", "f" * 64, 400, 0))
    key = make_key("bench")
    signed = sign_block(cells, key)
    decode = median_seconds(lambda: decode_block(signed))
    verify = median_seconds(lambda: check_signature(signed, [key.public_key()]))
    sign = median_seconds(lambda: sign_block(cells, key))
    functions.about(signed)  # decoded and verified once; recalculations find both remembered
    about = median_seconds(lambda: functions.about(signed))
    print(f"block of {len(signed)} rows ({repeats} networks of 8-16-8-1)")
    print(f"  decode            {decode * 1e3:8.2f} ms")
    print(f"  verify signature  {verify * 1e3:8.2f} ms   {verify / decode:5.2f} x decode")
    print(f"  sign              {sign * 1e3:8.2f} ms   {sign / decode:5.2f} x decode")
    print(f"  ABOUT, seen before{about * 1e3:8.2f} ms   {about / decode:5.2f} x decode")


if __name__ == "__main__":
    main()
