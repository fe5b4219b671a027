"""The Calc extension when the server is missing, stopped, slow or refuses: a readable message in the
cell within the time limit, never a bare error or a hung office; and a server started from Calc when
none runs (the interpreter recorded at install time). Real headless LibreOffice, one office start."""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path
from typing import Any, Iterator

import pytest
from calc_office import CalcOffice, office_missing
from calc_scenario import TOKEN, address, bakery_table
from local_server import serving

from sheetnet import functions
from sheetnet.calc.commands import office_settings
from sheetnet.server import create_app
from sheetnet.server_file import write_server_file

MISSING = office_missing() or (None if shutil.which("unopkg") else "unopkg is missing (apt-get install libreoffice-calc-nogui)")
pytestmark = pytest.mark.skipif(MISSING is not None, reason=MISSING or "")
LIMIT = 2.0  # seconds the cells wait for the server in this office (SHEETNET_CALC_TIMEOUT)
SHEET = "Sheet1"


@pytest.fixture(scope="module")
def office(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, Any]]:
    home = tmp_path_factory.mktemp("calc-fail-home")
    profile = home / "profile"
    command = [sys.executable, "-c", "import sys; from sheetnet.cli import main; sys.exit(main(sys.argv[1:]))",
               "calc", "install", "--profile", str(profile), "--interpreter", sys.executable]
    installed = subprocess.run(command, env=dict(os.environ, HOME=str(home)), capture_output=True, text=True, timeout=300)
    assert installed.returncode == 0, installed.stderr
    assert f"Calc starts one with {sys.executable}" in installed.stdout
    live = CalcOffice(home, profile, office_settings(profile), {"SHEETNET_CALC_TIMEOUT": str(LIMIT)})
    state: dict[str, Any] = {"home": home, "office": live, "cell": 0}
    try:
        state["doc"] = live.call("new")
        table = bakery_table(30)
        live.call("put", doc=state["doc"], sheet=SHEET, address=address("A", 1, 4, len(table)), rows=table)
        state["table"] = table
        yield state
    finally:
        live.close()
        record = _record(home)
        if record and record.get("pid") not in (None, os.getpid()):
            os.kill(record["pid"], signal.SIGTERM)  # the server this test had Calc start


def _record(home: Path) -> dict[str, Any] | None:
    try:
        return json.loads((home / ".sheetnet" / "server.json").read_text())
    except (OSError, ValueError):
        return None


def fresh_cell(state: dict[str, Any], formula: str, height: int = 1, width: int = 1) -> tuple[list[list[Any]], float]:
    """A new array formula (add-in cells rerun only when their inputs change), its cells and the seconds Calc took."""
    state["cell"] += 1
    where = address("H", 1 + 40 * state["cell"], width, height)
    office = state["office"]
    office.call("array_formula", doc=state["doc"], sheet=SHEET, address=where, formula=formula)
    seconds = office.call("calculate", doc=state["doc"])
    return office.call("read", doc=state["doc"], sheet=SHEET, address=where), seconds


def point_at(state: dict[str, Any], port: int, token: str = TOKEN) -> None:
    write_server_file(port, token, path=state["home"] / ".sheetnet" / "server.json", pid=os.getpid())


def test_a_wrong_token_reads_as_a_message(office: dict[str, Any]) -> None:
    with serving(create_app(TOKEN)) as base:
        point_at(office, int(base.rsplit(":", 1)[1]), token="not-the-token-at-all")
        cells, _ = fresh_cell(office, "=SHEETNET.LAGS(D1:D10;1)")
    assert cells[0][0].startswith("#SHEETNET! missing or wrong access token")


def test_a_stopped_server_reads_as_a_message(office: dict[str, Any]) -> None:
    with socket.socket() as probe:  # a port nothing listens on
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    point_at(office, port)
    cells, seconds = fresh_cell(office, "=SHEETNET.LAGS(D1:D10;1)")
    assert cells[0][0] == f"#SHEETNET! no sheetnet server answers on 127.0.0.1:{port}; start one with: sheetnet serve"
    assert seconds < 30  # no hang (connection refused is immediate)


def test_a_silent_server_gives_up_within_the_limit(office: dict[str, Any]) -> None:
    with socket.socket() as silent:  # accepts connections (the backlog) and never answers
        silent.bind(("127.0.0.1", 0))
        silent.listen(8)
        point_at(office, silent.getsockname()[1])
        cells, seconds = fresh_cell(office, "=SHEETNET.LAGS(D1:D10;1)")
    assert cells[0][0] == f"#SHEETNET! the sheetnet server did not answer within {LIMIT:g} s; it may be busy: recalculate later, or restart sheetnet serve"
    assert LIMIT * 0.9 <= seconds < LIMIT + 30


def test_bad_input_reads_in_spreadsheet_words(office: dict[str, Any]) -> None:
    with serving(create_app(TOKEN)) as base:
        point_at(office, int(base.rsplit(":", 1)[1]))
        cells, _ = fresh_cell(office, "=SHEETNET.PREDICT(A1:D5;A1:C10)")
        missing, _ = fresh_cell(office, "=SHEETNET.PREDICT()")
    expected = functions.predict([row[:] for row in office["table"][:5]], [row[:3] for row in office["table"][:10]])
    assert cells == [[expected[0][0]]] and cells[0][0].startswith("#SHEETNET! ")
    assert missing[0][0].startswith("#SHEETNET! SHEETNET.PREDICT needs at least 2 arguments")


def test_an_https_server_is_reached_through_its_own_certificate(office: dict[str, Any], tmp_path: Path) -> None:
    import threading

    import uvicorn

    from sheetnet.tls import local_certificate

    certificate, key = local_certificate(tmp_path / "tls")
    server = uvicorn.Server(uvicorn.Config(create_app(TOKEN), host="127.0.0.1", port=0, log_level="warning",
                                           ssl_certfile=str(certificate), ssl_keyfile=str(key)))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    try:
        deadline = time.monotonic() + 20
        while not server.started and time.monotonic() < deadline:
            time.sleep(0.05)
        port = server.servers[0].sockets[0].getsockname()[1]
        write_server_file(port, TOKEN, "https", office["home"] / ".sheetnet" / "server.json", os.getpid(), certificate)
        cells, _ = fresh_cell(office, "=SHEETNET.LAGS(D1:D4;1)", height=4)
    finally:
        server.should_exit = True
        thread.join(10)
    assert cells == [[v] for (v,) in functions.lags([[r[3]] for r in office["table"][:4]], 1)]


def test_no_server_starts_one_with_the_recorded_interpreter(office: dict[str, Any]) -> None:
    (office["home"] / ".sheetnet" / "server.json").unlink(missing_ok=True)
    office["office"].call("array_formula", doc=office["doc"], sheet=SHEET, address="AA1:AA31", formula="=SHEETNET.SPLIT(A1:D31;0.25;7)")
    office["office"].call("calculate", doc=office["doc"])
    cells = office["office"].call("read", doc=office["doc"], sheet=SHEET, address="AA1:AA31")
    record = _record(office["home"])
    assert record is not None and record["pid"] != os.getpid()
    assert (office["home"] / ".sheetnet" / "server.json").stat().st_mode & 0o777 == 0o600
    assert cells == [[v] for (v,) in functions.split(office["table"], 0.25, 7)]
