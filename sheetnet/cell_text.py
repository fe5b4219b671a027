"""A cell value in the words a spreadsheet user reads, for messages.

Messages never show Python's spelling of a value (``None``, ``nan``,
``np.float64(3.0)``, ``datetime.datetime(2026, 3, 1, 0, 0)``): every message
built from a cell value goes through `cell_in_words`.
"""

from __future__ import annotations

import datetime
import math
import numbers
from typing import Any

LONGEST_TEXT = 60  # longer texts are cut in messages, which only need to identify the cell
ERROR_VALUES = frozenset(
    {
        "#N/A", "#VALUE!", "#REF!", "#DIV/0!", "#NUM!", "#NAME?", "#NULL!", "#SPILL!",
        "#CALC!", "#GETTING_DATA", "#FIELD!", "#BLOCKED!", "#CONNECT!", "#BUSY!", "#UNKNOWN!",
    }
)  # spreadsheet error values as they reach Python in text form


def number_in_words(value: float) -> str:
    """A number as a spreadsheet's general format shows it: 3, 0.25, 1234567, 1E+308."""
    if math.isnan(value):
        return "blank"
    if math.isinf(value):
        return "infinity" if value > 0 else "minus infinity"
    if value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    text = f"{value:.15g}"
    if "e" in text:
        mantissa, exponent = text.split("e")
        return f"{mantissa}E{exponent[0]}{exponent[1:].lstrip('0').rjust(2, '0')}"
    return text


def cell_in_words(value: Any) -> str:
    """How a message names a cell's value.

    >>> [cell_in_words(v) for v in (None, 3.0, True, "n/a", "#N/A", datetime.date(2026, 3, 1))]
    ['blank', '3', 'TRUE', "'n/a'", '#N/A', '2026-03-01']
    """
    if hasattr(value, "item") and not isinstance(value, (list, tuple, dict, str)) and getattr(value, "ndim", 1) == 0:
        value = value.item()  # a NumPy scalar
    if value is None:
        return "blank"
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, numbers.Real):
        return number_in_words(float(value))
    if isinstance(value, str):
        text = value.strip()
        if not text:
            return "blank"
        if text.upper() in ERROR_VALUES:
            return text.upper()
        shown = " ".join(value.split()) if "\n" in value or "\t" in value else value
        if len(shown) > LONGEST_TEXT:
            shown = shown[: LONGEST_TEXT - 3] + "..."
        return f"'{shown}'"
    if isinstance(value, datetime.datetime):
        return value.strftime("%Y-%m-%d") if value.time() == datetime.time() else value.strftime("%Y-%m-%d %H:%M:%S")
    if isinstance(value, datetime.date):
        return value.strftime("%Y-%m-%d")
    if isinstance(value, datetime.time):
        return value.strftime("%H:%M:%S")
    if isinstance(value, (list, tuple)):
        return "a list of values"
    return "a value that is not a number, text, date or TRUE/FALSE"


def label_in_words(value: Any) -> str:
    """A category or class label without quotes (it is listed among others): 3, yes, TRUE, 2026-03-01."""
    shown = cell_in_words(value)
    return shown[1:-1] if shown.startswith("'") and shown.endswith("'") and isinstance(value, str) else shown


def labels_in_words(values: Any, most: int = 10) -> str:
    """A few labels joined by commas, the rest counted."""
    listed = list(values)
    shown = ", ".join(label_in_words(v) for v in listed[:most])
    return shown if len(listed) <= most else f"{shown} and {len(listed) - most:,} more"
