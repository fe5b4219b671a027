"""Signed model blocks: forgeries found, signatures kept through files and doors, key files, trust, the commands."""

import functools
import json
import os
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
import sheetnet_demo
from hypothesis import given, settings
from hypothesis import strategies as st

import sheetnet
from sheetnet import block, cli, functions, keyring, service
from sheetnet.block import BlockError, BlockInfo, decode_block, encode_block
from sheetnet.placements import placements_from_json
from sheetnet.sheet_writer import apply_to_workbook
from sheetnet.signing import (
    SigningKeyError,
    check_signature,
    key_file_text,
    make_key,
    public_key_file_text,
    read_key_text,
    sign_block,
)
from sheetnet.workbook import open_book, read_model

INFO = BlockInfo("output", "2026-01-01T00:00:00Z", "sheetnet test", "f" * 64, 60, 0, {"rmse": 0.25})
DATA = Path(__file__).parent / "data"


@functools.lru_cache(maxsize=None)
def _model():
    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"size": rng.normal(10, 2, 60), "kind": rng.choice(["red", "blue"], 60)})
    y = frame["size"] * 0.5 + (frame["kind"] == "red") + rng.normal(0, 0.1, 60)
    return frame, sheetnet.fit(frame, y, hidden=(3,), seed=1, workers=1, epochs=30)


def _block():
    return encode_block(_model()[1], INFO)


ALICE = make_key("alice")
MALLORY = make_key("mallory")


def _resealed(cells):
    """The checksum computed again after an edit, as the public format describes it (what a forger does)."""
    records, _ = block._records_of([list(r) for r in cells[:-1]] + [["checksum", ""] + [""] * (block.WIDTH - 2)])
    return [list(r) for r in cells[:-1]] + [["checksum", block.checksum(records)] + [""] * (block.WIDTH - 2)]


def _row_of(cells, key):
    return next(i for i, r in enumerate(cells) if r[0] == key)


# --- signing and verifying ------------------------------------------------------------------

def test_a_signed_block_is_trusted_with_its_key_and_unknown_without():
    signed = sign_block(_block(), ALICE)
    assert signed[-2][:3] == ["signature", "ed25519", ALICE.key_id]
    assert signed[-1][0] == "checksum" and len(signed) == len(_block()) + 1
    assert check_signature(signed, [MALLORY.public_key(), ALICE.public_key()]).state == "trusted"
    found = check_signature(signed, [ALICE.public_key()])
    assert (found.trusted_as, found.key_id) == ("alice", ALICE.key_id)
    assert found.in_words() == f"signed by the trusted key 'alice' ({ALICE.key_id})"
    unknown = check_signature(signed, [MALLORY.public_key()])
    assert unknown.state == "unknown" and ALICE.key_id in unknown.in_words() and "not among your trusted keys" in unknown.in_words()
    assert check_signature(_block(), [ALICE.public_key()]).state == "unsigned"
    assert "accidental damage, not deliberate edits" in check_signature(_block(), []).in_words()


def test_signing_keeps_the_model_and_signing_again_is_stable():
    frame, model = _model()
    signed = sign_block(_block(), ALICE)
    decoded, info = decode_block(signed)
    assert info == INFO
    np.testing.assert_array_equal(decoded.predict(frame), decode_block(_block())[0].predict(frame))
    assert sign_block(signed, ALICE) == signed  # Ed25519 signatures are deterministic (RFC 8032): nothing changes
    by_mallory = sign_block(signed, MALLORY)  # a second signature replaces the first, never piles up
    assert [r[0] for r in by_mallory].count("signature") == 1
    assert check_signature(by_mallory, [ALICE.public_key()]).state == "unknown"


def test_a_forged_block_with_edited_weights_is_wrongly_signed_or_unsigned():
    frame, _ = _model()
    signed = sign_block(_block(), ALICE)
    forged = [list(r) for r in signed]
    weights = _row_of(forged, "weights")
    forged[weights + 1][1] = forged[weights + 1][1] + 5.0  # a first-layer weight
    metric = _row_of(forged, "holdout_metric")
    forged[metric][2] = 0.0001  # and a flattering holdout RMSE
    forged = _resealed(forged)
    decoded, info = decode_block(forged)  # the checksum passes: it detects accidents, not forgery
    assert info.holdout_metrics["rmse"] == 0.0001
    assert not np.allclose(decoded.predict(frame), decode_block(_block())[0].predict(frame))
    wrong = check_signature(forged, [ALICE.public_key()])
    assert wrong.state == "wrong" and wrong.key_id == ALICE.key_id
    assert wrong.in_words().startswith("wrongly signed: the block was changed after the key")
    # dropping the signature row and resealing leaves an unsigned block
    stripped = _resealed([r for r in forged if r[0] != "signature"])
    assert check_signature(stripped, [ALICE.public_key()]).state == "unsigned"
    # signing the forgery with another key makes it signed by a key the reader does not trust
    assert check_signature(sign_block(stripped, MALLORY), [ALICE.public_key()]).state == "unknown"
    # and nobody signs over a signature that no longer fits: that would vouch for the edit
    with pytest.raises(BlockError, match=f"changed after the key {ALICE.key_id} signed it, so signing it again would vouch"):
        sign_block(forged, ALICE)


def test_no_single_cell_edit_of_a_signed_block_stays_trusted_even_resealed():
    signed = sign_block(_block(), ALICE)
    trusted = [ALICE.public_key()]
    seen = {"wrong": 0, "refused": 0}
    for i, row in enumerate(signed[:-1]):
        for j, value in enumerate(row):
            edited = [list(r) for r in signed]
            edited[i][j] = (value + "x" if value else 0.5) if isinstance(value, str) else value * 1.001 + 1e-9
            try:
                state = check_signature(_resealed(edited), trusted).state
            except BlockError:
                seen["refused"] += 1
                continue
            renamed = (i, j) == (len(signed) - 2, 0)  # 'signature' renamed: a row this sheetnet ignores, so unsigned
            assert state == ("unsigned" if renamed else "wrong"), (i, j, value)
            seen["wrong"] += 1
    assert seen["wrong"] > 300 and seen["refused"] > 0


@pytest.mark.parametrize(
    "position, value, message",
    [
        (1, "rsa", "signed by a method this sheetnet does not know \\('rsa'\\)"),
        (2, "0" * 16, "names the key '0000000000000000', which is not the id of the key it holds"),
        (3, "zz" * 32, "signature row is damaged \\(the public key must be 64 hex digits"),
        (4, "AB" * 64, "the signature 128, in lower case"),
        (4, "__import__('os').system('echo hacked')", "signature row is damaged"),
        (4, 12345.0, "signature row is damaged"),
    ],
)
def test_a_tampered_signature_row_gets_a_message_at_every_door(position, value, message):
    signed = [list(r) for r in sign_block(_block(), ALICE)]
    row = _row_of(signed, "signature")
    signed[row][position] = value
    with pytest.raises(BlockError, match="checksum does not match"):  # an accident (or a careless forger): the checksum
        check_signature(signed, [])
    resealed = _resealed(signed)
    for read in (decode_block, lambda cells: check_signature(cells, [ALICE.public_key()])):
        with pytest.raises(BlockError, match=message):
            read(resealed)
    answer = functions.predict(resealed, _model_table())  # the cell functions answer with one message cell
    assert len(answer) == 1 and answer[0][0].startswith("#SHEETNET! the model block") and "Traceback" not in answer[0][0]


def test_a_signature_row_misplaced_or_in_an_older_format_is_refused():
    signed = [list(r) for r in sign_block(_block(), ALICE)]
    row = _row_of(signed, "signature")
    moved = _resealed(signed[:1] + [signed[row]] + signed[1:row] + signed[row + 1:])
    with pytest.raises(BlockError, match="signature row is repeated or not the last row before the checksum"):
        decode_block(moved)
    older = [list(r) for r in signed]
    older[0][1] = 2
    with pytest.raises(BlockError, match="format 2, which holds no signature, yet it has a signature row"):
        decode_block(_resealed(older))
    format_2 = json.loads((DATA / "block_format_2.json").read_text())["block"]
    assert check_signature(format_2, []).state == "unsigned"
    with pytest.raises(BlockError, match="older sheetnet \\(block format 2\\), which holds no signature; train it again"):
        sign_block(format_2, ALICE)


def test_a_block_signed_once_stays_verified_and_predicts_the_same():
    # tests/data/signed_block_format_3.json: written and signed once when signatures began, the private key thrown
    # away; later versions must keep verifying it (canonical content, message prefix) and predict the same
    from sheetnet.signing import PublicKey

    stored = json.loads((DATA / "signed_block_format_3.json").read_text())
    found = check_signature(stored["block"], [PublicKey("fixture", bytes.fromhex(stored["public_key"]))])
    assert (found.state, found.key_id) == ("trusted", block.key_id_of(bytes.fromhex(stored["public_key"])))
    model, _ = decode_block(stored["block"])
    assert model.format_version == 3
    np.testing.assert_allclose(model.predict(pd.DataFrame(stored["rows"])), stored["predictions"], rtol=1e-12)


def _model_table():
    frame, _ = _model()
    return [list(frame.columns)] + frame.values.tolist()


# --- the signature travels with the block ---------------------------------------------------

def test_a_signed_block_survives_a_workbook_file_round_trip(tmp_path):
    signed = sign_block(_block(), ALICE)
    book = openpyxl.Workbook()
    for row in signed:
        book.active.append([None if v == "" else v for v in row])
    book.save(tmp_path / "signed.xlsx")
    again = openpyxl.load_workbook(tmp_path / "signed.xlsx")
    again.save(tmp_path / "saved-again.xlsx")  # a second program saving it (openpyxl here) keeps it too
    cells = [list(r) for r in openpyxl.load_workbook(tmp_path / "saved-again.xlsx").active.iter_rows(values_only=True)]
    assert check_signature(cells, [ALICE.public_key()]).state == "trusted"


def test_a_signed_block_survives_the_store_path_every_door_shares(tmp_path):
    signed = sign_block(_block(), ALICE)
    # as a spreadsheet hands cells back: whole numbers as floats, empty cells as blanks
    as_cells = [[float(v) if isinstance(v, int) else (None if v == "" else v) for v in row] for row in signed]
    assert functions.predict(as_cells, _model_table()) == functions.predict(_block(), _model_table())
    assert dict(map(tuple, functions.about(as_cells)[1:]))["target"] == "output"
    # the service's placements, through their JSON form (what the server sends the task pane and Calc), applied to a workbook
    placements = placements_from_json(json.loads(json.dumps(service.model_placements("grades", as_cells).to_json())))
    workbook = openpyxl.Workbook()
    apply_to_workbook(workbook, placements)
    workbook.save(tmp_path / "stored.xlsx")
    stored = read_model(open_book(tmp_path / "stored.xlsx"), "grades")
    assert check_signature(stored, [ALICE.public_key()]).state == "trusted"
    assert stored[-2][3] == ALICE.public.hex()


# --- key files and the key folder -----------------------------------------------------------

def test_key_files_read_back_and_refuse_edits():
    assert read_key_text(key_file_text(ALICE), "alice.key") == ALICE
    assert read_key_text(public_key_file_text(ALICE), "alice.pub") == ALICE.public_key()
    assert ALICE.private.hex() not in repr(ALICE)
    text = public_key_file_text(ALICE)
    with pytest.raises(SigningKeyError, match="alice.pub names the key id .* not the id of its public key"):
        read_key_text(text.replace(ALICE.public.hex(), MALLORY.public.hex()), "alice.pub")
    with pytest.raises(SigningKeyError, match="private and public keys do not belong together"):
        read_key_text(key_file_text(ALICE).replace(ALICE.private.hex(), MALLORY.private.hex()), "alice.key")
    with pytest.raises(SigningKeyError, match="is not a sheetnet key file"):
        read_key_text("-----BEGIN PUBLIC KEY-----\n", "other.pem")
    with pytest.raises(SigningKeyError, match="a line 'owner: bob' a key file does not have"):
        read_key_text(text + "owner: bob\n", "alice.pub")
    with pytest.raises(SigningKeyError, match="is not a key name"):
        make_key("../alice")


def test_the_key_folder_keeps_private_keys_private(tmp_path):
    private, public = keyring.save_signing_key(ALICE, tmp_path / "keys")
    assert private.stat().st_mode & 0o777 == 0o600 and (tmp_path / "keys").stat().st_mode & 0o777 == 0o700
    assert keyring.signing_key(None, tmp_path / "keys") == ALICE
    assert keyring.signing_key("alice", tmp_path / "keys") == ALICE
    assert [k.name for k in keyring.trusted_keys(tmp_path / "keys")] == ["alice"]
    with pytest.raises(SigningKeyError, match="exists already"):
        keyring.save_signing_key(ALICE, tmp_path / "keys")
    private.chmod(0o644)
    with pytest.raises(SigningKeyError, match="can be read by other users of this computer; run chmod 600"):
        keyring.signing_key("alice", tmp_path / "keys")
    with pytest.raises(SigningKeyError, match="is a public key, which cannot sign"):
        keyring.signing_key(str(public), tmp_path / "keys")


def test_trusting_and_forgetting_keys(tmp_path, monkeypatch):
    monkeypatch.setenv(keyring.KEY_FOLDER_VARIABLE, str(tmp_path / "elsewhere"))
    assert keyring.key_folder() == tmp_path / "elsewhere"
    trusted, path = keyring.trust_key(MALLORY.public_key(), name="colleague")
    assert (trusted.name, path) == ("colleague", tmp_path / "elsewhere" / "trusted" / "colleague.pub")
    assert keyring.trust_key(MALLORY.public_key())[1] is None  # trusted already, under its first name
    with pytest.raises(SigningKeyError, match="is trusted as 'colleague' already"):
        keyring.trust_key(ALICE.public_key(), name="Colleague")
    assert keyring.forget_key("colleague") == path
    assert keyring.trusted_keys() == []


# --- the commands ---------------------------------------------------------------------------

def _book_with_models(path):
    table = sheetnet_demo.coffee_lot_grades(rows=80, seed=8)
    book = openpyxl.Workbook()
    book.active.title = "Lots"
    book.active.append(list(table.columns))
    for row in table.itertuples(index=False):
        book.active.append(list(row))
    book.active["J2"] = "my note"
    book.save(path)
    for name in ("grades", "second"):
        assert cli.main(["train", str(path), "--table", "Lots!A1:G81", "--target", "grade", "--name", name,
                         "--hidden", "3", "--set", "ignore=lot", "--set", "epochs=20"]) == 0


@pytest.fixture
def signed_book(tmp_path, capsys):
    path = tmp_path / "lots.xlsx"
    _book_with_models(path)
    keys = str(tmp_path / "keys")
    assert cli.main(["keys", "make", "alice", "--keys", keys]) == 0
    assert cli.main(["sign", str(path), "--keys", keys, "--model", "grades"]) == 0
    capsys.readouterr()
    return path, keys


def test_make_sign_and_check_from_the_command_line(signed_book, capsys, tmp_path):
    path, keys = signed_book
    assert cli.main(["check", str(path), "--keys", keys]) == 0
    out = capsys.readouterr().out
    alice = keyring.signing_key("alice", Path(keys))
    assert f"ok      grades: intact; signed by the trusted key 'alice' ({alice.key_id})" in out
    assert "ok      second: intact; unsigned" in out
    assert "2 of 2 models verified (intact); 1 signed by a trusted key" in out and "accidental damage only" in out
    assert cli.main(["check", str(path), "--keys", keys, "--trusted-only"]) == 1
    out = capsys.readouterr().out
    assert "REFUSED second: unsigned" in out and "1 of 2 models verified (intact, signed by a trusted key)" in out
    assert cli.main(["sign", str(path), "--keys", keys]) == 0
    assert capsys.readouterr().out.splitlines()[-2:] == [
        f"already grades: by the key 'alice' ({alice.key_id})", f"signed  second: by the key 'alice' ({alice.key_id})",
    ]
    assert cli.main(["check", str(path), "--keys", keys, "--trusted-only"]) == 0
    assert openpyxl.load_workbook(path)["Lots"]["J2"].value == "my note"  # the user's cells are kept
    openpyxl.load_workbook(path).save(tmp_path / "resaved.xlsx")  # the whole workbook saved again by another program
    assert cli.main(["check", str(tmp_path / "resaved.xlsx"), "--keys", keys, "--trusted-only"]) == 0
    assert cli.main(["check", str(path), "--keys", str(tmp_path / "no-keys"), "--trusted-only"]) == 1  # someone without alice's key
    assert "REFUSED grades: signed by a key that is not among your trusted keys" in capsys.readouterr().out


def _write_block(sheet, cells):
    for i, row in enumerate(cells, start=1):
        for j, value in enumerate(row, start=1):
            sheet.cell(i, j).value = None if value == "" else value


def test_a_model_edited_after_signing_fails_check(signed_book, capsys):
    path, keys = signed_book
    book = openpyxl.load_workbook(path)
    hidden = book["sheetnet_grades"]
    cells = [list(r) for r in hidden.iter_rows(min_col=1, max_col=block.WIDTH, values_only=True)]
    cells = cells[: next(i for i, r in enumerate(cells) if r[0] == "checksum") + 1]
    weights = _row_of(cells, "weights")
    cells[weights + 1][1] += 1.0
    _write_block(hidden, _resealed([["" if v is None else v for v in r] for r in cells]))
    book.save(path)
    assert cli.main(["check", str(path), "--keys", keys]) == 1
    out = capsys.readouterr().out
    assert "FAILED  grades: wrongly signed: the block was changed after the key" in out


def test_trusting_a_colleague_key_from_the_command_line(tmp_path, capsys):
    theirs, mine = str(tmp_path / "theirs"), str(tmp_path / "mine")
    assert cli.main(["keys", "make", "bob", "--keys", theirs, "--no-trust"]) == 0
    assert keyring.trusted_keys(Path(theirs)) == []
    assert cli.main(["keys", "trust", os.path.join(theirs, "bob.key"), "--keys", mine]) == 1
    assert "is a private signing key; trust its public half" in capsys.readouterr().err
    assert cli.main(["keys", "trust", os.path.join(theirs, "bob.pub"), "--keys", mine, "--name", "bob_at_lab"]) == 0
    assert cli.main(["keys", "list", "--keys", mine]) == 0
    out = capsys.readouterr().out
    assert "now trusted" in out and "signing keys:\n  (none" in out and "bob_at_lab" in out
    assert cli.main(["keys", "forget", "bob_at_lab", "--keys", mine]) == 0
    assert cli.main(["sign", str(tmp_path / "none.xlsx"), "--keys", mine]) == 1
    assert "holds 0 signing keys; name one with --key, or make one" in capsys.readouterr().err


def test_a_tampered_signature_row_in_a_workbook_is_named_by_check(signed_book, capsys):
    path, keys = signed_book
    book = openpyxl.load_workbook(path)
    hidden = book["sheetnet_grades"]
    cells = [["" if v is None else v for v in r] for r in hidden.iter_rows(min_col=1, max_col=block.WIDTH, values_only=True)]
    cells = cells[: next(i for i, r in enumerate(cells) if r[0] == "checksum") + 1]
    cells[_row_of(cells, "signature")][4] = "not a signature"
    _write_block(hidden, _resealed(cells))
    book.save(path)
    assert cli.main(["check", str(path), "--keys", keys]) == 1
    captured = capsys.readouterr()
    assert "FAILED  grades: the model block's signature row is damaged" in captured.out
    assert "Traceback" not in captured.out + captured.err


def test_about_shows_the_signature_in_a_cell():
    signed = sign_block(_block(), ALICE)
    assert dict(map(tuple, functions.about(signed)[1:]))["signature"] == (
        f"signed by the key {ALICE.key_id}; sheetnet check tells whether it is a key you trust"
    )
    forged = [list(r) for r in signed]
    forged[_row_of(forged, "holdout_metric")][2] = 0.0001
    assert dict(map(tuple, functions.about(_resealed(forged))[1:]))["signature"].startswith("WRONG: the block was changed after the key")
    assert "not deliberate edits" in dict(map(tuple, functions.about(_block())[1:]))["signature"]


def _key_with_a_numeric_id():
    """A key whose id is 16 digits (about 1 key in 1,850): a text a spreadsheet would read as a number if typed."""
    while not (key := make_key("digits")).key_id.isdigit():
        pass
    return key


def test_a_signature_whose_texts_look_like_numbers_survives_the_xlwings_door():
    import xlwings_standin as standin

    from sheetnet import xl_macros
    from sheetnet.xl_udfs import from_excel

    key = _key_with_a_numeric_id()
    signed = sign_block(_block(), key)
    book = standin.Book()
    book.table("Data", _model_table())
    xl_macros.apply_placements(book, service.model_placements("grades", signed))
    stored = from_excel(book.names["grades"].refers_to_range.options(ndim=2).value)
    assert stored[-2][2] == key.key_id  # still the text, not the number 1.23e15
    assert check_signature(stored, [key.public_key()]).state == "trusted"


SIGNATURE_VALUES = st.one_of(
    st.sampled_from(["", " ", "ed25519", "ED25519", None, 0, 1.5, float("nan"), float("inf"), True, "0" * 64, "f" * 128, ALICE.key_id,
                     ALICE.public.hex(), MALLORY.public.hex(), MALLORY.key_id, "checksum", "signature"]),
    st.text(alphabet="0123456789abcdefABCDEF", min_size=0, max_size=130),
    st.integers(),
    st.floats(),
)


@given(column=st.integers(0, block.WIDTH - 1), value=SIGNATURE_VALUES, reseal=st.booleans())
@settings(max_examples=300, deadline=None)
def test_any_edit_of_the_signature_row_is_refused_or_untrusted(column, value, reseal):
    signed = [list(r) for r in _signed_once()]
    row = len(signed) - 2
    original = signed[row][column]
    signed[row][column] = value
    try:
        found = check_signature(_resealed(signed) if reseal else signed, [ALICE.public_key()])
    except BlockError as error:
        assert "model block" in str(error) and "Traceback" not in str(error)
        return
    padding = column > 4 and (value in ("", None) or (isinstance(value, float) and np.isnan(value)))  # an empty cell after the fields
    same = (value == original and type(value) is type(original)) or padding
    assert found.state != "trusted" or same, (column, value)


@functools.lru_cache(maxsize=None)
def _signed_once():
    return tuple(tuple(r) for r in sign_block(_block(), ALICE))


def test_a_signed_block_survives_a_model_file():
    from sheetnet.model_file import block_of, file_text

    signed = sign_block(_block(), ALICE)
    assert check_signature(block_of(file_text(signed).encode("utf-8")), [ALICE.public_key()]).state == "trusted"


def test_a_signed_block_survives_the_server_door(tmp_path):
    import httpx
    from local_server import serving

    from sheetnet import server

    token = "signing-test-token-0123456789"
    signed = sign_block(_block(), ALICE)
    sent = [[None if v == "" else v for v in row] for row in signed]  # as the task pane and Calc send cells: blanks as null
    with serving(server.create_app(token, origin="http://127.0.0.1")) as address:
        with httpx.Client(base_url=address, headers={"Authorization": f"Bearer {token}"}, timeout=60) as client:
            placed = client.post("/v1/placements", json={"name": "grades", "block": sent, "existing_names": []})
            about = client.post("/v1/functions/SHEETNET.ABOUT", json={"args": [sent]})
    assert placed.status_code == 200 and about.status_code == 200, placed.text + about.text
    assert dict(map(tuple, about.json()["result"][1:]))["signature"].startswith(f"signed by the key {ALICE.key_id}")
    workbook = openpyxl.Workbook()
    apply_to_workbook(workbook, placements_from_json(placed.json()))
    workbook.save(tmp_path / "served.xlsx")
    stored = read_model(open_book(tmp_path / "served.xlsx"), "grades")
    assert check_signature(stored, [ALICE.public_key()]).state == "trusted"


def test_a_workbook_of_signed_models_saved_by_libreoffice_calc_still_checks_as_trusted(signed_book, tmp_path, capsys):
    from libreoffice import SOFFICE, recalculate

    if SOFFICE is None:
        pytest.skip("LibreOffice Calc is not installed")
    path, keys = signed_book
    saved = recalculate([path], tmp_path / "calc")[0]  # opened, computed and saved again by Calc, as .xlsx
    assert cli.main(["check", str(saved), "--keys", keys]) == 0
    assert "ok      grades: intact; signed by the trusted key 'alice'" in capsys.readouterr().out


def test_retraining_a_signed_model_says_the_new_block_is_unsigned(signed_book, capsys):
    path, keys = signed_book
    alice = keyring.signing_key("alice", Path(keys))
    assert cli.main(["train", str(path), "--table", "Lots!A1:G81", "--target", "grade", "--name", "grades", "--hidden", "3",
                     "--set", "ignore=lot", "--set", "epochs=20", "--replace"]) == 0
    assert f"note: the model it replaced was signed by the key {alice.key_id}; the new block is unsigned until you sign it" in capsys.readouterr().out
    assert check_signature(read_model(open_book(path), "grades"), []).state == "unsigned"
    assert cli.main(["sign", str(path), "--keys", keys, "--model", "grades"]) == 0
    book = openpyxl.load_workbook(path)
    book["Lots"]["B2"].value = book["Lots"]["B2"].value + 1.5  # the data changed: refresh retrains
    book.save(path)
    capsys.readouterr()
    assert cli.main(["refresh", str(path), "--model", "grades"]) == 0
    out = capsys.readouterr().out
    assert "retrained grades" in out and f"  note: the model it replaced was signed by the key {alice.key_id}" in out
