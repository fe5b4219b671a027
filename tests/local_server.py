"""Run a sheetnet server on a free loopback port in a background thread (tests and benchmarks)."""

from __future__ import annotations

import threading
import time
from contextlib import contextmanager
from typing import Any, Iterator

import uvicorn

from sheetnet.server import server_options


@contextmanager
def serving(app, **options: Any) -> Iterator[str]:
    """Yields the base address, like ``http://127.0.0.1:41234``; stops the server afterwards.
    Runs with the options ``sheetnet serve`` uses (`server.server_options`); ``options`` replace them."""
    config = uvicorn.Config(app, host="127.0.0.1", port=0, log_level="warning", **{**server_options(), **options})
    running = uvicorn.Server(config)
    thread = threading.Thread(target=running.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not running.started and time.monotonic() < deadline:
        time.sleep(0.05)
    if not running.started:
        raise RuntimeError("the test server did not start within 20 s")
    host, port = running.servers[0].sockets[0].getsockname()[:2]
    try:
        yield f"http://{host}:{port}"
    finally:
        running.should_exit = True
        thread.join(10)


def main() -> None:
    """``python tests/local_server.py TOKEN``: a server in a process of its own (for measuring its memory);
    prints ``port N`` once it listens, serves until stopped."""
    import socket
    import sys

    from sheetnet import cli, server

    listening = socket.create_server(("127.0.0.1", 0))
    port = listening.getsockname()[1]
    app = server.create_app(sys.argv[1], origin=f"http://127.0.0.1:{port}")
    print(f"port {port}", flush=True)
    cli.serve_forever(app, listening, host="127.0.0.1", port=port, **server_options())


if __name__ == "__main__":
    main()
