"""The model block: a trained model as a plain 2-D block of numbers and short texts.

`encode_block` and `decode_block` are a pure pair. The block is what
SHEETNET.TRAIN returns and what the hidden model sheet stores; DEVELOPERS.md
documents the layout. Decoding reads numbers and texts only (nothing is
evaluated or imported), checks the format version and a SHA-256 checksum
over the whole content, and checks that the parts fit together, so a
corrupted, truncated, accidentally edited or future-version block gets a
clear `BlockError` instead of a wrong number. The checksum is no protection
against a deliberate edit (anyone can compute it again); the optional
signature row (format 3), verified by `sheetnet.signing`, shows who wrote a block.

Layout: every row is ``[key, field, field, ...]`` padded to `WIDTH` cells. A
row with a key starts a record; the rows below it with a blank key carry
that record's numbers (up to ``WIDTH - 1`` per row). Numbers are stored
rounded to 15 significant digits, which every spreadsheet keeps exactly;
settings, the arguments as given and class labels as a kind and an exact
text. Writing refuses (`ModelError`) what a spreadsheet could not give back
exactly, so a written block never reads back as damaged.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping, Sequence

import numpy as np

from . import network
from .cell_text import cell_in_words
from .errors import ModelError
from .model import FORMAT_VERSION, Member, Model
from .network import ACTIVATIONS, parameter_count
from .preparation import CategoryInput, NumericInput, Preparation, TargetPreparation
from .settings import SETTINGS_BY_NAME
from .uncertainty import SCORES, Conformal

MAGIC = "sheetnet model block"
WIDTH = 9  # a key and eight values per row
CURVE_POINTS = 200  # loss curves longer than this are stored at evenly spread epochs
VALUE_KINDS = ("text", "int", "float", "bool", "none")  # how settings, given arguments and class labels keep their type


class BlockError(ModelError):
    """A model block cannot be read: not a block, damaged, edited or from a newer sheetnet."""


@dataclass(frozen=True)
class BlockInfo:
    """What the block records besides the model itself."""

    target: str
    trained_at: str  # ISO 8601, UTC
    written_by: str  # sheetnet version
    fingerprint: str  # SHA-256 of the training table (see `table_fingerprint`)
    training_rows: int
    holdout_rows: int
    holdout_metrics: dict[str, float] = field(default_factory=dict)
    blank_rows: str = "error"  # how the cell functions treat rows with a blank cell: error or skip
    # where the model was trained from, when a bridge knows it: (range address, holdout share, split mode, split seed)
    source: tuple[str, float, str, int] | None = None
    # the arguments given to TRAIN exactly as given: "hidden" (the raw hidden-layers argument) and every
    # setting the user wrote, lower-cased name -> raw value (str, int, float, bool or None); format 2 on
    given: Mapping[str, Any] = field(default_factory=dict)
    # format 3 on: the split-conformal calibration on the holdout rows (prediction intervals or class sets)
    conformal: Conformal | None = None
    # format 3 on: bootstrap error bars of the holdout metrics, name -> (low, high), and how they were drawn
    metric_intervals: Mapping[str, tuple[float, float]] = field(default_factory=dict)
    error_bars: tuple[float, int, int] | None = None  # (level, resamples, seed) of `metric_intervals`
    # format 3 on: metrics by group on the holdout rows, when TRAIN was given the setting group=COLUMN:
    # the column's name, and group label -> metric name -> value (a metric undefined for a group is absent; "rows" its count)
    group_column: str | None = None
    group_metrics: Mapping[str, Mapping[str, float]] = field(default_factory=dict)

    def __reduce__(self) -> tuple[Any, ...]:
        """Pickled (and deep-copied) as its fields, read-only mappings as plain dicts; `_rebuilt_info` makes them read-only again."""
        read_only = tuple(name for name, value in vars(self).items() if isinstance(value, MappingProxyType))
        return (_rebuilt_info, ({name: dict(value) if name in read_only else value for name, value in vars(self).items()}, read_only))


def _rebuilt_info(values: dict[str, Any], read_only: tuple[str, ...]) -> BlockInfo:
    arguments: dict[str, Any] = {name: MappingProxyType(value) if name in read_only else value for name, value in values.items()}
    return BlockInfo(**arguments)


@dataclass(frozen=True)
class Record:
    key: str
    fields: tuple[Any, ...]
    numbers: tuple[float, ...] = ()


def _round15(value: float) -> float:
    return float(f"{float(value):.15g}")


def _numbers_of(values: Sequence[float] | np.ndarray) -> tuple[float, ...]:
    return tuple(_round15(v) for v in np.asarray(values, dtype=np.float64).ravel())


def _typed_fields(value: Any, what: str) -> tuple[str, str]:
    """A value as (kind, text), so decoding gives back the same Python type and value (floats by repr: exact)."""
    if value is None:
        return ("none", "")
    if isinstance(value, (bool, np.bool_)):
        return ("bool", "TRUE" if value else "FALSE")
    if isinstance(value, (int, np.integer)):
        try:
            return ("int", str(int(value)))
        except ValueError:  # beyond Python's limit on digits of an int as text
            raise ModelError(f"the model cannot be stored: {what} is a whole number of thousands of digits; give a smaller number and train again") from None
    if isinstance(value, (float, np.floating)):
        if not math.isfinite(float(value)):
            raise ModelError(f"the model cannot be stored: {what} is {cell_in_words(float(value))}, not a finite number; give a finite number and train again")
        return ("float", repr(float(value)))
    if isinstance(value, str):
        return ("text", value)
    raise ModelError(f"the model cannot be stored: {what} is a {type(value).__name__}; give a number, a text, TRUE/FALSE or nothing, and train again")


def _typed_value(kind: Any, text: Any, what: str) -> Any:
    """The value `_typed_fields` wrote; ``what`` names it in the message (like "the setting 'epochs'")."""
    text = "" if _blank_padding(text) else str(text)
    try:
        if kind == "none" and text == "":
            return None
        if kind == "bool" and text in ("TRUE", "FALSE"):
            return text == "TRUE"
        if kind == "int":
            return int(text)
        if kind == "float":
            number = float(text)
            if math.isfinite(number):
                return number
        if kind == "text":
            return text
    except ValueError:
        pass
    if kind not in VALUE_KINDS:
        raise BlockError(f"the model block records {what} with a kind {_shown(kind)} this sheetnet does not know; it is damaged: train again")
    raise BlockError(f"the model block records {what} as '{text[:40]}', which is not a valid {kind}; it is damaged: train again")


def _sampled_curve(epochs: Sequence[int], curve: Sequence[float]) -> list[float]:
    """Pairs (epoch, loss) flattened, at most CURVE_POINTS of them, evenly spread, always with the last point.

    A model read from a block brings its points' own epochs, so writing it again keeps them.
    """
    n = len(curve)
    if n == 0:
        return []
    kept = np.unique(np.linspace(1, n, min(n, CURVE_POINTS)).round().astype(int)) - 1
    return [v for i in kept for v in (float(epochs[i]), float(curve[i]))]


def model_records(model: Model, info: BlockInfo) -> list[Record]:
    """The records of a block, in order, before the checksum."""
    records = [
        Record(MAGIC, (FORMAT_VERSION,)),
        Record("written_by", (info.written_by,)),
        Record("trained_at", (info.trained_at,)),
        Record("target", (info.target, model.task)),
        Record("network", (model.activation, model.algorithm, model.seed, len(model.sizes)), _numbers_of(model.sizes)),
        Record("rows", (info.training_rows, info.holdout_rows)),
        Record("fingerprint", (info.fingerprint,)),
        Record("blank_rows", (info.blank_rows,)),
    ]
    if info.source is not None:
        address, share, mode, split_seed = info.source
        records.append(Record("source", (address, _round15(share), mode, int(split_seed))))
    for name, value in sorted(model.settings.items()):
        records.append(Record("setting", (str(name), *_typed_fields(value, f"the setting '{name}'"))))
    for name, value in info.given.items():
        records.append(Record("given", (str(name), *_typed_fields(value, f"the argument '{name}'"))))
    for spec in model.preparation.inputs:
        if isinstance(spec, NumericInput):
            records.append(Record("input", (spec.name, "number"), _numbers_of([spec.mean, spec.scale, spec.low, spec.high])))
        else:
            records.append(Record("input", (spec.name, "category", len(spec.categories))))
            records.extend(Record("category", (spec.name, c)) for c in spec.categories)
    if model.task == "regression":
        records.append(Record("target_scaling", (), _numbers_of([model.target.mean, model.target.scale])))
    for index, label in enumerate(model.classes):
        records.append(Record("class", (index, *_typed_fields(label, f"class label {index + 1}"))))
    for name, value in info.holdout_metrics.items():
        records.append(Record("holdout_metric", (name, _round15(value))))
    if info.error_bars is not None:
        level, resamples, bar_seed = info.error_bars
        records.append(Record("error_bars", (_round15(level), int(resamples), int(bar_seed))))
        for name, (low, high) in info.metric_intervals.items():
            records.append(Record("holdout_interval", (name, _round15(low), _round15(high))))
    if info.conformal is not None:
        c = info.conformal
        records.append(Record("conformal", (c.score, _round15(c.level), int(c.rows), _round15(c.quantile))))
    if info.group_column is not None:
        records.append(Record("group_column", (info.group_column,)))
        for label, values in info.group_metrics.items():
            records.extend(Record("group_metric", (label, name, _round15(value))) for name, value in values.items())
    for index, member in enumerate(model.members):
        records.append(Record("member", (index, member.stopped_by, member.epochs, member.best_epoch)))
        records.append(Record("curve", (index, "training"), _numbers_of(_sampled_curve(member.training_epochs, member.training_curve))))
        if member.validation_curve:
            records.append(Record("curve", (index, "validation"), _numbers_of(_sampled_curve(member.validation_epochs, member.validation_curve))))
        records.append(Record("weights", (index, len(member.theta)), _numbers_of(member.theta)))
    return records


def _canonical(value: Any) -> str:
    if value is None or (isinstance(value, str) and value == ""):
        return ""
    if isinstance(value, bool):
        return "b:" + ("1" if value else "0")
    if isinstance(value, (int, float, np.integer, np.floating)):
        if not _finite_number(value) and isinstance(value, (int, np.integer)):
            return "n:too large"  # no block holds one (writing refuses it); a forged one must not crash the check
        text = f"{float(value):.15g}"
        return "0" if text == "-0" else text
    return "s:" + str(value)


def _trimmed(fields: tuple[Any, ...]) -> tuple[Any, ...]:
    """Fields without the empty cells at the end, which read back as padding (an empty text value, say)."""
    end = len(fields)
    while end and _blank_padding(fields[end - 1]):
        end -= 1
    return fields[:end]


def _canonical_entries(records: Sequence[Record]) -> list[list[Any]]:
    return [[r.key, [_canonical(f) for f in _trimmed(r.fields)], [_canonical(n) for n in r.numbers]] for r in records]


def _dumped(entries: list[list[Any]]) -> bytes:
    return json.dumps(entries, separators=(",", ":")).encode("utf-8")


def canonical_content(records: Sequence[Record]) -> bytes:
    """The records as the bytes the checksum and a signature cover: a compact JSON list of
    ``[key, [fields], [numbers]]``, each value as `_canonical` writes it (numbers to 15 digits)."""
    return _dumped(_canonical_entries(records))


def checksum(records: Sequence[Record]) -> str:
    """SHA-256 over every key, field and number, in order. It catches accidental damage, not forgery:
    anyone can recompute it after an edit (a signature, `sheetnet.signing`, tells who wrote a block)."""
    return hashlib.sha256(canonical_content(records)).hexdigest()


def _rows_of(record: Record) -> list[list[Any]]:
    if len(record.fields) > WIDTH - 1:
        raise ValueError(f"record {record.key} has too many fields")  # internal invariant
    rows = [[record.key, *record.fields] + [""] * (WIDTH - 1 - len(record.fields))]
    for start in range(0, len(record.numbers), WIDTH - 1):
        chunk = list(record.numbers[start:start + WIDTH - 1])
        rows.append(["", *chunk] + [""] * (WIDTH - 1 - len(chunk)))
    return rows


CELL_TEXT_LIMIT = 32_767  # characters a spreadsheet cell holds; longer texts are cut when the file is saved
WHOLE_LIMIT = 10**15  # whole numbers in numeric cells: beyond 15 digits a spreadsheet does not keep them exactly
LARGEST_STORED = 1.79769313486231e308  # the largest magnitude whose 15-digit rounding is still finite

_SCALE_DOWN = "divide that column by a power of ten (amounts in millions, say) and train again"
_STEADIER = "scale the columns down, or lower the setting 'rate' or raise 'decay', and train again"


def _what_is_stored(record: Record) -> tuple[str, str]:
    """What a record holds, in the user's words, and what to do when it cannot be stored."""
    first = record.fields[0] if record.fields else ""
    network = f"network {int(first) + 1}" if isinstance(first, (int, np.integer)) else "a network"
    return {
        "network": ("the seed or the layer sizes", "use a seed of at most 15 digits"),
        "source": ("the split's holdout share or seed", "use a split seed of at most 15 digits"),
        "input": (f"the scaling of input '{first}'", _SCALE_DOWN),
        "target_scaling": ("the scaling of the target", _SCALE_DOWN.replace("that column", "the target column")),
        "holdout_metric": (f"the holdout metric '{first}'", _SCALE_DOWN.replace("that column", "the target column")),
        "curve": (f"the loss curve of {network}", _STEADIER),
        "weights": (f"the weights of {network}", _STEADIER),
        "member": (f"the training record of {network}", "train again"),
        "conformal": ("the prediction interval's half-width", _SCALE_DOWN.replace("that column", "the target column")),
        "group_metric": (f"a metric of group '{first}'", _SCALE_DOWN.replace("that column", "the target column")),
        "holdout_interval": (f"the error bar of holdout metric '{first}'", _SCALE_DOWN.replace("that column", "the target column")),
    }.get(record.key, (f"the block's '{record.key}' row", "train again"))


def _check_storable(record: Record) -> None:
    """Refuse a record a spreadsheet could not give back exactly, rather than write a block that reads as damaged."""
    why = ""
    for value in (*record.fields, *record.numbers):
        if isinstance(value, str):
            if len(value) > CELL_TEXT_LIMIT:
                why = f"a text of {len(value):,} characters, more than the {CELL_TEXT_LIMIT:,} a cell holds"
        elif isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_)):
            if abs(int(value)) >= WHOLE_LIMIT:
                why = f"the whole number {int(value)}, longer than the 15 digits a spreadsheet keeps exactly"
        elif isinstance(value, (float, np.floating)) and not math.isfinite(float(value)):
            why = (
                "a number that is infinite, not a number, or too large to keep once rounded to the 15 digits "
                f"a spreadsheet keeps (the largest is about {LARGEST_STORED:.15g})"
            )
        if why:
            what, advice = _what_is_stored(record)
            raise ModelError(f"the model cannot be stored in a block: {what} holds {why}; {advice}")


def encode_block(model: Model, info: BlockInfo) -> list[list[Any]]:
    """The model as a block of cells, ``WIDTH`` wide, ending in its checksum row.

    Raises `ModelError` when a value could not come back from a spreadsheet
    exactly (see `_check_storable`): such a block would later read as damaged.
    """
    records = model_records(model, info)
    for record in records:
        _check_storable(record)
    rows = [row for record in records for row in _rows_of(record)]
    rows.append(["checksum", checksum(records)] + [""] * (WIDTH - 2))
    return rows


# --- decoding -----------------------------------------------------------------------------

def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, str) and not value.strip()) or (isinstance(value, float) and math.isnan(value))


def _blank_padding(value: Any) -> bool:
    """An empty cell (a text of spaces is a value, kept as written)."""
    return value is None or (isinstance(value, str) and value == "") or (isinstance(value, float) and math.isnan(value))


def _records_of(grid: list[list[Any]]) -> tuple[list[Record], str | None]:
    records: list[Record] = []
    stored = None
    current: list[Any] | None = None
    numbers: list[float] = []
    for i, row in enumerate(grid):
        key = row[0]
        if _blank(key):
            if current is None:
                raise BlockError("the model block starts with a blank row; select the block from its first cell")
            for value in row[1:]:
                if _blank(value):
                    continue
                if not _finite_number(value):
                    raise BlockError(
                        f"row {i + 1} of the model block holds {_shown(value)} where a finite number belongs; the block was edited: restore it or train again"
                    )
                numbers.append(float(value))
            continue
        if current is not None:
            records.append(Record(current[0], tuple(current[1:]), tuple(numbers)))
        if key == "checksum":
            stored = str(row[1]) if len(row) > 1 else ""
            if any(not _blank(v) for v in row[2:]):
                raise BlockError(f"row {i + 1} of the model block (its checksum row) holds extra cells; the block was edited: restore it or train again")
            current = None
            break
        fields = list(row[1:])
        while fields and _blank_padding(fields[-1]):
            fields.pop()
        current = [str(key), *fields]
        numbers = []
    else:
        if current is not None:
            records.append(Record(current[0], tuple(current[1:]), tuple(numbers)))
    return records, stored


def _shown(value: Any) -> str:
    """A cell's value for a message: texts quoted and cut short, numbers as written."""
    if isinstance(value, str):
        return f"'{value[:40]}'" + ("..." if len(value) > 40 else "")
    if value is None:
        return "blank"
    return str(value)[:40]


def _damaged(what: str) -> BlockError:
    return BlockError(f"the model block's {what}; it is damaged: train the model again")


def _finite_number(value: Any) -> bool:
    """A cell holding a finite number (a whole number too large for a float is not one)."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.integer, np.floating)):
        return False
    try:
        return math.isfinite(float(value))
    except OverflowError:
        return False


def _number(value: Any, what: str) -> float:
    if not _finite_number(value):
        raise _damaged(f"{what} is {_shown(value)}, not a finite number")
    return float(value)


def _whole(value: Any, what: str, low: int = 0, high: float = WHOLE_LIMIT) -> int:
    number = _number(value, what)
    if not number.is_integer() or not low <= number <= high:
        limits = f"from {low:,} to {int(high):,}" if high < WHOLE_LIMIT else f"of {low:,} or more"
        raise _damaged(f"{what} is {_shown(value)}, not a whole number {limits}")
    return int(number)


def _text(value: Any, what: str) -> str:
    if not isinstance(value, str):
        raise _damaged(f"{what} is {_shown(value)}, not a text")
    return value


def _fields(record: Record, count: int) -> tuple[Any, ...]:
    """Exactly ``count`` fields (empty ones at the end were trimmed as padding)."""
    if len(record.fields) > count:
        raise _damaged(f"'{record.key}' row holds {len(record.fields)} cells after its key where it has {count}")
    return record.fields + (None,) * (count - len(record.fields))


def decode_block(cells: Any) -> tuple[Model, BlockInfo]:
    """Read a block back into a model; every failure is a `BlockError` that says what to do.

    A signature row is checked for its shape only (`sheetnet.signing` verifies it), so a block
    with a damaged one is refused at every door rather than read as unsigned."""
    records, version, _ = _checked_records(cells)
    _signature_of(records, version)
    try:
        return _model_of(records, version)
    except (KeyError, IndexError, TypeError, ValueError, ArithmeticError) as error:  # a safety net: the checks above name the usual faults
        raise BlockError(f"the model block is damaged (its rows do not fit together: {type(error).__name__}); train the model again") from None


def _checked_records(cells: Any) -> tuple[list[Record], int, list[list[Any]]]:
    """The records of a block, its format version and the records' canonical entries (computed once: they are
    most of the cost), after the first cell, the version and the checksum."""
    if isinstance(cells, np.ndarray):
        cells = cells.tolist()
    if not isinstance(cells, (list, tuple)) or not cells or not all(isinstance(row, (list, tuple)) for row in cells) or not cells[0]:
        raise BlockError("the model argument is not a model block; pass the range SHEETNET.TRAIN returned (or the model's name)")
    width = max(len(r) for r in cells)
    grid = [list(r) + [None] * (width - len(r)) for r in cells]
    if grid[0][0] != MAGIC:
        raise BlockError(
            f"the model argument is not a sheetnet model block (its first cell is {_shown(grid[0][0])}); pass the whole block SHEETNET.TRAIN returned"
        )
    version: Any = grid[0][1] if width > 1 else None
    if not _finite_number(version) or version != int(version) or version < 1:
        raise BlockError(f"the model block's format version is {_shown(version)}; the block is damaged: train again")
    if int(version) > FORMAT_VERSION:
        raise BlockError(
            f"the model block was written by a newer sheetnet (format {int(version)}; this one reads up to {FORMAT_VERSION}); upgrade sheetnet to use it"
        )
    records, stored = _records_of(grid)
    if stored is None:
        raise BlockError("the model block is incomplete (its checksum row is missing); select the whole block, down to the row that starts with 'checksum'")
    entries = _canonical_entries(records)
    if stored != hashlib.sha256(_dumped(entries)).hexdigest():  # `checksum`, from the entries
        raise BlockError("the model block was changed after training (its checksum does not match); undo the change, or train the model again")
    return records, int(version), entries


# --- the signature row (format 3) -----------------------------------------------------------

SIGNATURE_KEY = "signature"
SIGNATURE_SCHEME = "ed25519"
SIGNATURE_FROM_FORMAT = 3
SIGNED_PREFIX = b"sheetnet signed model block\n"  # keeps a block signature from meaning anything else


@dataclass(frozen=True)
class BlockSignature:
    """What a signature row holds: the key's id (first 16 hex digits of the SHA-256 of the public key),
    the 32-byte Ed25519 public key and the 64-byte signature over `signed_message`."""

    key_id: str
    public_key: bytes
    signature: bytes


def key_id_of(public_key: bytes) -> str:
    """The short name of a public key: the first 16 hex digits of its SHA-256."""
    return hashlib.sha256(public_key).hexdigest()[:16]


def _hex_bytes(value: Any, size: int) -> bytes | None:
    if not isinstance(value, str) or len(value) != 2 * size or value != value.lower():
        return None
    try:
        return bytes.fromhex(value)
    except ValueError:
        return None


_RESIGN = "sign the model again (sheetnet sign), or ask whoever sent the workbook for an intact copy"


def _signature_of(records: list[Record], version: int) -> BlockSignature | None:
    """The block's signature, checked for shape: one row at most, the last before the checksum, in format 3 on."""
    found = [i for i, r in enumerate(records) if r.key == SIGNATURE_KEY]
    if not found:
        return None
    if version < SIGNATURE_FROM_FORMAT:
        raise BlockError(f"the model block is of format {version}, which holds no signature, yet it has a signature row; it was edited: {_RESIGN}")
    if found != [len(records) - 1]:
        raise BlockError(f"the model block's signature row is repeated or not the last row before the checksum; it was edited: {_RESIGN}")
    record = records[-1]
    scheme, key_id, public_text, signature_text = _fields(record, 4)
    if scheme != SIGNATURE_SCHEME:
        raise BlockError(f"the model block is signed by a method this sheetnet does not know ({_shown(scheme)}); upgrade sheetnet, or {_RESIGN}")
    public_key, signature = _hex_bytes(public_text, 32), _hex_bytes(signature_text, 64)
    if public_key is None or signature is None or record.numbers:
        raise BlockError(
            "the model block's signature row is damaged (the public key must be 64 hex digits and the signature 128, in lower case); " + _RESIGN
        )
    if key_id != key_id_of(public_key):
        raise BlockError(f"the model block's signature row names the key {_shown(key_id)}, which is not the id of the key it holds; it was edited: {_RESIGN}")
    return BlockSignature(key_id, public_key, signature)


def signed_message(records: Sequence[Record]) -> bytes:
    """The bytes a signature covers: a fixed prefix, then the canonical content of every record but the signature."""
    return SIGNED_PREFIX + canonical_content([r for r in records if r.key != SIGNATURE_KEY])


def block_signature(cells: Any) -> tuple[bytes, BlockSignature | None]:
    """The message a block's signature covers and its signature (None: unsigned), after the checks
    `decode_block` makes first (first cell, version, checksum, the signature row's shape)."""
    records, version, entries = _checked_records(cells)
    signature = _signature_of(records, version)
    return SIGNED_PREFIX + _dumped([e for e in entries if e[0] != SIGNATURE_KEY]), signature  # `signed_message`, from the entries


def with_signature(cells: Any, signature: BlockSignature) -> list[list[Any]]:
    """The block with ``signature`` as its last row before a new checksum (an older signature row is replaced).
    The signature must cover `block_signature(cells)[0]`; the rows above are kept as they are."""
    records, version, _ = _checked_records(cells)
    if version < SIGNATURE_FROM_FORMAT:
        raise BlockError(
            f"this model was stored by an older sheetnet (block format {version}), which holds no signature; train it again and sign it then"
        )
    _signature_of(records, version)
    unsigned = [r for r in records if r.key != SIGNATURE_KEY]
    if any(len(r.fields) > WIDTH - 1 for r in unsigned):
        raise BlockError(f"the model block is wider than {WIDTH} columns; select the block sheetnet stored (or its name) and sign that")
    signature_record = Record(SIGNATURE_KEY, (SIGNATURE_SCHEME, signature.key_id, signature.public_key.hex(), signature.signature.hex()))
    # laid out as encode_block lays them; a middle field read back from a file as an empty cell stays empty
    rows = [["" if v is None else v for v in row] for record in (*unsigned, signature_record) for row in _rows_of(record)]
    return rows + [["checksum", checksum([*unsigned, signature_record])] + [""] * (WIDTH - 2)]


def _model_of(records: list[Record], version: int) -> tuple[Model, BlockInfo]:
    by_key: dict[str, list[Record]] = {}
    for record in records:
        by_key.setdefault(record.key, []).append(record)

    def one(key: str, count: int) -> tuple[Any, ...]:
        found = by_key.get(key, [])
        if len(found) != 1:
            raise BlockError(f"the model block has {len(found)} '{key}' rows where it needs one; it is damaged: train again")
        return _fields(found[0], count)

    activation, algorithm, seed, depth = one("network", 4)
    if activation not in ACTIVATIONS:
        raise BlockError(f"the model block names an activation {_shown(activation)} this sheetnet does not know; upgrade sheetnet or train again")
    numbers = by_key["network"][0].numbers
    depth = _whole(depth, "number of layers", 2, max(len(numbers), 2))
    sizes = tuple(_whole(v, "layer size", 1) for v in numbers)
    if len(sizes) != depth:
        raise _damaged(f"layer sizes ({len(sizes)}) do not match its number of layers ({depth})")
    target_name, task = one("target", 2)
    settings = _settings_of(by_key.get("setting", []), version)
    given = {
        _text(r.fields[0], "name of an argument"): _typed_value(*_kind_and_text(r), f"the argument {_shown(r.fields[0])}") for r in by_key.get("given", [])
    }
    preparation = _preparation_of(by_key)

    class_rows = sorted(((_whole(r.fields[0], "class index"), r) for r in by_key.get("class", [])), key=lambda pair: pair[0])
    if [index for index, _ in class_rows] != list(range(len(class_rows))):
        raise _damaged("class rows are not numbered 0, 1, 2, ... once each")
    classes = tuple(_class_label(r) for _, r in class_rows)
    if len(set(classes)) != len(classes) or len({type(c) for c in classes}) > 1:
        raise _damaged("class labels repeat or mix kinds")
    if task == "regression":
        if classes:
            raise _damaged("regression model lists classes")
        mean, scale = (_number(v, "target scaling") for v in _exactly(by_key, "target_scaling", 2))
        if not scale > 0:
            raise _damaged("target scale is not positive")
        target = TargetPreparation("regression", mean, scale)
    elif task in ("binary", "multiclass"):
        if (task == "binary") != (len(classes) == 2) or len(classes) < 2:
            raise _damaged(f"{task} model lists {len(classes)} classes")
        target = TargetPreparation(str(task), classes=classes)
    else:
        raise BlockError(f"the model block's task {_shown(task)} is not known to this sheetnet; upgrade sheetnet or train again")
    if preparation.width != sizes[0] or target.outputs != sizes[-1]:
        raise BlockError("the model block's inputs or outputs do not match its layer sizes; it is damaged: train again")

    members = _members_of(by_key, sizes)
    _check_folding(preparation, members, sizes)
    algorithm = _text(algorithm, "algorithm")
    model = Model(preparation, target, sizes, str(activation), members, algorithm, MappingProxyType(settings), _whole(seed, "seed"), version)
    training_rows, holdout_rows = (_whole(v, "row count") for v in one("rows", 2))
    trained_at, written_by, fingerprint, blank_rows = one("trained_at", 1)[0], one("written_by", 1)[0], one("fingerprint", 1)[0], one("blank_rows", 1)[0]
    metrics = {}
    for r in by_key.get("holdout_metric", []):
        name, value = _fields(r, 2)
        metrics[_text(name, "name of a holdout metric")] = _number(value, f"holdout metric {_shown(name)}")
    info = BlockInfo(
        target=_text(target_name, "target name"),
        trained_at=_text(trained_at, "time of training"),
        written_by=_text(written_by, "version that wrote it"),
        fingerprint=_text(fingerprint, "fingerprint"),
        training_rows=training_rows,
        holdout_rows=holdout_rows,
        holdout_metrics=metrics,
        blank_rows=_text(blank_rows, "'blank_rows' row"),
        source=_source_of(by_key.get("source", [])),
        given=MappingProxyType(given),
        conformal=_conformal_of(by_key.get("conformal", [])),
        metric_intervals=MappingProxyType(_metric_intervals_of(by_key.get("holdout_interval", []))),
        error_bars=_error_bars_of(by_key.get("error_bars", [])),
        group_column=_text(one("group_column", 1)[0], "group column") if "group_column" in by_key else None,
        group_metrics=MappingProxyType(_group_metrics_of(by_key.get("group_metric", []))),
    )
    return model, info


def _group_metrics_of(found: list[Record]) -> dict[str, dict[str, float]]:
    groups: dict[str, dict[str, float]] = {}
    for r in found:
        label, name, value = _fields(r, 3)
        what = f"metric {_shown(name)} of group {_shown(label)}"
        groups.setdefault(_text(label, "group label"), {})[_text(name, "name of a group metric")] = _number(value, what)
    return groups


def _conformal_of(found: list[Record]) -> Conformal | None:
    if not found:  # optional: format 1 and 2 blocks, and models trained without holdout rows, have none
        return None
    if len(found) > 1:
        raise _damaged("'conformal' row is repeated")
    score, level, rows, quantile = _fields(found[0], 4)
    if score not in SCORES:
        raise _damaged(f"conformal score {_shown(score)} is not known")
    level = _number(level, "conformal level")
    quantile = _number(quantile, "conformal quantile")
    if not 0.5 <= level < 1 or quantile < 0:
        raise _damaged(f"conformal level {level} or quantile {quantile} is out of range")
    return Conformal(level, _whole(rows, "conformal rows", 1), quantile, str(score))


def _metric_intervals_of(found: list[Record]) -> dict[str, tuple[float, float]]:
    intervals: dict[str, tuple[float, float]] = {}
    for r in found:
        name, low, high = _fields(r, 3)
        what = f"holdout interval {_shown(name)}"
        intervals[_text(name, "name of a holdout interval")] = (_number(low, what), _number(high, what))
    return intervals


def _error_bars_of(found: list[Record]) -> tuple[float, int, int] | None:
    if not found:
        return None
    if len(found) > 1:
        raise _damaged("'error_bars' row is repeated")
    level, resamples, bar_seed = _fields(found[0], 3)
    level = _number(level, "error-bar level")
    if not 0.5 <= level < 1:
        raise _damaged(f"error-bar level {level} is out of range")
    return (level, _whole(resamples, "error-bar resamples", 1), _whole(bar_seed, "error-bar seed"))


def _exactly(by_key: dict[str, list[Record]], key: str, count: int) -> tuple[float, ...]:
    found = by_key.get(key, [])
    if len(found) != 1 or len(found[0].numbers) != count:
        raise _damaged(f"'{key}' row is missing, repeated, or does not hold {count} numbers")
    return found[0].numbers


def _preparation_of(by_key: dict[str, list[Record]]) -> Preparation:
    categories: dict[str, list[str]] = {}
    for r in by_key.get("category", []):
        name, category = _fields(r, 2)
        categories.setdefault(_text(name, "input of a category"), []).append(_text("" if category is None else category, f"a category of {_shown(name)}"))
    inputs: list[NumericInput | CategoryInput] = []
    for r in by_key.get("input", []):
        name, role, count = _fields(r, 3)
        name = _text(name, "name of an input")
        if role == "number":
            if len(r.numbers) != 4:
                raise _damaged(f"scaling of input {_shown(name)} does not hold 4 numbers (mean, scale, low, high)")
            mean, scale, low, high = (_number(v, f"scaling of input {_shown(name)}") for v in r.numbers)
            if not scale > 0:
                raise _damaged(f"scale of input {_shown(name)} is not positive")
            inputs.append(NumericInput(name, mean, scale, low, high))
        elif role == "category":
            found = tuple(categories.get(name, []))
            if len(found) != _whole(count, f"number of categories of {_shown(name)}", 1) or len(set(found)) != len(found):
                raise _damaged(f"categories of {_shown(name)} ({len(found)} listed) do not match its count {_shown(count)} or repeat")
            inputs.append(CategoryInput(name, found))
        else:
            raise _damaged(f"input {_shown(name)} has an unknown role {_shown(role)}")
    if len({spec.name for spec in inputs}) != len(inputs):
        raise _damaged("inputs repeat a name")
    return Preparation(tuple(inputs), named=True)


def _members_of(by_key: dict[str, list[Record]], sizes: tuple[int, ...]) -> tuple[Member, ...]:
    count = parameter_count(sizes)
    weights: dict[int, Record] = {}
    for r in by_key.get("weights", []):
        weights.setdefault(_whole(r.fields[0] if r.fields else None, "network index of a weights row"), r)
    curves: dict[tuple[int, str], tuple[float, ...]] = {}
    for r in by_key.get("curve", []):
        index, kind = _fields(r, 2)
        if kind not in ("training", "validation") or curves.setdefault((_whole(index, "network index of a curve"), kind), r.numbers) is not r.numbers:
            raise _damaged(f"curve row for network {_shown(index)}, {_shown(kind)}, is unknown or repeated")
    rows = sorted(((_whole(r.fields[0] if r.fields else None, "network index"), r) for r in by_key.get("member", [])), key=lambda pair: pair[0])
    if not rows:
        raise BlockError("the model block holds no trained network; it is damaged: train again")
    if [index for index, _ in rows] != list(range(len(rows))) or len(weights) != len(rows):
        raise _damaged("networks are not numbered 1, 2, 3, ... once each, each with one weights row")
    members = []
    for index, r in rows:
        _, stopped_by, epochs, best_epoch = _fields(r, 4)
        epochs = _whole(epochs, f"number of epochs of network {index + 1}", 1)
        best_epoch = _whole(best_epoch, f"kept epoch of network {index + 1}", 1, epochs)
        w = weights.get(index)
        if w is None or len(w.fields) != 2 or w.fields[1] != count or len(w.numbers) != count:
            raise BlockError(f"the model block's weights of network {index + 1} are missing or cut short; select the whole block, or train again")
        theta = np.array(w.numbers, dtype=np.float64)
        theta.setflags(write=False)
        training_epochs, training_curve = _curve_of(curves.get((index, "training"), ()), epochs, f"training curve of network {index + 1}")
        validation_epochs, validation_curve = _curve_of(curves.get((index, "validation"), ()), epochs, f"validation curve of network {index + 1}")
        members.append(
            Member(theta, _text(stopped_by, "stopping rule"), epochs, training_curve, validation_curve, best_epoch, training_epochs, validation_epochs)
        )
    return tuple(members)


def _check_folding(preparation: Preparation, members: tuple[Member, ...], sizes: tuple[int, ...]) -> None:
    """Numeric models fold the input scaling into the first layer; absurd scales would overflow there."""
    if not preparation.all_numeric:
        return
    mean, scale = preparation.numeric_constants()
    with np.errstate(all="ignore"):
        for member in members:
            for w, b in network.fold_input_scaling(network.unpack(member.theta, sizes)[:1], mean, scale):
                if not (np.isfinite(w).all() and np.isfinite(b).all()):
                    raise _damaged("input scaling and first-layer weights overflow together")


def _curve_of(numbers: tuple[float, ...], epochs: int, what: str) -> tuple[tuple[int, ...], tuple[float, ...]]:
    """(epochs, losses) from stored (epoch, loss) pairs: whole epochs from 1 to the member's last, rising."""
    points = np.array(numbers, dtype=np.float64)
    steps = points[0::2]
    if (
        len(points) % 2
        or not np.isfinite(points).all()
        or (steps != np.round(steps)).any()
        or (len(steps) and (steps[0] < 1 or steps[-1] > epochs))
        or (np.diff(steps) <= 0).any()
    ):
        raise _damaged(f"{what} does not hold (epoch, loss) pairs with rising epochs from 1 to {epochs}")
    return tuple(int(e) for e in steps), tuple(float(v) for v in points[1::2])


def _source_of(found: list[Record]) -> tuple[str, float, str, int] | None:
    if not found:  # optional: blocks trained without a bridge that knows the range have none
        return None
    if len(found) > 1:
        raise _damaged("'source' row is repeated")
    address, share, mode, split_seed = _fields(found[0], 4)
    share = _number(share, "holdout share of its source")
    if not 0.0 <= share <= 1.0:
        raise _damaged(f"holdout share of its source is {share}, not a share from 0 to 1")
    return (_text(address, "source address"), share, _text(mode, "split mode of its source"), _whole(split_seed, "split seed of its source"))


def _kind_and_text(record: Record) -> tuple[Any, Any]:
    """Kind and value text of a `setting` or `given` row of format 2 (a blank value was trimmed with the padding)."""
    _, kind, text = _fields(record, 3)
    return kind, text


def _class_label(record: Record) -> Any:
    kind, text = _kind_and_text(record)
    if kind == "none":
        raise BlockError("the model block records a class label that is empty; it is damaged: train again")
    return _typed_value(kind, text, f"class label {record.fields[0]}")


def _settings_of(found: list[Record], version: int) -> dict[str, Any]:
    settings: dict[str, Any] = {}
    for record in found:
        name = _text(_fields(record, 3)[0], "name of a setting")
        if version == 1:
            settings[name] = _format_1_setting(name, _fields(record, 2)[1])
        else:
            settings[name] = _typed_value(*_kind_and_text(record), f"the setting '{name}'")
    threshold = settings.get("threshold", 0.5)  # the one setting prediction reads
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) or not 0.0 <= threshold <= 1.0:
        raise BlockError(f"the model block's setting 'threshold' is {cell_in_words(threshold)}, not a share from 0 to 1; it is damaged: train again")
    return settings


def _format_1_setting(name: str, value: Any) -> Any:
    """Format 1 stored settings as bare cells: the type comes from the setting's declaration where it is known."""
    if value == "none":
        return None
    if value in ("TRUE", "FALSE"):
        return value == "TRUE"
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return value
    number = _number(value, f"setting '{name}'")
    declared = SETTINGS_BY_NAME.get(name)
    if declared is not None and declared.kind is float:
        return number
    if number.is_integer():
        return int(number)
    if declared is not None and declared.kind is int:
        raise BlockError(f"the model block's setting '{name}' is {cell_in_words(value)}, not a whole number; it is damaged: train again")
    return number


def table_fingerprint(columns: Sequence[Sequence[Any]]) -> str:
    """SHA-256 of table columns as cells read them (numbers to 15 significant digits)."""
    digest = hashlib.sha256()
    for column in columns:
        digest.update(b"\x1e")
        for value in column:
            digest.update(_canonical(value.item() if isinstance(value, np.generic) else value).encode("utf-8") + b"\x1f")
    return digest.hexdigest()
