"""The audit service: a FastAPI application with stored audit history.

Endpoints (all but ``/health`` need ``Authorization: Bearer <token>``; the report page
also accepts a signed, expiring link from ``POST /audits/{id}/view-link``):

=======  ==============================  ==============================================
POST     /audits                         store a submission as a job (202, at once)
GET      /audits                         list and filter audits (with their job status)
GET      /audits/{id}                    one audit as JSON (status; report when done)
GET      /audits/{id}/report.html        the HTML report page (plots, claims table)
GET      /audits/{id}/body               the exact submitted request bytes
POST     /audits/{id}/rerun              re-run with the stored bytes and tolerances
POST     /audits/{id}/view-link          a signed link to the page, for a browser
GET      /health                         liveness, version, job engine (no token)
=======  ==============================  ==============================================

Audits are jobs (:mod:`audit.service.jobs`): ``POST /audits`` checks the request and the
documents without converting anything (:mod:`audit.service.intake`), stores the exact
bytes with status ``queued`` and answers 202 with the audit's id and status URL; a Dask
worker runs the audit and stores the report (``queued`` -> ``running`` -> ``done`` or
``failed``). A client may send ``Idempotency-Key``: the same key (per token) with the
same bytes returns the stored audit, with other bytes 409.

Errors are JSON ``{"error": <code>, "field": <field or null>, "message": <text>}``:
401 missing/invalid token, 403 forbidden (a supplier asking for another supplier's
audit), 404 unknown audit, 409 an ``Idempotency-Key`` reused with another body, 413
request body above ``max_body_bytes``, 422 invalid request or model document (the CLI's
message, source ``models[i]`` / ``reference``) or a model above ``max_order`` /
``max_channels``, 429 the token has ``token_quota`` audits in flight, 503 the job queue
holds ``queue_size`` audits or no database connection is free within ``db_pool_timeout``
(both with ``Retry-After``). Any other exception becomes a generic 500 with an incident
id that is logged (with the traceback) on the server only.

Signed view links are HMAC-SHA256 (RFC 2104) over ``"<audit id>|<expiry>"`` with a
per-application secret (``link_secret``; random per process by default).
"""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import hmac
import json
import logging
import secrets
import time
import uuid
from collections.abc import Iterator
from typing import Any, Literal

from fastapi import Depends, FastAPI, Query, Request
from fastapi.exceptions import HTTPException, RequestValidationError
from fastapi.responses import HTMLResponse, JSONResponse, Response
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.routing import Match
from pydantic import BaseModel, Field
from sqlalchemy import Text, cast, func, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.exc import TimeoutError as PoolTimeoutError
from sqlalchemy.orm import Session, defer, selectinload

from audit.errors import AuditError, IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from audit.service.db import ACTIVE_STATES, Audit, AuditDocument, open_database, utc_now
from audit.service.intake import DEFAULT_MAX_CHANNELS, check_documents, check_sizes
from audit.service.jobs import (
    DEFAULT_JOB_ATTEMPTS,
    DEFAULT_JOB_SECONDS,
    DEFAULT_QUEUE_SIZE,
    DEFAULT_TOKEN_QUOTA,
    DEFAULT_WORKER_NICENESS,
    JobDispatcher,
    JobSettings,
    compute_audit,
)
from audit.service.submission import (
    ParsedSubmission,
    Submission,
    Tolerances,
    compared_models,
    parse_submission,
    tolerances_for,
)
from audit.service.tokens import Principal, authenticate

__all__ = ["DEFAULT_MAX_BODY_BYTES", "DEFAULT_MAX_ORDER", "create_app"]

LOG = logging.getLogger("audit.service")

DEFAULT_MAX_BODY_BYTES = 2 * 1024 * 1024
"""Largest accepted request body (bytes): about a dense order-300 model in JSON."""

DEFAULT_MAX_ORDER = 200
"""Largest accepted model order (states after conversion to state space)."""

DEFAULT_LINK_SECONDS = 900
"""Validity of a signed view link (seconds)."""

RETRY_AFTER_SECONDS = 5
"""``Retry-After`` of a 503 (queue full, no free database connection) or a 429."""

IDEMPOTENCY_KEY_MAX = 200


# ------------------------------------------------------------------ API models
class ErrorBody(BaseModel):
    error: str = Field(description="Machine-readable code")
    field: str | None = Field(description="The request field at fault, if any")
    message: str
    incident: str | None = Field(default=None, description="Server log reference (500 only)")


class DocumentInfo(BaseModel):
    role: Literal["reference", "model"]
    position: int
    name: str
    sha256: str = Field(description="SHA-256 of the document's canonical JSON "
                        "(sorted keys, no spaces, UTF-8)")


class AuditSummary(BaseModel):
    id: str
    created_at: str
    supplier: str | None
    submitted_by: str | None
    status: Literal["queued", "running", "done", "failed"] = Field(
        description="Job state: queued -> running -> done (report stored) or failed")
    attempts: int = Field(description="Times a worker started this audit")
    started_at: str | None
    finished_at: str | None
    failure: str | None = Field(description="Why the audit failed (error code: message)")
    time_budget_seconds: float | None = Field(description="Time budget of the audit job")
    verdict: Literal["equivalent", "different", "inconclusive", "not_compared"] | None = Field(
        description="Null until the audit is done")
    claims_outcome: Literal["hold", "fail", "unclear", "none"] | None
    reference_name: str | None
    model_names: list[str]
    lti_audit_version: str
    body_sha256: str = Field(description="SHA-256 of the exact request body as received")
    links: dict[str, str]


class AuditRecord(AuditSummary):
    tolerances: dict[str, Any]
    documents: list[DocumentInfo]
    report: dict[str, Any] | None = Field(description="Null until the audit is done")


class AuditList(BaseModel):
    total: int
    limit: int
    offset: int
    items: list[AuditSummary]


class RerunResult(BaseModel):
    audit_id: str
    original_version: str
    rerun_version: str
    original_verdict: str
    rerun_verdict: str
    same_verdict: bool
    original_claims_outcome: str
    rerun_claims_outcome: str
    claim_changes: list[dict[str, Any]]
    reproduced: bool = Field(description="Same verdict and same outcome for every claim")
    report: dict[str, Any]


class ViewLink(BaseModel):
    url: str
    expires_at: str


class Health(BaseModel):
    status: str
    lti_audit_version: str
    jobs: dict[str, Any] = Field(default_factory=dict,
                                 description="Dask connection and tasks in flight")


def _err(status: int, error: str, message: str, field: str | None = None,
         headers: dict[str, str] | None = None) -> JSONResponse:
    body = {"error": error, "field": field, "message": message}
    return JSONResponse(status_code=status, content=body, headers=headers)


class _ApiError(HTTPException):
    def __init__(self, status: int, error: str, message: str, field: str | None = None,
                 headers: dict[str, str] | None = None):
        super().__init__(status_code=status, detail=message, headers=headers)
        self.error = error
        self.field = field


def _responses(*codes: int, explicit_json: bool = False) -> dict[int | str, dict[str, Any]]:
    """OpenAPI entries of the JSON error responses (``explicit_json`` for non-JSON routes)."""
    text = {401: "Missing or invalid API token", 403: "Forbidden for this token",
            404: "No such audit",
            409: "Idempotency-Key reused with another body, or the audit is not done",
            413: "Request body too large", 422: "Invalid request, model document or claim",
            429: "This token has its quota of audits in flight (Retry-After)",
            503: "Job queue full or no database connection free (Retry-After)"}
    if explicit_json:
        ref = {"schema": {"$ref": "#/components/schemas/ErrorBody"}}
        return {c: {"description": text[c], "content": {"application/json": ref}} for c in codes}
    return {c: {"model": ErrorBody, "description": text[c]} for c in codes}


# ------------------------------------------------------------------ middleware
#: Sent with every response: the report page is self-contained (inline style, data: images),
#: so nothing else may load, run, be framed or submit (W3C Content Security Policy Level 3).
CONTENT_SECURITY_POLICY = (b"default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
                           b"base-uri 'none'; form-action 'none'; frame-ancestors 'none'")


class _SecurityHeaders:
    """Pure ASGI middleware adding the Content-Security-Policy to every response."""

    def __init__(self, app: Any) -> None:
        from audit.reports.html_page import zoom_script_csp_source

        self.app = app
        # the report page's one fixed zoom script may run, by its hash; nothing else
        self.policy = CONTENT_SECURITY_POLICY + b"; script-src " + zoom_script_csp_source().encode("ascii")

    async def __call__(self, scope: dict[str, Any], receive: Any, send: Any) -> None:
        async def send_with_headers(message: dict[str, Any]) -> None:
            if message["type"] == "http.response.start":
                message.setdefault("headers", [])
                message["headers"] = [*message["headers"],
                                      (b"content-security-policy", self.policy),
                                      (b"x-content-type-options", b"nosniff")]
            await send(message)

        await self.app(scope, receive, send_with_headers if scope["type"] == "http" else send)


class _Guard:
    """Pure ASGI middleware: request-size limit (413) and the last-resort 500 handler.

    It sits inside Starlette's ServerErrorMiddleware but outside the routing, so every
    exception not handled by a route or exception handler ends here: it is logged with
    an incident id and the client receives a generic JSON 500 (never a traceback).
    """

    def __init__(self, app: Any, max_body_bytes: int) -> None:
        self.app = app
        self.max_body_bytes = max_body_bytes

    async def __call__(self, scope: dict[str, Any], receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        limit = self.max_body_bytes
        started = False

        async def send_json(status: int, body: dict[str, Any]) -> None:
            payload = json.dumps(body).encode("utf-8")
            await send({"type": "http.response.start", "status": status,
                        "headers": [(b"content-type", b"application/json"),
                                    (b"content-length", str(len(payload)).encode())]})
            await send({"type": "http.response.body", "body": payload})

        too_large = {"error": "request_too_large", "field": "body",
                     "message": f"request body exceeds the limit max_body_bytes={limit} "
                                "bytes; split the submission or ask the operator"}
        for key, value in scope.get("headers", []):
            if key == b"content-length":
                try:
                    declared = int(value)
                except ValueError:
                    declared = -1
                if declared > limit:
                    too_large["message"] = (f"request body has {declared} bytes, above the limit "
                                            f"max_body_bytes={limit}")
                    await send_json(413, too_large)
                    return
        received = 0

        async def limited_receive() -> Any:
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > limit:
                    raise _ApiError(413, "request_too_large", too_large["message"], "body")
            return message

        async def tracking_send(message: dict[str, Any]) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, limited_receive, tracking_send)
        except Exception:  # noqa: BLE001 - last line of defence
            incident = uuid.uuid4().hex[:16]
            LOG.exception("incident %s: unhandled error on %s %s", incident,
                          scope.get("method"), scope.get("path"))
            if not started:
                await send_json(500, {"error": "internal_error", "field": None,
                                      "message": "internal error; quote the incident id to "
                                                 "the service operator",
                                      "incident": incident})


# ------------------------------------------------------------------ the app
def _iso(t: dt.datetime) -> str:
    return t.isoformat() + "Z"


def _parse_time(text: str, name: str) -> dt.datetime:
    """An ISO 8601 date-time (``Z`` or an offset; naive means UTC) as naive UTC."""
    try:
        t = dt.datetime.fromisoformat(text)
    except ValueError:
        raise _ApiError(422, "invalid_request",
                        f"{name}: got {text!r}, expected an ISO 8601 date-time such as "
                        "2025-03-01T00:00:00Z", name) from None
    if t.tzinfo is not None:
        t = t.astimezone(dt.timezone.utc).replace(tzinfo=None)
    return t


def create_app(
    database_url: str,
    *,
    max_body_bytes: int = DEFAULT_MAX_BODY_BYTES,
    max_order: int = DEFAULT_MAX_ORDER,
    link_secret: bytes | None = None,
    link_seconds: int = DEFAULT_LINK_SECONDS,
    max_channels: int = DEFAULT_MAX_CHANNELS,
    scheduler: str | None = None,
    local_workers: int | None = None,
    local_processes: bool = True,
    queue_size: int = DEFAULT_QUEUE_SIZE,
    token_quota: int = DEFAULT_TOKEN_QUOTA,
    job_seconds: float = DEFAULT_JOB_SECONDS,
    job_attempts: int = DEFAULT_JOB_ATTEMPTS,
    db_pool_size: int = 10,
    db_max_overflow: int = 10,
    db_pool_timeout: float = 10.0,
    start_jobs: bool = True,
) -> FastAPI:
    """Build the audit service application (migrating the database first).

    Parameters
    ----------
    database_url : str
        SQLAlchemy URL; e.g. ``sqlite:///lti-audit.sqlite3`` (file next to where the
        service runs; see :func:`audit.service.db.default_database_url`) or
        ``postgresql+psycopg://user@host/lti_audit``.
    max_body_bytes : int, keyword-only
        Largest request body accepted (413 above). Default 2 MiB.
    max_order : int, keyword-only
        Largest model order accepted (422 above). Default 200.
    link_secret : bytes or None, keyword-only
        Key of the signed view links; random per process when ``None`` (links then
        stop working at restart).
    link_seconds : int, keyword-only
        Validity of a signed view link. Default 900 s.
    max_channels : int, keyword-only
        Largest number of inputs or outputs of a model (422 above). Default 64.
    scheduler : str or None, keyword-only
        Address of an existing Dask scheduler (``tcp://HOST:PORT``) that runs the
        audit jobs; ``None`` starts a local cluster of ``local_workers`` processes
        (default: one per CPU; threads when ``local_processes`` is false).
    queue_size : int, keyword-only
        Audits in flight (queued + running) before submissions get 503. Default 500.
    token_quota : int, keyword-only
        Audits in flight per token before its submissions get 429. Default 50.
    job_seconds : float, keyword-only
        Time budget of one audit job (stated in its report). Default 600 s.
    job_attempts : int, keyword-only
        Worker starts of a job before it is ``failed`` (its workers kept dying). Default 3.
    db_pool_size, db_max_overflow, db_pool_timeout : keyword-only
        Database connection pool (defaults 10, 10, 10 s); a request that finds no free
        connection within the timeout gets 503 with Retry-After.
    start_jobs : bool, keyword-only
        Start the job dispatcher (default True; False stores submissions without
        running them, for tools that only read).

    Returns
    -------
    FastAPI

    Raises
    ------
    InvalidModelError
        A limit is not a positive integer.
    audit.service.db.DatabaseError
        The database cannot be opened or migrated.
    """
    for name, value in (("max_body_bytes", max_body_bytes), ("max_order", max_order),
                        ("link_seconds", link_seconds), ("max_channels", max_channels),
                        ("queue_size", queue_size), ("token_quota", token_quota),
                        ("job_attempts", job_attempts), ("db_pool_size", db_pool_size)):
        if not isinstance(value, int) or isinstance(value, bool) or value < 1:
            raise InvalidModelError(f"{name}={value!r}: expected an integer >= 1", field=name)
    from audit.reports.shapes import package_version

    for name, fvalue in (("job_seconds", job_seconds), ("db_pool_timeout", db_pool_timeout)):
        if not isinstance(fvalue, (int, float)) or isinstance(fvalue, bool) or not fvalue > 0:
            raise InvalidModelError(f"{name}={fvalue!r}: expected a number > 0", field=name)
    engine, sessions = open_database(database_url, pool_size=db_pool_size,
                                     max_overflow=db_max_overflow, pool_timeout=db_pool_timeout)
    secret = link_secret if link_secret is not None else secrets.token_bytes(32)
    version = package_version()
    # worker processes (not threads of this process, as with an in-process cluster) may
    # lower their priority and end themselves after a runaway audit
    processes = (local_processes if scheduler is None
                 else not scheduler.startswith("inproc://"))
    job_settings = JobSettings(database_url=database_url, max_order=max_order,
                               time_budget=float(job_seconds), max_attempts=job_attempts,
                               hard_stop=processes,
                               worker_niceness=DEFAULT_WORKER_NICENESS if processes else 0)
    dispatcher = JobDispatcher(sessions, job_settings, scheduler=scheduler,
                               local_workers=local_workers, local_processes=local_processes)
    if start_jobs:
        dispatcher.start()

    @contextlib.asynccontextmanager
    async def lifespan(_: FastAPI) -> Any:
        yield
        from starlette.concurrency import run_in_threadpool

        await run_in_threadpool(dispatcher.close)

    app = FastAPI(
        lifespan=lifespan,
        title="lti-audit service",
        version=version,
        description="Audits of claimed-equivalent LTI models and supplier claims, with "
                    "stored history. Authenticate with `Authorization: Bearer <token>` "
                    "(tokens are created with `lti-audit token create`).",
    )
    app.state.engine = engine
    app.state.sessions = sessions
    app.state.max_order = max_order
    app.state.dispatcher = dispatcher
    app.add_middleware(_Guard, max_body_bytes=max_body_bytes)
    app.add_middleware(_SecurityHeaders)  # outside the guard: its 413/500 answers get it too
    bearer = HTTPBearer(auto_error=False, description="API token from `lti-audit token create`")

    # ------------------------------------------------------------ error handlers
    @app.exception_handler(StarletteHTTPException)
    async def _http_error(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        if isinstance(exc, _ApiError):
            return _err(exc.status_code, exc.error, str(exc.detail), exc.field, exc.headers)
        if exc.status_code == 400:  # FastAPI could not parse the body (not UTF-8 JSON)
            return _err(422, "invalid_request", f"body: {exc.detail}; expected a UTF-8 JSON "
                        "object", "body")
        code = {404: "not_found", 405: "method_not_allowed"}.get(exc.status_code, "http_error")
        headers = dict(exc.headers or {})
        if exc.status_code == 405:  # list every method of every route on this path
            allowed: set[str] = set()
            for route in app.routes:
                match, _ = route.matches({**request.scope, "method": "\x00"})
                if match != Match.NONE and getattr(route, "methods", None):
                    allowed |= set(route.methods)  # type: ignore[attr-defined]
            headers["Allow"] = ", ".join(sorted(allowed))
        return _err(exc.status_code, code, str(exc.detail), None, headers or None)

    @app.exception_handler(PoolTimeoutError)
    async def _pool_timeout(_: Request, exc: PoolTimeoutError) -> JSONResponse:
        LOG.warning("no free database connection: %s", exc)
        return _err(503, "busy", "no database connection became free in time; retry after "
                    f"{RETRY_AFTER_SECONDS} s", None, {"Retry-After": str(RETRY_AFTER_SECONDS)})

    @app.exception_handler(RequestValidationError)
    async def _validation_error(_: Request, exc: RequestValidationError) -> JSONResponse:
        errors = exc.errors()
        first = errors[0] if errors else {"loc": ("body",), "msg": "invalid request"}
        loc = ".".join(str(x) for x in first.get("loc", ()))
        more = f" (and {len(errors) - 1} more problem(s))" if len(errors) > 1 else ""
        return _err(422, "invalid_request", f"{loc}: {first.get('msg')}{more}", loc)

    @app.exception_handler(InvalidModelError)
    async def _invalid_model(_: Request, exc: InvalidModelError) -> JSONResponse:
        src = exc.source or ""
        field = src if not exc.field or exc.field == src else (
            f"{src}.{exc.field}" if src else exc.field)
        return _err(422, "invalid_model", str(exc), field or None)

    @app.exception_handler(IncompatibleModelsError)
    async def _incompatible(_: Request, exc: IncompatibleModelsError) -> JSONResponse:
        return _err(422, "incompatible_models", str(exc), "models")

    @app.exception_handler(NumericalTroubleError)
    async def _numerical(_: Request, exc: NumericalTroubleError) -> JSONResponse:
        return _err(422, "numerical_trouble", f"the audit could not be computed reliably: {exc}")

    # ------------------------------------------------------------ dependencies
    def session_dep() -> Iterator[Session]:
        with sessions() as s:
            yield s

    def principal_dep(
        creds: HTTPAuthorizationCredentials | None = Depends(bearer),
    ) -> Principal:
        """The caller, looked up in a session of its own (closed before the route runs)."""
        with sessions() as session:
            who = authenticate(session, creds.credentials if creds else None)
        if who is None:
            raise _ApiError(401, "unauthorized",
                            "missing, invalid or revoked API token; send "
                            "'Authorization: Bearer <token>'", "Authorization",
                            {"WWW-Authenticate": "Bearer"})
        return who

    def known_query(request: Request) -> None:
        """Reject query parameters the route does not define (a typo must not widen a filter)."""
        route = request.scope.get("route")
        allowed = {p.alias for p in getattr(getattr(route, "dependant", None), "query_params", [])}
        unknown = sorted(set(request.query_params) - allowed)
        if unknown:
            raise _ApiError(422, "invalid_request",
                            f"{unknown[0]}: unknown query parameter; expected one of "
                            f"{', '.join(sorted(allowed)) or '(none)'}", unknown[0])

    def load_audit(session: Session, audit_id: str, who: Principal, *,
                   with_body: bool = True, with_report: bool = True) -> Audit:
        options: list[Any] = [selectinload(Audit.documents)]
        if not with_body:
            options.append(defer(Audit.body))
        if not with_report:
            options.append(defer(Audit.report))
        row = session.get(Audit, audit_id, options=options)
        if row is None:
            raise _ApiError(404, "not_found", f"no audit with id {audit_id!r}", "audit_id")
        if not who.may_see(row.supplier):
            raise _ApiError(403, "forbidden",
                            "this audit belongs to another supplier; supplier tokens see only "
                            "their own audits", "audit_id")
        return row

    def summary(row: Audit, holder: str | None = None) -> dict[str, Any]:
        return {
            "id": row.id, "created_at": _iso(row.created_at), "supplier": row.supplier,
            "submitted_by": holder, "status": row.status, "attempts": row.attempts,
            "started_at": None if row.started_at is None else _iso(row.started_at),
            "finished_at": None if row.finished_at is None else _iso(row.finished_at),
            "failure": row.failure, "time_budget_seconds": row.time_budget_seconds,
            "verdict": row.verdict,
            "claims_outcome": row.claims_outcome, "reference_name": row.reference_name,
            "model_names": list(row.model_names), "lti_audit_version": row.lti_audit_version,
            "body_sha256": row.body_sha256,
            "links": {"self": f"/audits/{row.id}", "status": f"/audits/{row.id}",
                      "html": f"/audits/{row.id}/report.html",
                      "body": f"/audits/{row.id}/body", "rerun": f"/audits/{row.id}/rerun"},
        }

    def holder_of(session: Session, row: Audit) -> str | None:
        from audit.service.db import ApiToken

        if row.submitted_by is None:
            return None
        tok = session.get(ApiToken, row.submitted_by)
        return None if tok is None else tok.holder

    def record(session: Session, row: Audit, with_report: bool = True) -> dict[str, Any]:
        data = summary(row, holder_of(session, row))
        data["tolerances"] = row.tolerances
        data["documents"] = [{"role": d.role, "position": d.position, "name": d.name,
                              "sha256": d.sha256} for d in row.documents]
        if with_report:
            data["report"] = row.report
        return data

    # ------------------------------------------------------------ routes
    @app.get("/health", response_model=Health, tags=["service"])
    def health() -> dict[str, Any]:
        """Liveness check; needs no token."""
        return {"status": "ok", "lti_audit_version": version, "jobs": dispatcher.state()}

    @app.post("/audits", status_code=202, response_model=AuditRecord, tags=["audits"],
              responses=_responses(401, 403, 409, 413, 422, 429, 503))
    async def submit(request: Request, submission: Submission,
                     who: Principal = Depends(principal_dep)) -> Any:
        """Store a submission as an audit job; answer at once with its id and status URL.

        The request and the documents are checked first (sizes before anything is
        converted, then each document); the audit and its documents are then written in
        one transaction with status ``queued``, so a failure leaves nothing
        half-written. A Dask worker computes the report; poll ``GET /audits/{id}``.
        With an ``Idempotency-Key`` header, a repeated request (same key and token,
        same bytes) returns the stored audit instead of storing it twice.
        """
        raw = await request.body()
        key = request.headers.get("idempotency-key")
        if key is not None and not (0 < len(key) <= IDEMPOTENCY_KEY_MAX and key.isprintable()):
            raise _ApiError(422, "invalid_request", f"Idempotency-Key: expected 1 to "
                            f"{IDEMPOTENCY_KEY_MAX} printable characters", "Idempotency-Key")
        if who.role == "supplier":
            if submission.supplier is not None and submission.supplier != who.supplier:
                raise _ApiError(403, "forbidden",
                                f"supplier: a token of supplier {who.supplier!r} cannot submit "
                                f"for supplier {submission.supplier!r}", "supplier")
            supplier = who.supplier
        else:
            supplier = submission.supplier
        from starlette.concurrency import run_in_threadpool

        status, data = await run_in_threadpool(_submit_sync, raw, submission, supplier, who, key)
        headers = {"Location": data["links"]["self"]}
        if status == 200:
            headers["Idempotent-Replayed"] = "true"
        return JSONResponse(status_code=202, content=data, headers=headers)

    def _replay(session: Session, who: Principal, key: str, digest: str) -> dict[str, Any] | None:
        row = session.scalars(select(Audit).options(selectinload(Audit.documents)).where(
            Audit.submitted_by == who.token_id, Audit.idempotency_key == key)).first()
        if row is None:
            return None
        if row.body_sha256 != digest:
            raise _ApiError(409, "idempotency_key_reused",
                            f"Idempotency-Key {key!r} was already used by this token for "
                            f"another request body (audit {row.id}); use a new key for a new "
                            "submission", "Idempotency-Key")
        return record(session, row)

    def _submit_sync(raw: bytes, sub: Submission, supplier: str | None, who: Principal,
                     key: str | None) -> tuple[int, dict[str, Any]]:
        digest = hashlib.sha256(raw).hexdigest()
        if key is not None:
            with sessions() as session:
                replay = _replay(session, who, key, digest)
            if replay is not None:
                return 200, replay
        check_sizes(json.loads(raw.decode("utf-8")), max_order=max_order,
                    max_channels=max_channels)
        documents = check_documents(sub)
        tol = tolerances_for(sub)
        audit_id = uuid.uuid4().hex
        try:
            with sessions.begin() as session:
                in_flight = select(func.count()).select_from(Audit).where(
                    Audit.status.in_(ACTIVE_STATES))
                if (session.scalar(in_flight) or 0) >= queue_size:
                    raise _ApiError(503, "queue_full",
                                    f"the job queue holds {queue_size} audits (queue_size); "
                                    f"retry after {RETRY_AFTER_SECONDS} s", None,
                                    {"Retry-After": str(RETRY_AFTER_SECONDS)})
                mine = session.scalar(in_flight.where(Audit.submitted_by == who.token_id)) or 0
                if mine >= token_quota:
                    raise _ApiError(429, "quota_exceeded",
                                    f"this token has {mine} audits in flight, its quota "
                                    f"(token_quota={token_quota}); retry when some are done",
                                    None, {"Retry-After": str(RETRY_AFTER_SECONDS)})
                row = Audit(
                    id=audit_id, created_at=utc_now(), supplier=supplier,
                    submitted_by=who.token_id, status="queued", attempts=0,
                    time_budget_seconds=float(job_seconds), idempotency_key=key,
                    verdict=None, claims_outcome=None,
                    reference_name=next((d["name"] for d in documents
                                         if d["role"] == "reference"), None),
                    model_names=[d["name"] for d in documents if d["role"] == "model"],
                    body=raw, body_sha256=digest, lti_audit_version=version,
                    tolerances=tol.model_dump(), report=None, seconds=None,
                )
                session.add(row)
                session.flush()
                for d in documents:
                    session.add(_document_row(audit_id, d))
        except IntegrityError:
            if key is None:
                raise
            with sessions() as session:  # a concurrent request with the same key won
                replay = _replay(session, who, key, digest)
            if replay is None:
                raise
            return 200, replay
        dispatcher.wake()
        return 202, _acknowledge(sessions, audit_id, record)

    @app.get("/audits", response_model=AuditList, tags=["audits"],
             responses=_responses(401, 403, 422))
    def list_audits(
        model: str | None = Query(default=None, max_length=200,
                                  description="Substring of a model or reference name (case-insensitive)"),
        supplier: str | None = Query(default=None, max_length=200),
        verdict: Literal["equivalent", "different", "inconclusive", "not_compared"] | None = None,
        status: Literal["queued", "running", "done", "failed"] | None = None,
        since: str | None = Query(default=None, max_length=40, description="ISO 8601 date-time, inclusive",
                                  json_schema_extra={"format": "date-time"}),
        until: str | None = Query(default=None, max_length=40, description="ISO 8601 date-time, exclusive",
                                  json_schema_extra={"format": "date-time"}),
        limit: int = Query(default=50, ge=1, le=500),
        offset: int = Query(default=0, ge=0, le=10_000_000),
        who: Principal = Depends(principal_dep),
        session: Session = Depends(session_dep),
        _: None = Depends(known_query),
    ) -> Any:
        """List audits, newest first, filtered by model name, supplier, verdict, status, date."""
        if who.role == "supplier":
            if supplier is not None and supplier != who.supplier:
                raise _ApiError(403, "forbidden", "supplier: supplier tokens see only their "
                                "own audits", "supplier")
            supplier = who.supplier
        # summary columns only: the body and the report can be megabytes per row
        q = select(Audit).options(defer(Audit.body), defer(Audit.report),
                                  defer(Audit.tolerances))
        if supplier is not None:
            q = q.where(Audit.supplier == supplier)
        if verdict is not None:
            q = q.where(Audit.verdict == verdict)
        if status is not None:
            q = q.where(Audit.status == status)
        if since is not None:
            q = q.where(Audit.created_at >= _parse_time(since, "since"))
        if until is not None:
            q = q.where(Audit.created_at < _parse_time(until, "until"))
        if model:
            names = select(AuditDocument.audit_id).where(
                func.lower(AuditDocument.name).contains(model.lower(), autoescape=True))
            q = q.where(Audit.id.in_(names))
        total = session.scalar(select(func.count()).select_from(q.subquery())) or 0
        rows = session.scalars(q.order_by(Audit.created_at.desc(), Audit.id)
                               .limit(limit).offset(offset)).all()
        return JSONResponse({"total": int(total), "limit": limit, "offset": offset,
                             "items": [summary(r, holder_of(session, r)) for r in rows]})

    @app.get("/audits/{audit_id}", response_model=AuditRecord, tags=["audits"],
             responses=_responses(401, 403, 404, 422))
    def get_audit(audit_id: str, who: Principal = Depends(principal_dep),
                  session: Session = Depends(session_dep)) -> Any:
        """One stored audit: status, report, documents with their hashes, tolerances, version."""
        # the stored report (up to megabytes of JSON) is spliced in as the database holds
        # it: no parse, validation and re-serialization pass per read
        row = load_audit(session, audit_id, who, with_body=False, with_report=False)
        data = record(session, row, with_report=False)
        raw = session.scalar(select(cast(Audit.report, Text)).where(Audit.id == audit_id))
        head = json.dumps(data, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
        text = f'{head[:-1]},"report":{raw if raw else "null"}}}'
        return Response(content=text.encode("utf-8"), media_type="application/json")

    @app.get("/audits/{audit_id}/body", tags=["audits"], responses={
        200: {"content": {"application/json": {}}, "description": "The exact request body"},
        **_responses(401, 403, 404, 422, explicit_json=True)})
    def get_body(audit_id: str, who: Principal = Depends(principal_dep),
                 session: Session = Depends(session_dep)) -> Response:
        """The exact bytes submitted (header ``X-Content-SHA256`` carries their hash)."""
        row = load_audit(session, audit_id, who)
        return Response(content=row.body, media_type="application/json",
                        headers={"X-Content-SHA256": row.body_sha256})

    def sign(audit_id: str, expires: int) -> str:
        return hmac.new(secret, f"{audit_id}|{expires}".encode(), hashlib.sha256).hexdigest()

    @app.post("/audits/{audit_id}/view-link", response_model=ViewLink, tags=["audits"],
              responses=_responses(401, 403, 404, 422))
    def view_link(audit_id: str, who: Principal = Depends(principal_dep),
                  session: Session = Depends(session_dep)) -> dict[str, Any]:
        """A signed link to the report page, valid ``link_seconds``, for a browser."""
        load_audit(session, audit_id, who)
        expires = int(time.time()) + link_seconds
        return {"url": f"/audits/{audit_id}/report.html?expires={expires}"
                       f"&signature={sign(audit_id, expires)}",
                "expires_at": dt.datetime.fromtimestamp(expires, dt.timezone.utc)
                .replace(tzinfo=None).isoformat() + "Z"}

    @app.get("/audits/{audit_id}/report.html", response_class=HTMLResponse, tags=["audits"],
             responses=_responses(401, 403, 404, 422, 503, explicit_json=True))
    def report_page(
        audit_id: str,
        expires: int | None = Query(default=None, ge=0, le=2**62),
        signature: str | None = Query(default=None, max_length=128),
        _: None = Depends(known_query),
        creds: HTTPAuthorizationCredentials | None = Depends(bearer),
        session: Session = Depends(session_dep),
    ) -> HTMLResponse:
        """The HTML audit page (bearer token, or a signed link's ``expires``/``signature``)."""
        if creds is not None:
            who = principal_dep(creds)
            row = load_audit(session, audit_id, who)
        else:
            ok = (expires is not None and signature is not None and expires >= time.time()
                  and hmac.compare_digest(sign(audit_id, expires), signature))
            if not ok:
                raise _ApiError(401, "unauthorized", "send a bearer token or use a valid, "
                                "unexpired signed link from POST /audits/{id}/view-link",
                                "signature", {"WWW-Authenticate": "Bearer"})
            row = session.get(Audit, audit_id)
            if row is None:
                raise _ApiError(404, "not_found", f"no audit with id {audit_id!r}", "audit_id")
        if row.status != "done":
            return HTMLResponse(_state_page(row))
        # the page converts the documents and computes plots: on the cluster, with no
        # database connection held, so that a large audit's page never slows other requests
        fields = {"id": row.id, "report": row.report, "body": bytes(row.body),
                  "tolerances": row.tolerances}
        session.close()
        try:
            page = dispatcher.run_now(_page_task, fields, max_order,
                                      timeout=float(job_seconds) + 60.0)
        except (TimeoutError, RuntimeError) as exc:
            raise _ApiError(503, "busy", f"the report page could not be drawn now: {exc}; "
                            f"retry after {RETRY_AFTER_SECONDS} s", None,
                            {"Retry-After": str(RETRY_AFTER_SECONDS)}) from None
        return HTMLResponse(page)

    @app.post("/audits/{audit_id}/rerun", response_model=RerunResult, tags=["audits"],
              responses=_responses(401, 403, 404, 409, 422, 503))
    def rerun(audit_id: str, who: Principal = Depends(principal_dep),
              session: Session = Depends(session_dep)) -> dict[str, Any]:
        """Re-run a stored audit from its exact bytes with its stored tolerances.

        Nothing is stored; the result says whether verdict and every claim outcome were
        reproduced and with which lti-audit versions.
        """
        row = load_audit(session, audit_id, who)
        if row.status != "done":
            raise _ApiError(409, "not_done", f"audit {audit_id} is {row.status}; only a done "
                            "audit can be re-run", "audit_id")
        body, tolerances = bytes(row.body), dict(row.tolerances)
        budget = row.time_budget_seconds or float(job_seconds)
        session.close()  # no connection held while the cluster computes
        try:
            outcome = dispatcher.run_now(compute_audit, body, tolerances, max(max_order, 2000),
                                         budget, timeout=budget + 60.0)
        except AuditError as exc:
            raise _ApiError(422, "audit_error", f"the stored submission cannot be re-run: "
                            f"{exc}") from None
        except (TimeoutError, RuntimeError) as exc:
            raise _ApiError(503, "busy", f"the re-run did not finish: {exc}; retry after "
                            f"{RETRY_AFTER_SECONDS} s", None,
                            {"Retry-After": str(RETRY_AFTER_SECONDS)}) from None
        old_claims = {(c["model"], c["claim"]): c["outcome"]
                      for c in (row.report or {}).get("claims", [])}
        new_claims = {(c["model"], c["claim"]): c["outcome"] for c in outcome["report"]["claims"]}
        changes = [{"model": k[0], "claim": k[1], "original": old_claims.get(k),
                    "rerun": new_claims.get(k)}
                   for k in sorted(set(old_claims) | set(new_claims))
                   if old_claims.get(k) != new_claims.get(k)]
        same = outcome["verdict"] == row.verdict
        return {
            "audit_id": audit_id, "original_version": row.lti_audit_version,
            "rerun_version": outcome["report"]["lti_audit_version"],
            "original_verdict": row.verdict, "rerun_verdict": outcome["verdict"],
            "same_verdict": same, "original_claims_outcome": row.claims_outcome,
            "rerun_claims_outcome": outcome["claims_outcome"], "claim_changes": changes,
            "reproduced": same and not changes, "report": outcome["report"],
        }

    return app


def _acknowledge(sessions: Any, audit_id: str, record: Any) -> dict[str, Any]:
    """The 202 answer of a stored submission (read back after the commit)."""
    with sessions() as session:
        stored = session.get(Audit, audit_id, options=[selectinload(Audit.documents)])
        assert stored is not None
        return record(session, stored)


def _state_page(row: Audit) -> str:
    """A small page for an audit that is not done (refreshes itself while in flight)."""
    import html

    from audit.reports.shapes import CAUTION

    refresh = '<meta http-equiv="refresh" content="5">' if row.status in ACTIVE_STATES else ""
    names = ", ".join(html.escape(str(n)) for n in row.model_names)
    failure = (f'<p id="failure"><strong>Reason:</strong> {html.escape(row.failure)}</p>'
               if row.failure else "")
    budget = ("" if row.time_budget_seconds is None else
              f"<p>Time budget of the audit job: {row.time_budget_seconds:g} s.</p>")
    return (f'<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">{refresh}'
            f"<title>lti-audit audit {html.escape(row.id)}: {html.escape(row.status)}</title>"
            f'</head><body><h1>lti-audit audit {html.escape(row.id)}</h1>'
            f'<p id="status">Status: <strong>{html.escape(row.status)}</strong> '
            f"(attempts: {row.attempts})</p>{failure}<p>Models: {names}</p>{budget}"
            f'<p id="caution">{html.escape(CAUTION)}</p></body></html>')


def _document_row(audit_id: str, d: dict[str, Any]) -> AuditDocument:
    return AuditDocument(audit_id=audit_id, position=d["position"], role=d["role"],
                         name=d["name"], sha256=d["sha256"])


def _page_task(fields: dict[str, Any], max_order: int) -> str:
    """Draw a done audit's report page (a Dask task; ``fields``: id, report, body,
    tolerances of the stored audit)."""
    import types

    row = types.SimpleNamespace(**fields)

    def reparse(r: Any) -> tuple[ParsedSubmission, Tolerances]:
        body = json.loads(r.body.decode("utf-8"))
        return (parse_submission(body, max_order=max(max_order, 2000)),
                Tolerances.model_validate(r.tolerances))

    return _render_page(row, reparse)  # type: ignore[arg-type]


def _render_page(row: Audit, reparse: Any) -> str:
    from audit.reports.html_page import render_compare_html
    from audit.reports.shapes import model_entry

    ps, _ = reparse(row)
    report = row.report
    title = f"lti-audit audit {row.id}"
    claims = report.get("claims") or []
    compared, sources = compared_models(ps)
    data = report.get("comparison")
    if data is None:  # one model, no reference: a page with claims and plots of it
        compared, sources = [ps.models[0]], ["models[0]"]
        data = {"report": "compare", "lti_audit_version": report["lti_audit_version"],
                "verdict": "not_compared", "summary": report["summary"],
                "tolerances": report["tolerances"], "models": [model_entry(ps.models[0], "models[0]")],
                "comparisons": [], "seconds": report.get("seconds", 0.0)}
    else:
        data = dict(data, summary=report["summary"])
    return render_compare_html(data, compared, claims=claims, title=title)
