"""The `sheetnet` command line.

Errors of sheetnet's own are caught once here and printed as ``Type: message``
with exit code 1; anything else is a bug and keeps its traceback.
"""

from __future__ import annotations

import argparse
import sys
import time
from typing import Any, Sequence, TextIO

import numpy as np

from . import __version__
from .errors import SheetnetError

CAUTION = (
    "A model is a decision aid, not a decision. Where its output affects people "
    "(credit, hiring, medical or safety decisions), check it for bias across groups, "
    "keep a person accountable for each decision, and follow local law and licensed practice."
)


class ProgressLine:
    """Training progress on one terminal line (quiet when the stream is not a terminal)."""

    def __init__(self, label: str, stream: TextIO = sys.stderr) -> None:
        self.label = label
        self.stream = stream
        self.live = stream.isatty()
        self._last = 0.0

    def __call__(self, epoch: int, most: int, training_loss: float, validation_loss: float | None) -> None:
        now = time.monotonic()
        if not self.live or now - self._last < 0.1:
            return
        self._last = now
        filled = int(20 * epoch / most)
        val = "" if validation_loss is None else f"  validation loss {validation_loss:.4g}"
        self.stream.write(f"\r{self.label} [{'#' * filled}{'.' * (20 - filled)}] epoch {epoch}  loss {training_loss:.4g}{val}   ")
        self.stream.flush()

    def done(self) -> None:
        if self.live:
            self.stream.write("\r" + " " * 100 + "\r")
            self.stream.flush()


def _print_metrics(metrics: dict[str, Any], out: TextIO) -> None:
    for name, value in metrics.items():
        if isinstance(value, float):
            out.write(f"    {name:<18} {value:.4f}\n")
        elif value is None:
            out.write(f"    {name:<18} (not defined for these rows)\n")
    if "confusion" in metrics:
        classes = list(metrics["per_class"])
        out.write("    confusion (rows actual, columns predicted): " + " ".join(map(str, classes)) + "\n")
        for label, row in zip(classes, metrics["confusion"]):
            out.write(f"      {str(label):<10} " + " ".join(f"{n:>5d}" for n in row) + "\n")


def run_demo(seed: int, out: TextIO) -> int:
    """Train and check a model on each invented scenario; print holdout metrics."""
    import sheetnet_demo as scenes

    from .evaluation import score, take_rows
    from .metrics import regression_metrics, rmse
    from .splits import holdout_mask
    from .training import fit

    out.write(f"sheetnet {__version__}: demo on invented data (seed {seed})\n\n")

    shipments = scenes.cold_chain_shipments(seed=seed + 7)
    inputs = shipments.drop(columns=["shipment", "spoiled"])
    held = holdout_mask(len(shipments), 0.25, seed, "stratified", shipments["spoiled"].to_numpy())
    bar = ProgressLine("shipments")
    model = fit(take_rows(inputs, ~held), shipments["spoiled"][~held], hidden=(6,), seed=seed, progress=bar)
    bar.done()
    out.write(f"1. Cold-chain shipments: spoiled yes/no, {len(shipments)} rows, {held.sum()} held out\n")
    out.write(f"   network {model.sizes}, {model.algorithm}, stopped by '{model.stopped_by}' after {model.epochs} epochs\n")
    _print_metrics(score(model, take_rows(inputs, held), shipments["spoiled"][held]), out)

    weeks = scenes.depot_parcel_weeks(seed=seed + 11)
    lags = 4
    level = weeks["parcels"].to_numpy(dtype=np.float64)
    change = np.diff(level)  # change[t] = level[t + 1] - level[t]: forecasting changes extrapolates the trend
    week = weeks["week_of_year"].to_numpy()[lags + 1:]
    table = np.column_stack([scenes.lagged(change, lags), np.sin(2 * np.pi * week / 52), np.cos(2 * np.pi * week / 52)])
    target = change[lags:]
    last_week, actual = level[lags:-1], level[lags + 1:]
    held = holdout_mask(len(target), 0.2, mode="ordered")
    bar = ProgressLine("parcels")
    model = fit(table[~held], target[~held], hidden=(4,), seed=seed, progress=bar)
    bar.done()
    out.write(f"\n2. Depot parcels per week: next week from the last {lags} weekly changes and the season, last {held.sum()} weeks held out\n")
    out.write(f"   network {model.sizes}, {model.algorithm}, stopped by '{model.stopped_by}' after {model.epochs} epochs\n")
    forecast = last_week[held] + model.predict(table[held])
    _print_metrics(regression_metrics(actual[held], forecast), out)
    out.write(f"    naive last-week RMSE {rmse(actual[held], last_week[held]):.4f} (for comparison)\n")

    lots = scenes.coffee_lot_grades(seed=seed + 5)
    inputs = lots.drop(columns=["lot", "grade"])
    held = holdout_mask(len(lots), 0.25, seed, "stratified", lots["grade"].to_numpy())
    bar = ProgressLine("coffee lots")
    model = fit(take_rows(inputs, ~held), lots["grade"][~held], hidden=(6,), seed=seed, progress=bar)
    bar.done()
    out.write(f"\n3. Coffee lots: grade A, B or C, {len(lots)} rows, {held.sum()} held out\n")
    out.write(f"   network {model.sizes}, {model.algorithm}, stopped by '{model.stopped_by}' after {model.epochs} epochs\n")
    _print_metrics(score(model, take_rows(inputs, held), lots["grade"][held]), out)
    out.write(f"\n{CAUTION}\n")
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="sheetnet", description="Small neural networks for spreadsheet data.")
    parser.add_argument("--version", action="version", version=f"sheetnet {__version__}")
    commands = parser.add_subparsers(dest="command", required=True)
    demo = commands.add_parser("demo", help="train and check models on the built-in invented scenarios")
    demo.add_argument("--seed", type=int, default=0, help="seed for data, splits and training (default 0)")
    commands.add_parser("settings", help="list every training setting with its default")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        if args.command == "demo":
            return run_demo(args.seed, sys.stdout)
        if args.command == "settings":
            from .settings import settings_table_markdown

            print(settings_table_markdown())
            return 0
    except SheetnetError as error:
        print(f"{type(error).__name__}: {error}", file=sys.stderr)
        return 1
    return 2  # pragma: no cover - argparse rejects unknown commands


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
