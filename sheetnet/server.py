"""The local sheetnet server: the cell functions over HTTP for sheetnet's own Office add-in.

Listens on 127.0.0.1 only. Every call needs ``Authorization: Bearer TOKEN``
except the add-in's static files under ``/addin/`` (the task pane page reads
the token from its address, ``#token=...``). Request bodies are limited in
size. Every error answer, from the token gate to a cell function's refusal,
is JSON ``{"detail": TEXT}`` built by `error_response`, with the same messages
the cells show.

- ``GET /v1/functions``: the registry.
- ``POST /v1/functions/{name}`` with ``{"args": [...]}``: ``{"result": [[...]]}``. Runs off the
  event loop; identical requests under way at the same time are computed once.
- ``POST /v1/jobs`` with ``{"name": MODEL, "args": [TRAIN's arguments], "existing_names": [...]}``: a
  training job (`sheetnet.jobs`), with ``GET /v1/jobs/{id}`` for progress (epoch, losses, curve; when
  done the block, and the placements if ``existing_names`` was given) and ``DELETE /v1/jobs/{id}`` to cancel.
- ``POST /v1/placements`` with ``{"name": MODEL, "block": [[...]], "existing_names": [...]}``: what a
  door writes to store the model (`sheetnet.service.model_placements`, as JSON).
- ``GET /v1/models``: the models this server trained, with their summaries.
- ``/openapi.json``: the schema (token required).
"""

from __future__ import annotations

import asyncio
import hashlib
import hmac
import json
import logging
import secrets
import threading
from http import HTTPStatus
from pathlib import Path
from typing import Any, Mapping

from fastapi import FastAPI, HTTPException, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import Response
from pydantic import BaseModel, Field
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from . import __version__, service
from .cells import MARKER
from .errors import SheetnetError
from .jobs import BoardFull, JobBoard, JobRequestError, SplitRequest, UnknownJob, finite
from .registry import BY_NAME, REGISTRY

MAX_BODY_BYTES = 32 * 1024 * 1024  # about a million numeric cells
ADDIN_FILES = Path(__file__).parent / "addin"
# the HTTP status of each refusal sheetnet raises on purpose; any other SheetnetError is a 400
STATUS_OF_ERROR: tuple[tuple[type[SheetnetError], int], ...] = ((UnknownJob, 404), (JobRequestError, 422), (BoardFull, 429))
log = logging.getLogger(__name__)


class CallBody(BaseModel):
    args: list[Any] = Field(default_factory=list, description="the cell function's arguments in order; ranges as lists of rows")


class JobBody(BaseModel):
    name: str = Field(description="the model's name, as it will be stored in the workbook")
    args: list[Any] = Field(description="SHEETNET.TRAIN's arguments: table, target, [hidden], [settings], [split]")
    existing_names: list[str] | None = Field(
        None, description="the workbook's defined names now; when given, a done job carries the model's placements"
    )
    holdout: float | None = Field(
        None, description="when given (leave TRAIN's split argument out), the server holds out this share and seeds split and training as every door does"
    )
    mode: str = Field("auto", description="how holdout rows are chosen: auto (stratified when the target is learned as classes), random, stratified, ordered")
    seed: int | None = Field(None, description="seed of the split and the training (default: the seed setting, else 0)")
    address: str | None = Field(None, description="where the table lives, like 'Data'!A1:F500, recorded so the model can be refreshed")


class PlacementsBody(BaseModel):
    name: str = Field(description="the model's name")
    # any cells: what is wrong with a damaged block is the service's to say (a 400 with its message)
    block: list[list[Any]] = Field(description="the model block, as SHEETNET.TRAIN returned it (a list of rows)")
    existing_names: list[str] = Field(default_factory=list, description="the workbook's defined names now")


def error_response(status: int, detail: str, headers: Mapping[str, str] | None = None) -> Response:
    """The one shape of every error this server answers: ``{"detail": TEXT}`` with its status.
    A Starlette response is itself an ASGI app, so the plain ASGI layers send it too."""
    return Response(json.dumps({"detail": detail}).encode(), status_code=status, headers=headers, media_type="application/json")


def status_of(error: SheetnetError) -> int:
    return next((status for kind, status in STATUS_OF_ERROR if isinstance(error, kind)), 400)


def _plain_detail(status: int, detail: Any, request: Request) -> str:
    """Our own messages pass as they are; the framework's bare status phrases get words that say what to do."""
    if status == 404 and detail == HTTPStatus.NOT_FOUND.phrase:
        return f"the sheetnet server has no address '{request.url.path}'; GET /openapi.json lists what it answers"
    if status == 405 and detail == HTTPStatus.METHOD_NOT_ALLOWED.phrase:
        return f"'{request.url.path}' does not take {request.method} requests; GET /openapi.json lists what it answers"
    return detail if isinstance(detail, str) else HTTPStatus(status).phrase


def _problems(error: RequestValidationError) -> str:
    """Pydantic's findings in plain words: where (field, then item numbers counted from 1) and what."""

    def place(location: Any) -> str:
        parts = [f"item {p + 1}" if isinstance(p, int) else str(p) for p in location if p != "body"]
        return " ".join(parts) if parts else "the body"

    found = []
    for problem in error.errors():
        if problem.get("type") == "json_invalid":
            return "it is not JSON"
        found.append(f"{place(problem.get('loc', ()))}: {problem.get('msg', 'not accepted')}")
    return "; ".join(dict.fromkeys(found))


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
            await self._too_large(scope, receive, send)
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
                await self._too_large(scope, receive, send)
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

    async def _too_large(self, scope: Scope, receive: Receive, send: Send) -> None:
        refusal = error_response(413, f"the request body is larger than {self.limit:,} bytes; send fewer cells per call")
        await refusal(scope, receive, send)


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
            refusal = error_response(401, "missing or wrong access token; send the header 'Authorization: Bearer TOKEN' printed by sheetnet serve")
            await refusal(scope, receive, send)
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


def create_app(token: str, origin: str = "http://127.0.0.1", max_body: int = MAX_BODY_BYTES, jobs: JobBoard | None = None) -> FastAPI:
    """The application; ``origin`` is where it is served from (the only origin CORS allows);
    ``jobs`` holds the training jobs (a fresh `JobBoard` when not given; also at ``app.state.jobs``)."""
    if len(token) < 16:
        raise ValueError("the access token must be at least 16 characters")
    app = FastAPI(title="sheetnet local server", version=__version__, description=__doc__)
    board = app.state.jobs = jobs if jobs is not None else JobBoard()
    running: dict[str, asyncio.Future[Any]] = {}
    lock = threading.Lock()

    # --- every error answer, in one place ---------------------------------------------------

    @app.exception_handler(StarletteHTTPException)
    async def http_refusal(request: Request, error: StarletteHTTPException) -> Response:
        return error_response(error.status_code, _plain_detail(error.status_code, error.detail, request), error.headers)

    @app.exception_handler(RequestValidationError)
    async def malformed(request: Request, error: RequestValidationError) -> Response:
        return error_response(422, f"the request body is not what this call takes ({_problems(error)}); GET /openapi.json shows what each call takes")

    @app.exception_handler(SheetnetError)
    async def refused(request: Request, error: SheetnetError) -> Response:
        return error_response(status_of(error), str(error))

    @app.exception_handler(Exception)
    async def broken(request: Request, error: Exception) -> Response:  # a bug: logged, answered in words
        log.error("unexpected error answering %s %s", request.method, request.url.path, exc_info=error)
        return error_response(500, "the sheetnet server hit an unexpected problem; this is a bug, please report it with what you sent")

    # --- the calls --------------------------------------------------------------------------

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
        split = None if body.holdout is None else SplitRequest(body.holdout, body.mode, body.seed, body.address)
        job = board.submit(body.name, body.args, body.existing_names, split)
        return {"id": job.id, "state": job.state}

    @app.get("/v1/jobs/{job_id}", summary="a training job's progress and, when done, its model block")
    def job_status(job_id: str) -> dict[str, Any]:
        return board.get(job_id).view()

    @app.delete("/v1/jobs/{job_id}", summary="cancel a training job")
    def cancel_job(job_id: str) -> dict[str, Any]:
        return {"id": job_id, "state": board.cancel(job_id)}

    @app.post("/v1/placements", summary="what storing a model writes into a workbook (sheets, cells, defined names)")
    def model_placements(body: PlacementsBody) -> Response:
        placements = service.model_placements(body.name, body.block, body.existing_names)
        return Response(_dumps_strict(placements.to_json()), media_type="application/json")

    @app.get("/v1/models", summary="the models this server has trained")
    def list_models() -> dict[str, Any]:
        return {"models": board.models()}

    @app.get("/addin/{file_name}", include_in_schema=False)
    def addin_file(file_name: str, request: Request) -> Response:
        from .addin import ADDIN_TYPES, addin_file_bytes, addin_headers, served_base

        if file_name not in ADDIN_TYPES:
            raise HTTPException(404, f"the add-in has no file '{file_name}'")
        base = served_base(request.scope, origin)  # the server's own address, never the request's Host header
        return Response(addin_file_bytes(file_name, base), media_type=ADDIN_TYPES[file_name], headers=addin_headers(file_name))

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
        return _dumps_strict({**answer, "result": finite(answer["result"])})


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
