"""API tokens of the audit service: creation, lookup, listing and revocation.

A token is ``lta_`` followed by 32 random bytes from :mod:`secrets` in URL-safe base64
(43 characters). Only its SHA-256 (FIPS 180-4) is stored; the token itself is shown
once, when it is created. A presented token is hashed and looked up by hash; the stored
and computed hashes are then compared with :func:`hmac.compare_digest` (constant time),
so that the comparison leaks no timing information. SHA-256 without salt or key
stretching is adequate here because the token has 256 bits of entropy (no dictionary
to attack), unlike a password.

Roles: ``team`` tokens see and submit every audit; ``supplier`` tokens carry a supplier
name and see only the audits submitted for that supplier.
"""

from __future__ import annotations

import hashlib
import hmac
import secrets
from dataclasses import dataclass
from typing import Any, Literal

from sqlalchemy import select
from sqlalchemy.orm import Session

from audit.errors import AuditError
from audit.service.db import ApiToken, utc_now

__all__ = ["Principal", "TOKEN_PREFIX", "TokenError", "authenticate", "create_token",
           "list_tokens", "revoke_token", "token_sha256"]

Role = Literal["team", "supplier"]
TOKEN_PREFIX = "lta_"
TOKEN_BYTES = 32


class TokenError(AuditError, ValueError):
    """A token command was given invalid arguments (the message names them)."""


@dataclass(frozen=True)
class Principal:
    """Who is calling: token id, holder, role and (suppliers) supplier name."""

    token_id: int
    holder: str
    role: Role
    supplier: str | None

    def may_see(self, supplier: str | None) -> bool:
        return self.role == "team" or (supplier is not None and supplier == self.supplier)

    def as_dict(self) -> dict[str, Any]:
        return {"token_id": self.token_id, "holder": self.holder, "role": self.role,
                "supplier": self.supplier}


def token_sha256(token: str) -> str:
    """Hex SHA-256 of the token's UTF-8 bytes."""
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


def create_token(session: Session, *, holder: str, role: Role,
                 supplier: str | None = None) -> tuple[str, dict[str, Any]]:
    """Create a token; return (the token, its stored record as a dict).

    Parameters
    ----------
    session : Session
        Committed by this function.
    holder : str, keyword-only
        Team member or supplier contact (non-empty, at most 200 characters).
    role : {"team", "supplier"}, keyword-only
    supplier : str or None, keyword-only
        Required for ``role="supplier"``, forbidden for ``role="team"``.

    Returns
    -------
    (str, dict)
        The token (show it once, it is not stored) and ``{"id", "holder", "role",
        "supplier", "prefix", "created_at", "revoked_at"}``.

    Raises
    ------
    TokenError
        Empty or over-long holder/supplier, unknown role, supplier missing or misplaced.
    """
    holder = (holder or "").strip()
    if not holder or len(holder) > 200:
        raise TokenError("holder: expected a non-empty name of at most 200 characters")
    if role not in ("team", "supplier"):
        raise TokenError(f"role: got {role!r}, expected 'team' or 'supplier'")
    if role == "supplier":
        supplier = (supplier or "").strip()
        if not supplier or len(supplier) > 200:
            raise TokenError("supplier: a supplier token needs a supplier name "
                             "(non-empty, at most 200 characters)")
    elif supplier:
        raise TokenError("supplier: only supplier tokens carry a supplier name; "
                         "team tokens see every supplier")
    else:
        supplier = None
    token = TOKEN_PREFIX + secrets.token_urlsafe(TOKEN_BYTES)
    row = ApiToken(holder=holder, role=role, supplier=supplier, token_sha256=token_sha256(token),
                   prefix=token[:10], created_at=utc_now(), revoked_at=None)
    session.add(row)
    session.commit()
    return token, _record(row)


def _record(row: ApiToken) -> dict[str, Any]:
    return {
        "id": row.id, "holder": row.holder, "role": row.role, "supplier": row.supplier,
        "prefix": row.prefix, "created_at": row.created_at.isoformat() + "Z",
        "revoked_at": None if row.revoked_at is None else row.revoked_at.isoformat() + "Z",
    }


def list_tokens(session: Session) -> list[dict[str, Any]]:
    """Every token record (never the token), oldest first."""
    return [_record(r) for r in session.scalars(select(ApiToken).order_by(ApiToken.id))]


def revoke_token(session: Session, token_id: int) -> dict[str, Any]:
    """Revoke a token by id (idempotent); return its record.

    Raises
    ------
    TokenError
        No token has this id.
    """
    row = session.get(ApiToken, token_id)
    if row is None:
        raise TokenError(f"id: no token with id {token_id}")
    if row.revoked_at is None:
        row.revoked_at = utc_now()
        session.commit()
    return _record(row)


def authenticate(session: Session, presented: str | None) -> Principal | None:
    """The principal of a presented token, or ``None`` (unknown, malformed or revoked)."""
    if not presented or not presented.startswith(TOKEN_PREFIX) or len(presented) > 200:
        return None
    digest = token_sha256(presented)
    row = session.scalars(select(ApiToken).where(ApiToken.token_sha256 == digest)).first()
    if row is None or not hmac.compare_digest(row.token_sha256, digest):
        return None
    if row.revoked_at is not None:
        return None
    return Principal(row.id, row.holder, row.role, row.supplier)  # type: ignore[arg-type]
