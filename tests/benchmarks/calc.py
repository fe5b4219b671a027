"""sheetnet's Calc extension in a live headless LibreOffice Calc, beside the direct call and native formulas.

Run by hand:  python tests/benchmarks/calc.py [--rows 10000] [--cells 1000] [--repeats 5]

1. One ``SHEETNET.PREDICT`` array formula over ROWS rows (the model stored by the extension's store
   command, the server on loopback): the median recalculation (``calculateAll``) in Calc, against
   the in-process ``functions.predict`` on the same rows, and against recalculating a column of
   native formulas (one per row, written by ``sheetnet formulas`` over the same stored constants).
2. CELLS one-row ``SHEETNET.PREDICT`` cells (each its own two-row table: a header copy and one row):
   the recalculation after editing one input cell (only its cell reruns) against recalculating all.
Ratios are printed, never asserted.
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any, Callable

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # the tests' Calc helpers
from calc_office import office_missing  # noqa: E402
from calc_scenario import TOKEN, address, bakery_table, from_calc, install_extension, start_office  # noqa: E402
from local_server import serving  # noqa: E402

from sheetnet import functions  # noqa: E402
from sheetnet.calc.build import STORE_COMMAND  # noqa: E402
from sheetnet.server import create_app  # noqa: E402
from sheetnet.server_file import write_server_file  # noqa: E402

SHEETNET_COMMAND = [sys.executable, "-c", "import sys; from sheetnet.cli import main; sys.exit(main(sys.argv[1:]))"]


def median_seconds(run: Callable[[], Any], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        run()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=10_000)
    parser.add_argument("--cells", type=int, default=1_000)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    missing = office_missing()
    if missing or shutil.which("unopkg") is None:
        print(f"skipped: {missing or 'unopkg is missing'}")
        return 0
    with tempfile.TemporaryDirectory(prefix="sheetnet-calc-bench-") as scratch:
        home = Path(scratch)
        profile = home / "profile"
        installed = install_extension(home, profile)
        if installed.returncode != 0:
            print(installed.stderr)
            return 1
        with serving(create_app(TOKEN)) as base:
            write_server_file(int(base.rsplit(":", 1)[1]), TOKEN, path=home / ".sheetnet" / "server.json", pid=os.getpid())
            office = start_office(home, profile)
            try:
                return run(office, home, args)
            finally:
                office.close()


def run(office: Any, home: Path, args: argparse.Namespace) -> int:
    rows, repeats = args.rows, args.repeats
    table = bakery_table(rows, seed=5)
    n = rows + 1
    doc = office.call("new")
    office.call("rename_sheet", doc=doc, index=0, name="Data")
    office.call("put", doc=doc, sheet="Data", address=address("A", 1, 4, n), rows=table)
    done = office.call("store_command", doc=doc, sheet="Data", address="A1:D501", url=f"{STORE_COMMAND}?name=bakery&target=loaves&hidden=6")
    print(f"store command (train 500 rows through the server, write the model sheet): {done['seconds']:.2f} s -> {done['result']}")
    names = office.call("names", doc=doc)
    block = from_calc(office.call("read", doc=doc, sheet="sheetnet_bakery", address=names["bakery"].split(".", 1)[1].replace("$", "")))

    plain = home / "plain.xlsx"
    office.call("save", doc=doc, path=str(plain), filter="Calc Office Open XML")
    native = home / "native.xlsx"
    shutil.copy(plain, native)
    subprocess.run([*SHEETNET_COMMAND, "formulas", str(native), "--model", "bakery", "--table", f"Data!A1:C{n}", "--to", "Data!H1"], check=True, capture_output=True)

    office.call("array_formula", doc=doc, sheet="Data", address=f"F1:F{n}", formula=f"=SHEETNET.PREDICT(bakery;A1:C{n})")
    office.call("calculate_all", doc=doc)  # the first call loads the extension's Python code
    live = statistics.median(office.call("calculate_all", doc=doc) for _ in range(repeats))
    calc_values = [r[0] for r in office.call("read", doc=doc, sheet="Data", address=f"F2:F{n}")]
    inputs = [r[:3] for r in table]
    direct = median_seconds(lambda: functions.predict(block, inputs), repeats)
    direct_values = [r[0] for r in functions.predict(block, inputs)[1:]]
    assert calc_values == direct_values, "Calc's PREDICT differs from the direct call"

    formulas_doc = office.call("load", path=str(native))
    office.call("calculate_all", doc=formulas_doc)
    native_seconds = statistics.median(office.call("calculate_all", doc=formulas_doc) for _ in range(repeats))
    native_values = [r[0] for r in office.call("read", doc=formulas_doc, sheet="Data", address=f"H2:H{n}")]
    worst = max(abs(a - b) / max(1.0, abs(b)) for a, b in zip(native_values, direct_values))
    office.call("close", doc=formulas_doc)

    print(f"\n1. one SHEETNET.PREDICT over {rows:,} rows, median of {repeats}")
    print(f"   Calc recalculation (extension -> server -> back into cells)   {live:8.3f} s")
    print(f"   direct functions.predict in Python                           {direct:8.3f} s   Calc/direct  {live / direct:6.1f}x")
    print(f"   Calc recalculating {rows:,} native formulas                    {native_seconds:8.3f} s   Calc PREDICT/native {live / native_seconds:6.2f}x")
    print(f"   largest relative difference native vs PREDICT: {worst:.1e}")

    cells = args.cells
    doc2 = office.call("new")
    header = table[0][:3]
    pairs = []
    for i in range(cells):
        pairs.append(header)
        pairs.append(table[1 + i][:3])
    office.call("put", doc=doc2, sheet="Sheet1", address=address("A", 1, 3, 2 * cells), rows=pairs)
    office.call("put", doc=doc2, sheet="Sheet1", address=address("K", 1, len(block[0]), len(block)), rows=block)
    model = address("K", 1, len(block[0]), len(block))
    start = time.perf_counter()
    for i in range(cells):
        top = 2 * i + 1
        office.call("array_formula", doc=doc2, sheet="Sheet1", address=f"E{top}:E{top + 1}", formula=f"=SHEETNET.PREDICT({model};A{top}:C{top + 1})")
    entered = time.perf_counter() - start
    office.call("calculate_all", doc=doc2)
    everything = statistics.median(office.call("calculate_all", doc=doc2) for _ in range(repeats))
    edits = []
    for k in range(repeats):
        office.call("put_cell", doc=doc2, sheet="Sheet1", address=f"A{2 * (k + 1)}", value=20.5 + k)
        edits.append(office.call("calculate", doc=doc2))
    one_edit = statistics.median(edits)
    print(f"\n2. {cells:,} one-row SHEETNET.PREDICT cells (entering them through UNO took {entered:.1f} s), median of {repeats}")
    print(f"   recalculating all {cells:,} cells (one server call each)            {everything:8.3f} s   per cell {1000 * everything / cells:.2f} ms")
    print(f"   recalculation after one input edit (only its cell reruns)      {one_edit:8.3f} s   all/one-edit {everything / one_edit:6.0f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
