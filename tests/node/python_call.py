"""The Python side of the add-in's Node test: demo tables and the cell functions called directly.

    python python_call.py table ROWS SEED      -> the coffee-lot demo table as JSON rows (header first)
    python python_call.py call < calls.json    -> [[name, args], ...] in, each function's answer out

Answers are what the cell function returns, blanks as empty strings (as a spilled answer shows them),
NaN as null, so the Node test compares them with what the add-in's functions give in the stand-in.
"""

from __future__ import annotations

import json
import math
import sys
from typing import Any


def _plain(value: Any) -> Any:
    if isinstance(value, list):
        return [_plain(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return "" if value is None else value


def main(argv: list[str]) -> int:
    if argv[:1] == ["table"]:
        import sheetnet_demo

        frame = sheetnet_demo.coffee_lot_grades(rows=int(argv[1]), seed=int(argv[2]))
        rows = [list(frame.columns)] + frame.astype(object).values.tolist()
        print(json.dumps(rows))
        return 0
    if argv[:1] == ["call"]:
        from sheetnet.registry import BY_NAME

        calls = json.load(sys.stdin)
        print(json.dumps([_plain(BY_NAME[name].run(*args)) for name, args in calls]))
        return 0
    print(__doc__, file=sys.stderr)
    return 2


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
