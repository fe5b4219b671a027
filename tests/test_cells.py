"""Reading ranges as tables (sheetnet.cells): column types, blank rows, the header, the fast keys and the fingerprint."""

from __future__ import annotations

import base64
import datetime
import hashlib
import math
import struct
import time

import numpy as np
import pytest

from sheetnet import cells
from sheetnet.block import table_fingerprint
from sheetnet.errors import InputError, SheetnetError, UnknownColumnError

TRICKY_NUMBERS = [
    0.1, -0.0, 0.0, 1.0, -2.5, 1 / 3, 2 / 3, 1e-5, 1e-4, 0.00012345, 1e14, 1e15, 999999999999999.9, 1e16, 123456789012345678.0,
    5e-324, 1.7976931348623157e308, -1.7976931348623157e308, 0.30000000000000004, 1234567.0000000002, 9.9999999999999995e-8,
    float("inf"), float("-inf"), 42, -7, 10**15, 2**53 + 1,
]


def test_number_columns_are_float_arrays_and_text_columns_object_arrays_of_cleaned_cells():
    table = cells.read_sheet_table([
        ["name", "size", 3, "mixed"],
        ["  ann ", 1, 2.5, "x"],
        [None, None, None, None],
        ["bo", None, np.float32(1.5), 7],
        ["", 2.0, "", "  "],
    ])
    assert list(table.columns) == ["name", "size", "3", "mixed"]  # a number as a header reads as the sheet shows it
    assert table.data_rows.tolist() == [0, 2, 3] and table.n_rows == 4  # the blank row is left out, still counted
    assert table.values("size").dtype == np.float64 and np.isnan(table.values("size")[1])
    assert table.values("name").tolist() == ["ann", "bo", None]  # texts stripped, a blank text is a blank
    assert table.values("3").tolist()[:2] == [2.5, 1.5] and table.values("3")[2] is None  # a blank text makes the column cells
    assert table.values("mixed").tolist() == ["x", 7, None]
    frame = table.frame
    assert list(frame.columns) == ["name", "size", "3", "mixed"]
    assert [frame[c].dtype.kind for c in frame.columns] == ["O", "f", "O", "O"]
    assert frame["name"].tolist() == ["ann", "bo", None] and isinstance(frame["name"].iloc[0], str)


def test_a_table_of_numbers_only_is_read_in_one_conversion_with_blank_rows_dropped():
    table = cells.read_sheet_table([["a", "b"], [1, 2.0], [None, None], [3, None], [None, None]])
    assert table.data_rows.tolist() == [0, 2] and table.n_rows == 4
    assert table.values("a").tolist() == [1.0, 3.0] and table.values("b")[0] == 2.0 and np.isnan(table.values("b")[1])
    assert table.filled("b").tolist() == [True, False]
    assert table.frame.shape == (2, 2) and table.frame["a"].dtype == np.float64


def test_an_unknown_column_is_named_with_the_columns_there_are():
    table = cells.read_sheet_table([["a", "b"], [1, 2]])
    with pytest.raises(UnknownColumnError, match="no column named 'c'; its columns are: a, b"):
        table.values("c")
    with pytest.raises(UnknownColumnError, match="no column named 'c'"):
        table.column("c")


def test_a_list_inside_a_cell_is_named_in_the_first_column_that_holds_one():
    body = [[float(i), "text", float(i)] for i in range(60)]
    body[2][1] = {"a": 1}  # column 2, an earlier row
    body[49][0] = [1, 2]  # column 1, a later row: columns are checked in order, so this one is named
    with pytest.raises(InputError, match=r"^row 51, column 1 of the table range holds a list of values"):
        cells.read_sheet_table([["a", "b", "c"], *body])


def test_a_header_100000_columns_wide_is_read_in_linear_time():
    # the names were once checked against a list (quadratic: 40,000 columns took 30 s, 100,000 did not finish in 120 s);
    # read with a set it takes well under a second, so this generous bound only catches the quadratic step coming back
    width = 100_000
    header = [f"c{j}" for j in range(width)]
    start = time.monotonic()
    table = cells.read_sheet_table([header, list(range(width)), [None] * width])
    seconds = time.monotonic() - start
    assert len(table.columns) == width and table.values("c99999").tolist() == [99999.0] and table.n_rows == 2
    assert seconds < 20, f"reading a 100,000-column header took {seconds:.1f} s"
    with pytest.raises(InputError, match="two columns named 'c0'"):
        cells.read_sheet_table([[*header[:-1], "c0"], [0] * width])


def test_the_first_scheme_fingerprint_is_the_blocks_table_fingerprint_of_the_columns_as_read():
    rng = np.random.default_rng(3)
    numbers = [*TRICKY_NUMBERS, *rng.normal(size=40).tolist(), *(rng.normal(size=20) * 1e-9).tolist(), *(rng.normal(size=20) * 1e20).tolist()]
    rows = len(numbers)
    texts = ["a", " b ", None, True, 3, 2.5, 10**400, np.float64(0.25), datetime.date(2026, 12, 2), "", -0.0, np.int64(7)]
    wholes = [0, -0.0, 1, -3, 2**40, 999_999_999_999_999, -999_999_999_999_999, 12.0]  # written through '%d'
    grid = [["n", "with blanks", "cells", "whole"]] + [
        [numbers[i], None if i % 5 == 0 else numbers[(i * 7) % rows], texts[i % len(texts)], wholes[i % len(wholes)]] for i in range(rows)
    ]
    table = cells.read_sheet_table(grid)
    assert table.values("n").dtype == np.float64 and table.values("cells").dtype == object
    names = ["n", "with blanks", "cells", "whole"]
    for used in (np.ones(rows, dtype=bool), np.arange(rows) % 3 != 0):
        expected = table_fingerprint([table.frame.loc[used, name].tolist() for name in names])  # the way blocks have stored it
        assert cells.first_fingerprint(table, names, used) == expected
    every = np.ones(rows, dtype=bool)
    assert cells.first_fingerprint(table, ["cells", "n"], every) != cells.first_fingerprint(table, ["n", "cells"], every)


def test_the_first_scheme_fingerprint_of_a_known_table_stays_the_same():
    table = cells.read_sheet_table([["x", "label"], [1.5, "a"], [-0.0, "b"], [None, None], [1e16, None], [float("nan"), "c"]])
    # the texts block._canonical writes: numbers to 15 digits, -0 as 0, a blank number as nan, a blank cell as nothing
    written = hashlib.sha256(b"\x1e1.5\x1f0\x1f1e+16\x1fnan\x1f\x1es:a\x1fs:b\x1f\x1fs:c\x1f").hexdigest()
    assert cells.first_fingerprint(table, ["x", "label"], np.ones(4, dtype=bool)) == written
    assert table_fingerprint([[1.5, 0.0, 1e16, math.nan], ["a", "b", None, "c"]]) == written


def test_content_key_tells_apart_every_difference_a_cell_can_hold():
    table = [["a", "b"], [1.0, "x"], [2.0, None]]
    key = cells.content_key(table, "b", None)
    assert key == cells.content_key([["a", "b"], [1.0, "x"], [2.0, None]], "b", None)  # same content, other lists
    changed = [["a", "b"], [1.0, "x"], [2.0, ""]]
    assert cells.content_key(changed, "b", None) != key
    assert len({cells.content_key([[1]]), cells.content_key([[1.0]]), cells.content_key([[True]]), cells.content_key([["1"]])}) == 4
    assert cells.content_key(table, "b", "8") != cells.content_key(table, "b", 8)
    # not plain: keyed another way (marshal would write arrays and NumPy numbers as bare bytes, so [1.0] and [4607182418800017408] would meet)
    for strange in ([[datetime.date(2026, 12, 2)]], np.zeros(2), [np.array([1.0])], [[np.float64(1.0)]], [[[1.0]]], [[b"1"]]):
        assert cells.content_key([["a"], [1.0]], strange) is None


def column_form(grid: list[list[object]], numbers: tuple[int, ...] = ()) -> dict[str, object]:
    """``grid`` by columns; the columns in ``numbers`` as base64 doubles (blanks as NaN)."""
    columns: list[object] = []
    for j in range(len(grid[0])):
        column = [row[j] for row in grid[1:]]
        if j in numbers:
            doubles = np.array([np.nan if v is None else v for v in column], dtype="<f8")
            columns.append({"numbers": base64.b64encode(doubles.tobytes()).decode("ascii")})
        else:
            columns.append(column)
    return {"header": list(grid[0]), "columns": columns}


def test_a_range_sent_by_columns_reads_as_the_same_range_sent_by_rows():
    grid = [["size", "kind", "weight"], [1.0, " a ", 2.5], [None, None, None], [3.0, None, None], [4.5, "b", 7.0]]
    by_rows, by_columns = cells.read_sheet_table(grid), cells.read_sheet_table(column_form(grid, numbers=(0, 2)))
    assert list(by_columns.columns) == ["size", "kind", "weight"]
    assert by_columns.data_rows.tolist() == by_rows.data_rows.tolist() == [0, 2, 3] and by_columns.n_rows == 4
    for name in by_rows.columns:
        assert by_columns.values(name).dtype == by_rows.values(name).dtype
        assert by_columns.values(name).tolist() == pytest.approx(by_rows.values(name).tolist(), nan_ok=True)
    every = np.ones(3, dtype=bool)
    assert cells.fingerprint(by_columns, ["size", "kind", "weight"], every) == cells.fingerprint(by_rows, ["size", "kind", "weight"], every)
    assert cells.content_key(column_form(grid, (0,))) == cells.content_key(column_form(grid, (0,))) != cells.content_key(column_form(grid, (2,)))


def test_a_range_sent_by_columns_gets_the_messages_a_range_sent_by_rows_gets():
    bad = [["a", "b"], [1.0, "x"], [2.0, True], [3.0, [1, 2]]]
    with pytest.raises(InputError) as by_rows:
        cells.read_sheet_table(bad)
    with pytest.raises(InputError) as by_columns:
        cells.read_sheet_table(column_form(bad, numbers=(0,)))
    expected = "row 4, column 2 of the table range holds a list of values rather than one value; pass a plain range of cells"
    assert str(by_columns.value) == str(by_rows.value) == expected
    with pytest.raises(InputError, match="two columns named 'a'"):
        cells.read_sheet_table({"header": ["a", "a"], "columns": [[1.0], [2.0]]})
    with pytest.raises(InputError, match="header but no data rows"):
        cells.read_sheet_table({"header": ["a"], "columns": [[None]]})


@pytest.mark.parametrize(
    ("form", "words"),
    [
        ({"header": ["a"], "rows": [[1.0]]}, "not a table by columns"),
        ({"header": ["a", "b"], "columns": [[1.0]]}, "header has 2 names but 1 columns came"),
        ({"header": ["a", "b"], "columns": [[1.0], [1.0, 2.0]]}, "different numbers of cells"),
        ({"header": ["a"], "columns": [{"numbers": "not base64!"}]}, "column 1 of the table came neither as a list of cells nor as numbers"),
        ({"header": ["a"], "columns": [{"numbers": base64.b64encode(b"12345").decode()}]}, "neither as a list of cells nor as numbers"),
        ({"header": ["a"], "columns": [7]}, "neither as a list of cells nor as numbers"),
        ({"header": [f"c{j}" for j in range(16_385)], "columns": [[1.0]] * 16_385}, "16,385 columns, more than the 16,384"),
    ],
)
def test_a_malformed_table_by_columns_is_refused_with_what_to_send(form, words):
    with pytest.raises(SheetnetError, match=words):
        cells.read_sheet_table(form)


def test_the_cell_functions_answer_a_table_by_columns_as_they_answer_it_by_rows():
    from sheetnet import functions

    rng = np.random.default_rng(5)
    grid: list[list[object]] = [["x1", "x2", "shade", "y"]]
    for i in range(80):
        x1, x2 = float(rng.normal()), float(rng.normal())
        grid.append([x1, x2, "dark" if i % 3 else "light", x1 - 2 * x2 + (0.5 if i % 3 else 0.0)])
    grid[7] = [None, None, None, None]  # a blank row: a blank answer
    by_columns = column_form(grid, numbers=(0, 1, 3))
    model = functions.train(grid, "y", "3", "seed=1; epochs=30")
    trained_by_columns = functions.train(by_columns, "y", "3", "seed=1; epochs=30")
    assert functions.predict(trained_by_columns, grid) == functions.predict(model, grid)  # the same network
    assert functions.predict(model, by_columns) == functions.predict(model, grid)
    assert functions.predict(model, by_columns)[7] == [""]
    assert functions.data_unchanged(model, by_columns) and functions.data_unchanged(trained_by_columns, grid)  # the same fingerprint
    grid[3][0] = 9.5
    assert not functions.data_unchanged(model, column_form(grid, numbers=(0, 1, 3)))


def test_number_texts_are_kept_within_their_bound_and_give_the_same_fingerprint(monkeypatch):
    rng = np.random.default_rng(8)
    grid = [["a", "b"]] + [[float(x), float(y)] for x, y in rng.normal(size=(3_000, 2))]
    table = cells.read_sheet_table(grid)
    every = np.ones(3_000, dtype=bool)
    expected = table_fingerprint([table.frame[name].tolist() for name in ("a", "b")])
    cells.forget_number_texts()
    assert cells.first_fingerprint(table, ["a", "b"], every) == expected  # written
    assert cells.first_fingerprint(table, ["a", "b"], every) == expected  # kept
    assert len(cells._kept_texts) == 2 and cells._kept_size[0] == sum(map(len, cells._kept_texts.values()))
    monkeypatch.setattr(cells, "NUMBER_TEXTS_KEPT", cells._kept_size[0] + 10)  # room for these two columns, not a third
    other = cells.read_sheet_table([["c"]] + [[float(x)] for x in rng.normal(size=3_000)])
    assert cells.first_fingerprint(other, ["c"], every) == table_fingerprint([other.frame["c"].tolist()])
    def key(values: np.ndarray) -> bytes:
        return hashlib.sha256(values.tobytes()).digest()

    assert list(cells._kept_texts)[-1] == key(other.values("c")) and key(table.values("a")) not in cells._kept_texts  # the oldest went
    assert cells._kept_size[0] <= cells.NUMBER_TEXTS_KEPT and cells._kept_size[0] == sum(map(len, cells._kept_texts.values()))
    assert cells.first_fingerprint(table, ["a", "b"], every) == expected
    cells.forget_number_texts()
    assert not cells._kept_texts and cells._kept_size[0] == 0


# --- the byte scheme (what new blocks store) ---------------------------------------------------

def reference_fingerprint(columns: list[list[object]]) -> str:
    """The byte scheme written out cell by cell, as `cells.fingerprint_bytes` documents it: the oracle of the fast one."""
    digest = hashlib.sha256()
    for column in columns:
        kinds, numbers, texts = bytearray(), b"", []
        for value in column:
            if value is None or (isinstance(value, float) and math.isnan(value)):
                kinds.append(0)
            elif isinstance(value, (bool, np.bool_)):
                kinds.append(3 if value else 2)
            elif isinstance(value, str):
                kinds.append(4)
                texts.append(value.encode("utf-8"))
            elif isinstance(value, int) and abs(value) >= 2**1024:
                kinds.append(5)  # a whole number too large for a double: its digits
                texts.append(str(value).encode("utf-8"))
            elif isinstance(value, (int, float, np.number)):
                kinds.append(1)
                numbers += struct.pack("<d", 0.0 if value == 0 else float(value))
            else:
                kinds.append(6)
                texts.append(str(value).encode("utf-8"))
        lengths = b"".join(struct.pack("<Q", len(t)) for t in texts)
        digest.update(b"\x1e" + struct.pack("<Q", len(column)) + bytes(kinds) + numbers + lengths + b"".join(texts))
    return "sha256v2:" + digest.hexdigest()


def test_the_fingerprint_is_the_byte_scheme_of_the_columns_as_read():
    rng = np.random.default_rng(3)
    numbers = [*TRICKY_NUMBERS, *rng.normal(size=40).tolist(), *(rng.normal(size=20) * 1e20).tolist()]
    rows = len(numbers)
    texts = ["a", " b ", None, True, False, 3, 2.5, 10**400, np.float64(0.25), datetime.date(2026, 12, 2), "", -0.0, np.int64(7), "é\x1e"]
    grid = [["n", "with blanks", "cells"]] + [
        [numbers[i], None if i % 5 == 0 else numbers[(i * 7) % rows], texts[i % len(texts)]] for i in range(rows)
    ]
    table = cells.read_sheet_table(grid)
    assert table.values("n").dtype == np.float64 and table.values("cells").dtype == object
    names = ["n", "with blanks", "cells"]
    for used in (np.ones(rows, dtype=bool), np.arange(rows) % 3 != 0):
        expected = reference_fingerprint([table.frame.loc[used, name].tolist() for name in names])
        assert cells.fingerprint(table, names, used) == expected
        assert cells.fingerprint_matches(table, names, used, expected)


def test_the_fingerprint_of_a_known_table_stays_the_same():
    table = cells.read_sheet_table([["x", "label"], [1.5, "a"], [-0.0, "b"], [None, None], [1e16, None], [float("nan"), "cd"]])
    # the bytes written out by hand: per column a mark, the cell count, a kind per cell (0 blank, 1 number, 4 text),
    # the numbers as little-endian doubles (-0 as 0), then each text's byte length and its UTF-8
    x = b"\x1e" + struct.pack("<Q", 4) + bytes([1, 1, 1, 0]) + struct.pack("<3d", 1.5, 0.0, 1e16)
    label = b"\x1e" + struct.pack("<Q", 4) + bytes([4, 4, 0, 4]) + struct.pack("<3Q", 1, 1, 2) + b"abcd"
    expected = "sha256v2:" + hashlib.sha256(x + label).hexdigest()
    assert cells.fingerprint(table, ["x", "label"], np.ones(4, dtype=bool)) == expected
    assert expected == "sha256v2:" + hashlib.sha256(bytes.fromhex(x.hex() + label.hex())).hexdigest()


def _fingerprint_of(grid: list[list[object]]) -> str:
    table = cells.read_sheet_table(grid)
    return cells.fingerprint(table, list(table.columns), np.ones(len(table.data_rows), dtype=bool))


def test_the_fingerprint_changes_with_every_change_of_a_cell():
    rng = np.random.default_rng(11)
    grid: list[list[object]] = [["a", "b", "kind"]] + [[float(x), float(y), f"k{i % 3}"] for i, (x, y) in enumerate(rng.normal(size=(50, 2)))]
    seen = _fingerprint_of(grid)
    assert seen == _fingerprint_of([list(row) for row in grid])  # the same cells in other lists: the same fingerprint

    def changed(edit) -> str:
        other = [list(row) for row in grid]
        edit(other)
        return _fingerprint_of(other)

    assert changed(lambda g: g[7].__setitem__(0, np.nextafter(g[7][0], np.inf))) != seen  # the last bit of one number
    assert changed(lambda g: g.__setitem__(slice(3, 5), [g[4], g[3]])) != seen  # two rows swapped
    assert changed(lambda g: g[9].__setitem__(2, "K1")) != seen  # a text changed (its case)
    assert changed(lambda g: g[9].__setitem__(2, "k1 x")) != seen
    assert changed(lambda g: g[12].__setitem__(1, None)) != seen  # a number cleared
    assert changed(lambda g: [row.__setitem__(slice(0, 2), row[1::-1]) for row in g[1:]]) != seen  # two columns' values swapped
    # texts cannot run into each other: "ab", "" and "a", "b" differ
    assert _fingerprint_of([["t"], ["ab"], [None], ["x"]]) != _fingerprint_of([["t"], ["a"], ["b"], ["x"]])
    # a number, its text and TRUE differ; 1 and 1.0 are the same number
    assert len({_fingerprint_of([["v", "w"], [1.0, "z"]]), _fingerprint_of([["v", "w"], ["1", "z"]]), _fingerprint_of([["v", "w"], [True, "z"]])}) == 3
    assert _fingerprint_of([["v", "w"], [1, "z"]]) == _fingerprint_of([["v", "w"], [1.0, "z"]])


def test_the_fingerprint_reads_minus_zero_as_zero_and_every_blank_as_a_blank():
    # decided: -0.0 and 0.0 are the same cell (a sheet shows both as 0, and they compare equal)
    assert _fingerprint_of([["v"], [-0.0], [2.0]]) == _fingerprint_of([["v"], [0.0], [2.0]])
    assert _fingerprint_of([["v", "t"], [-0.0, "a"]]) == _fingerprint_of([["v", "t"], [0, "a"]])
    # an empty cell, an empty text and NaN are the same blank, in a column of numbers and in one of texts
    blanks = [_fingerprint_of([["v", "t"], [1.0, "a"], [blank, "b"]]) for blank in (None, "", "  ", float("nan"))]
    assert len(set(blanks)) == 1
    assert len({_fingerprint_of([["t", "v"], ["a", 1.0], [blank, 2.0]]) for blank in (None, "", float("nan"))}) == 1


def test_a_block_keeps_its_scheme_an_old_fingerprint_is_compared_in_the_old_scheme():
    table = cells.read_sheet_table([["x", "label"], [1.5, "a"], [2.0, "b"]])
    every = np.ones(2, dtype=bool)
    new, old = cells.fingerprint(table, ["x", "label"], every), cells.first_fingerprint(table, ["x", "label"], every)
    assert new.startswith(cells.FINGERPRINT_SCHEME) and len(old) == 64 and new[len(cells.FINGERPRINT_SCHEME):] != old
    assert cells.fingerprint_matches(table, ["x", "label"], every, new) and cells.fingerprint_matches(table, ["x", "label"], every, old)
    other = cells.read_sheet_table([["x", "label"], [1.5, "a"], [2.5, "b"]])
    assert not cells.fingerprint_matches(other, ["x", "label"], every, new) and not cells.fingerprint_matches(other, ["x", "label"], every, old)
    for stored in ("not recorded", "", old.upper(), "sha256v2:" + old[:-1]):
        assert not cells.fingerprint_matches(table, ["x", "label"], every, stored)


def test_about_compares_a_block_with_a_first_scheme_fingerprint_in_that_scheme():
    import dataclasses

    from sheetnet import functions
    from sheetnet.block import decode_block, encode_block

    rng = np.random.default_rng(4)
    grid: list[list[object]] = [["x", "shade", "y"]] + [[float(x), "dark" if i % 2 else "light", float(2 * x)] for i, x in enumerate(rng.normal(size=40))]
    block = functions.train(grid, "y", "2", "seed=0; epochs=20")
    model, info = decode_block(block)
    assert info.fingerprint.startswith("sha256v2:")  # new blocks store the byte scheme
    table = cells.read_sheet_table(grid)
    first = cells.first_fingerprint(table, ["x", "shade", "y"], np.ones(40, dtype=bool))
    old_block = encode_block(model, dataclasses.replace(info, fingerprint=first))  # as a block written before the byte scheme
    assert decode_block(old_block)[1].fingerprint == first

    def since_training(model_block: list[list[object]], cells_now: list[list[object]]) -> str:
        return dict(map(tuple, functions.about(model_block, cells_now)))["data since training"]

    edited = [list(row) for row in grid]
    edited[5][0] = edited[5][0] + 0.5
    retexted = [list(row) for row in grid]
    retexted[8][1] = "pale"
    for stored in (block, old_block):
        assert since_training(stored, grid) == "unchanged"
        assert since_training(stored, [list(row) for row in grid]) == "unchanged"
        assert since_training(stored, edited).startswith("changed")
        assert since_training(stored, retexted).startswith("changed")
        assert dict(map(tuple, functions.score(stored, grid)))["rows scored"] == functions.ROWS_SCORED_TRAINING
        assert dict(map(tuple, functions.score(stored, edited)))["rows scored"] == functions.ROWS_SCORED_UNSPLIT


@pytest.mark.parametrize(
    "odd",
    [
        True, False, np.bool_(True), np.bool_(False), "1.5", "x", None, float("nan"), 10**20, 2**63,
        np.float32(1.0), np.int64(1), 0, 1, -0.0, datetime.date(2026, 1, 1),
    ],
)
def test_a_range_of_numbers_with_one_other_cell_reads_as_each_column_read_alone(odd):
    # the fast path reads a range of numbers in one C pass; one other cell in the middle must still make its column
    # read exactly as the column alone reads (TRUE stays TRUE, a number as text stays text), and the table's matrix
    # is kept only when every column is numbers
    rng = np.random.default_rng(2)
    grid: list[list[object]] = [["a", "b", "c"]] + [[float(x), int(k), float(y)] for k, (x, y) in enumerate(rng.normal(size=(30, 2)))]
    grid[15][1] = odd
    table = cells.read_sheet_table(grid)
    for j, name in enumerate(["a", "b", "c"]):
        alone = cells._typed_column([row[j] for row in grid[1:]], grid, "table")
        read = table.values(name)
        assert read.dtype == alone.dtype, name
        assert [type(v) for v in read.tolist()] == [type(v) for v in alone.tolist()]
        assert read.tolist() == pytest.approx(alone.tolist(), nan_ok=True) if read.dtype.kind == "f" else read.tolist() == alone.tolist()
    assert (table.numbers is not None) == all(table.values(n).dtype.kind == "f" for n in "abc")
    if table.numbers is not None:
        assert np.array_equal(table.number_matrix(["c", "a"], np.ones(30, dtype=bool)), np.column_stack([table.values("c"), table.values("a")]), equal_nan=True)


def test_a_table_of_numbers_sent_by_columns_reads_as_by_rows_and_keeps_its_matrix():
    grid: list[list[object]] = [["a", "b"], [1.0, -0.5], [None, None], [3.0, None], [2.5, 7.0]]
    by_rows, by_columns = cells.read_sheet_table(grid), cells.read_sheet_table(column_form(grid, numbers=(0, 1)))
    assert by_columns.data_rows.tolist() == by_rows.data_rows.tolist() == [0, 2, 3]
    for table in (by_rows, by_columns):
        assert table.numbers is not None and table.numbers.shape == (3, 2)
        assert np.array_equal(table.number_matrix(["b", "a"], np.ones(3, dtype=bool)), [[-0.5, 1.0], [np.nan, 3.0], [7.0, 2.5]], equal_nan=True)
        assert np.array_equal(table.number_matrix(["a"], np.array([True, False, True])), [[1.0], [2.5]])
    mixed = cells.read_sheet_table(column_form([["a", "t"], [1.0, "x"], [2.0, "y"]], numbers=(0,)))
    assert mixed.numbers is None and mixed.values("a").flags.writeable  # a column decoded from base64 is an array of its own
