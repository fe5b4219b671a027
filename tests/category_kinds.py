"""Invented readings whose category columns hold every kind of cell: numbers declared as categories,
decimals, logicals, texts that look like formulas or numbers, mixed numbers and texts. Shared by the
evaluator's tests and the LibreOffice proofs of native formulas."""

from __future__ import annotations

import numpy as np
import pandas as pd


def kinds_frame(rows: int, seed: int) -> pd.DataFrame:
    """Invented readings with every kind of input cell a category column can hold."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "width": rng.normal(20, 4, rows),
        "occupation": rng.integers(1, 7, rows).astype(float),  # numbers declared as categories
        "dose": rng.choice([0.5, 2.5, 0.125, 1e-07], rows),  # decimals declared as categories
        "site": pd.Series(rng.choice(["north", "=1+1", '=HYPERLINK("http://example.invalid","x")', "007", "3.0", " east "], rows), dtype=object),
        "sealed": pd.Series(rng.choice([True, False], rows), dtype=object),  # logicals declared as categories
        "batch": pd.Series(rng.choice(np.array([3, "3", "a", 2.5, "b  c"], dtype=object), rows), dtype=object),  # mixed
    })
    signal = 0.2 * frame["width"] + frame["occupation"] * 0.4 + (frame["site"] == "north") * 2 + frame["dose"] + frame["sealed"].astype(float)
    frame["reading"] = signal + rng.normal(0, 0.3, rows)
    frame["passed"] = np.where(frame["reading"] > frame["reading"].median(), "pass", "fail")
    frame["grade"] = np.array(["low", "mid", "high"])[np.digitize(signal, np.quantile(signal, [1 / 3, 2 / 3]))]
    return frame

INPUTS = ["width", "occupation", "dose", "site", "sealed", "batch"]
CATEGORIES = ["occupation", "dose", "sealed", "batch"]
FEW = ["width", "occupation", "site"]  # a multiclass class formula repeats each member's network 8 times
