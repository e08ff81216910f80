"""Audit jobs in the service: sizes before conversion, bounds (queue, quota, pool, time
budget), idempotency, restart recovery, bounded retries and the job state everywhere.

The jobs run on the Dask cluster shared by the service tests (threads of this process,
tests/service_cluster.py); real scheduler and worker processes are in
tests/test_jobs_cluster.py.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

pytest.importorskip("fastapi")
pytest.importorskip("distributed")

from audit.service.db import Audit, open_database  # noqa: E402

from .service_cluster import wait_done  # noqa: E402
from .test_service import Service, demo, ss_doc  # noqa: E402

PAIR = {"models": [demo("conveyor_drive_refactored")], "reference": demo("conveyor_drive_reference")}


@pytest.fixture
def make(tmp_path: Path) -> Iterator[Any]:
    made: list[Service] = []

    def factory(**kwargs: Any) -> Service:
        s = Service(f"sqlite:///{tmp_path / f'jobs{len(made)}.sqlite3'}", **kwargs)
        made.append(s)
        return s

    yield factory
    for s in made:
        s.close()


def _post(s: Service, body: Any, token: str | None = None, **headers: str) -> Any:
    return s.client.post("/audits", json=body, headers={**s.auth(token or s.team), **headers})


def _set(s: Service, audit_id: str, **values: Any) -> None:
    with s.sessions.begin() as session:
        row = session.get(Audit, audit_id)
        for k, v in values.items():
            setattr(row, k, v)


# ------------------------------------------------------------------ sizes first
def test_sizes_are_checked_on_the_document_before_any_conversion(
        make: Any, monkeypatch: pytest.MonkeyPatch) -> None:
    import audit.documents.loading

    def no_conversion(*args: Any, **kwargs: Any) -> Any:
        raise AssertionError("a document was converted before its size was checked")

    monkeypatch.setattr(audit.documents.loading, "realization_from_document", no_conversion)
    s = make(start_jobs=False)
    # 2000 poles in one zeros-poles-gain channel (the 44 KB document)
    poles = [[-1.0 - k * 1e-3, 0.0] for k in range(2000)]
    factored = {"lti_model": 1, "name": "long delay line", "sample_period": None,
           "zeros_poles_gain": {"zeros": [[[]]], "poles": [[poles]], "gain": [[1.0]]}}
    r = _post(s, {"models": [factored]})
    assert r.status_code == 422 and r.json()["field"] == "models[0]"
    assert "order 2000" in r.json()["message"] and "max_order=200" in r.json()["message"]
    # 1/(s^2000 + 1): the denominator degree counts
    tf = {"lti_model": 1, "name": "resonator bank", "sample_period": None,
          "transfer_function": {"numerator": [[[1.0]]],
                                "denominator": [[[1.0] + [0.0] * 1999 + [1.0]]]}}
    r = _post(s, {"models": [demo("conveyor_drive_reference")], "reference": tf})
    assert r.status_code == 422 and r.json()["field"] == "reference"
    assert "order 2000" in r.json()["message"]
    # a MIMO transfer function: the degrees of all channels add up (3 x 70 = 210 > 200)
    den = [1.0] + [0.0] * 69 + [1.0]
    mimo = {"lti_model": 1, "name": "three loops", "sample_period": None,
            "transfer_function": {"numerator": [[[1.0]], [[1.0]], [[1.0]]],
                                  "denominator": [[den], [den], [den]]}}
    r = _post(s, {"models": [mimo]})
    assert r.status_code == 422 and "order 210" in r.json()["message"]
    # too many outputs
    wide = ss_doc("wide sensor array", [[-1.0]], [[1.0]], np.ones((65, 1)), np.zeros((65, 1)))
    r = _post(s, {"models": [wide]})
    assert r.status_code == 422 and "65 outputs" in r.json()["message"]
    assert "max_channels=64" in r.json()["message"]
    with s.sessions() as session:
        assert session.query(Audit).count() == 0  # nothing stored


def test_incompatible_models_are_refused_at_the_door(make: Any) -> None:
    s = make(start_jobs=False)
    r = _post(s, {"models": [demo("conveyor_drive_reference"), demo("heated_zones_reference")]})
    assert r.status_code == 422 and r.json()["error"] == "incompatible_models"
    assert "models[1]" in r.json()["message"] and "2 output(s) x 2 input(s)" in r.json()["message"]


# ------------------------------------------------------------------ bounds
def test_full_queue_answers_503_with_retry_after(make: Any) -> None:
    s = make(start_jobs=False, queue_size=2)  # nothing runs: the jobs stay queued
    assert [_post(s, PAIR).status_code for _ in range(2)] == [202, 202]
    r = _post(s, PAIR)
    assert r.status_code == 503 and r.json()["error"] == "queue_full"
    assert r.headers["Retry-After"] == "5" and "queue_size" in r.json()["message"]
    assert s.client.get("/audits", headers=s.auth(s.team)).json()["total"] == 2


def test_token_quota_of_jobs_in_flight_answers_429(make: Any) -> None:
    s = make(start_jobs=False, token_quota=1)
    assert _post(s, PAIR).status_code == 202
    r = _post(s, PAIR)
    assert r.status_code == 429 and r.json()["error"] == "quota_exceeded"
    assert "Retry-After" in r.headers
    body = dict(PAIR, supplier="ACME")
    assert _post(s, body, s.acme).status_code == 202  # another token has its own quota


def test_authentication_holds_no_connection_through_the_request(make: Any) -> None:
    # one connection in the pool, none beyond it: the token lookup and the route need it
    # one after the other; a lookup that kept its session would starve the route (503)
    s = make(db_pool_size=1, db_max_overflow=0, db_pool_timeout=2.0)
    rec = wait_done(s.client, _post(s, PAIR).json()["id"], s.auth(s.team)).json()
    assert rec["status"] == "done"
    for path in ("/audits", f"/audits/{rec['id']}", f"/audits/{rec['id']}/body"):
        assert s.client.get(path, headers=s.auth(s.team)).status_code == 200, path


def test_no_free_connection_answers_503_with_retry_after(make: Any) -> None:
    s = make(db_pool_size=1, db_max_overflow=0, db_pool_timeout=0.2, start_jobs=False)
    engine = s.app.state.engine
    with engine.connect():  # the only connection is taken
        r = s.client.get("/audits", headers=s.auth(s.team))
    assert r.status_code == 503 and r.json()["error"] == "busy"
    assert r.headers["Retry-After"] == "5"
    assert s.client.get("/audits", headers=s.auth(s.team)).status_code == 200


def test_time_budget_ends_the_audit_inconclusive_with_the_reason(make: Any) -> None:
    s = make(job_seconds=1e-6)
    rec = s.submit(PAIR).json()
    assert rec["status"] == "done" and rec["verdict"] == "inconclusive"
    budget = rec["report"]["time_budget"]
    assert budget["seconds"] == pytest.approx(1e-6, rel=0, abs=0) and budget["exceeded"] is True
    assert "time budget of 1e-06 s" in budget["reason"]
    assert rec["time_budget_seconds"] == pytest.approx(1e-6, rel=0, abs=0)
    assert "time budget" in rec["report"]["summary"]
    page = s.client.get(f"/audits/{rec['id']}/report.html", headers=s.auth(s.team))
    assert page.status_code == 200


def test_the_report_states_the_time_budget(make: Any) -> None:
    rec = make(job_seconds=120).submit(PAIR).json()
    assert rec["verdict"] == "equivalent"
    assert rec["report"]["time_budget"] == {"seconds": 120.0, "exceeded": False, "reason": None}


# ------------------------------------------------------------------ idempotency
def test_idempotency_key_same_body_same_audit_other_body_409(make: Any) -> None:
    s = make()
    first = _post(s, PAIR, **{"Idempotency-Key": "nightly-17"})
    again = _post(s, PAIR, **{"Idempotency-Key": "nightly-17"})
    assert first.status_code == again.status_code == 202
    assert again.json()["id"] == first.json()["id"]
    assert again.headers["Idempotent-Replayed"] == "true"
    other = _post(s, dict(PAIR, rtol=0.01), **{"Idempotency-Key": "nightly-17"})
    assert other.status_code == 409 and other.json()["error"] == "idempotency_key_reused"
    assert "'nightly-17'" in other.json()["message"] and other.json()["field"] == "Idempotency-Key"
    # keys belong to a token: another token's same key is another audit
    theirs = _post(s, dict(PAIR, supplier="ACME"), s.acme, **{"Idempotency-Key": "nightly-17"})
    assert theirs.status_code == 202 and theirs.json()["id"] != first.json()["id"]
    assert s.client.get("/audits", headers=s.auth(s.team)).json()["total"] == 2
    bad = _post(s, PAIR, **{"Idempotency-Key": "x" * 201})
    assert bad.status_code == 422 and bad.json()["field"] == "Idempotency-Key"


# ------------------------------------------------------------------ recovery
def test_start_up_requeues_queued_and_running_jobs(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'restart.sqlite3'}"
    stopped = Service(url, start_jobs=False)  # a web process whose jobs never ran
    ids = [_post(stopped, PAIR).json()["id"] for _ in range(3)]
    _set(stopped, ids[0], status="running", attempts=1)  # as if it died mid-audit
    stopped.close()
    restarted = Service(stopped.url)
    try:
        recs = [wait_done(restarted.client, i, restarted.auth(stopped.team)).json() for i in ids]
    finally:
        restarted.close()
    assert [r["status"] for r in recs] == ["done"] * 3
    assert [r["attempts"] for r in recs] == [2, 1, 1]
    assert {r["verdict"] for r in recs} == {"equivalent"}


def test_a_job_whose_workers_keep_dying_fails_with_the_reason(make: Any) -> None:
    from audit.service.jobs import JobSettings, execute_job

    s = make(start_jobs=False, job_attempts=3)
    audit_id = _post(s, PAIR).json()["id"]
    _set(s, audit_id, status="running", attempts=3)  # three workers died on it
    assert execute_job(audit_id, JobSettings(s.url, 200, max_attempts=3)) == "failed"
    rec = s.client.get(f"/audits/{audit_id}", headers=s.auth(s.team)).json()
    assert rec["status"] == "failed" and rec["verdict"] is None
    assert rec["failure"].startswith("worker_lost:") and "3 attempts" in rec["failure"]
    # the dispatcher's side: a task lost with attempts left is handed back to the queue
    other = _post(s, PAIR).json()["id"]
    _set(s, other, status="running", attempts=1)
    s.app.state.dispatcher._task_lost(other, RuntimeError("worker vanished"))
    assert s.client.get(f"/audits/{other}", headers=s.auth(s.team)).json()["status"] == "queued"
    _set(s, other, status="running", attempts=3)
    s.app.state.dispatcher._task_lost(other, RuntimeError("worker vanished"))
    rec = s.client.get(f"/audits/{other}", headers=s.auth(s.team)).json()
    assert rec["status"] == "failed" and "worker vanished" in rec["failure"]


def test_a_submission_that_cannot_be_audited_fails_with_the_reason(make: Any) -> None:
    s = make()
    # a claimed discretization the reference cannot take (matched pole-zero is SISO only)
    a = [[-1.0, 0.2], [0.0, -3.0]]
    mimo = ss_doc("mixing valve pair", a, np.eye(2), np.eye(2), np.zeros((2, 2)))
    disc = ss_doc("mixing valve pair, sampled", a, np.eye(2), np.eye(2), np.zeros((2, 2)), 0.1)
    rec = s.submit({"reference": mimo, "models": [disc],
                    "claims": {"discretization": {"method": "matched-pole-zero"}}}).json()
    assert rec["status"] == "failed" and rec["verdict"] is None and rec["report"] is None
    assert rec["failure"].startswith("incompatible_models: reference: cannot be discretized")


# ------------------------------------------------------------------ state shown
def test_list_page_and_record_show_the_job_state(make: Any) -> None:
    s = make(start_jobs=False)
    audit_id = _post(s, PAIR).json()["id"]
    rec = s.client.get(f"/audits/{audit_id}", headers=s.auth(s.team)).json()
    assert rec["status"] == "queued" and rec["verdict"] is None and rec["report"] is None
    assert rec["links"]["status"] == f"/audits/{audit_id}"
    listed = s.client.get("/audits?status=queued", headers=s.auth(s.team)).json()
    assert [i["id"] for i in listed["items"]] == [audit_id]
    assert s.client.get("/audits?status=done", headers=s.auth(s.team)).json()["total"] == 0
    page = s.client.get(f"/audits/{audit_id}/report.html", headers=s.auth(s.team))
    assert page.status_code == 200 and 'id="status"' in page.text and "queued" in page.text
    assert 'http-equiv="refresh"' in page.text and 'id="caution"' in page.text
    _set(s, audit_id, status="failed", failure="worker_lost: <b>gone</b>")
    page = s.client.get(f"/audits/{audit_id}/report.html", headers=s.auth(s.team)).text
    assert "&lt;b&gt;gone&lt;/b&gt;" in page and "<b>gone" not in page  # escaped
    assert "refresh" not in page
    r = s.client.post(f"/audits/{audit_id}/rerun", headers=s.auth(s.team))
    assert r.status_code == 409 and r.json()["error"] == "not_done"


# ------------------------------------------------------------------ PostgreSQL
def test_postgresql_jobs_idempotency_race_and_status() -> None:
    import os
    import threading

    url = os.environ.get("LTI_AUDIT_TEST_POSTGRES_URL")
    if not url:
        pytest.skip("PostgreSQL not tested: set LTI_AUDIT_TEST_POSTGRES_URL to a reachable "
                    "database URL (e.g. postgresql+psycopg://user@localhost/lti_audit_test)")
    pytest.importorskip("psycopg")
    import httpx

    from .test_service import running_server

    s = Service(url)
    try:
        key = f"pg-race-{os.getpid()}-{id(s)}"
        ids: list[str] = []
        codes: list[int] = []
        lock = threading.Lock()
        with running_server(s.app) as base:
            def post() -> None:
                with httpx.Client(base_url=base, timeout=60) as client:
                    r = client.post("/audits", json=PAIR, headers={
                        **s.auth(s.team), "Idempotency-Key": key})
                with lock:
                    codes.append(r.status_code)
                    if r.status_code == 202:
                        ids.append(r.json()["id"])

            threads = [threading.Thread(target=post) for _ in range(6)]
            for t in threads:
                t.start()
            for t in threads:
                t.join(timeout=60)
        assert codes == [202] * 6 and len(set(ids)) == 1  # one audit for six racing posts
        rec = wait_done(s.client, ids[0], s.auth(s.team)).json()
        assert rec["status"] == "done" and rec["verdict"] == "equivalent"
        with s.sessions() as session:
            assert session.query(Audit).filter(Audit.idempotency_key == key).count() == 1
    finally:
        s.close()


def test_a_computation_that_overruns_is_abandoned_and_stored_inconclusive(
        make: Any, monkeypatch: pytest.MonkeyPatch) -> None:
    import threading

    import audit.service.jobs as jobs

    release = threading.Event()

    def stuck(*args: Any, **kwargs: Any) -> Any:  # a computation that ignores its budget
        release.wait(30)
        raise RuntimeError("released")

    monkeypatch.setattr(jobs, "compute_audit", stuck)
    s = make(start_jobs=False, job_seconds=0.1)
    audit_id = _post(s, PAIR).json()["id"]
    settings = jobs.JobSettings(s.url, 200, time_budget=0.1, stop_grace=0.2, hard_stop=False)
    try:
        assert jobs.execute_job(audit_id, settings) == "done"
    finally:
        release.set()
    rec = s.client.get(f"/audits/{audit_id}", headers=s.auth(s.team)).json()
    assert rec["status"] == "done" and rec["verdict"] == "inconclusive"
    assert rec["report"]["time_budget"]["exceeded"] is True
    assert "did not return within 0.35 s" in rec["report"]["time_budget"]["reason"]
    assert rec["report"]["caution"].startswith("Caution:")
