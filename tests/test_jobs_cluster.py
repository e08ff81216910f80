"""Audit jobs and stress campaigns on a real Dask cluster of separate processes.

A ``dask scheduler`` and two ``dask worker`` programs are started on 127.0.0.1 on free
ports (each bounded in time, killed at the end), and the service runs as its own
``lti-audit serve`` process. Checked here:

* a campaign on the cluster gives the same report as the single-process run with the
  same seed (timings aside);
* killing a busy worker mid-campaign loses no case (Dask re-runs its tasks);
* the service with an external scheduler completes every acknowledged audit while the
  web process is killed (SIGKILL) and restarted, stores each once, and a worker killed
  in the middle of an audit makes the audit run again, not vanish;
* a kill between the commit of a submission and its reply: the client's retry with the
  same ``Idempotency-Key`` gets the stored audit, nothing is stored twice.

Budgets are small (a few systems, small models) so that the file runs in about a minute.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

distributed = pytest.importorskip("distributed")
httpx = pytest.importorskip("httpx")

from audit.workflows import stress  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
BIN = Path(sys.executable).parent
DEMO = ROOT / "fixtures" / "demo"
STARTUP_SECONDS = 60
FAST = ("lti-audit: modal form", "scipy: transfer-function round trip",
        "verdict: different by construction")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _stop(proc: subprocess.Popen[Any]) -> None:
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)


class DaskProcesses:
    """A scheduler and its workers, each a separate program started here."""

    def __init__(self, log_dir: Path) -> None:
        self.port = _free_port()
        self.address = f"tcp://127.0.0.1:{self.port}"
        self.log_dir = log_dir
        self.procs: list[subprocess.Popen[Any]] = []
        self.workers: dict[str, subprocess.Popen[Any]] = {}
        self.procs.append(self._spawn("scheduler", [
            str(BIN / "dask"), "scheduler", "--host", "127.0.0.1", "--port", str(self.port),
            "--no-dashboard", "--dashboard-address", "127.0.0.1:0"]))  # loopback only

    def _spawn(self, name: str, argv: list[str]) -> subprocess.Popen[Any]:
        log = open(self.log_dir / f"{name}.log", "wb")  # noqa: SIM115 - closed with the process
        return subprocess.Popen(argv, stdout=log, stderr=subprocess.STDOUT, cwd=ROOT,
                                start_new_session=True)

    def start_worker(self, name: str) -> None:
        proc = self._spawn(name, [
            str(BIN / "dask"), "worker", self.address, "--nthreads", "1", "--no-nanny",
            "--no-dashboard", "--dashboard-address", "127.0.0.1:0", "--host", "127.0.0.1",
            "--name", name])
        self.procs.append(proc)
        self.workers[name] = proc

    def wait_workers(self, count: int) -> None:
        deadline = time.monotonic() + STARTUP_SECONDS
        with distributed.Client(self.address, timeout=STARTUP_SECONDS,
                                set_as_default=False) as client:
            while len(client.scheduler_info()["workers"]) != count:
                if time.monotonic() > deadline:
                    raise RuntimeError(f"Dask cluster did not reach {count} workers")
                time.sleep(0.1)

    def kill_busy_worker(self, client: Any, key_prefix: str = "",
                         wanted: Any = lambda key: True) -> str:
        """SIGKILL one of our workers while it executes a task (key starting with
        ``key_prefix``, accepted by ``wanted``); return the worker's name."""
        def executing_keys(dask_worker: Any) -> list[str]:  # runs on each worker (by value)
            return [str(ts.key) for ts in dask_worker.state.executing]

        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            executing = client.run(executing_keys)
            names = {a: str(w.get("name")) for a, w in client.scheduler_info()["workers"].items()}
            for addr, keys in executing.items():
                proc = self.workers.get(names.get(addr, ""))
                if proc is not None and proc.poll() is None and any(
                        k.startswith(key_prefix) and wanted(k) for k in keys):
                    os.kill(proc.pid, signal.SIGKILL)
                    proc.wait(timeout=10)
                    del self.workers[names[addr]]
                    return names[addr]
            time.sleep(0.02)
        raise AssertionError("no worker was executing a task within 60 s")

    def close(self) -> None:
        for proc in reversed(self.procs):
            _stop(proc)


@pytest.fixture(scope="module")
def cluster(tmp_path_factory: pytest.TempPathFactory) -> Iterator[DaskProcesses]:
    c = DaskProcesses(tmp_path_factory.mktemp("dask-logs"))
    try:
        c.start_worker("w0")
        c.start_worker("w1")
        c.wait_workers(2)
        yield c
    finally:
        c.close()


# ------------------------------------------------------------------ campaigns
def _settings() -> stress.CampaignSettings:
    return stress.CampaignSettings(max_order=4, max_spread_decades=2.0, pipelines=FAST,
                                   escalation_seconds=0.5)


def _comparable(report: dict[str, Any]) -> dict[str, Any]:
    """A campaign report without what depends on the machine (timings, worker count)."""
    return stress.reproducible_part(report)


def test_campaign_on_the_cluster_equals_the_single_process_run(cluster: DaskProcesses) -> None:
    single = stress.run_campaign(budget=4, seed=11, settings=_settings()).as_dict()
    seen: list[int] = []
    on_cluster = stress.run_campaign(budget=4, seed=11, settings=_settings(),
                                     scheduler=cluster.address,
                                     progress=lambda done, planned, f: seen.append(done))
    rep = on_cluster.as_dict()
    assert rep["workers"] == 2
    assert _comparable(rep) == _comparable(single)
    assert seen == list(range(5))  # progress from 0, then once per finished case


def test_killing_a_worker_mid_campaign_loses_no_case(cluster: DaskProcesses) -> None:
    single = stress.run_campaign(budget=6, seed=12, settings=_settings()).as_dict()
    cluster.start_worker("doomed")
    cluster.wait_workers(3)
    killed: list[str] = []
    with distributed.Client(cluster.address, set_as_default=False) as watcher:
        def kill_once(done: int, planned: int | None, failures: int) -> None:
            if done == 1 and not killed:
                killed.append(cluster.kill_busy_worker(watcher))

        rep = stress.run_campaign(budget=6, seed=12, settings=_settings(),
                                  scheduler=cluster.address, progress=kill_once).as_dict()
    assert len(killed) == 1
    assert [c["index"] for c in rep["cases"]] == list(range(6))
    assert _comparable(rep) == _comparable(single)
    cluster.wait_workers(2)  # two survivors for the next tests


# ------------------------------------------------------------------ the service
def _demo(name: str) -> dict[str, Any]:
    return json.loads((DEMO / f"{name}.json").read_text())


def _ss_doc(name: str, n: int, seed: int) -> dict[str, Any]:
    """A stable random state-space model of order n (invented; sized to take a moment)."""
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((n, n)) / np.sqrt(n) - 2.0 * np.eye(n)
    return {"lti_model": 1, "name": name, "sample_period": None,
            "state_space": {"a": a.tolist(), "b": rng.standard_normal((n, 1)).tolist(),
                            "c": rng.standard_normal((1, n)).tolist(), "d": [[0.0]]}}


class WebProcess:
    """``lti-audit serve`` (or a patched copy) as a separate process on a free port."""

    def __init__(self, db_url: str, scheduler: str, log: Path, *, script: str | None = None):
        self.port = _free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        argv = ([sys.executable, "-c", script, db_url, scheduler, str(self.port)] if script else
                [str(BIN / "lti-audit"), "serve", "--database", db_url, "--scheduler", scheduler,
                 "--port", str(self.port), "--job-seconds", "60"])
        self.proc = subprocess.Popen(argv, stdout=open(log, "ab"), stderr=subprocess.STDOUT,  # noqa: SIM115
                                     cwd=ROOT, start_new_session=True)
        deadline = time.monotonic() + STARTUP_SECONDS
        while True:
            try:
                if httpx.get(self.base + "/health", timeout=2).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if self.proc.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"web process did not start: {log.read_text()[-2000:]}")
            time.sleep(0.1)

    def kill(self) -> None:
        os.kill(self.proc.pid, signal.SIGKILL)
        self.proc.wait(timeout=10)

    def stop(self) -> None:
        _stop(self.proc)


def _token(db_url: str) -> str:
    from audit.service.db import open_database
    from audit.service.tokens import create_token

    _, sessions = open_database(db_url)
    with sessions() as s:
        return create_token(s, holder="cluster test", role="team")[0]


def _rows(db_url: str) -> list[tuple[str, str, str | None, int]]:
    from sqlalchemy import select

    from audit.service.db import Audit, open_database

    _, sessions = open_database(db_url, migrate_schema=False)
    with sessions() as s:
        return [(r.id, r.status, r.idempotency_key, r.attempts)
                for r in s.scalars(select(Audit).order_by(Audit.created_at))]


def _wait_all_done(base: str, token: str, ids: list[str], timeout: float = 180) -> dict[str, Any]:
    deadline = time.monotonic() + timeout
    out: dict[str, Any] = {}
    with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {token}"},
                      timeout=10) as client:
        while time.monotonic() < deadline:
            for audit_id in ids:
                if audit_id not in out:
                    rec = client.get(f"/audits/{audit_id}").json()
                    if rec["status"] in ("done", "failed"):
                        out[audit_id] = rec
            if len(out) == len(ids):
                return out
            time.sleep(0.2)
    raise AssertionError(f"{len(ids) - len(out)} audit(s) not finished after {timeout} s")


def test_service_on_external_cluster_survives_web_restart_and_worker_kill(
        cluster: DaskProcesses, tmp_path: Path) -> None:
    db_url = f"sqlite:///{tmp_path / 'jobs.sqlite3'}"
    token = _token(db_url)
    headers = {"Authorization": f"Bearer {token}", "Content-Type": "application/json"}
    web = WebProcess(db_url, cluster.address, tmp_path / "web.log")
    acknowledged: dict[str, str] = {}  # audit id -> body sha256
    try:
        with httpx.Client(base_url=web.base, headers=headers, timeout=30) as client:
            # larger models last, so that audits are running when the web process dies
            bodies = [{"models": [_demo("conveyor_drive_refactored")],
                       "reference": _demo("conveyor_drive_reference"), "supplier": f"S{k}"}
                      for k in range(5)]
            bodies += [{"models": [_ss_doc(f"shaker table {k}", 60, k),
                                   _ss_doc(f"shaker table {k} (copy)", 60, k)]}
                       for k in range(3)]
            for body in bodies:
                raw = json.dumps(body).encode()
                r = client.post("/audits", content=raw)
                assert r.status_code == 202, r.text
                acknowledged[r.json()["id"]] = hashlib.sha256(raw).hexdigest()
        with distributed.Client(cluster.address, set_as_default=False) as watcher:
            def running(key: str) -> bool:  # lti-audit-job-<audit id>-<suffix>
                return any(r[0] == key.split("-")[3] and r[1] == "running"
                           for r in _rows(db_url))

            killed = cluster.kill_busy_worker(watcher, "lti-audit-job-", running)
            web.kill()  # and SIGKILL the web process: no shutdown, tasks in flight
        cluster.start_worker(f"{killed}-again")
        web = WebProcess(db_url, cluster.address, tmp_path / "web.log")
        done = _wait_all_done(web.base, token, list(acknowledged))
    finally:
        web.stop()
    assert {k: v["status"] for k, v in done.items()} == {k: "done" for k in acknowledged}
    assert {k: v["body_sha256"] for k, v in done.items()} == acknowledged
    assert all(v["verdict"] == "equivalent" for v in done.values())
    rows = _rows(db_url)
    assert sorted(r[0] for r in rows) == sorted(acknowledged)  # each stored once
    assert max(r[3] for r in rows) >= 2  # the killed worker's audit ran again
    cluster.wait_workers(2)


KILL_AFTER_COMMIT = """
import os, sys
import uvicorn
import audit.service.app as service_app

def _die_before_reply(*args, **kwargs):
    os._exit(137)  # the submission is committed; the process dies before answering

service_app._acknowledge = _die_before_reply
app = service_app.create_app(sys.argv[1], scheduler=sys.argv[2])
uvicorn.run(app, host="127.0.0.1", port=int(sys.argv[3]), log_level="warning")
"""


def test_retry_after_a_kill_between_commit_and_reply_returns_the_same_audit(
        cluster: DaskProcesses, tmp_path: Path) -> None:
    db_url = f"sqlite:///{tmp_path / 'idem.sqlite3'}"
    token = _token(db_url)
    headers = {"Authorization": f"Bearer {token}", "Content-Type": "application/json",
               "Idempotency-Key": "order-4711-valve"}
    raw = json.dumps({"models": [_demo("valve_actuator_supplier")],
                      "reference": _demo("valve_actuator_reference")}).encode()
    doomed = WebProcess(db_url, cluster.address, tmp_path / "web.log", script=KILL_AFTER_COMMIT)
    try:
        with pytest.raises(httpx.HTTPError):  # the reply is lost
            httpx.post(doomed.base + "/audits", content=raw, headers=headers, timeout=30)
        doomed.proc.wait(timeout=10)
        assert doomed.proc.returncode == 137
    finally:
        doomed.stop()
    stored = _rows(db_url)
    assert [(r[2], r[1]) for r in stored] == [("order-4711-valve", "queued")]
    web = WebProcess(db_url, cluster.address, tmp_path / "web.log")
    try:
        retry = httpx.post(web.base + "/audits", content=raw, headers=headers, timeout=30)
        assert retry.status_code == 202 and retry.headers["Idempotent-Replayed"] == "true"
        assert retry.json()["id"] == stored[0][0]
        other = httpx.post(web.base + "/audits", content=raw + b" ", headers=headers, timeout=30)
        assert other.status_code == 409 and "order-4711-valve" in other.json()["message"]
        done = _wait_all_done(web.base, token, [stored[0][0]])
    finally:
        web.stop()
    assert done[stored[0][0]]["status"] == "done"
    assert len(_rows(db_url)) == 1
