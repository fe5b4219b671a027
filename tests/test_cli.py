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
    assert drawn == [  # classifiers: calibration and confusion; the regression: predicted against actual and residuals
        "1-shipments-calibration.png", "1-shipments-confusion.png", "1-shipments-dependence.png", "1-shipments-importance.png",
        "1-shipments-training.png",
        "2-parcels-dependence.png", "2-parcels-importance.png", "2-parcels-predicted.png", "2-parcels-residuals.png", "2-parcels-training.png",
        "3-coffee-calibration.png", "3-coffee-confusion.png", "3-coffee-dependence.png", "3-coffee-importance.png", "3-coffee-training.png",
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


def test_check_refuses_unsigned_models_with_exit_code_1_when_asked(tmp_path):
    import os

    import numpy as np
    import openpyxl
    import pandas as pd

    import sheetnet
    from sheetnet import service
    from sheetnet.block import BlockInfo, encode_block
    from sheetnet.sheet_writer import apply_to_workbook

    rng = np.random.default_rng(5)
    frame = pd.DataFrame({"a": rng.normal(size=40), "b": rng.normal(size=40)})
    model = sheetnet.fit(frame, frame["a"] - frame["b"], hidden=(2,), epochs=10, workers=1)
    workbook = openpyxl.Workbook()
    workbook.active["A1"] = "mine"
    apply_to_workbook(workbook, service.model_placements("small", encode_block(model, BlockInfo("y", "t", "x", "f" * 64, 40, 0))))
    book = tmp_path / "small.xlsx"
    workbook.save(book)
    script = str(Path(sys.executable).parent / "sheetnet")
    environment = {**os.environ, "SHEETNET_KEYS": str(tmp_path / "keys")}

    def run(*args):
        return subprocess.run([script, *args], capture_output=True, text=True, timeout=120, env=environment)

    assert run("check", str(book)).returncode == 0
    refused = run("check", str(book), "--trusted-only")
    assert refused.returncode == 1 and "REFUSED small: unsigned" in refused.stdout and "Traceback" not in refused.stderr
    assert run("keys", "make", "me").returncode == 0
    assert (tmp_path / "keys" / "me.key").stat().st_mode & 0o777 == 0o600
    assert run("sign", str(book)).returncode == 0
    passed = run("check", str(book), "--trusted-only")
    assert passed.returncode == 0 and "ok      small: intact; signed by the trusted key 'me'" in passed.stdout
    assert openpyxl.load_workbook(book).active["A1"].value == "mine"
