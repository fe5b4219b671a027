"""Size limits, checked before anything large is allocated.

A spreadsheet user who types ``hidden=100000000`` or trains on a column of
10,000 different labels should get a message in a second, not a memory error
after minutes. The limits are far above what a useful model of a worksheet
table needs and well below what a 16 GB machine can hold while training.
"""

from __future__ import annotations

from typing import Sequence

from .errors import SizeError

MAX_PARAMETERS = 2_000_000  # weights and biases of one network; L-BFGS keeps about 25 copies of them
MAX_MATRIX_CELLS = 50_000_000  # rows x widest layer (inputs, one-hot columns included): one training buffer, 400 MB
MAX_CLASSES = 200  # distinct labels of a classifier's target
MAX_LAYERS = 20  # hidden layers
MAX_NUMBER = 1e100  # larger magnitudes are refused: their squares (for the scaling) would overflow


def parameter_count(sizes: Sequence[int]) -> int:
    """Weights and biases of a network with these layer sizes (inputs first, outputs last)."""
    return sum((a + 1) * b for a, b in zip(sizes[:-1], sizes[1:]))


def check_network_size(rows: int, inputs: int, hidden: Sequence[int], outputs: int) -> None:
    """Refuse a network or a training table beyond the limits, naming the limit and the fix.

    ``inputs`` counts network inputs (a text column counts one per category).

    >>> check_network_size(1000, 5, (8, 4), 1)
    >>> parameter_count((5, 100_000_000, 1))
    700000001
    """
    if len(hidden) > MAX_LAYERS:
        raise SizeError(f"{len(hidden)} hidden layers are more than the {MAX_LAYERS} sheetnet trains; use one to three layers, such as 8 or 16,8")
    sizes = (inputs, *hidden, outputs)
    count = parameter_count(sizes)
    if count > MAX_PARAMETERS:
        raise SizeError(
            f"a network of {'-'.join(map(str, sizes))} has {count:,} weights, more than the {MAX_PARAMETERS:,} sheetnet trains; "
            "use fewer or narrower hidden layers, such as 8 or 16,8"
            + (", or fewer categories in the text inputs" if inputs > 1000 else "")
        )
    widest = max(sizes)
    if rows * widest > MAX_MATRIX_CELLS:
        what = "inputs (each category of a text column is one input)" if widest == inputs else "units in a layer"
        raise SizeError(
            f"{rows:,} rows times {widest:,} {what} make {rows * widest:,} numbers, more than the {MAX_MATRIX_CELLS:,} "
            "sheetnet holds while training; train on fewer rows, or use fewer categories or narrower layers"
        )


def check_class_count(count: int, examples: str) -> None:
    """Refuse a classifier target with more distinct labels than `MAX_CLASSES`."""
    if count > MAX_CLASSES:
        raise SizeError(
            f"the target has {count:,} different values ({examples}), more than the {MAX_CLASSES} classes sheetnet learns; "
            "if it holds amounts, add the setting task=regression; if it is an identifier or a free text, choose another target"
        )
