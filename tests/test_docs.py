"""The documents say what the code does: settings table, set-up commands, docstring examples."""

import doctest
import importlib
from pathlib import Path

import pytest

from sheetnet.settings import settings_table_markdown

ROOT = Path(__file__).resolve().parents[1]


def test_readme_settings_table_is_generated_from_the_settings():
    assert settings_table_markdown() in (ROOT / "README.md").read_text()


def test_ci_runs_exactly_the_readme_test_command():
    readme = (ROOT / "README.md").read_text()
    command = "python3 -m venv .venv && .venv/bin/pip install '.[dev]' && .venv/bin/python -m pytest"
    assert command in readme
    assert command in (ROOT / ".ci" / "run").read_text()
    assert "python3 -m venv .venv && .venv/bin/pip install . && .venv/bin/sheetnet demo" in readme


def test_readme_carries_the_cautions():
    readme = (ROOT / "README.md").read_text()
    for phrase in ("decision aid", "bias", "local law", "credit", "hiring", "medical", "safety"):
        assert phrase in readme


@pytest.mark.parametrize("module", ["sheetnet.network", "sheetnet.settings", "sheetnet.splits", "sheetnet.preparation", "sheetnet.training"])
def test_docstring_examples_run(module):
    result = doctest.testmod(importlib.import_module(module))
    assert result.attempted > 0
    assert result.failed == 0
