"""The `sheetnet` command line.

Errors of sheetnet's own are caught once here and printed as ``Type: message``
with exit code 1; anything else is a bug and keeps its traceback.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import Any, Sequence, TextIO

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


def run_demo(seed: int, out: TextIO, pictures: Path | None = None) -> int:
    """Train and check a model on each invented scenario; print holdout metrics, draw pictures."""
    import sheetnet_demo

    from .training import fit

    out.write(f"sheetnet {__version__}: demo on invented data (seed {seed})\n")
    drawn: list[Path] = []
    for number, problem in enumerate(sheetnet_demo.problems(seed), start=1):
        bar = ProgressLine(f"scenario {number}")
        inputs, target = problem.training_rows()
        model = fit(inputs, target, hidden=problem.hidden, seed=seed, progress=bar)
        bar.done()
        metrics = problem.score(model)
        out.write(f"\n{number}. {problem.title}, {int(problem.holdout.sum())} held out\n")
        out.write(f"   network {model.sizes}, {model.algorithm}, stopped by '{model.stopped_by}' after {model.epochs} epochs\n")
        _print_metrics(metrics, out)
        if problem.note:
            out.write(f"    ({problem.note})\n")
        if pictures is not None:
            drawn.extend(_draw(problem, model, metrics, pictures / f"{number}-{problem.slug}"))
    if drawn:
        out.write("\npictures:\n" + "".join(f"  {path}\n" for path in drawn))
    out.write(f"\n{CAUTION}\n")
    return 0


def _draw(problem: Any, model: Any, metrics: dict[str, Any], stem: Path) -> list[Path]:
    from . import pictures

    drawn = [pictures.loss_curve_picture(model, f"{stem}-training.png", problem.title)]
    if "confusion" in metrics:
        drawn.append(pictures.confusion_picture(metrics["confusion"], list(metrics["per_class"]), f"{stem}-confusion.png", problem.title))
    else:
        actual, predicted = problem.actual_and_predicted(model)
        drawn.append(pictures.predicted_vs_actual_picture(actual, predicted, f"{stem}-predicted.png", problem.title))
    return drawn


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="sheetnet", description="Small neural networks for spreadsheet data.")
    parser.add_argument("--version", action="version", version=f"sheetnet {__version__}")
    commands = parser.add_subparsers(dest="command", required=True)
    demo = commands.add_parser("demo", help="train and check models on the built-in invented scenarios")
    demo.add_argument("--seed", type=int, default=0, help="seed for data, splits and training (default 0)")
    demo.add_argument("--pictures", type=Path, default=Path("sheetnet-demo"), metavar="FOLDER", help="where to write the PNG pictures (default: sheetnet-demo)")
    demo.add_argument("--no-pictures", action="store_true", help="print the metrics only")
    commands.add_parser("settings", help="list every training setting with its default")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        if args.command == "demo":
            return run_demo(args.seed, sys.stdout, None if args.no_pictures else args.pictures)
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
