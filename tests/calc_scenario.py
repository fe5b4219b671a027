"""Shared by the Calc tests and the benchmark: an invented, seeded scenario and the set-up of a live
Calc with the extension installed into a temporary profile and a real sheetnet server on loopback."""

from __future__ import annotations

import math
import os
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np

from sheetnet.calc.commands import office_settings

TOKEN = "calc-test-token-0123456789"
DAYS = ("weekday", "weekend", "=holiday")  # a category that starts with '=': it must stay text everywhere


def bakery_table(rows: int, seed: int = 11) -> list[list[Any]]:
    """Our own scenario: loaves a village bakery sells per day, from the morning temperature,
    the kind of day and whether a promotion ran. Whole numbers are ints, as Calc's cells reach the server."""
    generator = np.random.default_rng(seed)
    table: list[list[Any]] = [["temperature", "day", "promo", "loaves"]]
    for _ in range(rows):
        temperature = round(float(generator.normal(14, 6)), 1)
        day = DAYS[int(generator.choice(3, p=[0.6, 0.3, 0.1]))]
        promo = int(generator.random() < 0.25)
        loaves = round(120 + 2.5 * temperature + {"weekday": 0, "weekend": 35, "=holiday": 60}[day] + 18 * promo + float(generator.normal(0, 6)))
        table.append([as_sent(temperature), day, promo, int(loaves)])
    return table


def as_sent(value: Any) -> Any:
    """What the extension sends for a cell (whole numbers as JSON integers)."""
    if isinstance(value, float) and math.isfinite(value) and value.is_integer():
        return int(value)
    return value


def as_shown(value: Any) -> Any:
    """What a Calc cell shows for an answer cell (see the extension's cell_out)."""
    if value is None:
        return ""
    if isinstance(value, bool):
        return 1.0 if value else 0.0
    if isinstance(value, (int, float)):
        return float(value)
    return str(value)


def shown(cells: list[list[Any]]) -> list[list[Any]]:
    width = max(len(r) for r in cells)
    return [[as_shown(v) for v in r] + [""] * (width - len(r)) for r in cells]


def from_calc(cells: list[list[Any]]) -> list[list[Any]]:
    """Cells read from Calc as the extension would send them back to the server."""
    return [[as_sent(v) for v in row] for row in cells]


def address(left: str, top: int, width: int, height: int) -> str:
    """'H', 1, 9, 40 -> 'H1:P40'."""
    from sheetnet.placements import column_letters

    number = 0
    for letter in left:
        number = number * 26 + ord(letter) - 64
    return f"{left}{top}:{column_letters(number + width - 1)}{top + height - 1}"


def install_extension(home: Path, profile: Path) -> subprocess.CompletedProcess[str]:
    """`sheetnet calc install` as a user would run it (HOME in the temporary folder; as root a shared install beside the profile)."""
    command = [sys.executable, "-c", "import sys; from sheetnet.cli import main; sys.exit(main(sys.argv[1:]))",
               "calc", "install", "--profile", str(profile), "--no-start"]
    return subprocess.run(command, env=dict(os.environ, HOME=str(home)), capture_output=True, text=True, timeout=300)


def start_office(home: Path, profile: Path, environment: dict[str, str] | None = None) -> Any:
    from calc_office import CalcOffice

    return CalcOffice(home, profile, office_settings(profile), environment)
