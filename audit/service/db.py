"""Database layer of the audit service: tables, engine and schema migrations.

Tables (SQLAlchemy 2 declarative models; the schema itself is created and upgraded by
the Alembic migrations in ``audit/service/migrations``, applied programmatically by
:func:`open_database` at start-up, so ``create_all`` is never used):

``api_tokens``
    one row per API token: the holder's name, role (``team`` or ``supplier``), supplier
    name (suppliers only), the SHA-256 of the token (never the token), a short display
    prefix, creation and revocation times.
``audits``
    one row per stored audit (a job): creation time, supplier, submitting token, job
    status (``queued``, ``running``, ``done``, ``failed``), attempts, start and finish
    times, failure reason, time budget, the client's ``Idempotency-Key`` (unique per
    token), verdict, reference and model names, the SHA-256 and the exact bytes of the
    request body, the lti-audit version, the tolerances used and the full report (JSON;
    empty until the job is done).
``audit_documents``
    one row per model document of an audit: its role (``reference`` or ``model``),
    position, name, and the SHA-256 of its canonical JSON text (sorted keys, no spaces,
    UTF-8), kept for searching by model name and for identifying a document.

SQLite databases are switched to write-ahead logging (WAL; "Write-Ahead Logging",
sqlite.org) with a busy timeout, so that readers never block the single writer and
concurrent submissions queue instead of failing. A submission is written in one
transaction (audit row and document rows, status ``queued``); the worker that runs the
job writes the report and the final status in one more transaction. The connection pool
is sized by :func:`open_database`'s ``pool_size``/``max_overflow``/``pool_timeout``.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

from sqlalchemy import (
    JSON,
    DateTime,
    ForeignKey,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
    create_engine,
    event,
)
from sqlalchemy.engine import Engine
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship, sessionmaker

from audit.errors import AuditError

__all__ = [
    "ACTIVE_STATES",
    "ApiToken",
    "Audit",
    "AuditDocument",
    "Base",
    "DatabaseError",
    "default_database_url",
    "open_database",
    "utc_now",
]

SQLITE_BUSY_TIMEOUT_MS = 30_000
"""How long a SQLite writer waits for the lock before giving up (milliseconds)."""


ACTIVE_STATES = ("queued", "running")
"""Job states of an audit in flight (counted by the queue bound and the token quota)."""

JOB_STATES = ("queued", "running", "done", "failed")


class DatabaseError(AuditError):
    """The database could not be opened or migrated (message names the URL)."""


def utc_now() -> dt.datetime:
    """The current time, UTC, without tzinfo (stored naive-UTC in every backend)."""
    return dt.datetime.now(dt.timezone.utc).replace(tzinfo=None)


def default_database_url(directory: str | Path = ".") -> str:
    """``sqlite:///<directory>/lti-audit.sqlite3`` (a file next to where it runs)."""
    return f"sqlite:///{Path(directory).resolve() / 'lti-audit.sqlite3'}"


class Base(DeclarativeBase):
    pass


class ApiToken(Base):
    __tablename__ = "api_tokens"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    holder: Mapped[str] = mapped_column(String(200))
    role: Mapped[str] = mapped_column(String(20))
    supplier: Mapped[str | None] = mapped_column(String(200), nullable=True)
    token_sha256: Mapped[str] = mapped_column(String(64), unique=True, index=True)
    prefix: Mapped[str] = mapped_column(String(16))
    created_at: Mapped[dt.datetime] = mapped_column(DateTime)
    revoked_at: Mapped[dt.datetime | None] = mapped_column(DateTime, nullable=True)


class Audit(Base):
    __tablename__ = "audits"

    id: Mapped[str] = mapped_column(String(32), primary_key=True)
    created_at: Mapped[dt.datetime] = mapped_column(DateTime, index=True)
    supplier: Mapped[str | None] = mapped_column(String(200), nullable=True, index=True)
    submitted_by: Mapped[int | None] = mapped_column(ForeignKey("api_tokens.id"), nullable=True)
    status: Mapped[str] = mapped_column(String(12), index=True, default="queued")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    started_at: Mapped[dt.datetime | None] = mapped_column(DateTime, nullable=True)
    finished_at: Mapped[dt.datetime | None] = mapped_column(DateTime, nullable=True)
    failure: Mapped[str | None] = mapped_column(Text, nullable=True)
    time_budget_seconds: Mapped[float | None] = mapped_column(nullable=True)
    idempotency_key: Mapped[str | None] = mapped_column(String(200), nullable=True)
    verdict: Mapped[str | None] = mapped_column(String(20), index=True, nullable=True)
    claims_outcome: Mapped[str | None] = mapped_column(String(20), nullable=True)
    reference_name: Mapped[str | None] = mapped_column(String(500), nullable=True)
    model_names: Mapped[Any] = mapped_column(JSON)
    body: Mapped[bytes] = mapped_column(LargeBinary)
    body_sha256: Mapped[str] = mapped_column(String(64), index=True)
    lti_audit_version: Mapped[str] = mapped_column(String(50))
    tolerances: Mapped[Any] = mapped_column(JSON)
    report: Mapped[Any] = mapped_column(JSON, nullable=True)
    seconds: Mapped[float | None] = mapped_column(nullable=True)

    __table_args__ = (UniqueConstraint("submitted_by", "idempotency_key",
                                       name="uq_audits_token_idempotency_key"),)

    documents: Mapped[list["AuditDocument"]] = relationship(
        back_populates="audit", order_by="AuditDocument.position", cascade="all, delete-orphan")


class AuditDocument(Base):
    __tablename__ = "audit_documents"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    audit_id: Mapped[str] = mapped_column(ForeignKey("audits.id"), index=True)
    position: Mapped[int] = mapped_column(Integer)
    role: Mapped[str] = mapped_column(String(20))
    name: Mapped[str] = mapped_column(Text, index=True)
    sha256: Mapped[str] = mapped_column(String(64))

    audit: Mapped[Audit] = relationship(back_populates="documents")


def _sqlite_pragmas(dbapi_connection: Any, _record: Any) -> None:
    cur = dbapi_connection.cursor()
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    cur.execute("PRAGMA foreign_keys=ON")
    cur.execute("PRAGMA synchronous=FULL")
    cur.close()


def migrate(engine: Engine) -> None:
    """Upgrade the database schema to the newest Alembic revision (idempotent)."""
    from alembic import command
    from alembic.config import Config

    cfg = Config()
    cfg.set_main_option("script_location", str(Path(__file__).parent / "migrations"))
    with engine.begin() as connection:
        cfg.attributes["connection"] = connection
        command.upgrade(cfg, "head")


def open_database(database_url: str, *, migrate_schema: bool = True, pool_size: int = 10,
                  max_overflow: int = 10, pool_timeout: float = 10.0,
                  ) -> tuple[Engine, sessionmaker[Any]]:
    """Create the engine for ``database_url``, apply migrations, return (engine, sessions).

    Parameters
    ----------
    database_url : str
        Any SQLAlchemy URL, e.g. ``sqlite:///audits.sqlite3`` or
        ``postgresql+psycopg://user@host/db``.
    migrate_schema : bool, keyword-only
        Apply the Alembic migrations (default True).
    pool_size, max_overflow : int, keyword-only
        Connections kept open, and opened beyond them under load (defaults 10 and 10).
    pool_timeout : float, keyword-only
        Seconds a request waits for a free connection before
        ``sqlalchemy.exc.TimeoutError`` (the service answers 503 with Retry-After).

    Returns
    -------
    (Engine, sessionmaker)

    Raises
    ------
    DatabaseError
        The URL is malformed, its driver is missing, or the migration failed.
    """
    try:
        engine = create_engine(database_url, future=True, pool_pre_ping=True,
                               pool_size=pool_size, max_overflow=max_overflow,
                               pool_timeout=pool_timeout)
    except Exception as exc:  # noqa: BLE001 - translate at the edge
        raise DatabaseError(f"database URL {database_url!r} cannot be used: {exc}") from exc
    if engine.dialect.name == "sqlite":
        event.listen(engine, "connect", _sqlite_pragmas)
    if migrate_schema:
        try:
            migrate(engine)
        except Exception as exc:  # noqa: BLE001
            raise DatabaseError(
                f"database {engine.url.render_as_string(hide_password=True)}: schema "
                f"migration failed: {exc}") from exc
    return engine, sessionmaker(engine, expire_on_commit=False)
