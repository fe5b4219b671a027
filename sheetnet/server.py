"""The local sheetnet server: the cell functions over HTTP for sheetnet's own Office add-in.

Listens on 127.0.0.1 only and answers only requests addressed to it (``Host``
127.0.0.1, localhost or [::1] with its port; 421 otherwise, against DNS
rebinding). Every call needs ``Authorization: Bearer TOKEN`` except the
add-in's static files under ``/addin/`` (the task pane page reads the token
from its address, ``#token=...``), which take no request body. Requests are
held to the budget of `sheetnet.limits` before anything is parsed: body size,
cells and rows in the body, bodies held and calls answered at once (503 with
``Retry-After`` beyond), and time to send the headers (`guarded_protocol`: the
socket is closed) and the body (408). Every error answer, from the host check
to a cell function's refusal, is JSON ``{"detail": TEXT}`` built by
`error_response`, with the same messages the cells show.

- ``GET /v1/functions``: the registry.
- ``POST /v1/functions/{name}`` with ``{"args": [...]}``: ``{"result": [[...]]}``. Runs off the
  event loop; identical requests under way at the same time are computed once.
- ``POST /v1/jobs`` with ``{"name": MODEL, "args": [TRAIN's arguments], "existing_names": [...]}``: a
  training job (`sheetnet.jobs`; 429 with ``Retry-After`` when as many are training and waiting as the
  board takes), with ``GET /v1/jobs/{id}`` for progress (waiting or not, epoch, losses, curve; when done the
  block, and the placements if ``existing_names`` was given) and ``DELETE /v1/jobs/{id}`` to cancel. With
  ``"function": "SHEETNET.SEARCH"`` and SEARCH's arguments, a search job: progress per finished fold
  (``stage``, ``done`` of ``total``), the ranking SEARCH's cell shows when done, the same cancel.
- ``POST /v1/placements`` with ``{"name": MODEL, "block": [[...]], "existing_names": [...]}``: what a
  door writes to store the model (`sheetnet.service.model_placements`, as JSON).
- ``GET /v1/models``: the models this server trained, with their summaries.
- ``/openapi.json``: the schema (token required; it declares the token as its bearer security scheme).

Run it with `server_options` (uvicorn's options: the guarded protocol), as ``sheetnet serve`` does.
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
from urllib.parse import urlsplit

from fastapi import FastAPI, HTTPException, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import Response
from pydantic import BaseModel, Field
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from . import __version__, service
from .cells import MARKER
from .errors import SheetnetError, SizeError
from .jobs import BoardFull, JobBoard, JobRequestError, SplitRequest, UnknownJob, finite
from .limits import BODY_TIMEOUT, HEADER_TIMEOUT, MAX_BODIES_BYTES, MAX_BODY_BYTES, MAX_CALLS_AT_ONCE, check_request_body
from .registry import BY_NAME, REGISTRY

ADDIN_FILES = Path(__file__).parent / "addin"
LOCAL_NAMES = (b"127.0.0.1", b"localhost", b"[::1]")  # the only host names a request may address
BUSY_RETRY_SECONDS = 1  # Retry-After of a refusal for too much at once (bodies held, calls)
CLOSE = {"connection": "close"}  # a refusal sent before the body was read ends the connection
# the HTTP status of each refusal sheetnet raises on purpose; any other SheetnetError is a 400
STATUS_OF_ERROR: tuple[tuple[type[SheetnetError], int], ...] = ((UnknownJob, 404), (JobRequestError, 422), (BoardFull, 429))
log = logging.getLogger(__name__)


class CallBody(BaseModel):
    args: list[Any] = Field(default_factory=list, description="the cell function's arguments in order; ranges as lists of rows")


class JobBody(BaseModel):
    name: str = Field(description="the model's name, as it will be stored in the workbook (a search job's: how it is listed)")
    args: list[Any] = Field(description="SHEETNET.TRAIN's arguments: table, target, [hidden], [settings], [split] (SEARCH's for a search job)")
    function: str = Field(
        "SHEETNET.TRAIN", description="the cell function the job runs: SHEETNET.TRAIN, or SHEETNET.SEARCH (table, target, [candidates], [settings], [folds])"
    )
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


class HostCheck:
    """Refuses (421) a request whose ``Host`` is not this server's: 127.0.0.1, localhost or [::1] with its port.

    A web page on another site may make the browser connect to 127.0.0.1 under that site's name (DNS
    rebinding); the Host header still names the site, so such a request is refused before anything else.
    ``port``: the server's port (None: the port the connection came in on, as ASGI reports it)."""

    def __init__(self, app: ASGIApp, port: int | None = None) -> None:
        self.app, self.port = app, port
        self._allowed: dict[tuple[str, int | None], frozenset[bytes]] = {}

    def allowed(self, scheme: str, port: int | None) -> frozenset[bytes]:
        found = self._allowed.get((scheme, port))
        if found is None:
            names = {name + b":" + str(port).encode() for name in LOCAL_NAMES} if port is not None else set()
            if port is None or port == {"http": 80, "https": 443}.get(scheme):  # the default port may go unwritten
                names.update(LOCAL_NAMES)
            found = self._allowed[(scheme, port)] = frozenset(names)
        return found

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] not in ("http", "websocket"):
            await self.app(scope, receive, send)
            return
        port = self.port if self.port is not None else (scope.get("server") or (None, None))[1]
        host = next((value for key, value in scope.get("headers", []) if key == b"host"), b"").lower()
        if host not in self.allowed(scope.get("scheme", "http"), port):
            shown = host.decode("latin-1")[:100] or "nothing"
            refusal = error_response(
                421,
                f"this sheetnet server answers only requests addressed to 127.0.0.1:{port}, localhost:{port} or [::1]:{port}, "
                f"not to '{shown}'; open the server by one of those addresses",
                CLOSE,
            )
            await refusal(scope, receive, send)
            return
        await self.app(scope, receive, send)


class RequestBudget:
    """Holds every request to the server's budget (`sheetnet.limits`) before the API sees it.

    In order: calls at once (503), the declared body size (413), then the body is read, counted against
    its limit (413), the bodies held at once (503) and its time limit (408), and its cells and rows are
    counted on the bytes (413, `limits.check_request_body`) before the API parses it once, in one piece."""

    def __init__(
        self,
        app: ASGIApp,
        limit: int = MAX_BODY_BYTES,
        held_limit: int = MAX_BODIES_BYTES,
        calls_limit: int = MAX_CALLS_AT_ONCE,
        body_timeout: float = BODY_TIMEOUT,
    ) -> None:
        self.app, self.limit, self.held_limit, self.calls_limit, self.body_timeout = app, limit, held_limit, calls_limit, body_timeout
        self.calls = self.held = 0  # only the event loop's thread changes them

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        if self.calls >= self.calls_limit:
            busy = f"the sheetnet server is answering {self.calls} calls already, the most it takes at once; try again in a moment"
            await self._refuse(scope, receive, send, 503, busy, busy=True)
            return
        self.calls += 1
        reserved = 0
        try:
            declared = dict(scope.get("headers", [])).get(b"content-length")
            if declared is not None and declared.isdigit() and int(declared) > self.limit:
                await self._too_large(scope, receive, send)
                return
            parts: list[bytes] = []
            seen, more = 0, True
            try:
                async with asyncio.timeout(self.body_timeout):
                    while more:
                        message = await receive()
                        if message["type"] != "http.request":
                            return  # the caller went away: nobody to answer
                        parts.append(message.get("body", b""))
                        seen += len(parts[-1])
                        if seen > self.limit:
                            await self._too_large(scope, receive, send)
                            return
                        if seen > reserved:  # bodies held at once: what this request holds counts until it is answered
                            if self.held - reserved + seen > self.held_limit:
                                full = "the sheetnet server is holding as many large requests as it takes at once; try again in a moment"
                                await self._refuse(scope, receive, send, 503, full, busy=True)
                                return
                            self.held += seen - reserved
                            reserved = seen
                        more = message.get("more_body", False)
            except TimeoutError:
                await self._refuse(scope, receive, send, 408, f"the request body did not arrive within {self.body_timeout:g} seconds; send it in one go")
                return
            body = b"".join(parts)
            del parts
            if body:
                try:
                    check_request_body(body)
                except SizeError as error:
                    await self._refuse(scope, receive, send, 413, str(error))
                    return
            delivered = False

            async def replay() -> Message:
                nonlocal delivered
                if not delivered:
                    delivered = True
                    return {"type": "http.request", "body": body, "more_body": False}
                return await receive()

            await self.app(scope, replay, send)
        finally:
            self.calls -= 1
            self.held -= reserved

    async def _too_large(self, scope: Scope, receive: Receive, send: Send) -> None:
        await self._refuse(scope, receive, send, 413, f"the request body is larger than {self.limit:,} bytes; send fewer cells per call")

    @staticmethod
    async def _refuse(scope: Scope, receive: Receive, send: Send, status: int, detail: str, busy: bool = False) -> None:
        headers = {**CLOSE, "retry-after": str(BUSY_RETRY_SECONDS)} if busy else CLOSE
        await error_response(status, detail, headers)(scope, receive, send)


def is_public(scope: Scope) -> bool:
    """What anyone on this machine may ask without the token: the add-in's files, the start page, CORS preflights."""
    path = scope.get("path", "")
    return scope.get("method") == "OPTIONS" or path.startswith("/addin/") or path == "/"


class TokenGate:
    """Refuses every call without ``Authorization: Bearer TOKEN`` (except the add-in's static files, which
    take no body: one sent is refused before a byte of it is read); answers CORS for our own origin only.
    A plain ASGI layer: it adds no per-request task or copy."""

    def __init__(self, app: ASGIApp, token: str, origin: str) -> None:
        self.app, self.expected, self.origin = app, f"Bearer {token}".encode(), origin.encode()

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        headers = dict(scope.get("headers", []))
        public = is_public(scope)
        if public and (headers.get(b"content-length", b"0") != b"0" or b"transfer-encoding" in headers):
            refusal = error_response(413, "the add-in's files and the start page take no request body; send the request without one", CLOSE)
            await refusal(scope, receive, send)
            return
        if not public and not hmac.compare_digest(headers.get(b"authorization", b""), self.expected):
            refusal = error_response(401, "missing or wrong access token; send the header 'Authorization: Bearer TOKEN' printed by sheetnet serve", CLOSE)
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


def guarded_protocol(header_timeout: float = HEADER_TIMEOUT) -> type:
    """uvicorn's HTTP/1.1 protocol (h11) closing a connection whose request headers take longer than
    ``header_timeout`` seconds to arrive, counted from the connection (or the end of the previous answer)
    to the end of the headers, and one answered before its request's body was in (a refusal): a caller
    trickling bytes cannot hold sockets open. (uvicorn itself times out only idle kept-alive connections;
    the body's own time limit is `RequestBudget`'s.)"""
    import h11
    from uvicorn.protocols.http.h11_impl import H11Protocol

    class GuardedH11Protocol(H11Protocol):
        _header_timer: asyncio.TimerHandle | None = None

        def connection_made(self, transport: Any) -> None:
            super().connection_made(transport)
            self._start_header_clock()

        def data_received(self, data: bytes) -> None:
            super().data_received(data)
            if self.conn.their_state is not h11.IDLE:  # the headers are in
                self._stop_header_clock()

        def on_response_complete(self) -> None:
            super().on_response_complete()
            if self.transport.is_closing():
                return
            if self.conn.their_state is h11.SEND_BODY:  # answered before its body came in: reading on would only feed a trickle
                self.transport.close()
            elif self.conn.their_state is h11.IDLE:
                self._start_header_clock()

        def connection_lost(self, exc: Exception | None) -> None:
            self._stop_header_clock()
            super().connection_lost(exc)

        def _start_header_clock(self) -> None:
            self._stop_header_clock()
            self._header_timer = self.loop.call_later(header_timeout, self._headers_too_slow)

        def _stop_header_clock(self) -> None:
            if self._header_timer is not None:
                self._header_timer.cancel()
                self._header_timer = None

        def _headers_too_slow(self) -> None:
            self._header_timer = None
            if self.conn.their_state is h11.IDLE and not self.transport.is_closing():
                self.transport.close()

    return GuardedH11Protocol


def server_options(header_timeout: float = HEADER_TIMEOUT) -> dict[str, Any]:
    """uvicorn's options for this server (``uvicorn.Config(app, **server_options(), ...)``): the guarded
    protocol, a short keep-alive, headers of at most 16 KB."""
    return {"http": guarded_protocol(header_timeout), "timeout_keep_alive": 5, "h11_max_incomplete_event_size": 16 * 1024}


def create_app(
    token: str,
    origin: str = "http://127.0.0.1",
    max_body: int = MAX_BODY_BYTES,
    jobs: JobBoard | None = None,
    body_timeout: float = BODY_TIMEOUT,
    max_held: int = MAX_BODIES_BYTES,
    max_calls: int = MAX_CALLS_AT_ONCE,
) -> FastAPI:
    """The application; ``origin`` is where it is served from (the only origin CORS allows; its port, when
    written, the only port a request may address, else the port the connection came in on: `HostCheck`); ``jobs``
    holds the training jobs (a fresh `JobBoard` when not given; also at ``app.state.jobs``); the rest:
    the request budget (`RequestBudget`)."""
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
        retry = {"retry-after": str(error.retry_after)} if isinstance(error, BoardFull) else None
        return error_response(status_of(error), str(error), retry)

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

    @app.post("/v1/jobs", status_code=202, summary="start a job: SHEETNET.TRAIN (or SHEETNET.SEARCH) with progress and cancel")
    def start_job(body: JobBody) -> dict[str, Any]:
        split = None if body.holdout is None else SplitRequest(body.holdout, body.mode, body.seed, body.address)
        job = board.submit(body.name, body.args, body.existing_names, split, body.function.upper())
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

    openapi = app.openapi

    def openapi_with_token() -> dict[str, Any]:
        schema = openapi()  # FastAPI's, built once and kept
        schema.setdefault("components", {})["securitySchemes"] = {
            "token": {"type": "http", "scheme": "bearer", "description": "the access token sheetnet serve prints (also in the task pane's address)"}
        }
        schema["security"] = [{"token": []}]
        return schema

    app.openapi = openapi_with_token  # type: ignore[method-assign]
    app.add_middleware(RequestBudget, limit=max_body, held_limit=max_held, calls_limit=max_calls, body_timeout=body_timeout)
    app.add_middleware(TokenGate, token=token, origin=origin)  # nothing is read before the token is checked
    app.add_middleware(HostCheck, port=urlsplit(origin).port or None)  # outermost: a request for another host meets nothing
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
