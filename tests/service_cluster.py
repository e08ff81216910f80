"""A Dask cluster shared by the service tests of one pytest process (threads, in process).

The service's default is a local cluster of worker *processes*; the tests that need real
processes (a scheduler and workers started as separate programs) are in
tests/test_jobs_cluster.py. Here the workers are threads of the test process, so that
the many small service tests do not each pay for starting processes.
"""

from __future__ import annotations

import atexit
import threading
import time
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
                                    dashboard_address=None)
            atexit.register(_CLUSTER.close)
        return str(_CLUSTER.scheduler_address)


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
