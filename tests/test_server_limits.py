"""The server's budget, each case with its bound: oversized requests refused at once with little memory,
Host names other than the server's own refused, slow sockets closed, the public paths taking no body,
too much at once answered with Retry-After. Over real sockets; memory of a server in a process of its own."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import threading
import time
import tracemalloc
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import httpx
import orjson
import psutil
import pytest
from local_server import serving

from sheetnet import functions, limits, server
from sheetnet.registry import BY_NAME, CellFunction

TOKEN = "limits-token-0123456789abcdef"
AUTH = {"Authorization": f"Bearer {TOKEN}"}
MB = 1024 * 1024


# --- one server in a process of its own, whose memory is measured --------------------------------

@pytest.fixture(scope="module")
def measured():
    """(base address, psutil process) of a server started by tests/local_server.py."""
    script = Path(__file__).with_name("local_server.py")
    env = {**os.environ, "PYTHONPATH": str(script.parent)}
    process = subprocess.Popen([sys.executable, str(script), TOKEN], stdout=subprocess.PIPE, text=True, env=env)
    try:
        line = process.stdout.readline()
        assert line.startswith("port "), line
        base = f"http://127.0.0.1:{int(line.split()[1])}"
        with httpx.Client(base_url=base, headers=AUTH, timeout=60) as warm:  # the first calls load what every call uses
            for _ in range(200):
                try:
                    warm.post("/v1/functions/SHEETNET.LAGS", json={"args": [[["s"], [1], [2]], 1]}).raise_for_status()
                    break
                except httpx.TransportError:
                    time.sleep(0.05)
        yield base, psutil.Process(process.pid)
    finally:
        process.terminate()
        process.wait(20)
        process.stdout.close()


def _peak_growth(process: psutil.Process, send) -> tuple[httpx.Response, int]:
    """The answer to ``send()`` and how far the server's resident memory rose above where it stood, sampled meanwhile."""
    before = process.memory_info().rss
    peak, done = [before], threading.Event()

    def sample():
        while not done.is_set():
            peak[0] = max(peak[0], process.memory_info().rss)
            time.sleep(0.005)

    sampler = threading.Thread(target=sample)
    sampler.start()
    try:
        answer = send()
    finally:
        done.set()
        sampler.join()
    return answer, max(peak[0], process.memory_info().rss) - before


def test_the_billion_lags_request_is_refused_at_once_with_little_memory(measured):
    base, process = measured
    with httpx.Client(base_url=base, headers=AUTH, timeout=60) as client:
        started = time.perf_counter()
        answer, growth = _peak_growth(process, lambda: client.post("/v1/functions/SHEETNET.LAGS", json={"args": [[["s"], [1], [2]], 1e9]}))
        seconds = time.perf_counter() - started
    assert answer.status_code == 200
    assert answer.json()["message"].startswith("#SHEETNET! a lag of 1,000,000,000 is as long as the series or longer")
    assert growth < 5 * MB and seconds < 2  # before the cap: 6 GB in 14 s


def test_lags_beyond_the_count_limit_and_answers_beyond_the_cell_limit_are_refused_with_little_memory(measured):
    base, process = measured
    series = [["s"]] + [[float(i % 97)] for i in range(200_000)]
    with httpx.Client(base_url=base, headers=AUTH, timeout=60) as client:
        body = orjson.dumps({"args": [series, 199_999]})
        send = lambda: client.post("/v1/functions/SHEETNET.LAGS", content=body, headers={"content-type": "application/json"})  # noqa: E731
        send()  # the series' own parsing has settled in once
        answer, growth = _peak_growth(process, send)
        assert answer.json()["message"] == (
            "#SHEETNET! 199,999 lags are more than the 1,000 SHEETNET.LAGS makes in one call; give a smaller count, or a list of the lags you need, like 1,2,12"
        )
        assert growth < 60 * MB  # the series parsed (200,000 rows), not 200,000 x 199,999 answer cells
        listed = orjson.dumps({"args": [series, ",".join(map(str, range(1, 21)))]})  # 20 lags x 200,001 rows: 4 million cells
        answer, growth = _peak_growth(process, lambda: client.post("/v1/functions/SHEETNET.LAGS", content=listed, headers={"content-type": "application/json"}))
        assert answer.json()["message"].startswith(
            "#SHEETNET! SHEETNET.LAGS would answer up to 4,000,020 cells (200,001 rows by up to 20 columns), more than the 4,000,000"
        )
        assert growth < 60 * MB


def test_a_body_of_millions_of_tiny_rows_is_refused_before_it_is_parsed(measured):
    base, process = measured
    rows = 7_000_000  # "[1]," is 4 bytes; parsed, each row would take about 70
    body = b'{"args": [[' + b"[1]," * rows + b'[1]], 1]}'
    assert len(body) < limits.MAX_BODY_BYTES
    with httpx.Client(base_url=base, headers=AUTH, timeout=60) as client:
        answer, growth = _peak_growth(process, lambda: client.post("/v1/functions/SHEETNET.LAGS", content=body, headers={"content-type": "application/json"}))
    assert answer.status_code == 413
    assert answer.json()["detail"].startswith("the request holds 7,000,003 rows, more than the 2,500,000 sheetnet takes in one call")
    assert growth < 3 * len(body)  # the body held while it is counted (about 28 MB), never the 590 MB that parsing it takes


def test_the_public_files_with_a_huge_body_use_no_memory(measured):
    base, process = measured
    host, port = base.removeprefix("http://").split(":")

    def sixteen_at_once():
        def one(_):
            with socket.create_connection((host, int(port)), timeout=10) as sock:
                sock.sendall(f"POST /addin/taskpane.html HTTP/1.1\r\nHost: {host}:{port}\r\nContent-Length: {32 * MB}\r\n\r\n".encode())
                answer = sock.recv(200)  # answered before a byte of the body is sent
                try:
                    sock.sendall(b"x" * MB)  # and the body, sent anyway, goes nowhere: the connection is closed
                except OSError:
                    pass
                return answer

        with ThreadPoolExecutor(max_workers=16) as pool:
            return list(pool.map(one, range(16)))

    answers, growth = _peak_growth(process, sixteen_at_once)
    assert all(a.startswith(b"HTTP/1.1 413 ") for a in answers)
    assert growth < 10 * MB  # 16 x 32 MB once went to memory (153 to 710 MB)


# --- in-process: the cell functions refuse before allocating -------------------------------------

def test_cell_functions_refuse_oversized_asks_before_allocating():
    wide = [[f"c{j}" for j in range(40_000)], list(range(40_000))]
    tall = [["s"]] + [[1.0]] * 1_100_000
    cases = {  # the arguments are made before memory is traced: only what the function allocates counts
        "lags": (functions.lags, ([["s"], [1], [2]], 1e9), "#SHEETNET! a lag of 1,000,000,000 is as long as the series or longer"),
        "columns": (functions.split, (wide,), "#SHEETNET! the table range has 40,000 columns, more than the 16,384 sheetnet reads; select only the rows"),
        "rows": (functions.lags, (tall, 1), "#SHEETNET! the series range has 1,100,001 rows, more than the 1,048,576 sheetnet reads"),
        "train": (functions.train, (wide, "c1"), "#SHEETNET! the table range has 40,000 columns"),
    }
    for name, (function, args, expected) in cases.items():
        tracemalloc.start()
        started = time.perf_counter()
        answer = function(*args)
        seconds = time.perf_counter() - started
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        assert answer[0][0].startswith(expected), (name, answer)
        assert peak < 100_000 and seconds < 1, (name, peak, seconds)  # the 40,000-column header took 30 s before


def test_predict_refuses_an_answer_beyond_the_cell_limit_before_predicting(monkeypatch):
    rows = [["x", "y"]] + [[float(i % 10), i % 7 + 0.25 * (i % 3)] for i in range(200)]  # amounts: a regression, no classes
    model = functions.train(rows, "y", "2", "epochs=5")
    calls = []
    monkeypatch.setattr(functions, "_predictions", lambda *a: calls.append(1))
    table = [["x"]] + [[1.0]] * 1_000_000
    answer = functions.predict(model, table, "value, interval, spread, flag")
    assert answer[0][0].startswith("#SHEETNET! SHEETNET.PREDICT would answer up to 8,000,008 cells (1,000,001 rows by up to 8 columns)")
    assert calls == []


def test_the_request_count_skips_commas_inside_texts():
    texts = [["note"]] + [["a," * 3000 + "b"] for _ in range(2000)]  # six million commas, all inside texts
    raw = orjson.dumps({"args": [texts, 0.25]})
    assert raw.count(b",") > limits.MAX_REQUEST_VALUES
    assert limits.json_size(raw) == (2001 + 2003, 2003)  # commas between rows and arguments, plus one a list
    limits.check_request_body(raw)  # not refused
    with pytest.raises(limits.SizeError, match=r"^the request holds about 5,000,001 cells, more than the 5,000,000"):
        limits.check_request_body(b"[" + b"1," * 5_000_000 + b"1]")


def test_the_budget_as_the_server_answers_it(monkeypatch):
    with serving(server.create_app(TOKEN)) as base, httpx.Client(base_url=base, headers=AUTH, timeout=60) as client:
        many = b'{"args": [' + b"1," * 5_100_000 + b"1]}"
        answer = client.post("/v1/functions/SHEETNET.LAGS", content=many, headers={"content-type": "application/json"})
        assert answer.status_code == 413 and answer.json()["detail"].startswith("the request holds about 5,100,001 cells")
        jobs = client.post("/v1/jobs", content=b'{"name": "m", "args": [' + b"[1]," * 2_600_000 + b"1]}", headers={"content-type": "application/json"})
        assert jobs.status_code == 413 and "2,500,000" in jobs.json()["detail"]  # every call, not the cell functions only


# --- the Host header --------------------------------------------------------------------------------

def _raw_request(host: str, port: int, head: bytes, timeout: float = 10) -> bytes:
    with socket.create_connection((host, port), timeout=timeout) as sock:
        sock.sendall(head)
        received = b""
        while b"\r\n\r\n" not in received:
            chunk = sock.recv(4096)
            if not chunk:
                break
            received += chunk
        return received


@pytest.fixture(scope="module")
def live():
    with serving(server.create_app(TOKEN)) as base:
        yield base


def test_requests_for_other_hosts_are_refused_with_421(live):
    port = int(live.rsplit(":", 1)[1])
    refused = ["evil.example", f"evil.example:{port}", "127.0.0.1", f"127.0.0.1:{port + 1}", f"localhost.:{port}", f"127.0.0.2:{port}",
               f"127.0.0.1.nip.io:{port}", f"[::2]:{port}", f"127.0.0.1:{port}@evil.example", ""]
    accepted = [f"127.0.0.1:{port}", f"localhost:{port}", f"[::1]:{port}", f"LocalHost:{port}"]
    with httpx.Client(base_url=live, headers=AUTH, timeout=30) as client:
        for host in refused:
            for path in ("/v1/functions", "/addin/taskpane.html"):  # with the token, and on the public files
                answer = client.get(path, headers={"Host": host})
                assert answer.status_code == 421, (host, path)
                words = f"this sheetnet server answers only requests addressed to 127.0.0.1:{port}, localhost:{port} or [::1]:{port}"
                assert answer.json()["detail"].startswith(words)
        for host in accepted:
            assert client.get("/v1/functions", headers={"Host": host}).status_code == 200, host
    no_host = _raw_request("127.0.0.1", port, b"GET /v1/functions HTTP/1.0\r\n" + f"Authorization: Bearer {TOKEN}\r\n\r\n".encode())
    assert no_host.startswith(b"HTTP/1.1 421 ")


def test_the_served_files_carry_the_servers_own_address(live):
    with httpx.Client(base_url=live, timeout=30) as client:
        script = client.get("/addin/functions.js", headers={"Host": live.removeprefix("http://").replace("127.0.0.1", "localhost")}).text
    assert f'const SHEETNET_BASE = "{live}";' in script  # not the Host the request named


# --- slow sockets, bodies on public paths, too much at once ---------------------------------------

def test_slow_sockets_are_closed_within_the_timeouts():
    app = server.create_app(TOKEN, body_timeout=1.0)
    with serving(app, **server.server_options(header_timeout=1.0)) as base:
        port = int(base.rsplit(":", 1)[1])
        sockets = []
        for k in range(50):  # headers that never end (a byte now and then), and connections that never say a word
            sock = socket.create_connection(("127.0.0.1", port), timeout=10)
            if k % 5:
                sock.sendall(b"GET /v1/functions HTTP/1.1\r\nHost: 127.0.0.1\r\n")
            sockets.append(sock)
        started = time.monotonic()
        for _ in range(3):
            time.sleep(0.3)
            for k, sock in enumerate(sockets):
                try:
                    if k % 5:
                        sock.sendall(b"X")
                except OSError:
                    pass
        closed_after = []
        for sock in sockets:
            try:
                while sock.recv(4096):
                    pass
            except OSError:
                pass
            closed_after.append(time.monotonic() - started)
            sock.close()
        assert max(closed_after) < 3.0  # the header timeout is 1 s; the sockets stayed open forever before
        # a body that never arrives in full: 408 once the body's time is up, and the connection closed
        with socket.create_connection(("127.0.0.1", port), timeout=10) as sock:
            started = time.monotonic()
            sock.sendall(f"POST /v1/functions/SHEETNET.LAGS HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\nAuthorization: Bearer {TOKEN}\r\n"
                         "Content-Type: application/json\r\nContent-Length: 100\r\n\r\n{\"args\"".encode())
            received = b""
            while chunk := sock.recv(4096):
                received += chunk
            assert time.monotonic() - started < 3.0
        assert received.startswith(b"HTTP/1.1 408 ") and b"did not arrive within 1 seconds" in received
        with httpx.Client(base_url=base, headers=AUTH) as client:  # a prompt caller is served as ever
            assert client.get("/v1/functions").status_code == 200


def test_the_public_paths_take_no_body(live):
    port = int(live.rsplit(":", 1)[1])
    for path in ("/addin/taskpane.html", "/addin/functions.json", "/"):
        for framing in (f"Content-Length: {32 * MB}", "Transfer-Encoding: chunked"):
            started = time.monotonic()
            answer = _raw_request("127.0.0.1", port, f"POST {path} HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\n{framing}\r\n\r\n".encode())
            assert answer.startswith(b"HTTP/1.1 413 "), (path, framing, answer[:80])
            assert b"connection: close" in answer.lower()
            assert time.monotonic() - started < 2  # answered without the body being sent at all
    with httpx.Client(base_url=live, timeout=30) as client:
        assert client.get("/addin/taskpane.html").status_code == 200  # without a body, as ever
        options = client.options("/v1/functions", headers={"Origin": "http://127.0.0.1", "Access-Control-Request-Method": "POST"})
        assert options.status_code != 413


def test_too_many_calls_at_once_get_503_with_retry_after(monkeypatch):
    release, entered = threading.Event(), threading.Semaphore(0)
    original = BY_NAME["SHEETNET.LAGS"]

    def held_lags(series, lags=None):
        entered.release()
        assert release.wait(30)
        return functions.lags(series, lags)

    monkeypatch.setitem(BY_NAME, "SHEETNET.LAGS", CellFunction(original.name, held_lags, original.help, original.arguments, original.returns))
    with serving(server.create_app(TOKEN, max_calls=3)) as base:
        with httpx.Client(base_url=base, headers=AUTH, timeout=30) as client, ThreadPoolExecutor(max_workers=3) as pool:
            pending = [pool.submit(client.post, "/v1/functions/SHEETNET.LAGS", json={"args": [[["s"], [1], [i]], 1]}) for i in range(3)]
            assert all(entered.acquire(timeout=30) for _ in range(3))  # the three calls are being answered
            busy = client.get("/v1/functions")
            assert busy.status_code == 503 and busy.headers["retry-after"] == "1"
            assert busy.json()["detail"] == "the sheetnet server is answering 3 calls already, the most it takes at once; try again in a moment"
            release.set()
            assert [p.result().status_code for p in pending] == [200] * 3
            assert client.get("/v1/functions").status_code == 200


def test_bodies_beyond_what_is_held_at_once_get_503_with_retry_after():
    with serving(server.create_app(TOKEN, max_held=1000)) as base, httpx.Client(base_url=base, headers=AUTH, timeout=30) as client:
        small = client.post("/v1/functions/SHEETNET.LAGS", json={"args": [[["s"], [1], [2]], 1]})
        assert small.status_code == 200
        large = client.post("/v1/functions/SHEETNET.LAGS", json={"args": [[["s"]] + [[i] for i in range(500)], 1]})
        assert large.status_code == 503 and large.headers["retry-after"] == "1"
        assert client.post("/v1/functions/SHEETNET.LAGS", json={"args": [[["s"], [1], [2]], 1]}).status_code == 200  # released


def test_a_refusal_sent_before_the_body_ends_the_connection(live):
    port = int(live.rsplit(":", 1)[1])
    with socket.create_connection(("127.0.0.1", port), timeout=10) as sock:  # no token: 401 at once, then the socket is closed
        sock.sendall(f"POST /v1/functions/SHEETNET.LAGS HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\nContent-Length: {MB}\r\n\r\n".encode())
        received = b""
        started = time.monotonic()
        try:
            while time.monotonic() - started < 5:
                sock.sendall(b"x" * 100)  # a trickle of body that the server would otherwise read and drop for ever
                chunk = sock.recv(4096)
                if not chunk:
                    break
                received += chunk
                time.sleep(0.1)
        except OSError:
            pass
        assert received.startswith(b"HTTP/1.1 401 ") and time.monotonic() - started < 5
