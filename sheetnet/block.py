"""The model block: a trained model as a plain 2-D block of numbers and short texts.

`encode_block` and `decode_block` are a pure pair. The block is what
SHEETNET.TRAIN returns and what the hidden model sheet stores; DEVELOPERS.md
documents the layout. Decoding reads numbers and texts only (nothing is
evaluated or imported), checks the format version and a SHA-256 checksum
over the whole content, and checks that the parts fit together, so a
corrupted, truncated, edited or future-version block gets a clear
`BlockError` instead of a wrong number.

Layout: every row is ``[key, field, field, ...]`` padded to `WIDTH` cells. A
row with a key starts a record; the rows below it with a blank key carry
that record's numbers (up to ``WIDTH - 1`` per row). Numbers are stored
rounded to 15 significant digits, which every spreadsheet keeps exactly.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Mapping, Sequence

import numpy as np

from .errors import ModelError
from .model import FORMAT_VERSION, Member, Model
from .network import ACTIVATIONS, parameter_count
from .preparation import CategoryInput, NumericInput, Preparation, TargetPreparation
from .settings import SETTINGS_BY_NAME

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
        return ("int", str(int(value)))
    if isinstance(value, (float, np.floating)):
        if not math.isfinite(float(value)):
            raise ModelError(f"the model cannot be stored: {what} is {float(value)!r}, not a finite number; give a finite number and train again")
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
        raise BlockError(f"the model block records {what} with a kind {kind!r} this sheetnet does not know; it is damaged: train again")
    raise BlockError(f"the model block records {what} as '{text[:40]}', which is not a valid {kind}; it is damaged: train again")


def _sampled_curve(curve: Sequence[float]) -> list[float]:
    """Pairs (epoch, loss) flattened, at most CURVE_POINTS of them, always with the last epoch."""
    n = len(curve)
    if n == 0:
        return []
    epochs = np.unique(np.linspace(1, n, min(n, CURVE_POINTS)).round().astype(int))
    return [v for e in epochs for v in (float(e), float(curve[e - 1]))]


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
    for index, member in enumerate(model.members):
        records.append(Record("member", (index, member.stopped_by, member.epochs, member.best_epoch)))
        records.append(Record("curve", (index, "training"), _numbers_of(_sampled_curve(member.training_curve))))
        if member.validation_curve:
            records.append(Record("curve", (index, "validation"), _numbers_of(_sampled_curve(member.validation_curve))))
        records.append(Record("weights", (index, len(member.theta)), _numbers_of(member.theta)))
    return records


def _canonical(value: Any) -> str:
    if value is None or (isinstance(value, str) and value == ""):
        return ""
    if isinstance(value, bool):
        return "b:" + ("1" if value else "0")
    if isinstance(value, (int, float, np.integer, np.floating)):
        text = f"{float(value):.15g}"
        return "0" if text == "-0" else text
    return "s:" + str(value)


def _trimmed(fields: tuple[Any, ...]) -> tuple[Any, ...]:
    """Fields without the empty cells at the end, which read back as padding (an empty text value, say)."""
    end = len(fields)
    while end and _blank_padding(fields[end - 1]):
        end -= 1
    return fields[:end]


def checksum(records: Sequence[Record]) -> str:
    """SHA-256 over every key, field and number, in order."""
    canonical = [[r.key, [_canonical(f) for f in _trimmed(r.fields)], [_canonical(n) for n in r.numbers]] for r in records]
    return hashlib.sha256(json.dumps(canonical, separators=(",", ":")).encode("utf-8")).hexdigest()


def _rows_of(record: Record) -> list[list[Any]]:
    if len(record.fields) > WIDTH - 1:
        raise ValueError(f"record {record.key} has too many fields")  # internal invariant
    rows = [[record.key, *record.fields] + [""] * (WIDTH - 1 - len(record.fields))]
    for start in range(0, len(record.numbers), WIDTH - 1):
        chunk = list(record.numbers[start:start + WIDTH - 1])
        rows.append(["", *chunk] + [""] * (WIDTH - 1 - len(chunk)))
    return rows


def encode_block(model: Model, info: BlockInfo) -> list[list[Any]]:
    """The model as a block of cells, ``WIDTH`` wide, ending in its checksum row."""
    records = model_records(model, info)
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
                if isinstance(value, bool) or not isinstance(value, (int, float)):
                    raise BlockError(f"row {i + 1} of the model block holds {value!r} where a number belongs; the block was edited: restore it or train again")
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


def _number(value: Any, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(float(value)):
        raise BlockError(f"the model block's {what} is {value!r}, not a number; the block is damaged: train again")
    return float(value)


def decode_block(cells: Any) -> tuple[Model, BlockInfo]:
    """Read a block back into a model; every failure is a `BlockError` that says what to do."""
    if isinstance(cells, np.ndarray):
        cells = cells.tolist()
    if not isinstance(cells, (list, tuple)) or not cells or not isinstance(cells[0], (list, tuple)):
        raise BlockError("the model argument is not a model block; pass the range SHEETNET.TRAIN returned (or the model's name)")
    width = max(len(r) for r in cells)
    grid = [list(r) + [None] * (width - len(r)) for r in cells]
    if grid[0][0] != MAGIC:
        raise BlockError(f"the model argument is not a sheetnet model block (its first cell is {grid[0][0]!r}); pass the whole block SHEETNET.TRAIN returned")
    version = grid[0][1] if width > 1 else None
    if isinstance(version, bool) or not isinstance(version, (int, float)) or not math.isfinite(version) or version != int(version) or version < 1:
        raise BlockError(f"the model block's format version is {version!r}; the block is damaged: train again")
    if int(version) > FORMAT_VERSION:
        raise BlockError(
            f"the model block was written by a newer sheetnet (format {int(version)}; this one reads up to {FORMAT_VERSION}); upgrade sheetnet to use it"
        )
    records, stored = _records_of(grid)
    if stored is None:
        raise BlockError("the model block is incomplete (its checksum row is missing); select the whole block, down to the row that starts with 'checksum'")
    if stored != checksum(records):
        raise BlockError("the model block was changed after training (its checksum does not match); undo the change, or train the model again")
    try:
        return _model_of(records, int(version))
    except (KeyError, IndexError, TypeError, ValueError) as error:
        raise BlockError(f"the model block is damaged ({error}); train the model again") from None


def _model_of(records: list[Record], version: int) -> tuple[Model, BlockInfo]:
    by_key: dict[str, list[Record]] = {}
    for record in records:
        by_key.setdefault(record.key, []).append(record)

    def one(key: str) -> Record:
        found = by_key.get(key, [])
        if len(found) != 1:
            raise BlockError(f"the model block has {len(found)} '{key}' rows where it needs one; it is damaged: train again")
        return found[0]

    activation, algorithm, seed, depth = one("network").fields
    if activation not in ACTIVATIONS:
        raise BlockError(f"the model block names an activation {activation!r} this sheetnet does not know; upgrade sheetnet or train again")
    sizes = tuple(int(v) for v in one("network").numbers)
    if len(sizes) != int(depth) or len(sizes) < 2 or min(sizes) < 1:
        raise BlockError("the model block's layer sizes are inconsistent; it is damaged: train again")
    target_name, task = one("target").fields
    settings = _settings_of(by_key.get("setting", []), version)
    given = {str(r.fields[0]): _typed_value(*_kind_and_text(r), f"the argument '{r.fields[0]}'") for r in by_key.get("given", [])}

    categories: dict[str, list[str]] = {}
    for r in by_key.get("category", []):
        categories.setdefault(str(r.fields[0]), []).append(str(r.fields[1]))
    inputs: list[NumericInput | CategoryInput] = []
    for r in by_key.get("input", []):
        name, role = str(r.fields[0]), r.fields[1]
        if role == "number":
            mean, scale, low, high = (_number(v, f"scaling of input '{name}'") for v in r.numbers)
            if not scale > 0:
                raise BlockError(f"the model block's scale of input '{name}' is not positive; it is damaged: train again")
            inputs.append(NumericInput(name, mean, scale, low, high))
        elif role == "category":
            found = tuple(categories.get(name, []))
            if len(found) != int(r.fields[2]):
                raise BlockError(f"the model block lists {len(found)} categories of '{name}' but records {r.fields[2]}; it is damaged: train again")
            inputs.append(CategoryInput(name, found))
        else:
            raise BlockError(f"the model block's input '{name}' has an unknown role {role!r}; it is damaged: train again")
    preparation = Preparation(tuple(inputs), named=True)

    classes = tuple(_class_label(r) for r in sorted(by_key.get("class", []), key=lambda r: int(r.fields[0])))
    if task == "regression":
        mean, scale = (_number(v, "target scaling") for v in one("target_scaling").numbers)
        target = TargetPreparation("regression", mean, scale)
    elif task in ("binary", "multiclass"):
        target = TargetPreparation(str(task), classes=classes)
    else:
        raise BlockError(f"the model block's task {task!r} is not known to this sheetnet; upgrade sheetnet or train again")
    if preparation.width != sizes[0] or target.outputs != sizes[-1]:
        raise BlockError("the model block's inputs or outputs do not match its layer sizes; it is damaged: train again")

    curves = {(int(r.fields[0]), str(r.fields[1])): r.numbers for r in by_key.get("curve", [])}
    weights = {int(r.fields[0]): r for r in by_key.get("weights", [])}
    members = []
    for r in sorted(by_key.get("member", []), key=lambda r: int(r.fields[0])):
        index, stopped_by, epochs, best_epoch = int(r.fields[0]), str(r.fields[1]), int(r.fields[2]), int(r.fields[3])
        w = weights.get(index)
        if w is None or int(w.fields[1]) != parameter_count(sizes) or len(w.numbers) != parameter_count(sizes):
            raise BlockError(f"the model block's weights of network {index + 1} are missing or cut short; select the whole block, or train again")
        theta = np.array(w.numbers, dtype=np.float64)
        if not np.isfinite(theta).all():
            raise BlockError("the model block holds a weight that is not a finite number; it is damaged: train again")
        theta.setflags(write=False)
        training_epochs, training_curve = _curve_of(curves.get((index, "training"), ()), epochs, f"training curve of network {index + 1}")
        validation_epochs, validation_curve = _curve_of(curves.get((index, "validation"), ()), epochs, f"validation curve of network {index + 1}")
        members.append(Member(theta, stopped_by, epochs, training_curve, validation_curve, best_epoch, training_epochs, validation_epochs))
    if not members:
        raise BlockError("the model block holds no trained network; it is damaged: train again")

    model = Model(preparation, target, sizes, str(activation), tuple(members), str(algorithm), MappingProxyType(settings), int(seed), version)
    training_rows, holdout_rows = (int(v) for v in one("rows").fields)
    info = BlockInfo(
        target=str(target_name),
        trained_at=str(one("trained_at").fields[0]),
        written_by=str(one("written_by").fields[0]),
        fingerprint=str(one("fingerprint").fields[0]),
        training_rows=training_rows,
        holdout_rows=holdout_rows,
        holdout_metrics={str(r.fields[0]): float(r.fields[1]) for r in by_key.get("holdout_metric", [])},
        blank_rows=str(one("blank_rows").fields[0]),
        source=_source_of(by_key.get("source", [])),
        given=MappingProxyType(given),
    )
    return model, info


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
        raise BlockError(f"the model block's {what} does not hold (epoch, loss) pairs with rising epochs from 1 to {epochs}; it is damaged: train again")
    return tuple(int(e) for e in steps), tuple(float(v) for v in points[1::2])


def _source_of(found: list[Record]) -> tuple[str, float, str, int] | None:
    if not found:  # optional: blocks trained without a bridge that knows the range have none
        return None
    address, share, mode, split_seed = found[0].fields
    return (str(address), float(share), str(mode), int(split_seed))


def _kind_and_text(record: Record) -> tuple[Any, Any]:
    """Kind and value text of a `setting` or `given` row of format 2 (a blank value was trimmed with the padding)."""
    return record.fields[1], record.fields[2] if len(record.fields) > 2 else None


def _class_label(record: Record) -> Any:
    kind, text = record.fields[1], record.fields[2] if len(record.fields) > 2 else None
    if kind == "none":
        raise BlockError("the model block records a class label that is empty; it is damaged: train again")
    return _typed_value(kind, text, f"class label {record.fields[0]}")


def _settings_of(found: list[Record], version: int) -> dict[str, Any]:
    settings: dict[str, Any] = {}
    for record in found:
        name = str(record.fields[0])
        if version == 1:
            settings[name] = _format_1_setting(name, record.fields[1])
        else:
            settings[name] = _typed_value(*_kind_and_text(record), f"the setting '{name}'")
    threshold = settings.get("threshold", 0.5)  # the one setting prediction reads
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) or not 0.0 <= threshold <= 1.0:
        raise BlockError(f"the model block's setting 'threshold' is {threshold!r}, not a share from 0 to 1; it is damaged: train again")
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
        raise BlockError(f"the model block's setting '{name}' is {value!r}, not a whole number; it is damaged: train again")
    return number


def table_fingerprint(columns: Sequence[Sequence[Any]]) -> str:
    """SHA-256 of table columns as cells read them (numbers to 15 significant digits)."""
    digest = hashlib.sha256()
    for column in columns:
        digest.update(b"\x1e")
        for value in column:
            digest.update(_canonical(value.item() if isinstance(value, np.generic) else value).encode("utf-8") + b"\x1f")
    return digest.hexdigest()
