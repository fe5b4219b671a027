"""The local sheetnet server: the cell functions over HTTP for sheetnet's own Office add-in.

Listens on 127.0.0.1 only. Every call needs ``Authorization: Bearer TOKEN``
except the add-in's static files under ``/addin/`` (the task pane page reads
the token from its address, ``#token=...``). Request bodies are limited in
size; errors are JSON with the same messages the cells show, produced in one
place (the exception handlers below).

- ``GET /v1/functions``: the registry.
- ``POST /v1/functions/{name}`` with ``{"args": [...]}``: ``{"result": [[...]]}``. Runs off the
  event loop; identical requests under way at the same time are computed once.
- ``POST /v1/jobs`` with ``{"name": MODEL, "args": [TRAIN's arguments]}``: a training job, with
  ``GET /v1/jobs/{id}`` for progress (epoch, losses, curve) and ``DELETE /v1/jobs/{id}`` to cancel.
- ``GET /v1/models``: the models this server trained, with their summaries.
- ``/openapi.json``: the schema (token required).
"""

from __future__ import annotations

import asyncio
import hashlib
import hmac
import json
import math
import secrets
import threading
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from fastapi import FastAPI, HTTPException, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel, Field
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from . import __version__, functions
from .cells import MARKER
from .errors import SheetnetError
from .registry import BY_NAME, REGISTRY

MAX_BODY_BYTES = 32 * 1024 * 1024  # about a million numeric cells
KEPT_JOBS = 100  # finished training jobs remembered for their callers
ADDIN_FILES = Path(__file__).parent / "addin"


class CallBody(BaseModel):
    args: list[Any] = Field(default_factory=list, description="the cell function's arguments in order; ranges as lists of rows")


class JobBody(BaseModel):
    name: str = Field(description="the model's name, as it will be stored in the workbook")
    args: list[Any] = Field(description="SHEETNET.TRAIN's arguments: table, target, [hidden], [settings], [split]")


class Cancelled(SheetnetError):
    """A training job was cancelled by its caller."""


@dataclass
class Job:
    id: str
    name: str
    state: str = "running"  # running, done, failed, cancelled
    epoch: int = 0
    epochs: int = 0
    training_loss: float | None = None
    validation_loss: float | None = None
    curve: list[list[float | None]] = field(default_factory=list)
    message: str | None = None
    result: list[list[Any]] | None = None
    cancel: threading.Event = field(default_factory=threading.Event)

    def view(self) -> dict[str, Any]:
        return {
            "id": self.id, "name": self.name, "state": self.state, "epoch": self.epoch, "epochs": self.epochs,
            "training_loss": self.training_loss, "validation_loss": self.validation_loss,
            "curve": self.curve[-500:], "message": self.message, "result": self.result,
        }


def _finite(value: Any) -> Any:
    """JSON cannot carry NaN or infinity: they go out as blanks (None)."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, list):
        return [_finite(v) for v in value]
    return value


class BodyLimit:
    """Refuses request bodies over the limit with 413, whether announced by Content-Length or not."""

    def __init__(self, app: ASGIApp, limit: int) -> None:
        self.app, self.limit = app, limit

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        declared = dict(scope.get("headers", [])).get(b"content-length")
        if declared is not None and declared.isdigit() and int(declared) > self.limit:
            await _too_large(self.limit, send)
            return
        # read the whole body first (it is bounded by the limit), then hand it on in one piece
        parts, seen, more = [], 0, True
        while more:
            message = await receive()
            if message["type"] != "http.request":
                await self.app(scope, receive, send)  # a disconnect: let the app see it
                return
            parts.append(message.get("body", b""))
            seen += len(parts[-1])
            if seen > self.limit:
                await _too_large(self.limit, send)
                return
            more = message.get("more_body", False)
        body, delivered = b"".join(parts), False

        async def replay() -> Message:
            nonlocal delivered
            if not delivered:
                delivered = True
                return {"type": "http.request", "body": body, "more_body": False}
            return await receive()

        await self.app(scope, replay, send)


class TokenGate:
    """Refuses every call without ``Authorization: Bearer TOKEN`` (except the add-in's static files);
    answers CORS for our own origin only. A plain ASGI layer: it adds no per-request task or copy."""

    def __init__(self, app: ASGIApp, token: str, origin: str) -> None:
        self.app, self.expected, self.origin = app, f"Bearer {token}".encode(), origin.encode()

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        headers = dict(scope.get("headers", []))
        path = scope.get("path", "")
        public = scope.get("method") == "OPTIONS" or path.startswith("/addin/") or path == "/"
        if not public and not hmac.compare_digest(headers.get(b"authorization", b""), self.expected):
            body = json.dumps({"detail": "missing or wrong access token; send the header 'Authorization: Bearer TOKEN' printed by sheetnet serve"}).encode()
            await send({"type": "http.response.start", "status": 401, "headers": [(b"content-type", b"application/json")]})
            await send({"type": "http.response.body", "body": body})
            return
        if headers.get(b"origin") != self.origin:
            await self.app(scope, receive, send)
            return

        async def with_cors(message: Message) -> None:
            if message["type"] == "http.response.start":
                extra = [
                    (b"access-control-allow-origin", self.origin),
                    (b"access-control-allow-headers", b"Authorization, Content-Type"),
                    (b"access-control-allow-methods", b"GET, POST, DELETE"),
                ]
                message = {**message, "headers": [*message.get("headers", []), *extra]}
            await send(message)

        await self.app(scope, receive, with_cors)


async def _too_large(limit: int, send: Send) -> None:
    body = json.dumps({"detail": f"the request body is larger than {limit:,} bytes; send fewer cells per call"}).encode()
    await send({"type": "http.response.start", "status": 413, "headers": [(b"content-type", b"application/json")]})
    await send({"type": "http.response.body", "body": body})


def create_app(token: str, origin: str = "http://127.0.0.1", max_body: int = MAX_BODY_BYTES) -> FastAPI:
    """The application; ``origin`` is where it is served from (the only origin CORS allows)."""
    if len(token) < 16:
        raise ValueError("the access token must be at least 16 characters")
    app = FastAPI(title="sheetnet local server", version=__version__, description=__doc__)
    jobs: dict[str, Job] = {}
    models: dict[str, dict[str, Any]] = {}
    running: dict[str, asyncio.Future[Any]] = {}
    lock = threading.Lock()


    @app.exception_handler(RequestValidationError)
    async def malformed(request: Request, error: RequestValidationError) -> JSONResponse:
        problems = "; ".join(f"{'.'.join(str(p) for p in e.get('loc', ()))}: {e.get('msg')}" for e in error.errors())
        return JSONResponse({"detail": f"the request body is not what this call takes ({problems}); send JSON like {{\"args\": [...]}}"}, 422)

    @app.exception_handler(SheetnetError)
    async def refused(request: Request, error: SheetnetError) -> JSONResponse:
        return JSONResponse({"detail": str(error)}, 400)

    @app.get("/", include_in_schema=False)
    def home() -> Response:
        return Response(status_code=307, headers={"location": "/addin/taskpane.html"})

    @app.get("/v1/functions", summary="the cell functions this server runs")
    def list_functions() -> dict[str, Any]:
        def arguments(entry: Any) -> list[dict[str, Any]]:
            return [{"name": a.name, "help": a.help, "optional": a.optional, "kind": a.kind} for a in entry.arguments]

        return {"functions": [
            {"name": f.name, "help": f.help, "returns": f.returns, "arguments": arguments(f)}
            for f in REGISTRY
        ]}

    call_schema = {"requestBody": {"required": True, "content": {"application/json": {"schema": CallBody.model_json_schema()}}}}

    @app.post("/v1/functions/{name}", summary="run one cell function", openapi_extra=call_schema)
    async def call_function(name: str, request: Request) -> Response:
        entry = BY_NAME.get(name.upper()) or BY_NAME.get(f"SHEETNET.{name.upper()}")
        if entry is None:
            raise HTTPException(404, f"there is no cell function '{name}'; GET /v1/functions lists them")
        raw = await request.body()
        body = _call_body(raw)
        if len(body.args) > len(entry.arguments):
            raise HTTPException(422, f"{entry.name} takes at most {len(entry.arguments)} arguments; got {len(body.args)}")
        required = sum(not a.optional for a in entry.arguments)
        if len(body.args) < required:
            names = ", ".join(a.name for a in entry.arguments[:required])
            raise HTTPException(422, f"{entry.name} needs at least {required} arguments ({names}); got {len(body.args)}")
        key = hashlib.sha256(entry.name.encode() + b"\0" + raw).hexdigest()  # identical requests: identical bytes
        loop = asyncio.get_running_loop()
        with lock:
            future = running.get(key)
            if future is None:  # the first of identical requests computes; the others wait for it
                future = running[key] = asyncio.ensure_future(loop.run_in_executor(None, entry.run, *body.args))
                future.add_done_callback(lambda _: running.pop(key, None))
        result = await asyncio.shield(future)
        answer: dict[str, Any] = {"result": result}
        if result and result[0] and isinstance(result[0][0], str) and result[0][0].startswith(MARKER):
            answer["message"] = result[0][0]
        # json.dumps directly: FastAPI's generic encoder walks every cell and is many times slower
        return Response(_dumps(answer), media_type="application/json")

    @app.post("/v1/jobs", status_code=202, summary="start a training job (SHEETNET.TRAIN with progress)")
    def start_job(body: JobBody) -> dict[str, Any]:
        job = Job(uuid.uuid4().hex, body.name)
        finished = [j for j in jobs.values() if j.state != "running"]
        for old in finished[: max(0, len(jobs) - KEPT_JOBS)]:  # keep memory bounded: forget the oldest finished jobs
            jobs.pop(old.id, None)
        jobs[job.id] = job
        args = list(body.args) + [None] * (5 - len(body.args))

        def progress(epoch: int, most: int, training: float, validation: float | None) -> None:
            if job.cancel.is_set():
                raise Cancelled("the training was cancelled")
            job.epoch, job.epochs, job.training_loss, job.validation_loss = epoch, most, training, validation
            job.curve.append([epoch, _finite(training), _finite(validation)])

        def work() -> None:
            try:
                table, target, hidden, settings, split = args[:5]
                block = functions.train_block(table, target, hidden, settings, split, progress=progress)
                job.result = _finite(block)
                about = functions.raising(functions.about)(block)
                models[job.name] = {"name": job.name, "about": _finite(about), "block": job.result, "trained": time.time()}
                job.state = "done"
            except Cancelled as error:
                job.state, job.message = "cancelled", str(error)
            except SheetnetError as error:
                job.state, job.message = "failed", f"{MARKER} {error}"
            except Exception as error:  # a bug: reported, never a dead job
                job.state, job.message = "failed", f"{MARKER} unexpected {type(error).__name__}: {error}"

        if len(body.args) < 2:
            raise HTTPException(422, "a training job needs at least the table and the target column's name")
        threading.Thread(target=work, daemon=True, name=f"sheetnet-job-{job.id[:8]}").start()
        return {"id": job.id, "state": job.state}

    @app.get("/v1/jobs/{job_id}", summary="a training job's progress and, when done, its model block")
    def job_status(job_id: str) -> dict[str, Any]:
        if job_id not in jobs:
            raise HTTPException(404, f"there is no job '{job_id}'")
        return jobs[job_id].view()

    @app.delete("/v1/jobs/{job_id}", summary="cancel a training job")
    def cancel_job(job_id: str) -> dict[str, Any]:
        if job_id not in jobs:
            raise HTTPException(404, f"there is no job '{job_id}'")
        jobs[job_id].cancel.set()
        return {"id": job_id, "state": "cancelling" if jobs[job_id].state == "running" else jobs[job_id].state}

    @app.get("/v1/models", summary="the models this server has trained")
    def list_models() -> dict[str, Any]:
        return {"models": [{k: v for k, v in m.items() if k != "block"} for m in sorted(models.values(), key=lambda m: -m["trained"])]}

    @app.get("/addin/{file_name}", include_in_schema=False)
    def addin_file(file_name: str, request: Request) -> Response:
        from .addin import ADDIN_TYPES, addin_file_bytes

        if file_name not in ADDIN_TYPES:
            raise HTTPException(404, f"the add-in has no file '{file_name}'")
        base = f"{request.url.scheme}://{request.url.netloc}"
        return Response(addin_file_bytes(file_name, base), media_type=ADDIN_TYPES[file_name])

    app.add_middleware(BodyLimit, limit=max_body)
    app.add_middleware(TokenGate, token=token, origin=origin)  # outermost: nothing runs before the token is checked
    return app


try:  # a faster JSON reader and writer where installed; the standard library's otherwise
    import orjson

    def _loads(raw: bytes) -> Any:
        return orjson.loads(raw)

    def _dumps_strict(value: Any) -> bytes:
        return orjson.dumps(value)  # writes NaN as null, which is what JSON readers get from us anyway

except ImportError:  # pragma: no cover - orjson is a dependency

    def _loads(raw: bytes) -> Any:
        return json.loads(raw)

    def _dumps_strict(value: Any) -> bytes:
        return json.dumps(value, allow_nan=False).encode()


def _dumps(answer: dict[str, Any]) -> bytes:
    try:
        return _dumps_strict(answer)
    except ValueError:  # a NaN or infinity somewhere: JSON has none, so it goes out as a blank
        return _dumps_strict({**answer, "result": _finite(answer["result"])})


def _call_body(raw: bytes) -> CallBody:
    """The request body parsed directly (pydantic's validation is slow on big nested lists)."""
    try:
        parsed = _loads(raw)
    except (ValueError, UnicodeDecodeError) as error:
        raise HTTPException(422, f"the request body is not JSON ({error}); send JSON like {{\"args\": [...]}}") from None
    if not isinstance(parsed, dict) or not isinstance(parsed.get("args", []), list) or set(parsed) - {"args"}:
        raise HTTPException(422, 'the request body must be a JSON object {"args": [...]} holding the arguments in order')
    return CallBody.model_construct(args=parsed.get("args", []))


def new_token() -> str:
    return secrets.token_urlsafe(24)
