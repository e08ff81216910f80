"""Audit jobs: the database is the queue, Dask distributed runs them.

A submission is stored with status ``queued`` (see :mod:`audit.service.app`). The
:class:`JobDispatcher` of the web process sends every queued audit to a Dask cluster as
a task (:func:`execute_job`); the task runs in a worker process and writes the result
to the database itself, so an audit finishes even while the web process restarts.

Job life cycle (``audits.status``):

``queued``   stored, not started (or handed back after a lost worker);
``running``  claimed by a worker task (``attempts`` counts the claims);
``done``     report stored; a job that spent its time budget is ``done`` with verdict
             ``inconclusive`` and the reason in ``report["time_budget"]``;
``failed``   the submission could not be audited (incompatible models, a conversion
             that failed: ``failure`` holds the error code and message), or the worker
             running it died ``max_attempts`` times (a crash or a kill).

Recovery: at start-up the dispatcher re-sends every ``queued`` and ``running`` audit;
a task whose worker died is re-sent (Dask's own rescheduling, then the dispatcher's),
and each claim increments ``attempts`` so that the retries are bounded. A job claimed
twice (a re-sent ``running`` job whose first task was still alive) is computed twice but
stored once: only a task that finds the job still ``running`` writes its result.

Priority: on worker processes (a local cluster of processes or an external cluster) the
task raises its process's niceness once by ``DEFAULT_WORKER_NICENESS``, so that audits
yield the CPU to the web process on a shared machine and reads stay fast.

Time budget: :func:`audit.service.submission.run_audit` checks the budget between
model pairs and caps the extended-precision budget by the time left. As a backstop the
audit runs in a thread of the task; if it has not returned ``HARD_STOP_FACTOR`` times
the budget (plus ``HARD_STOP_GRACE`` s) after the start, the job is stored as
inconclusive and, on process workers, the worker process ends itself so that its
nanny starts a fresh one (a computation inside LAPACK cannot be interrupted otherwise).
"""

from __future__ import annotations

import json
import logging
import os
import queue
import threading
import time
import uuid
from dataclasses import dataclass
from typing import Any

from audit.errors import AuditError
from audit.service.db import ACTIVE_STATES, Audit, open_database, utc_now

__all__ = [
    "DEFAULT_JOB_ATTEMPTS",
    "DEFAULT_JOB_SECONDS",
    "DEFAULT_QUEUE_SIZE",
    "DEFAULT_TOKEN_QUOTA",
    "JobDispatcher",
    "JobSettings",
    "compute_audit",
    "error_code",
    "execute_job",
]

LOG = logging.getLogger("audit.service.jobs")

DEFAULT_QUEUE_SIZE = 500
"""Audits in flight (queued + running) before ``POST /audits`` answers 503."""

DEFAULT_TOKEN_QUOTA = 50
"""Audits in flight per token before ``POST /audits`` answers 429."""

DEFAULT_JOB_SECONDS = 600.0
"""Time budget of one audit job (seconds); stated in its report."""

DEFAULT_JOB_ATTEMPTS = 3
"""Claims of a job by worker tasks before a job whose workers keep dying is ``failed``."""

DEFAULT_WORKER_NICENESS = 10
"""Niceness added to a worker process by its first audit job (processes only)."""

HARD_STOP_FACTOR = 1.5
HARD_STOP_GRACE = 10.0
"""A computation still running ``HARD_STOP_FACTOR * budget + HARD_STOP_GRACE`` seconds
after its start is abandoned (see the module docstring)."""


@dataclass(frozen=True)
class JobSettings:
    """What a worker task needs to run audits (picklable; sent with every task)."""

    database_url: str
    max_order: int
    time_budget: float = DEFAULT_JOB_SECONDS
    max_attempts: int = DEFAULT_JOB_ATTEMPTS
    hard_stop: bool = False
    worker_niceness: int = 0
    stop_grace: float = HARD_STOP_GRACE


def error_code(exc: BaseException) -> str:
    """The service's error code of an audit error (same codes as the HTTP answers)."""
    from audit.errors import IncompatibleModelsError, InvalidModelError, NumericalTroubleError

    if isinstance(exc, IncompatibleModelsError):
        return "incompatible_models"
    if isinstance(exc, NumericalTroubleError):
        return "numerical_trouble"
    if isinstance(exc, InvalidModelError):
        return "invalid_model"
    return "audit_error"


def compute_audit(body: bytes, tolerances: dict[str, Any], max_order: int,
                  time_budget: float | None) -> dict[str, Any]:
    """Parse a stored submission and run its audit (numerics only, nothing stored).

    Returns
    -------
    dict
        ``verdict``, ``claims_outcome``, ``report``, ``seconds``.

    Raises
    ------
    AuditError
        The submission cannot be audited (the message says why).
    """
    from audit.service.submission import Tolerances, parse_submission, run_audit

    ps = parse_submission(json.loads(body.decode("utf-8")), max_order=max_order)
    outcome = run_audit(ps, Tolerances.model_validate(tolerances), time_budget=time_budget)
    return {"verdict": outcome.verdict, "claims_outcome": outcome.claims_outcome,
            "report": outcome.report, "seconds": outcome.seconds}


_SESSIONS: dict[str, Any] = {}
_SESSIONS_LOCK = threading.Lock()
_NICED = False


def _lower_priority(niceness: int) -> None:
    """Raise this worker process's niceness once (audits yield the CPU to the web process)."""
    global _NICED
    with _SESSIONS_LOCK:
        if niceness > 0 and not _NICED and hasattr(os, "nice"):
            try:
                os.nice(niceness)
            except OSError:  # pragma: no cover - not permitted here
                pass
            _NICED = True


def _sessions(url: str) -> Any:
    with _SESSIONS_LOCK:
        if url not in _SESSIONS:
            _SESSIONS[url] = open_database(url, migrate_schema=False, pool_size=2,
                                           max_overflow=2)[1]
        return _SESSIONS[url]


def _finish(sessions: Any, audit_id: str, **values: Any) -> bool:
    """Store a job's end if it is still ``running`` (the first finisher wins)."""
    with sessions.begin() as s:
        row = s.get(Audit, audit_id)
        if row is None or row.status != "running":
            return False
        for k, v in values.items():
            setattr(row, k, v)
        row.finished_at = utc_now()
        return True


def execute_job(audit_id: str, settings: JobSettings) -> str:
    """Run one stored audit in a Dask worker and store its result (the task function).

    Returns
    -------
    str
        ``done``, ``failed``, ``skipped`` (not in flight any more) or ``superseded``
        (another task stored the result first).
    """
    from audit.reports.shapes import CAUTION, package_version

    _lower_priority(settings.worker_niceness)
    sessions = _sessions(settings.database_url)
    with sessions.begin() as s:
        row = s.get(Audit, audit_id, with_for_update=True)
        if row is None or row.status not in ACTIVE_STATES:
            return "skipped"
        row.attempts += 1
        if row.attempts > settings.max_attempts:
            row.status = "failed"
            row.failure = (f"worker_lost: the worker running this audit stopped "
                           f"{row.attempts - 1} time(s) (crash or kill); not retried after "
                           f"{settings.max_attempts} attempts")
            row.finished_at = utc_now()
            return "failed"
        row.status, row.started_at = "running", utc_now()
        body, tolerances = bytes(row.body), dict(row.tolerances)
        budget = row.time_budget_seconds or settings.time_budget
    box: dict[str, Any] = {}

    def work() -> None:
        try:
            box["result"] = compute_audit(body, tolerances, settings.max_order, budget)
        except AuditError as exc:
            box["error"] = exc
        except Exception as exc:  # noqa: BLE001 - recorded with an incident id
            incident = uuid.uuid4().hex[:16]
            LOG.exception("incident %s: audit %s crashed", incident, audit_id)
            box["crash"] = f"internal_error: the audit crashed (incident {incident})"

    thread = threading.Thread(target=work, name=f"lti-audit audit {audit_id}", daemon=True)
    thread.start()
    limit = HARD_STOP_FACTOR * budget + settings.stop_grace
    thread.join(limit)
    if thread.is_alive():
        reason = (f"time budget of {budget:g} s exceeded: the computation did not return "
                  f"within {limit:g} s and was stopped; the audit is inconclusive")
        report = {"report": "audit", "lti_audit_version": package_version(),
                  "verdict": "inconclusive", "claims_outcome": "unclear", "summary": reason,
                  "tolerances": tolerances, "comparison": None, "claims": [],
                  "time_budget": {"seconds": budget, "exceeded": True, "reason": reason},
                  "audit_id": audit_id, "caution": CAUTION}
        _finish(sessions, audit_id, status="done", verdict="inconclusive",
                claims_outcome="unclear", report=report, seconds=budget)
        if settings.hard_stop:
            LOG.error("audit %s overran its time budget; ending this worker process", audit_id)
            os._exit(70)
        return "done"
    if "result" in box:
        res = box["result"]
        stored = _finish(sessions, audit_id, status="done", verdict=res["verdict"],
                         claims_outcome=res["claims_outcome"],
                         report=dict(res["report"], audit_id=audit_id),
                         seconds=res["seconds"],
                         lti_audit_version=res["report"]["lti_audit_version"])
        return "done" if stored else "superseded"
    failure = (f"{error_code(box['error'])}: {box['error']}" if "error" in box
               else box["crash"])
    stored = _finish(sessions, audit_id, status="failed", failure=failure)
    return "failed" if stored else "superseded"


def connect_cluster(scheduler: str | None, local_workers: int | None,
                    local_processes: bool = True) -> tuple[Any, Any]:
    """A Dask client: to ``scheduler`` (``tcp://HOST:PORT``), or to a new local cluster.

    Returns
    -------
    (Client, LocalCluster or None)
    """
    from distributed import Client, LocalCluster

    if scheduler:
        return Client(scheduler, timeout=30, set_as_default=False), None
    where = {"host": "127.0.0.1"} if local_processes else {}  # threads: in-process comms
    cluster = LocalCluster(n_workers=local_workers or _cpu_count(), threads_per_worker=1,
                           processes=local_processes, dashboard_address="127.0.0.1:0",
                           worker_dashboard_address="127.0.0.1:0", **where)
    return Client(cluster, set_as_default=False), cluster


def _cpu_count() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


class JobDispatcher:
    """Sends the database's queued audits to a Dask cluster and watches the tasks.

    Parameters
    ----------
    sessions : sessionmaker
        The web process's sessions (short transactions only).
    settings : JobSettings
    scheduler : str or None
        Address of an existing Dask scheduler; ``None`` starts a local cluster of
        ``local_workers`` worker processes (threads when ``local_processes`` is false).
    poll_seconds : float
        How often the database is polled for queued audits (a submission also wakes it).
    """

    def __init__(self, sessions: Any, settings: JobSettings, *, scheduler: str | None = None,
                 local_workers: int | None = None, local_processes: bool = True,
                 poll_seconds: float = 1.0) -> None:
        self.sessions = sessions
        self.settings = settings
        self.scheduler = scheduler
        self.local_workers = local_workers
        self.local_processes = local_processes
        self.poll_seconds = poll_seconds
        self.client: Any = None
        self.cluster: Any = None
        self.inflight: dict[str, Any] = {}
        self._lock = threading.Lock()
        self._wake = threading.Event()
        self._closed = threading.Event()
        self._ready = threading.Event()
        self._finished: queue.Queue[tuple[str, Any]] = queue.Queue()
        self._threads: list[threading.Thread] = []
        self.error: str | None = None

    # ------------------------------------------------------------ life cycle
    def start(self) -> "JobDispatcher":
        for target, name in ((self._run, "lti-audit dispatcher"),
                             (self._watch, "lti-audit job watcher")):
            t = threading.Thread(target=target, name=name, daemon=True)
            t.start()
            self._threads.append(t)
        return self

    def wait_ready(self, timeout: float) -> bool:
        """Wait until the cluster is connected (True) or ``timeout`` seconds pass."""
        return self._ready.wait(timeout)

    def wake(self) -> None:
        self._wake.set()

    def close(self) -> None:
        self._closed.set()
        self._wake.set()
        self._finished.put(("", None))
        for t in self._threads:
            t.join(timeout=10)
        with self._lock:
            client, cluster = self.client, self.cluster
            self.client = self.cluster = None
        if client is not None:
            try:
                client.close(timeout=10)
            except Exception:  # noqa: BLE001 - shutting down
                LOG.warning("closing the Dask client failed", exc_info=True)
        if cluster is not None:
            try:
                cluster.close(timeout=20)
            except Exception:  # noqa: BLE001
                LOG.warning("closing the local Dask cluster failed", exc_info=True)

    # ------------------------------------------------------------ the loops
    def _run(self) -> None:
        delay = 0.5
        while not self._closed.is_set():
            try:
                client, cluster = connect_cluster(self.scheduler, self.local_workers,
                                                  self.local_processes)
            except Exception as exc:  # noqa: BLE001 - retried, logged
                self.error = f"cannot reach the Dask scheduler {self.scheduler!r}: {exc}"
                LOG.error("%s; retrying in %.0f s", self.error, delay)
                self._closed.wait(delay)
                delay = min(2 * delay, 30.0)
                continue
            with self._lock:
                if self._closed.is_set():
                    client.close()
                    if cluster is not None:
                        cluster.close()
                    return
                self.client, self.cluster = client, cluster
            self.error = None
            break
        self._ready.set()
        startup = True
        while not self._closed.is_set():
            try:
                self._send_queued(include_running=startup)
                startup = False
            except Exception:  # noqa: BLE001 - e.g. the database is briefly unreachable
                LOG.exception("sending queued audits failed; retrying")
            self._wake.wait(self.poll_seconds)
            self._wake.clear()

    def _send_queued(self, include_running: bool) -> None:
        from sqlalchemy import select

        states = ACTIVE_STATES if include_running else ("queued",)
        with self.sessions() as s:
            ids = list(s.scalars(select(Audit.id).where(Audit.status.in_(states))
                                 .order_by(Audit.created_at).limit(5000)))
        for audit_id in ids:
            with self._lock:
                if audit_id in self.inflight or self.client is None:
                    continue
                fut = self.client.submit(execute_job, audit_id, self.settings, pure=False,
                                         key=f"lti-audit-job-{audit_id}-{uuid.uuid4().hex[:8]}")
                self.inflight[audit_id] = fut
            fut.add_done_callback(lambda f, a=audit_id: self._finished.put((a, f)))

    def _watch(self) -> None:
        while True:
            audit_id, fut = self._finished.get()
            if self._closed.is_set():
                return
            with self._lock:
                if self.inflight.get(audit_id) is fut:
                    del self.inflight[audit_id]
            try:
                if fut.status == "finished":
                    continue
                try:
                    exc = fut.exception(timeout=5)
                except Exception as e:  # noqa: BLE001 - cancelled futures raise here
                    exc = e
                self._task_lost(audit_id, exc)
            except Exception:  # noqa: BLE001
                LOG.exception("handling the end of the task of audit %s failed", audit_id)
            finally:
                self._wake.set()

    def _task_lost(self, audit_id: str, exc: BaseException | None) -> None:
        """A task ended without storing a result: hand the job back, or fail it."""
        with self.sessions.begin() as s:
            row = s.get(Audit, audit_id)
            if row is None or row.status not in ACTIVE_STATES:
                return
            if row.attempts >= self.settings.max_attempts:
                row.status = "failed"
                row.failure = (f"worker_lost: the audit was attempted {row.attempts} time(s) "
                               f"and its worker was lost each time ({type(exc).__name__}: "
                               f"{exc})")[:2000]
                row.finished_at = utc_now()
            else:
                row.status = "queued"
        LOG.warning("task of audit %s ended without a result (%r); re-queued or failed",
                    audit_id, exc)

    # ------------------------------------------------------------ one-off tasks
    def run_now(self, fn: Any, *args: Any, timeout: float) -> Any:
        """Run ``fn(*args)`` on the cluster and wait for it (at most ``timeout`` s)."""
        if not self._ready.wait(timeout=min(timeout, 30.0)) or self.client is None:
            raise RuntimeError(self.error or "the Dask cluster is not connected yet")
        fut = self.client.submit(fn, *args, pure=False)
        try:
            return fut.result(timeout=timeout)
        finally:
            fut.release()

    def state(self) -> dict[str, Any]:
        with self._lock:
            return {"connected": self.client is not None, "scheduler": self.scheduler
                    or ("local cluster" if self.cluster is not None else None),
                    "tasks_in_flight": len(self.inflight), "error": self.error}
