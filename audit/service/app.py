"""The audit service: a FastAPI application with stored audit history.

Endpoints (all but ``/health`` need ``Authorization: Bearer <token>``; the report page
also accepts a signed, expiring link from ``POST /audits/{id}/view-link``):

=======  ==============================  ==============================================
POST     /audits                         submit models, reference and claims (201)
GET      /audits                         list and filter past audits
GET      /audits/{id}                    one audit as JSON (report, documents, hashes)
GET      /audits/{id}/report.html        the HTML report page (plots, claims table)
GET      /audits/{id}/body               the exact submitted request bytes
POST     /audits/{id}/rerun              re-run with the stored bytes and tolerances
POST     /audits/{id}/view-link          a signed link to the page, for a browser
GET      /health                         liveness and version (no token)
=======  ==============================  ==============================================

Errors are JSON ``{"error": <code>, "field": <field or null>, "message": <text>}``:
401 missing/invalid token, 403 forbidden (a supplier asking for another supplier's
audit), 404 unknown audit, 413 request body above ``max_body_bytes``, 422 invalid
request or model document (the CLI's message, source ``models[i]`` / ``reference``) or a
model above ``max_order``. Any other exception becomes a generic 500 with an incident id
that is logged (with the traceback) on the server only.

Signed view links are HMAC-SHA256 (RFC 2104) over ``"<audit id>|<expiry>"`` with a
per-application secret (``link_secret``; random per process by default).
"""

from __future__ import annotations

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
from sqlalchemy import func, select
from sqlalchemy.orm import Session, selectinload

from ..errors import IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from .db import Audit, AuditDocument, open_database, utc_now
from .submission import (
    ParsedSubmission,
    Submission,
    Tolerances,
    compared_models,
    parse_submission,
    run_audit,
    tolerances_for,
)
from .tokens import Principal, authenticate

__all__ = ["DEFAULT_MAX_BODY_BYTES", "DEFAULT_MAX_ORDER", "create_app"]

LOG = logging.getLogger("audit.service")

DEFAULT_MAX_BODY_BYTES = 2 * 1024 * 1024
"""Largest accepted request body (bytes): about a dense order-300 model in JSON."""

DEFAULT_MAX_ORDER = 200
"""Largest accepted model order (states after conversion to state space)."""

DEFAULT_LINK_SECONDS = 900
"""Validity of a signed view link (seconds)."""


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
    verdict: Literal["equivalent", "different", "inconclusive", "not_compared"]
    claims_outcome: Literal["hold", "fail", "unclear", "none"]
    reference_name: str | None
    model_names: list[str]
    lti_audit_version: str
    body_sha256: str = Field(description="SHA-256 of the exact request body as received")
    links: dict[str, str]


class AuditRecord(AuditSummary):
    tolerances: dict[str, Any]
    documents: list[DocumentInfo]
    report: dict[str, Any]


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
            404: "No such audit", 413: "Request body too large",
            422: "Invalid request, model document or claim"}
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
        self.app = app

    async def __call__(self, scope: dict[str, Any], receive: Any, send: Any) -> None:
        async def send_with_headers(message: dict[str, Any]) -> None:
            if message["type"] == "http.response.start":
                message.setdefault("headers", [])
                message["headers"] = [*message["headers"],
                                      (b"content-security-policy", CONTENT_SECURITY_POLICY),
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
                        ("link_seconds", link_seconds)):
        if not isinstance(value, int) or isinstance(value, bool) or value < 1:
            raise InvalidModelError(f"{name}={value!r}: expected an integer >= 1", field=name)
    from ..report import package_version

    engine, sessions = open_database(database_url)
    secret = link_secret if link_secret is not None else secrets.token_bytes(32)
    version = package_version()
    app = FastAPI(
        title="lti-audit service",
        version=version,
        description="Audits of claimed-equivalent LTI models and supplier claims, with "
                    "stored history. Authenticate with `Authorization: Bearer <token>` "
                    "(tokens are created with `lti-audit token create`).",
    )
    app.state.engine = engine
    app.state.sessions = sessions
    app.state.max_order = max_order
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
        session: Session = Depends(session_dep),
    ) -> Principal:
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

    def load_audit(session: Session, audit_id: str, who: Principal) -> Audit:
        row = session.get(Audit, audit_id, options=[selectinload(Audit.documents)])
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
            "submitted_by": holder, "verdict": row.verdict,
            "claims_outcome": row.claims_outcome, "reference_name": row.reference_name,
            "model_names": list(row.model_names), "lti_audit_version": row.lti_audit_version,
            "body_sha256": row.body_sha256,
            "links": {"self": f"/audits/{row.id}", "html": f"/audits/{row.id}/report.html",
                      "body": f"/audits/{row.id}/body", "rerun": f"/audits/{row.id}/rerun"},
        }

    def holder_of(session: Session, row: Audit) -> str | None:
        from .db import ApiToken

        if row.submitted_by is None:
            return None
        tok = session.get(ApiToken, row.submitted_by)
        return None if tok is None else tok.holder

    def record(session: Session, row: Audit) -> dict[str, Any]:
        data = summary(row, holder_of(session, row))
        data["tolerances"] = row.tolerances
        data["documents"] = [{"role": d.role, "position": d.position, "name": d.name,
                              "sha256": d.sha256} for d in row.documents]
        data["report"] = row.report
        return data

    def reparse(row: Audit) -> tuple[ParsedSubmission, Tolerances]:
        body = json.loads(row.body.decode("utf-8"))
        return (parse_submission(body, max_order=max(max_order, 2000)),
                Tolerances.model_validate(row.tolerances))

    # ------------------------------------------------------------ routes
    @app.get("/health", response_model=Health, tags=["service"])
    def health() -> dict[str, Any]:
        """Liveness check; needs no token."""
        return {"status": "ok", "lti_audit_version": version}

    @app.post("/audits", status_code=201, response_model=AuditRecord, tags=["audits"],
              responses=_responses(401, 403, 413, 422))
    async def submit(request: Request, submission: Submission,
                     who: Principal = Depends(principal_dep)) -> Any:
        """Submit model documents, an optional reference and claims; store the audit.

        The report is computed first; the audit and its documents are then written in
        one transaction, so a failure leaves nothing half-written.
        """
        raw = await request.body()
        if who.role == "supplier":
            if submission.supplier is not None and submission.supplier != who.supplier:
                raise _ApiError(403, "forbidden",
                                f"supplier: a token of supplier {who.supplier!r} cannot submit "
                                f"for supplier {submission.supplier!r}", "supplier")
            supplier = who.supplier
        else:
            supplier = submission.supplier
        from starlette.concurrency import run_in_threadpool

        return await run_in_threadpool(_submit_sync, raw, supplier, who)

    def _submit_sync(raw: bytes, supplier: str | None, who: Principal) -> dict[str, Any]:
        body = json.loads(raw.decode("utf-8"))
        ps = parse_submission(body, max_order=max_order)
        tol = tolerances_for(ps.submission)
        outcome = run_audit(ps, tol)
        audit_id = uuid.uuid4().hex
        report = dict(outcome.report, audit_id=audit_id)
        with sessions.begin() as session:
            row = Audit(
                id=audit_id, created_at=utc_now(), supplier=supplier, submitted_by=who.token_id,
                verdict=outcome.verdict, claims_outcome=outcome.claims_outcome,
                reference_name=None if ps.reference is None else ps.reference.name,
                model_names=[m.name for m in ps.models], body=raw,
                body_sha256=hashlib.sha256(raw).hexdigest(),
                lti_audit_version=report["lti_audit_version"], tolerances=tol.model_dump(),
                report=report, seconds=outcome.seconds,
            )
            session.add(row)
            session.flush()
            for d in ps.documents:
                session.add(_document_row(audit_id, d))
        with sessions() as session:
            stored = session.get(Audit, audit_id, options=[selectinload(Audit.documents)])
            assert stored is not None
            return record(session, stored)

    @app.get("/audits", response_model=AuditList, tags=["audits"],
             responses=_responses(401, 403, 422))
    def list_audits(
        model: str | None = Query(default=None, max_length=200,
                                  description="Substring of a model or reference name (case-insensitive)"),
        supplier: str | None = Query(default=None, max_length=200),
        verdict: Literal["equivalent", "different", "inconclusive", "not_compared"] | None = None,
        since: str | None = Query(default=None, max_length=40, description="ISO 8601 date-time, inclusive",
                                  json_schema_extra={"format": "date-time"}),
        until: str | None = Query(default=None, max_length=40, description="ISO 8601 date-time, exclusive",
                                  json_schema_extra={"format": "date-time"}),
        limit: int = Query(default=50, ge=1, le=500),
        offset: int = Query(default=0, ge=0, le=10_000_000),
        who: Principal = Depends(principal_dep),
        session: Session = Depends(session_dep),
        _: None = Depends(known_query),
    ) -> dict[str, Any]:
        """List past audits, newest first, filtered by model name, supplier, verdict, date."""
        if who.role == "supplier":
            if supplier is not None and supplier != who.supplier:
                raise _ApiError(403, "forbidden", "supplier: supplier tokens see only their "
                                "own audits", "supplier")
            supplier = who.supplier
        q = select(Audit)
        if supplier is not None:
            q = q.where(Audit.supplier == supplier)
        if verdict is not None:
            q = q.where(Audit.verdict == verdict)
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
        return {"total": int(total), "limit": limit, "offset": offset,
                "items": [summary(r, holder_of(session, r)) for r in rows]}

    @app.get("/audits/{audit_id}", response_model=AuditRecord, tags=["audits"],
             responses=_responses(401, 403, 404, 422))
    def get_audit(audit_id: str, who: Principal = Depends(principal_dep),
                  session: Session = Depends(session_dep)) -> dict[str, Any]:
        """One stored audit: report, documents with their hashes, tolerances, version."""
        return record(session, load_audit(session, audit_id, who))

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
             responses=_responses(401, 403, 404, 422, explicit_json=True))
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
            who = principal_dep(creds, session)
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
        return HTMLResponse(_render_page(row, reparse))

    @app.post("/audits/{audit_id}/rerun", response_model=RerunResult, tags=["audits"],
              responses=_responses(401, 403, 404, 422))
    def rerun(audit_id: str, who: Principal = Depends(principal_dep),
              session: Session = Depends(session_dep)) -> dict[str, Any]:
        """Re-run a stored audit from its exact bytes with its stored tolerances.

        Nothing is stored; the result says whether verdict and every claim outcome were
        reproduced and with which lti-audit versions.
        """
        row = load_audit(session, audit_id, who)
        ps, tol = reparse(row)
        outcome = run_audit(ps, tol)
        old_claims = {(c["model"], c["claim"]): c["outcome"] for c in row.report.get("claims", [])}
        new_claims = {(c["model"], c["claim"]): c["outcome"] for c in outcome.report["claims"]}
        changes = [{"model": k[0], "claim": k[1], "original": old_claims.get(k),
                    "rerun": new_claims.get(k)}
                   for k in sorted(set(old_claims) | set(new_claims))
                   if old_claims.get(k) != new_claims.get(k)]
        same = outcome.verdict == row.verdict
        return {
            "audit_id": audit_id, "original_version": row.lti_audit_version,
            "rerun_version": outcome.report["lti_audit_version"],
            "original_verdict": row.verdict, "rerun_verdict": outcome.verdict,
            "same_verdict": same, "original_claims_outcome": row.claims_outcome,
            "rerun_claims_outcome": outcome.claims_outcome, "claim_changes": changes,
            "reproduced": same and not changes, "report": outcome.report,
        }

    return app


def _document_row(audit_id: str, d: dict[str, Any]) -> AuditDocument:
    return AuditDocument(audit_id=audit_id, position=d["position"], role=d["role"],
                         name=d["name"], sha256=d["sha256"])


def _render_page(row: Audit, reparse: Any) -> str:
    from ..html_report import render_compare_html
    from ..report import model_entry

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
