"""The add-in's Node tests (tests/node/), run from the suite so the README's test command runs them.

They load the served functions.js into a stand-in of Excel's custom-functions runtime written from
Microsoft's documentation (tests/node/custom_functions_runtime.js), start a real `sheetnet serve` on
loopback and compare every registry function with the Python call; no Excel runs. Skipped, with the
reason, only when Node is not installed.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

NODE_TESTS = Path(__file__).with_name("node")
NODE = shutil.which("node")


@pytest.mark.skipif(NODE is None, reason="Node.js is not installed (the add-in's tests need Node 20 or later)")
def test_the_add_in_holds_to_the_custom_functions_contract_against_a_live_server():
    files = sorted(p.name for p in NODE_TESTS.glob("*.test.js"))
    assert files, "no Node test files found"
    env = {**os.environ, "SHEETNET_PYTHON": sys.executable}
    done = subprocess.run([NODE, "--test", *files], cwd=NODE_TESTS, env=env, capture_output=True, text=True, timeout=400)
    report = done.stdout + done.stderr
    assert done.returncode == 0, report[-6000:]
    assert "# fail 0" in report and "# pass 0" not in report
