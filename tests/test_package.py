"""Saving edits the workbook package: nothing of the user's changes, hostile files are refused, the file stays safe."""

from __future__ import annotations

import io
import os
import random
import re
import shutil
import signal
import subprocess
import sys
import textwrap
import time
import warnings
import zipfile
from pathlib import Path
from typing import Any, Iterator

import openpyxl
import pytest
from calc_office import CalcOffice, office_missing

from sheetnet import cli, file_guard, package, service
from sheetnet.package import Cell, insert_cells, value_cell, write_package
from sheetnet.placements import CellBlock, FormulaBlock, Placements, SheetPlan, cell_block
from sheetnet.workbook import WorkbookError, open_book, read_range, save_book

RICH = Path(__file__).parent / "data" / "rich.xlsm"
ROWS = 60
TABLE = f"Lots!A1:G{ROWS + 1}"
FORMULA_LOOKING = ['=HYPERLINK("http://x","y")', "=cmd|' /C calc'!A0", "+SUM(A1:A2)", "@now", "-1+1"]


def _openpyxl(path: Path, **options: Any) -> Any:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # openpyxl warns about the extensions it does not model (it only reads here)
        return openpyxl.load_workbook(path, **options)


def _members(path: Path) -> dict[str, bytes]:
    with zipfile.ZipFile(path) as archive:
        return {name: archive.read(name) for name in archive.namelist()}


def _sheet_parts(path: Path) -> dict[str, str]:
    """Sheet title -> its part, read from the workbook part and its relationships."""
    members = _members(path)
    workbook = members["xl/workbook.xml"].decode()
    rels = dict(re.findall(r'Id="([^"]+)"[^>]*?Target="([^"]+)"', members["xl/_rels/workbook.xml.rels"].decode()))
    rels.update({i: t for t, i in re.findall(r'Target="([^"]+)"[^>]*?Id="([^"]+)"', members["xl/_rels/workbook.xml.rels"].decode())})
    parts = {}
    for name, rel in re.findall(r'<sheet name="([^"]+)"[^>]*?r:id="([^"]+)"', workbook):
        target = rels[rel]
        parts[name.replace("&apos;", "'")] = target.lstrip("/") if target.startswith("/") else "xl/" + target
    return parts


def _train(path: Path, name: str = "grades", *extra: str) -> int:
    return cli.main(["train", str(path), "--table", TABLE, "--target", "grade", "--name", name, "--hidden", "4",
                     "--set", "ignore=lot", "--set", "epochs=60", *extra])


@pytest.fixture
def rich(tmp_path: Path) -> Path:
    copy = tmp_path / "rich.xlsm"
    shutil.copyfile(RICH, copy)
    return copy


def _owned(path: Path) -> set[str]:
    shared = {"xl/workbook.xml", "xl/_rels/workbook.xml.rels", "[Content_Types].xml"}
    return shared | {part for title, part in _sheet_parts(path).items() if title.startswith((service.MODEL_SHEET_PREFIX, service.RESULTS_SHEET_PREFIX))}


def _assert_only_owned_changed(original: dict[str, bytes], path: Path, also: set[str] = frozenset()) -> None:
    now = _members(path)
    owned = _owned(path) | set(also)
    assert set(original) - owned <= set(now), "a part of the user's was removed"
    for name, data in original.items():
        if name == "xl/styles.xml":
            _assert_styles_only_appended(data.decode(), now[name].decode())
        elif name not in owned:
            assert now[name] == data, f"{name} changed"
    assert set(now) - set(original) <= owned


def _assert_styles_only_appended(before: str, after: str) -> None:
    """The styles part may gain number formats and cell formats for sheetnet's sheets, appended: every
    cell format index the user's cells use keeps its meaning, and nothing else in the part changes."""
    def blocks(xml: str, tag: str) -> tuple[str, list[str]]:
        match = re.search(rf"<{tag}(?:\s[^>]*)?(?:/>|>(.*?)</{tag}>)", xml, re.DOTALL)
        if match is None:
            return xml, []
        items = re.findall(r"<(?:xf|numFmt)\b[^>]*?(?:/>|>.*?</(?:xf|numFmt)>)", match.group(1) or "", re.DOTALL)
        return xml[:match.start()] + f"<{tag}/>" + xml[match.end():], items

    rest_before, xfs_before = blocks(before, "cellXfs")
    rest_after, xfs_after = blocks(after, "cellXfs")
    assert xfs_after[:len(xfs_before)] == xfs_before, "a cell format of the user's changed"
    rest_before, formats_before = blocks(rest_before, "numFmts")
    rest_after, formats_after = blocks(rest_after, "numFmts")
    assert formats_after[:len(formats_before)] == formats_before, "a number format of the user's changed"
    assert rest_after.replace("<numFmts/>", "") == rest_before.replace("<numFmts/>", ""), "xl/styles.xml changed beyond its formats"


def test_train_predict_formulas_change_only_what_sheetnet_owns(rich: Path, capsys: pytest.CaptureFixture[str]) -> None:
    original = _members(rich)
    notes_part = _sheet_parts(rich)["Notes"]
    assert _train(rich) == 0
    _assert_only_owned_changed(original, rich)
    assert cli.main(["predict", str(rich), "--model", "grades", "--table", TABLE, "--to", "Notes!C1", "--output", "value,probabilities"]) == 0
    _assert_only_owned_changed(original, rich, {notes_part})
    assert cli.main(["formulas", str(rich), "--model", "grades", "--table", TABLE]) == 0
    assert cli.main(["formulas", str(rich), "--model", "grades", "--table", TABLE, "--to", "Lots!N40"]) == 0
    _assert_only_owned_changed(original, rich, {notes_part, _sheet_parts(rich)["Lots"]})
    assert "saved" in capsys.readouterr().out
    # the workbook part keeps its root element (namespaces, mc:Ignorable) and the user's sheet entries as written
    workbook = _members(rich)["xl/workbook.xml"].decode()
    before = original["xl/workbook.xml"].decode()
    assert workbook.startswith(before[:before.index("<sheets>")])
    for entry in re.findall(r"<sheet [^>]*/>", before):
        assert entry in workbook
    assert workbook.endswith(before[before.index("<calcPr"):])
    # the user's sheet that received cells keeps every cell it had, and everything outside its cells
    old_notes, new_notes = original[notes_part].decode(), _members(rich)[notes_part].decode()
    for cell in re.findall(r"<c [^>]*?(?:/>|>.*?</c>)", old_notes):
        assert cell in new_notes
    assert new_notes[new_notes.index("</sheetData>"):] == old_notes[old_notes.index("</sheetData>"):]
    assert not (rich.parent / "rich-sheetnet.xlsm").exists()


def test_a_later_command_still_reads_the_users_cached_formula_results(rich: Path) -> None:
    assert _train(rich) == 0
    assert _train(rich, "second") == 0
    with open_book(rich) as book:
        assert read_range(book, "Lots!J2:J3") == [[653.65], [1307.3]]
        assert book.formulas["Lots"]["J3"].value == "=J2*2"
        assert sorted(n for n in book.formulas.defined_names if not n.startswith("snf_")) == ["grades", "second"]


def test_saved_workbook_opens_in_openpyxl_with_the_hidden_sheet_names_and_text_labels(rich: Path) -> None:
    with open_book(rich) as book:
        book.log.add(Placements(sheets=(SheetPlan("sn labels"),), cells=(cell_block("sn labels", 1, 1, [[v] for v in FORMULA_LOOKING]),)))
        book.log.add(Placements(cells=(CellBlock("Notes", 3, 2, ((FORMULA_LOOKING[0], 1.5, True),)),)))
        book.log.add(Placements(formulas=(FormulaBlock("Notes", 4, 2, (("=1+2",),)),)))
        save_book(book)
    assert _train(rich) == 0
    written = _openpyxl(rich)
    assert written["sheetnet_grades"].sheet_state == "veryHidden"
    assert written.defined_names["grades"].attr_text.startswith("'sheetnet_grades'!$A$1:$I$")
    labels = written["sn labels"]
    assert [labels.cell(r, 1).value for r in range(1, 6)] == FORMULA_LOOKING
    assert all(labels.cell(r, 1).data_type == "s" for r in range(1, 6))
    notes = written["Notes"]
    assert (notes["A1"].value, notes["B3"].value, notes["C3"].value, notes["D3"].value) == ("the analyst's own sheet", FORMULA_LOOKING[0], 1.5, True)
    assert notes["B3"].data_type == "s" and notes["B4"].value.text == "=1+2"


@pytest.mark.skipif(office_missing() is not None, reason=str(office_missing()))
def test_saved_workbook_opens_in_libreoffice_with_hidden_sheet_names_and_text_labels(rich: Path, tmp_path: Path) -> None:
    assert _train(rich) == 0
    assert cli.main(["predict", str(rich), "--model", "grades", "--table", TABLE, "--to", "Notes!C1"]) == 0
    assert cli.main(["formulas", str(rich), "--model", "grades", "--table", TABLE, "--to", "Lots!N1", "--output", "class"]) == 0
    with open_book(rich) as book:
        book.log.add(Placements(sheets=(SheetPlan("sn labels"),), cells=(cell_block("sn labels", 1, 1, [[v] for v in FORMULA_LOOKING]),)))
        save_book(book)
    home = tmp_path / "office-home"
    home.mkdir()
    office = CalcOffice(home, home / "profile", [])
    try:
        doc = office.call("load", path=str(rich))
        sheets = dict(office.call("sheets", doc=doc))
        assert sheets["sheetnet_grades"] is False and sheets["Lots"] is True and sheets["Pivot"] is True
        names = office.call("names", doc=doc)
        assert names["grades"].startswith("$sheetnet_grades.$A$1:$I$") and "snf_grades_m1_W2" in names
        cells = office.call("cells", doc=doc, sheet="sn labels", address="A1:A5")
        assert [row[0]["string"] for row in cells] == FORMULA_LOOKING
        assert {row[0]["type"] for row in cells} == {"TEXT"}
        assert office.call("read", doc=doc, sheet="Lots", address="J2:J3") == [[653.65], [1307.3]]
        block = office.call("read", doc=doc, sheet="sheetnet_grades", address="A1:B1")
        assert block[0][0] == "sheetnet model block"
        # native formulas inserted into the user's sheet compute, in LibreOffice, the classes sheetnet predicted
        native = office.call("cells", doc=doc, sheet="Lots", address=f"N2:N{ROWS + 1}")
        assert {c[0]["type"] for c in native} == {"FORMULA"} and {c[0]["error"] for c in native} == {0}
        predicted = office.call("read", doc=doc, sheet="Notes", address=f"C2:C{ROWS + 1}")
        assert [c[0]["string"] for c in native] == [row[0] for row in predicted]
    finally:
        office.close()


# --- hostile and damaged files ------------------------------------------------------------

def _small_book(path: Path) -> Path:
    book = openpyxl.Workbook()
    book.active.title = "Data"
    book.active.append(["x", "y"])
    for i in range(30):
        book.active.append([i, i * 2 + (i % 3)])
    book.save(path)
    return path


def _rezip(source: Path, target: Path, change: dict[str, bytes]) -> Path:
    with zipfile.ZipFile(source) as old, zipfile.ZipFile(target, "w", zipfile.ZIP_DEFLATED) as new:
        for name in old.namelist():
            new.writestr(name, change.pop(name, old.read(name)))
        for name, data in change.items():
            new.writestr(name, data)
    return target


def _refused(path: Path, capsys: pytest.CaptureFixture[str], *words: str) -> str:
    before = path.read_bytes()
    code = cli.main(["train", str(path), "--table", "Data!A1:B31", "--target", "y", "--name", "m", "--set", "epochs=20"])
    err = capsys.readouterr().err
    assert code == 1, err
    assert path.read_bytes() == before
    for word in words:
        assert word in err
    assert "Traceback" not in err
    return err


def test_a_part_that_expands_too_far_is_refused_from_the_zip_directory(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    bomb = _rezip(_small_book(tmp_path / "plain.xlsx"), tmp_path / "bomb.xlsx", {"xl/media/filler.bin": b"\0" * (3 << 20)})
    _refused(bomb, capsys, "xl/media/filler.bin", "bomb.xlsx", "times its stored size")


def test_an_archive_beyond_the_total_budget_is_refused(tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    path = _small_book(tmp_path / "big.xlsx")
    monkeypatch.setattr(package, "TOTAL_LIMIT", 2000)
    _refused(path, capsys, "big.xlsx would expand to", "beyond the 2,000")


@pytest.mark.parametrize("declaration", [b'<!DOCTYPE lolz [<!ENTITY lol "lol">]>', b'<!ENTITY x SYSTEM "file:///etc/passwd">'])
def test_xml_with_a_document_type_or_entities_is_refused(tmp_path: Path, capsys: pytest.CaptureFixture[str], declaration: bytes) -> None:
    plain = _small_book(tmp_path / "plain.xlsx")
    with zipfile.ZipFile(plain) as archive:
        sheet = archive.read("xl/worksheets/sheet1.xml")
    crafted = declaration + sheet
    path = _rezip(plain, tmp_path / "dtd.xlsx", {"xl/worksheets/sheet1.xml": crafted})
    _refused(path, capsys, "xl/worksheets/sheet1.xml of dtd.xlsx declares a document type or entities")


def test_a_damaged_zip_gets_a_message(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "cut.xlsx"
    path.write_bytes(_small_book(tmp_path / "plain.xlsx").read_bytes()[:700])
    _refused(path, capsys, "cut.xlsx is damaged")


# --- the file on disk ---------------------------------------------------------------------

def test_read_only_files_are_refused_untouched(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = _small_book(tmp_path / "locked.xlsx")
    path.chmod(0o444)
    _refused(path, capsys, "locked.xlsx is read-only")
    assert not list(tmp_path.glob("*sheetnet*"))


@pytest.mark.parametrize("lock_name", [".~lock.{}#", "~${}"])
def test_a_workbook_open_in_a_spreadsheet_program_is_refused(tmp_path: Path, capsys: pytest.CaptureFixture[str], lock_name: str) -> None:
    path = _small_book(tmp_path / "open.xlsx")
    (tmp_path / lock_name.format(path.name)).write_text("someone")
    _refused(path, capsys, "the workbook open.xlsx is open in a spreadsheet program", "close the workbook there")


def test_a_file_that_cannot_be_replaced_gets_a_message(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    path = _small_book(tmp_path / "denied.xlsx")
    before = path.read_bytes()

    def refuse(*_: Any) -> None:
        raise PermissionError(13, "Permission denied", str(path))

    monkeypatch.setattr(file_guard.os, "replace", refuse)
    with open_book(path) as book:
        book.log.add(Placements(sheets=(SheetPlan("sn x"),), cells=(cell_block("sn x", 1, 1, [["a"]]),)))
        with pytest.raises(file_guard.WorkbookFileError, match="denied.xlsx could not be saved: the system refused access"):
            save_book(book)
    assert path.read_bytes() == before
    assert not list(tmp_path.glob(f"{file_guard.TEMP_PREFIX}*"))


def test_a_file_changed_on_disk_since_it_was_read_is_not_overwritten(tmp_path: Path) -> None:
    path = _small_book(tmp_path / "moving.xlsx")
    with open_book(path) as book:
        book.log.add(Placements(sheets=(SheetPlan("sn x"),)))
        other = _openpyxl(path)
        other["Data"]["D1"] = "saved by someone else"
        changed = io.BytesIO()
        other.save(changed)
        path.write_bytes(changed.getvalue())
        with pytest.raises(file_guard.WorkbookFileError, match="moving.xlsx changed on disk since sheetnet read it"):
            save_book(book)
    assert path.read_bytes() == changed.getvalue()


def test_symbolic_links_are_written_through_and_stay_links(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    real = _small_book(tmp_path / "real.xlsx")
    link = tmp_path / "link.xlsx"
    link.symlink_to(real)
    assert cli.main(["train", str(link), "--table", "Data!A1:B31", "--target", "y", "--name", "m", "--set", "epochs=20"]) == 0
    assert link.is_symlink() and os.readlink(link) == str(real)
    assert "m" in _openpyxl(real).defined_names
    assert file_guard.backup_path(real, 1).exists() and not file_guard.backup_path(link, 1).exists()


def test_hard_links_keep_sharing_the_same_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    first = _small_book(tmp_path / "first.xlsx")
    second = tmp_path / "second.xlsx"
    os.link(first, second)
    inode = first.stat().st_ino
    assert cli.main(["train", str(first), "--table", "Data!A1:B31", "--target", "y", "--name", "m", "--set", "epochs=20"]) == 0
    assert first.stat().st_ino == inode == second.stat().st_ino
    assert "m" in _openpyxl(second).defined_names
    assert "m" not in _openpyxl(file_guard.backup_path(first, 1)).defined_names


def test_backups_are_ours_rotated_and_never_the_users(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = _small_book(tmp_path / "kept.xlsx")
    path.chmod(0o640)
    users = tmp_path / "kept.xlsx.bak"
    users.write_bytes(b"the user's own backup")
    versions = [path.read_bytes()]
    for n in range(5):
        with open_book(path) as book:
            book.log.add(service.results_placements(f"sn run {n}", []))
            save_book(book)
        versions.append(path.read_bytes())
    assert users.read_bytes() == b"the user's own backup"
    assert [file_guard.backup_path(path, n).read_bytes() for n in (1, 2, 3)] == versions[-2:-5:-1]
    assert not file_guard.backup_path(path, 4).exists()
    assert path.stat().st_mode & 0o777 == 0o640
    assert _openpyxl(path).sheetnames == ["Data"] + [f"sn run {n}" for n in range(5)]


SAVER = textwrap.dedent('''
    import os, sys, time
    from sheetnet import file_guard
    from sheetnet.placements import Placements, SheetPlan, cell_block
    from sheetnet.workbook import open_book, save_book
    path, rounds, pause = sys.argv[1], int(sys.argv[2]), sys.argv[3] == "pause"
    real_fsync, real_keep = os.fsync, file_guard._keep_attributes

    def slow_fsync(descriptor):  # a slow disk: kills land inside the write more often
        time.sleep(0.03)
        real_fsync(descriptor)

    def keep_then_wait(*arguments):  # the new file is written beside the workbook, not yet in its place
        real_keep(*arguments)
        print("written", flush=True)
        time.sleep(30)

    os.fsync = slow_fsync
    if pause:
        file_guard._keep_attributes = keep_then_wait
    for n in range(rounds):
        with open_book(path) as book:
            rows = [[f"=row {r}", r * 0.5, n] for r in range(2000)]
            book.log.add(Placements(drop_sheets=("sn load",), sheets=(SheetPlan("sn load"),), cells=(cell_block("sn load", 1, 1, rows),)))
            save_book(book)
        print("saved", n, flush=True)
''')


def test_a_save_killed_at_any_moment_leaves_the_workbook_or_its_backup_whole(tmp_path: Path) -> None:
    path = tmp_path / "killed.xlsx"
    shutil.copyfile(RICH, path)
    user_before = {k: v for k, v in _members(path).items() if k not in _owned(path)}
    chance = random.Random(20261202)
    environment = dict(os.environ, PYTHONPATH=str(Path(__file__).parents[1]))
    for round_number in range(5):
        pause = round_number == 0  # the first kill comes while the new file lies written beside the workbook
        saver = subprocess.Popen([sys.executable, "-c", SAVER, str(path), "50", "pause" if pause else "go"], stdout=subprocess.PIPE, env=environment)
        assert saver.stdout is not None
        if pause:
            assert saver.stdout.readline() == b"written\n"
        else:
            assert saver.stdout.readline().startswith(b"saved")  # the next saves are under way when the kill comes
            time.sleep(chance.uniform(0.0, 0.6))
        saver.send_signal(signal.SIGKILL)
        saver.wait()
        saver.stdout.close()
        if pause:
            assert len(list(tmp_path.glob(f"{file_guard.TEMP_PREFIX}killed.xlsx.*"))) == 1
        for candidate in (path, file_guard.backup_path(path, 1)):
            try:
                members = _members(candidate)
            except (zipfile.BadZipFile, FileNotFoundError):
                assert candidate != path, "the workbook itself was left damaged"
                continue
            assert {k: members[k] for k in user_before} == user_before
            assert _openpyxl(candidate, data_only=True)["Lots"]["K2"].value == "keep me"
    with open_book(path) as book:
        book.log.add(Placements(sheets=(SheetPlan("sn after"),)))
        save_book(book)
    assert not list(tmp_path.glob(f"{file_guard.TEMP_PREFIX}*"))
    assert _openpyxl(path, data_only=True)["Lots"]["J2"].value == 653.65


def test_two_trainings_at_once_keep_both_models(rich: Path) -> None:
    environment = dict(os.environ, PYTHONPATH=str(Path(__file__).parents[1]))
    runs = [
        subprocess.Popen([sys.executable, "-m", "sheetnet.cli", "train", str(rich), "--table", TABLE, "--target", "grade", "--name", name,
                          "--set", "ignore=lot", "--set", "epochs=60"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=environment)
        for name in ("first", "second")
    ]
    outcomes = [run.communicate(timeout=120) + (run.returncode,) for run in runs]
    stored = set(_openpyxl(rich).defined_names)
    for (_, err, code), name in zip(outcomes, ("first", "second")):
        if code == 0:
            assert name in stored
        else:
            assert "another sheetnet command is working on rich.xlsm" in err
    assert any(code == 0 for *_, code in outcomes)


HOLDER = "import sys, time\nfrom sheetnet.workbook import open_book\nbook = open_book(sys.argv[1])\nprint('holding', flush=True)\ntime.sleep(60)\n"


def test_a_second_command_waits_a_bounded_time_then_refuses(tmp_path: Path) -> None:
    path = _small_book(tmp_path / "busy.xlsx")
    environment = dict(os.environ, PYTHONPATH=str(Path(__file__).parents[1]))
    holder = subprocess.Popen([sys.executable, "-c", HOLDER, str(path)], stdout=subprocess.PIPE, text=True, env=environment)
    try:
        assert holder.stdout is not None and holder.stdout.readline() == "holding\n"
        started = time.monotonic()
        with pytest.raises(file_guard.WorkbookFileError, match="another sheetnet command is working on busy.xlsx; wait until it has finished"):
            open_book(path, wait=0.3)
        assert 0.3 <= time.monotonic() - started < 5
    finally:
        holder.kill()
        holder.wait()
        if holder.stdout is not None:
            holder.stdout.close()
    open_book(path, wait=0).close()  # a killed holder lets go of the file
    with open_book(path, wait=0) as first, open_book(path, wait=0) as second:  # one process shares its lock
        first.log.add(Placements(sheets=(SheetPlan("sn one"),)))
        save_book(first)
        second.log.add(Placements(sheets=(SheetPlan("sn two"),)))
        with pytest.raises(file_guard.WorkbookFileError, match="changed on disk since sheetnet read it"):
            save_book(second)


# --- reading ------------------------------------------------------------------------------

def test_whole_column_and_whole_row_ranges_read_up_to_the_used_cells(tmp_path: Path) -> None:
    with open_book(_small_book(tmp_path / "cols.xlsx")) as book:
        grid = read_range(book, "Data!A:B")
        assert len(grid) == 31 and grid[0] == ["x", "y"] and grid[-1] == [29, 29 * 2 + 2]
        assert read_range(book, "Data!1:2") == [["x", "y"], [0, 0]]


# --- the package edits in detail ----------------------------------------------------------

def test_cells_go_into_a_users_rows_in_order_keeping_formats_and_refusing_filled_cells() -> None:
    sheet = (
        '<?xml version="1.0"?><x:worksheet xmlns:x="http://schemas.openxmlformats.org/spreadsheetml/2006/main"><x:dimension ref="A1:C3"/>'
        '<x:sheetData><x:row r="1" spans="1:3"><x:c r="A1"><x:v>1</x:v></x:c><x:c r="C1" s="4"/></x:row>'
        '<x:row r="3"><x:c r="B3" t="s"><x:v>0</x:v></x:c></x:row></x:sheetData><x:extLst/></x:worksheet>'
    )
    text = value_cell("=not a formula")
    number = value_cell(2.5)
    assert isinstance(text, Cell) and isinstance(number, Cell)
    out = insert_cells(sheet, {(1, 2): number, (1, 3): text, (2, 1): number, (3, 5): text}, "Data")
    assert out == (
        '<?xml version="1.0"?><x:worksheet xmlns:x="http://schemas.openxmlformats.org/spreadsheetml/2006/main"><x:dimension ref="A1:E3"/>'
        '<x:sheetData><x:row r="1" spans="1:3"><x:c r="A1"><x:v>1</x:v></x:c><x:c r="B1"><x:v>2.5</x:v></x:c>'
        '<x:c r="C1" s="4" t="inlineStr"><x:is><x:t>=not a formula</x:t></x:is></x:c></x:row>'
        '<x:row r="2"><x:c r="A2"><x:v>2.5</x:v></x:c></x:row>'
        '<x:row r="3" spans="2:5"><x:c r="B3" t="s"><x:v>0</x:v></x:c><x:c r="E3" t="inlineStr"><x:is><x:t>=not a formula</x:t></x:is></x:c></x:row>'
        "</x:sheetData><x:extLst/></x:worksheet>"
    ).replace('<x:row r="3" spans="2:5">', '<x:row r="3">')
    with pytest.raises(package.PackageError, match="cell Data!A1 is not empty"):
        insert_cells(sheet, {(1, 1): number}, "Data")


def _xml(value: Any) -> str:
    cell = value_cell(value)
    assert cell is not None
    return cell.xml("", "A1")


def test_values_become_cells_of_their_kind() -> None:
    assert _xml(True) == '<c r="A1" t="b"><v>1</v></c>'
    assert _xml(7) == '<c r="A1"><v>7</v></c>'
    assert _xml(0.1) == '<c r="A1"><v>0.1</v></c>'
    assert _xml(float("nan")) == '<c r="A1" t="e"><v>#NUM!</v></c>'
    assert _xml(" a<b&\x01 ") == '<c r="A1" t="inlineStr"><is><t xml:space="preserve"> a&lt;b&amp;_x0001_ </t></is></c>'
    assert _xml("=SUM(A1)") == '<c r="A1" t="inlineStr"><is><t>=SUM(A1)</t></is></c>'
    assert package.formula_cell("=A1<2", True).xml("x:", "B5") == '<x:c r="B5"><x:f t="array" ref="B5">A1&lt;2</x:f></x:c>'
    assert value_cell(None) is None
    with pytest.raises(package.PackageError, match="longer than a cell holds"):
        value_cell("x" * 40_000)


def test_removing_a_sheet_of_ours_shifts_local_names_and_views(tmp_path: Path) -> None:
    book = openpyxl.Workbook()
    book.active.title = "Data"
    book.create_sheet("sheetnet_old").sheet_state = "veryHidden"
    later = book.create_sheet("Later")
    later.print_area = "A1:B2"
    book.active = 2
    book.save(tmp_path / "three.xlsx")
    with open_book(tmp_path / "three.xlsx") as opened:
        assert opened.package is not None
        out = io.BytesIO()
        write_package(opened.package, [Placements(drop_sheets=("sheetnet_old",))], out)
    (tmp_path / "two.xlsx").write_bytes(out.getvalue())
    workbook = _members(tmp_path / "two.xlsx")["xl/workbook.xml"].decode()
    assert 'localSheetId="1"' in workbook and 'activeTab="1"' in workbook and "sheetnet_old" not in workbook
    reread = _openpyxl(tmp_path / "two.xlsx")
    assert reread.sheetnames == ["Data", "Later"] and reread["Later"].print_area == "'Later'!$A$1:$B$2"
    assert not any(name.startswith("xl/worksheets/sheet2") for name in _members(tmp_path / "two.xlsx"))


def test_a_sheet_of_ours_holding_parts_we_did_not_write_is_not_replaced(rich: Path) -> None:
    with open_book(rich) as book:
        book.log.add(Placements(drop_sheets=("Lots",)))
        with pytest.raises(WorkbookError, match="the sheet 'Lots' holds pictures, charts or other parts sheetnet did not write"):
            save_book(book)


EXCEL_STYLE_WORKBOOK = (
    '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\r\n'
    '<workbook xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main" xmlns:r="http://schemas.openxmlformats.org/officeDocument/2006/relationships" '
    'xmlns:mc="http://schemas.openxmlformats.org/markup-compatibility/2006" mc:Ignorable="x15 xr xr6 xr10 xr2" '
    'xmlns:x15="http://schemas.microsoft.com/office/spreadsheetml/2010/11/main" xmlns:xr="http://schemas.microsoft.com/office/spreadsheetml/2014/revision" '
    'xmlns:xr6="http://schemas.microsoft.com/office/spreadsheetml/2016/revision6" '
    'xmlns:xr10="http://schemas.microsoft.com/office/spreadsheetml/2016/revision10" '
    'xmlns:xr2="http://schemas.microsoft.com/office/spreadsheetml/2015/revision2">'
    '<fileVersion appName="xl" lastEdited="7" lowestEdited="7" rupBuild="27328"/><workbookPr defaultThemeVersion="166925"/>'
    '<mc:AlternateContent xmlns:mc="http://schemas.openxmlformats.org/markup-compatibility/2006"><mc:Choice Requires="x15">'
    '<x15ac:absPath url="C:\\Users\\analyst\\" xmlns:x15ac="http://schemas.microsoft.com/office/spreadsheetml/2010/11/ac"/></mc:Choice></mc:AlternateContent>'
    '<xr:revisionPtr revIDLastSave="0" documentId="8_{00000000-0000-0000-0000-000000000000}" xr6:coauthVersionLast="47" xr6:coauthVersionMax="47" '
    'xr10:uidLastSave="{00000000-0000-0000-0000-000000000000}"/>'
    '<bookViews><workbookView xWindow="-120" yWindow="-120" windowWidth="29040" windowHeight="15840" xr2:uid="{00000000-000D-0000-FFFF-FFFF00000000}"/>'
    '</bookViews><sheets><sheet name="Data" sheetId="1" r:id="rId1"/></sheets>'
    '<definedNames><definedName name="_xlnm._FilterDatabase" localSheetId="0" hidden="1">Data!$A$1:$B$31</definedName>'
    '<definedName name="rates">Data!$B$2:$B$31</definedName></definedNames><calcPr calcId="191029"/>'
    '<extLst><ext uri="{140A7094-0E35-4892-8432-C4D2E57EDEB5}" xmlns:x15="http://schemas.microsoft.com/office/spreadsheetml/2010/11/main">'
    '<x15:workbookPr chartTrackingRefBase="1"/></ext></extLst></workbook>'
)


def test_a_workbook_part_written_the_way_excel_writes_it_keeps_all_but_our_entries(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    plain = _small_book(tmp_path / "plain.xlsx")
    path = _rezip(plain, tmp_path / "excel.xlsx", {"xl/workbook.xml": EXCEL_STYLE_WORKBOOK.encode()})
    for extra in ((), ("--replace",)):
        assert cli.main(["train", str(path), "--table", "Data!A1:B31", "--target", "y", "--name", "m", "--set", "epochs=20", *extra]) == 0
    workbook = _members(path)["xl/workbook.xml"].decode()
    ours = re.compile(r'<sheet name="(sheetnet_m|sn m|sn card m)"[^>]*/>|<definedName name="(m|snf_m_[^"]*)">[^<]*</definedName>')
    assert ours.sub("", workbook) == EXCEL_STYLE_WORKBOOK
    assert len(ours.findall(workbook)) >= 4
    reread = _openpyxl(path)
    assert reread.defined_names["rates"].attr_text == "Data!$B$2:$B$31"
    assert reread.sheetnames == ["Data", "sheetnet_m", "sn card m", "sn m"]


CALC_CHAIN = '<calcChain xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main"><c r="B2" i="{}"/><c r="B3"/></calcChain>'


@pytest.mark.parametrize("listed_sheet, kept", [(1, True), (2, False)])
def test_the_formula_cache_list_goes_only_when_it_lists_a_sheet_sheetnet_replaced(tmp_path: Path, listed_sheet: int, kept: bool) -> None:
    path = _small_book(tmp_path / "chain.xlsx")
    with open_book(path) as book:
        book.log.add(service.results_placements("sn x", [(3, 1, [["=SUM(1)"]])]))
        save_book(book)
    with zipfile.ZipFile(path) as archive:
        rels = archive.read("xl/_rels/workbook.xml.rels").decode()
        types = archive.read("[Content_Types].xml").decode()
    chain = CALC_CHAIN.format(listed_sheet).encode()
    chain_rel = f'<Relationship Id="rIdChain" Type="{package.CALC_CHAIN_REL}" Target="calcChain.xml"/>'
    chain_type = '<Override PartName="/xl/calcChain.xml" ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.calcChain+xml"/>'
    rels = rels.replace("</Relationships>", chain_rel + "</Relationships>")
    types = types.replace("</Types>", chain_type + "</Types>")
    _rezip(path, tmp_path / "with-chain.xlsx", {"xl/_rels/workbook.xml.rels": rels.encode(), "[Content_Types].xml": types.encode(), "xl/calcChain.xml": chain})
    with open_book(tmp_path / "with-chain.xlsx") as book:
        book.log.add(service.results_placements("sn x", [(3, 1, [["again"]])]))
        save_book(book)
    members = _members(tmp_path / "with-chain.xlsx")
    assert (members.get("xl/calcChain.xml") == chain) is kept
    assert ("calcChain" in members["xl/_rels/workbook.xml.rels"].decode()) is kept
    assert ("calcChain" in members["[Content_Types].xml"].decode()) is kept
    assert _openpyxl(tmp_path / "with-chain.xlsx")["sn x"]["A3"].value == "again"


@pytest.fixture(autouse=True)
def _no_stray_books() -> Iterator[None]:
    yield
    import gc

    gc.collect()  # a book left open by a failing test must not hold its file for the next one
