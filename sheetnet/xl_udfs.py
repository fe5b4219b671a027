"""Every cell function as an xlwings user-defined function (desktop Excel on Windows).

Generated from `sheetnet.registry.REGISTRY`: one function per entry, named as
the registry's bridge name (``SHEETNET_TRAIN``: Excel user-defined functions
cannot contain dots), with the registry's arguments, help texts and 2-D range
arguments. Answers are 2-D lists, which Excel shows as dynamic arrays; a
failure is one readable ``#SHEETNET!`` cell, never an exception in Excel.
Every argument is read with xlwings' ``err_to_str`` option (new in xlwings
0.28): error cells arrive as their codes (``#N/A``), which sheetnet names in
its messages, instead of xlwings' default ``None``, which would read as a
blank (and with ``blank_rows=skip`` drop the row without a word).

Uses only xlwings' open-source UDF decorators (``xw.func``, ``xw.arg``,
``xw.ret``). Point the workbook's ``xlwings.conf`` sheet at this module with
``sheetnet xl setup BOOK`` (``UDF MODULES = sheetnet.xl_udfs``).
"""

from __future__ import annotations

import inspect
import math
from typing import Any, Callable

import xlwings as xw

from .cells import Cells, message_cell
from .registry import REGISTRY, CellFunction

READ_OPTIONS: dict[str, Any] = {"err_to_str": True}  # how every door of this bridge reads cells


_PLAIN = frozenset({str, int, bool, type(None)})  # cells from_excel hands on as they are


def from_excel(value: Any) -> Any:
    """What xlwings hands over (lists, NumPy arrays with NaN for blanks, scalars) as plain cell values."""
    try:
        import numpy as np

        if isinstance(value, np.ndarray):
            value = value.tolist()
    except ImportError:  # pragma: no cover - NumPy is a dependency
        pass
    if isinstance(value, list):
        if all(type(row) is list for row in value):  # rows of cells, the common case: no call per plain cell (10,000 rows in ms)
            return [[(None if v != v else v) if type(v) is float else v if type(v) in _PLAIN else from_excel(v) for v in row] for row in value]
        return [from_excel(v) for v in value]
    if isinstance(value, float) and math.isnan(value):
        return None
    return value


def to_excel(answer: Cells) -> list[list[Any]]:
    """Blanks as empty strings so that a spilled answer shows empty cells, not zeros."""
    return [["" if v is None else v for v in row] for row in answer]


def _wrapper(entry: CellFunction) -> Callable[..., list[list[Any]]]:
    def udf(*args: Any) -> list[list[Any]]:
        try:
            return to_excel(entry.run(*[from_excel(a) for a in args]))
        except Exception as error:  # the cell function never raises; this guards the conversions
            return to_excel(message_cell(f"unexpected {type(error).__name__} in the Excel bridge: {error}"))

    parameters = [
        inspect.Parameter(a.name, inspect.Parameter.POSITIONAL_OR_KEYWORD, default=None if a.optional else inspect.Parameter.empty)
        for a in entry.arguments
    ]
    udf.__signature__ = inspect.Signature(parameters)  # type: ignore[attr-defined]
    udf.__name__ = udf.__qualname__ = entry.bridge_name
    udf.__doc__ = f"{entry.help} Returns {entry.returns}."
    udf.__module__ = __name__
    # what the decorators below declare, kept readable where xlwings' own UDF runtime is absent (Linux, macOS)
    udf.sheetnet_udf = {  # type: ignore[attr-defined]
        "name": entry.bridge_name,
        "category": "sheetnet",
        "args": [
            {"name": a.name, "optional": a.optional, "ndim": 2 if a.kind == "range" else None, "doc": a.help, **READ_OPTIONS}
            for a in entry.arguments
        ],
    }
    decorated: Callable[..., list[list[Any]]] = udf
    for argument in reversed(entry.arguments):
        options = {"ndim": 2, **READ_OPTIONS} if argument.kind == "range" else dict(READ_OPTIONS)
        decorated = xw.arg(argument.name, doc=argument.help, **options)(decorated)
    return xw.func(category="sheetnet")(decorated)  # a 2-D list answer spills as a dynamic array


UDFS: dict[str, Callable[..., list[list[Any]]]] = {entry.bridge_name: _wrapper(entry) for entry in REGISTRY}
globals().update(UDFS)  # xlwings imports the functions it finds in this module
