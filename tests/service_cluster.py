"""A Dask cluster shared by the service tests of one pytest process (threads, in process).

The service's default is a local cluster of worker *processes*; the tests that need real
processes (a scheduler and workers started as separate programs) are in
tests/test_jobs_cluster.py. Here the workers are threads of the test process, so that
the many small service tests do not each pay for starting processes.
"""

from __future__ import annotations

import atexit
import logging
import os
import threading
import time
import uuid
from typing import Any

_LOCK = threading.Lock()
_CLUSTER: Any = None


def inproc_scheduler() -> str:
    """Address of the shared in-process cluster (2 workers, 1 thread each), started once."""
    global _CLUSTER
    with _LOCK:
        if _CLUSTER is None:
            from distributed import LocalCluster

            _CLUSTER = LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                    dashboard_address="127.0.0.1:0",
                                    worker_dashboard_address="127.0.0.1:0")
            atexit.register(_close)
        return str(_CLUSTER.scheduler_address)


def _close() -> None:
    logging.getLogger("distributed").setLevel(logging.CRITICAL)  # quiet at interpreter exit
    _CLUSTER.close()


def on_postgres() -> bool:
    """True when the service tests run on PostgreSQL (``LTI_AUDIT_TEST_SERVICE_BACKEND=
    postgresql`` and ``LTI_AUDIT_TEST_POSTGRES_URL`` set): each Service then gets a fresh
    database on that server instead of its SQLite file."""
    return (os.environ.get("LTI_AUDIT_TEST_SERVICE_BACKEND") == "postgresql"
            and bool(os.environ.get("LTI_AUDIT_TEST_POSTGRES_URL")))


def service_database_url(sqlite_url: str) -> str:
    """``sqlite_url``, or a fresh PostgreSQL database in PostgreSQL mode (see on_postgres)."""
    if not on_postgres():
        return sqlite_url
    from sqlalchemy import create_engine, text
    from sqlalchemy.engine import make_url

    server = make_url(os.environ["LTI_AUDIT_TEST_POSTGRES_URL"])
    name = f"lti_audit_t_{uuid.uuid4().hex[:12]}"
    admin = create_engine(server.set(database="postgres"), isolation_level="AUTOCOMMIT")
    with admin.connect() as c:
        c.execute(text(f'CREATE DATABASE "{name}"'))
    admin.dispose()
    return server.set(database=name).render_as_string(hide_password=False)


def wait_done(client: Any, audit_id: str, headers: dict[str, str], timeout: float = 120.0) -> Any:
    """Poll ``GET /audits/{id}`` until the audit is done or failed (bounded in time)."""
    deadline = time.monotonic() + timeout
    delay = 0.02
    while True:
        r = client.get(f"/audits/{audit_id}", headers=headers)
        if r.status_code != 200 or r.json()["status"] in ("done", "failed"):
            return r
        if time.monotonic() > deadline:
            raise AssertionError(f"audit {audit_id} not finished after {timeout} s: {r.text[:300]}")
        time.sleep(delay)
        delay = min(2 * delay, 0.25)
