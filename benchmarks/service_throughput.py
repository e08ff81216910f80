"""Service throughput under load, with the web process and one worker killed mid-run.

Everything runs on 127.0.0.1 as separate processes: a ``dask scheduler``, ``--workers``
``dask worker`` programs (one thread each), and ``lti-audit serve --scheduler ...``.

Phase 1 (load): ``--submissions`` small audits (a conveyor-drive model of order 3 against
its reference, each with its own name) from ``--clients`` concurrent clients, each with
its own token and an ``Idempotency-Key`` per submission. A client retries a submission
(same key, same bytes) after a connection error, a 5xx or a 429/503 (honouring
``Retry-After``), at most 40 times and 180 s. When half of the submissions are
acknowledged the web process is killed (SIGKILL) and started again on the same port;
at three quarters one worker that is running an audit is killed (SIGKILL, not replaced).
Afterwards the database is read: every acknowledged audit must be stored once (one row
per key, the acknowledged id) and end ``done``.

Phase 2 (reads under heavy audits): ``--large`` audits of a reference and two order-200
models are submitted; while at least one of them is running, a client reads
``GET /audits/{id}`` and ``GET /audits?limit=20`` in turn (``--reads`` requests) and the
latency percentiles are printed.

Baseline: the same small audit computed in one process, serially (``compute_audit``),
gives what the machine computes per core; "half of what the machine can compute" is
half of that times the number of workers.

Phase 0 (clean): ``--clean`` submissions the same way, without kills.

Usage: python benchmarks/service_throughput.py [--clean 200] [--submissions 500] [--clients 20]
       [--workers 2] [--large 2] [--reads 300] [--database URL]
Prints Markdown tables. Loopback only; every loop is bounded in count and time.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import signal
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
BIN = Path(sys.executable).parent
DEMO = ROOT / "fixtures" / "demo"


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def percentile(values: list[float], q: float) -> float:
    return float(np.percentile(np.asarray(values), q)) if values else float("nan")


class Cluster:
    def __init__(self, workers: int, logs: Path) -> None:
        self.logs = logs
        self.address = f"tcp://127.0.0.1:{free_port()}"
        port = self.address.rsplit(":", 1)[1]
        self.procs = [self._spawn("scheduler", [
            str(BIN / "dask"), "scheduler", "--host", "127.0.0.1", "--port", port,
            "--no-dashboard", "--dashboard-address", "127.0.0.1:0"])]  # loopback only
        self.workers: dict[str, subprocess.Popen[Any]] = {}
        for k in range(workers):
            name = f"w{k}"
            self.workers[name] = self._spawn(name, [
                str(BIN / "dask"), "worker", self.address, "--nthreads", "1", "--no-nanny",
                "--no-dashboard", "--dashboard-address", "127.0.0.1:0", "--host", "127.0.0.1",
                "--name", name])
            self.procs.append(self.workers[name])
        self.wait(workers)

    def _spawn(self, name: str, argv: list[str]) -> subprocess.Popen[Any]:
        return subprocess.Popen(argv, stdout=open(self.logs / f"{name}.log", "wb"),  # noqa: SIM115
                                stderr=subprocess.STDOUT, cwd=ROOT, start_new_session=True)

    def wait(self, count: int) -> None:
        from distributed import Client

        deadline = time.monotonic() + 120
        with Client(self.address, timeout=60, set_as_default=False) as c:
            while len(c.scheduler_info()["workers"]) < count:
                if time.monotonic() > deadline:
                    raise RuntimeError("workers did not start")
                time.sleep(0.2)

    def kill_running_worker(self) -> str | None:
        """SIGKILL one of our workers that is executing an audit job; its name."""
        from distributed import Client

        def executing(dask_worker: Any) -> list[str]:
            return [str(ts.key) for ts in dask_worker.state.executing]

        deadline = time.monotonic() + 60
        with Client(self.address, timeout=60, set_as_default=False) as c:
            while time.monotonic() < deadline:
                names = {a: str(w["name"]) for a, w in c.scheduler_info()["workers"].items()}
                for addr, keys in c.run(executing).items():
                    proc = self.workers.get(names.get(addr, ""))
                    if proc is not None and any(k.startswith("lti-audit-job-") for k in keys):
                        os.kill(proc.pid, signal.SIGKILL)
                        proc.wait(timeout=10)
                        del self.workers[names[addr]]
                        return names[addr]
                time.sleep(0.02)
        return None

    def close(self) -> None:
        for p in reversed(self.procs):
            if p.poll() is None:
                p.terminate()
                try:
                    p.wait(timeout=10)
                except subprocess.TimeoutExpired:
                    p.kill()


class Web:
    def __init__(self, db_url: str, scheduler: str, port: int, log: Path) -> None:
        self.base = f"http://127.0.0.1:{port}"
        self.proc = subprocess.Popen(
            [str(BIN / "lti-audit"), "serve", "--database", db_url, "--scheduler", scheduler,
             "--port", str(port), "--queue-size", "2000", "--token-quota", "200",
             "--job-seconds", "600", "--db-pool-size", "20",
             "--max-body-bytes", str(16 * 1024 * 1024)],
            stdout=open(log, "ab"), stderr=subprocess.STDOUT, cwd=ROOT,  # noqa: SIM115
            start_new_session=True)
        import httpx

        deadline = time.monotonic() + 120
        while True:
            try:
                if httpx.get(self.base + "/health", timeout=2).status_code == 200:
                    return
            except httpx.HTTPError:
                pass
            if self.proc.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"web process did not start; see {log}")
            time.sleep(0.1)

    def kill(self) -> None:
        os.kill(self.proc.pid, signal.SIGKILL)
        self.proc.wait(timeout=10)

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                self.proc.kill()


def make_tokens(db_url: str, n: int) -> list[str]:
    from audit.service.db import open_database
    from audit.service.tokens import create_token

    _, sessions = open_database(db_url)
    with sessions() as s:
        return [create_token(s, holder=f"benchmark client {k}", role="team")[0] for k in range(n)]


def small_body(k: int) -> bytes:
    ref = json.loads((DEMO / "conveyor_drive_reference.json").read_text())
    mod = json.loads((DEMO / "conveyor_drive_refactored.json").read_text())
    mod["name"] = f"conveyor drive, supplier build {k}"
    return json.dumps({"models": [mod], "reference": ref}).encode()


def large_body(k: int, n: int = 200) -> bytes:
    """An invented 200-state plant (stable, random) and two equal copies of it."""
    rng = np.random.default_rng(1000 + k)
    a = rng.standard_normal((n, n)) / np.sqrt(n) - 2.0 * np.eye(n)
    b, c = rng.standard_normal((n, 1)), rng.standard_normal((1, n))

    def doc(name: str) -> dict[str, Any]:
        return {"lti_model": 1, "name": name, "sample_period": None,
                "state_space": {"a": a.tolist(), "b": b.tolist(), "c": c.tolist(), "d": [[0.0]]}}

    return json.dumps({"reference": doc(f"rolling mill stand {k}"),
                       "models": [doc(f"rolling mill stand {k} (copy A)"),
                                  doc(f"rolling mill stand {k} (copy B)")]}).encode()


def baseline_audits_per_second(count: int = 20) -> float:
    from audit.service.jobs import compute_audit
    from audit.service.submission import Submission, tolerances_for

    raw = small_body(0)
    tol = tolerances_for(Submission.model_validate(json.loads(raw))).model_dump()
    compute_audit(raw, tol, 200, None)  # warm-up: imports
    start = time.perf_counter()
    for _ in range(count):
        compute_audit(raw, tol, 200, None)
    return count / (time.perf_counter() - start)


def run_load(args: argparse.Namespace, db_url: str, cluster: Cluster, logs: Path, *,
             submissions: int, chaos_on: bool, phase: str) -> dict[str, Any]:
    import httpx

    tokens = make_tokens(db_url, args.clients)
    port = free_port()
    web = [Web(db_url, cluster.address, port, logs / "web.log")]
    base = web[0].base
    lock = threading.Lock()
    acks: dict[str, str] = {}  # key -> acknowledged audit id
    replays_ok = [0]
    retries = [0]
    post_latency: list[float] = []
    events: list[str] = []
    per_client = [list(range(k, submissions, args.clients)) for k in range(args.clients)]
    killed = {"web": False, "worker": False}

    def client(k: int) -> None:
        with httpx.Client(base_url=base, timeout=60,
                          headers={"Authorization": f"Bearer {tokens[k]}",
                                   "Content-Type": "application/json"}) as http:
            for i in per_client[k]:
                key = f"{phase}-{k}-{i}"
                raw = small_body(i)
                deadline = time.monotonic() + 180
                for attempt in range(40):
                    t0 = time.perf_counter()
                    try:
                        r = http.post("/audits", content=raw, headers={"Idempotency-Key": key})
                    except httpx.HTTPError:
                        r = None
                    dt_ = time.perf_counter() - t0
                    if r is not None and r.status_code == 202:
                        with lock:
                            post_latency.append(dt_)
                            acks[key] = r.json()["id"]
                            if attempt > 0 and r.headers.get("Idempotent-Replayed") == "true":
                                replays_ok[0] += 1  # the lost reply's audit, found again
                        break
                    with lock:
                        retries[0] += 1
                    wait = 0.5
                    if r is not None and r.status_code in (429, 503):
                        wait = min(float(r.headers.get("Retry-After", "1")), 5.0)
                    if time.monotonic() + wait > deadline:
                        break
                    time.sleep(wait)

    def chaos() -> None:
        deadline = time.monotonic() + 900
        while time.monotonic() < deadline and not (killed["web"] and killed["worker"]):
            with lock:
                n = len(acks)
            if not killed["web"] and n >= submissions // 2:
                web[0].kill()
                events.append(f"web process killed (SIGKILL) after {n} acknowledgements")
                killed["web"] = True
                web[0] = Web(db_url, cluster.address, port, logs / "web.log")
                events.append("web process restarted on the same port")
            if killed["web"] and not killed["worker"] and n >= 3 * submissions // 4:
                name = cluster.kill_running_worker()
                events.append(f"worker {name} killed (SIGKILL) while running an audit "
                              f"after {n} acknowledgements; not replaced")
                killed["worker"] = True
            time.sleep(0.05)

    start = time.perf_counter()
    threads = [threading.Thread(target=client, args=(k,)) for k in range(args.clients)]
    chaos_thread = threading.Thread(target=chaos)
    if chaos_on:
        chaos_thread.start()
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=1200)
    submit_seconds = time.perf_counter() - start
    if chaos_on:
        chaos_thread.join(timeout=120)
    # wait until every stored audit is done or failed (bounded)
    from sqlalchemy import func, select

    from audit.service.db import Audit, open_database

    _, sessions = open_database(db_url, migrate_schema=False)
    deadline = time.monotonic() + 900
    while time.monotonic() < deadline:
        with sessions() as s:
            active = s.scalar(select(func.count()).select_from(Audit)
                              .where(Audit.status.in_(("queued", "running")))) or 0
        if active == 0:
            break
        time.sleep(0.5)
    all_seconds = time.perf_counter() - start
    with sessions() as s:
        rows = [(r.idempotency_key, r.id, r.status, r.attempts, r.verdict) for r in
                s.execute(select(Audit.idempotency_key, Audit.id, Audit.status, Audit.attempts,
                                 Audit.verdict).where(Audit.idempotency_key.startswith(phase)))]
    by_key: dict[str, list[Any]] = {}
    for r in rows:
        by_key.setdefault(r[0], []).append(r)
    duplicated = sum(len(v) - 1 for v in by_key.values() if len(v) > 1)
    lost = sum(1 for k, i in acks.items() if i not in {r[1] for r in by_key.get(k, [])})
    not_done = sum(1 for k in acks for r in by_key.get(k, []) if r[2] != "done")
    wrong = sum(1 for r in rows if r[2] == "done" and r[4] != "equivalent")
    return {"web": web[0], "events": events, "acknowledged": len(acks),
            "never_acknowledged": submissions - len(acks), "stored": len(rows),
            "submissions": submissions,
            "duplicated": duplicated, "lost": lost, "not_done": not_done, "wrong": wrong,
            "retries": retries[0], "replayed_with_original": replays_ok[0],
            "retried_attempts": sum(1 for r in rows if r[3] > 1),
            "submit_seconds": submit_seconds, "all_seconds": all_seconds,
            "post_p50": percentile(post_latency, 50), "post_p99": percentile(post_latency, 99)}


def run_reads(args: argparse.Namespace, web: Web, db_url: str) -> dict[str, Any]:
    import httpx

    token = make_tokens(db_url, 1)[0]
    headers = {"Authorization": f"Bearer {token}", "Content-Type": "application/json"}
    with httpx.Client(base_url=web.base, headers=headers, timeout=60) as http:
        ids = []
        for k in range(args.large):
            r = http.post("/audits", content=large_body(k))
            if r.status_code != 202:
                raise RuntimeError(f"large submission refused: {r.status_code} {r.text[:300]}")
            ids.append(r.json()["id"])
        deadline = time.monotonic() + 300
        while time.monotonic() < deadline:  # wait until a large audit is running
            if any(http.get(f"/audits/{i}").json()["status"] == "running" for i in ids):
                break
            time.sleep(0.1)
        latencies: list[float] = []
        running_samples = 0
        k = 0
        stop = time.monotonic() + 600
        while len(latencies) < args.reads and time.monotonic() < stop:
            path = f"/audits/{ids[k % len(ids)]}" if k % 2 == 0 else "/audits?limit=20"
            t0 = time.perf_counter()
            r = http.get(path)
            latencies.append(time.perf_counter() - t0)
            if k % 2 == 0 and r.json()["status"] == "running":
                running_samples += 1
            k += 1
            time.sleep(0.02)
        deadline = time.monotonic() + 1800
        while time.monotonic() < deadline:
            states = [http.get(f"/audits/{i}").json() for i in ids]
            if all(s["status"] in ("done", "failed") for s in states):
                break
            time.sleep(1.0)
    return {"reads": len(latencies), "running_samples": running_samples,
            "p50": percentile(latencies, 50), "p95": percentile(latencies, 95),
            "p99": percentile(latencies, 99), "max": max(latencies) if latencies else float("nan"),
            "large": [(s["status"], s["verdict"], s["report"]["seconds"] if s["report"] else None)
                      for s in states]}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--submissions", type=int, default=500)
    parser.add_argument("--clients", type=int, default=20)
    parser.add_argument("--clean", type=int, default=200,
                        help="submissions of the first phase, without kills")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--large", type=int, default=2)
    parser.add_argument("--reads", type=int, default=300)
    parser.add_argument("--database", default=None, help="SQLAlchemy URL (default: a fresh "
                        "SQLite file in a temporary folder)")
    args = parser.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="lti-audit-bench-"))
    db_url = args.database or f"sqlite:///{tmp / 'bench.sqlite3'}"
    per_core = baseline_audits_per_second()
    cluster = Cluster(args.workers, tmp)
    web = None
    try:
        clean = run_load(args, db_url, cluster, tmp, submissions=args.clean, chaos_on=False,
                         phase="clean")
        clean["web"].stop()
        load = run_load(args, db_url, cluster, tmp, submissions=args.submissions, chaos_on=True,
                        phase="chaos")
        web = load["web"]
        reads = run_reads(args, web, db_url)
    finally:
        if web is not None:
            web.stop()
        cluster.close()
    print(f"service throughput ({args.submissions} submissions, {args.clients} clients, "
          f"{args.workers} dask worker processes, database "
          f"{'SQLite' if db_url.startswith('sqlite') else db_url.split(':')[0]}, "
          f"{os.cpu_count()} CPUs)")
    for e in load["events"]:
        print(f"- {e}")
    print()
    print("| measure | no kills | web killed + restarted, one worker killed |")
    print("|---|---|---|")
    print(f"| small audit computed serially in one process | {per_core:.1f} audits/s | |")
    print(f"| half of the machine (workers x serial rate / 2) | "
          f"{per_core * args.workers / 2:.1f} audits/s | |")
    measures = [
        ("acknowledged submissions", lambda d: f"{d['acknowledged']} of {d['submissions']}"),
        ("submissions acknowledged per second",
         lambda d: f"{d['acknowledged'] / d['submit_seconds']:.1f}"),
        ("audits done per second (first post to last done)",
         lambda d: f"{d['acknowledged'] / d['all_seconds']:.1f}"),
        ("POST latency p50 / p99",
         lambda d: f"{1000 * d['post_p50']:.0f} ms / {1000 * d['post_p99']:.0f} ms"),
        ("client retries (connection lost, 5xx, 429/503)", lambda d: str(d["retries"])),
        ("retries answered with the original audit (Idempotent-Replayed)",
         lambda d: str(d["replayed_with_original"])),
        ("audits started more than once (worker or web lost)",
         lambda d: str(d["retried_attempts"])),
        ("stored rows / duplicated / lost acknowledged",
         lambda d: f"{d['stored']} / {d['duplicated']} / {d['lost']}"),
        ("acknowledged but not done at the end", lambda d: str(d["not_done"])),
        ("done with a verdict other than equivalent", lambda d: str(d["wrong"])),
    ]
    for label, fmt in measures:
        print(f"| {label} | {fmt(clean)} | {fmt(load)} |")
    print()
    print(f"reads while {args.large} audits of a reference and two order-200 models run "
          f"({reads['reads']} reads, {reads['running_samples']} of the audit reads saw one running)")
    print()
    print("| reads | p50 | p95 | p99 | max |")
    print("|---|---|---|---|---|")
    print(f"| GET /audits/{{id}} and GET /audits?limit=20 | {1000 * reads['p50']:.1f} ms | "
          f"{1000 * reads['p95']:.1f} ms | {1000 * reads['p99']:.1f} ms | {1000 * reads['max']:.1f} ms |")
    print()
    print("large audits: " + "; ".join(f"{s} {v} ({sec:.0f} s)" if sec else f"{s} {v}"
                                     for s, v, sec in reads["large"]))
    shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
