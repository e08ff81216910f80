"""The lti-audit service: audits over HTTP with a stored, reproducible history.

``create_app(database_url, *, max_body_bytes=..., max_order=...)`` builds the FastAPI
application (see :mod:`audit.service.app` for the endpoints); tokens are managed with
:mod:`audit.service.tokens` (``lti-audit token ...``); the database layer and its Alembic
migrations live in :mod:`audit.service.db` and ``audit/service/migrations``; submissions are
checked by :mod:`audit.service.intake` and audited as jobs on Dask workers by
:mod:`audit.service.jobs`.
FastAPI, SQLAlchemy and Alembic are imported only when these modules are used.
"""

from __future__ import annotations

from typing import Any

__all__ = ["create_app"]


def create_app(database_url: str, **kwargs: Any) -> Any:
    """Build the service application; see :func:`audit.service.app.create_app`."""
    from audit.service.app import create_app as _create_app

    return _create_app(database_url, **kwargs)
