"""The server file: where a running ``sheetnet serve`` tells local doors how to reach it.

``sheetnet serve`` writes ``~/.sheetnet/server.json`` (``{"scheme", "port", "token", "pid",
"version"}``, with ``"certificate"`` under ``--https``) readable by the user only (0600, in a 0700 folder) and removes it on exit, so a door
that cannot be handed the token by a person (the Calc extension) finds the server by itself. A file
left by a server that died is recognised by its process no longer running.
"""

from __future__ import annotations

import json
import os
import signal
import tempfile
from pathlib import Path
from typing import Any

SERVER_FILE_NAME = "server.json"


def server_file_path(home: Path | None = None) -> Path:
    """``~/.sheetnet/server.json`` (``home`` replaces ``~``, for tests)."""
    return (home if home is not None else Path.home()) / ".sheetnet" / SERVER_FILE_NAME


def write_server_file(
    port: int, token: str, scheme: str = "http", path: Path | None = None, pid: int | None = None, certificate: Path | None = None
) -> Path:
    """Write the file atomically with owner-only permissions; returns its path. ``certificate``: the
    server's own TLS certificate (``sheetnet serve --https``), which local callers then trust."""
    from . import __version__

    target = path if path is not None else server_file_path()
    target.parent.mkdir(mode=0o700, parents=True, exist_ok=True)
    record: dict[str, Any] = {"scheme": scheme, "port": port, "token": token, "pid": pid if pid is not None else os.getpid(), "version": __version__}
    if certificate is not None:
        record["certificate"] = str(certificate)
    descriptor, temporary = tempfile.mkstemp(prefix=".server-", dir=target.parent)  # mkstemp creates it 0600
    try:
        with os.fdopen(descriptor, "w", encoding="utf-8") as handle:
            json.dump(record, handle)
        os.chmod(temporary, 0o600)
        os.replace(temporary, target)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
    return target


def read_server_file(path: Path | None = None) -> dict[str, Any] | None:
    """The record, or None when there is no file, it is unreadable, or its server process is gone."""
    target = path if path is not None else server_file_path()
    try:
        record = json.loads(target.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or not isinstance(record.get("port"), int) or not isinstance(record.get("token"), str):
        return None
    pid = record.get("pid")
    if isinstance(pid, int) and not _running(pid):
        return None
    return record


def remove_server_file(path: Path | None = None, pid: int | None = None) -> bool:
    """Remove the file if it still belongs to this process (another server may have replaced it)."""
    target = path if path is not None else server_file_path()
    try:
        record = json.loads(target.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    if isinstance(record, dict) and record.get("pid") != (pid if pid is not None else os.getpid()):
        return False
    target.unlink(missing_ok=True)
    return True


def exit_cleanly_on_terminate() -> None:
    """Make SIGTERM end the process through ``SystemExit``, so ``finally`` blocks remove the file.
    (uvicorn answers SIGTERM by shutting down and then raising the signal again under the handler
    that was in place before it started: with the default one the process dies before cleaning up.)"""
    def leave(number: int, frame: object) -> None:
        raise SystemExit(128 + number)

    signal.signal(signal.SIGTERM, leave)


def _running(pid: int) -> bool:
    if os.name == "nt":  # os.kill there would end the process, not probe it: trust the file
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # someone else's process: it exists
        return True
    return True
