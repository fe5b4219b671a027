"""The command line, called in-process and as the installed console script."""

import subprocess
import sys
from pathlib import Path

from sheetnet import cli
from sheetnet.settings import settings_table_markdown


def test_demo_writes_the_workbook_and_reports_every_scenario(capsys, tmp_path):
    book = tmp_path / "demo.xlsx"
    assert cli.main(["demo", "--out", str(book), "--pictures", str(tmp_path / "pictures")]) == 0
    out = capsys.readouterr().out
    for heading in ("1. Shipments", "2. Parcels", "3. Coffee"):
        assert heading in out
    assert out.count("stopped by") == 3
    assert "naive RMSE (same as this week)" in out
    assert "decision aid" in out and "bias" in out and "local law" in out
    accuracy = float(out.split("accuracy")[1].split()[0])
    assert 0.7 < accuracy <= 1.0
    forecast = float(out.split("forecast RMSE (parcels next week)")[1].split()[0])
    naive = float(out.split("naive RMSE (same as this week)")[1].split()[0])
    assert forecast < naive
    drawn = sorted(p.name for p in (tmp_path / "pictures").iterdir())
    assert drawn == [
        "1-shipments-confusion.png", "1-shipments-training.png",
        "2-parcels-predicted.png", "2-parcels-training.png",
        "3-coffee-confusion.png", "3-coffee-training.png",
    ]
    assert book.exists()


def test_demo_refuses_to_overwrite_a_workbook_it_did_not_write(capsys, tmp_path):
    import openpyxl

    mine = tmp_path / "mine.xlsx"
    workbook = openpyxl.Workbook()
    workbook.active["A1"] = "my budget"
    workbook.save(mine)
    before = mine.read_bytes()
    assert cli.main(["demo", "--out", str(mine)]) == 1
    assert "is not a sheetnet demo workbook" in capsys.readouterr().err
    assert mine.read_bytes() == before


def test_settings_prints_the_documented_table(capsys):
    assert cli.main(["settings"]) == 0
    assert capsys.readouterr().out.strip() == settings_table_markdown()


def test_sheetnet_errors_become_one_line_and_exit_code_1(monkeypatch, capsys):
    def broken(seed, out, workbook, pictures=None):
        from sheetnet.errors import NotEnoughRowsError

        raise NotEnoughRowsError("training needs at least 4 rows; got 3. Add rows")

    monkeypatch.setattr(cli, "run_demo", broken)
    assert cli.main(["demo"]) == 1
    assert capsys.readouterr().err.strip() == "sheetnet: training needs at least 4 rows; got 3. Add rows"


def test_console_script_is_installed():
    script = Path(sys.executable).parent / "sheetnet"  # installed beside the interpreter running the tests
    assert script.exists(), "install the project (pip install '.[dev]') so that the sheetnet command exists"
    done = subprocess.run([str(script), "--version"], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0
    assert done.stdout.startswith("sheetnet ")
