"""Saving a workbook: the package edit beside a whole rewrite through openpyxl (run by hand; prints medians and ratios).

    .venv/bin/python tests/benchmarks/saving.py [--rows 20000]
"""

from __future__ import annotations

import argparse
import io
import statistics
import tempfile
import time
from pathlib import Path

import openpyxl

from sheetnet import service
from sheetnet.package import open_package, write_package
from sheetnet.workbook import open_book, save_book


def median_seconds(action, repeats: int = 5) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=20_000)
    rows = parser.parse_args().rows
    with tempfile.TemporaryDirectory(prefix="sheetnet-bench-") as scratch:
        path = Path(scratch) / "bench.xlsx"
        book = openpyxl.Workbook()
        sheet = book.active
        sheet.title = "Data"
        sheet.append([f"x{j}" for j in range(8)])
        for i in range(rows):
            sheet.append([i * 0.5 + j for j in range(8)])
        book.save(path)
        data = path.read_bytes()
        results = [["sheetnet results"]] + [[i, i * 0.25] for i in range(rows)]
        placements = service.results_placements("sn bench", [(3, 1, results)])

        def edit_only() -> None:
            write_package(open_package(data, path.name), [placements], io.BytesIO())

        def rewrite_with_openpyxl() -> None:
            whole = openpyxl.load_workbook(io.BytesIO(data))
            target = whole.create_sheet("sn bench")
            for r, row in enumerate(results, start=3):
                for c, value in enumerate(row, start=1):
                    target.cell(r, c, value)
            whole.save(io.BytesIO())

        def full_command_save() -> None:
            path.write_bytes(data)
            with open_book(path) as opened:
                opened.log.add(placements)
                save_book(opened)

        edit = median_seconds(edit_only)
        rewrite = median_seconds(rewrite_with_openpyxl)
        full = median_seconds(full_command_save)
        print(f"{rows:,} rows of user data, {rows:,} result rows, {len(data):,} bytes")
        print(f"package edit (check + write):        {edit:.3f} s")
        print(f"openpyxl load + rewrite:             {rewrite:.3f} s   ({rewrite / edit:.1f}x the package edit)")
        print(f"open_book + save_book (lock, two openpyxl reads, checks, atomic replace, backup): {full:.3f} s")


if __name__ == "__main__":
    main()
