"""Audit service: submissions, claims, access control, limits, storage and reliability.

Real database: a SQLite file in tmp_path (and PostgreSQL when LTI_AUDIT_TEST_POSTGRES_URL
points to a reachable server). Requests go through FastAPI's TestClient, and the
concurrency test through a real uvicorn server on a free local port. Audits are jobs:
they run on a Dask cluster shared by these tests (workers are threads of the test
process, see tests/service_cluster.py); ``Service.submit`` posts, expects 202 and polls
the audit until it is done. Real scheduler and worker processes: tests/test_jobs_cluster.py.
"""

from __future__ import annotations

import contextlib
import copy
import hashlib
import json
import os
import socket
import sqlite3
import threading
import time
import warnings
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

pytest.importorskip("fastapi")
pytest.importorskip("sqlalchemy")
pytest.importorskip("alembic")

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # starlette: "use httpx2" deprecation notice
    from fastapi.testclient import TestClient

from audit.service import create_app
from audit.service.db import open_database
from audit.service.submission import bandwidth
from audit.service.tokens import create_token, revoke_token

from .service_cluster import inproc_scheduler, on_postgres, service_database_url, wait_done

sqlite_only = pytest.mark.skipif(on_postgres(), reason="inspects the SQLite file itself")


ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "demo"


def demo(name: str) -> dict[str, Any]:
    return json.loads((DEMO / f"{name}.json").read_text())


def ss_doc(name: str, a: Any, b: Any, c: Any, d: Any, sample_period: float | None = None,
           **extra: Any) -> dict[str, Any]:
    return {"lti_model": 1, "name": name, "sample_period": sample_period,
            "state_space": {"a": np.asarray(a, float).tolist(), "b": np.asarray(b, float).tolist(),
                            "c": np.asarray(c, float).tolist(), "d": np.asarray(d, float).tolist()},
            **extra}


class Service:
    """An app on a SQLite file with a team token and two supplier tokens."""

    def __init__(self, url: str, **kwargs: Any) -> None:
        url = service_database_url(url) if url.startswith("sqlite") else url
        self.url = url
        kwargs.setdefault("scheduler", inproc_scheduler())
        self.app = create_app(url, **kwargs)
        self.client = TestClient(self.app, raise_server_exceptions=False)
        _, self.sessions = open_database(url)
        with self.sessions() as s:
            self.team, _ = create_token(s, holder="alice (controls team)", role="team")
            self.acme, _ = create_token(s, holder="bob", role="supplier", supplier="ACME")
            self.other, _ = create_token(s, holder="carol", role="supplier", supplier="Globex")

    @staticmethod
    def auth(token: str) -> dict[str, str]:
        return {"Authorization": f"Bearer {token}"}

    def submit(self, body: Any, token: str | None = None, **kw: Any) -> Any:
        """POST the body; on 202 wait until the audit is done and return that GET."""
        r = self.client.post("/audits", json=body, headers=self.auth(token or self.team), **kw)
        if r.status_code != 202:
            return r
        return wait_done(self.client, r.json()["id"], self.auth(token or self.team))

    def close(self) -> None:
        self.app.state.dispatcher.close()


@pytest.fixture
def svc(tmp_path: Path) -> Iterator[Service]:
    s = Service(f"sqlite:///{tmp_path / 'audits.sqlite3'}")
    yield s
    s.close()


# ------------------------------------------------------------------ database
@sqlite_only
def test_sqlite_file_uses_wal_and_migrations_are_idempotent(tmp_path: Path) -> None:
    path = tmp_path / "a.sqlite3"
    create_app(f"sqlite:///{path}", start_jobs=False)
    create_app(f"sqlite:///{path}", start_jobs=False)  # second start: migrations applied
    con = sqlite3.connect(path)
    try:
        assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert con.execute("SELECT version_num FROM alembic_version").fetchall() == [("0002",)]
        tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table'")}
    finally:
        con.close()
    assert {"api_tokens", "audits", "audit_documents"} <= tables


@sqlite_only
def test_tokens_are_stored_only_as_sha256(svc: Service, tmp_path: Path) -> None:
    con = sqlite3.connect(tmp_path / "audits.sqlite3")
    try:
        stored = {r[0] for r in con.execute("SELECT token_sha256 FROM api_tokens")}
    finally:
        con.close()
    # independent: hashlib SHA-256 of the token text
    assert hashlib.sha256(svc.team.encode()).hexdigest() in stored
    raw = b"".join((tmp_path / "audits.sqlite3").read_bytes() for _ in [0])
    assert svc.team.encode() not in raw and svc.acme.encode() not in raw


# ------------------------------------------------------------------ submissions
def test_submit_fetch_and_exact_bytes(svc: Service) -> None:
    body = {"models": [demo("conveyor_drive_refactored")],
            "reference": demo("conveyor_drive_reference"), "supplier": "ACME"}
    raw = json.dumps(body, indent=3).encode()  # unusual formatting must survive byte-exact
    r = svc.client.post("/audits", content=raw, headers={**svc.auth(svc.team),
                                                         "Content-Type": "application/json"})
    assert r.status_code == 202, r.text
    assert r.json()["status"] in ("queued", "running", "done")
    assert r.headers["Location"] == f"/audits/{r.json()['id']}"
    r = wait_done(svc.client, r.json()["id"], svc.auth(svc.team))
    rec = r.json()
    assert rec["status"] == "done" and rec["attempts"] == 1
    assert rec["verdict"] == "equivalent"
    assert rec["claims_outcome"] == "none"
    assert rec["supplier"] == "ACME" and rec["submitted_by"] == "alice (controls team)"
    assert rec["body_sha256"] == hashlib.sha256(raw).hexdigest()  # independent: hashlib
    assert rec["report"]["comparison"]["report"] == "compare"
    assert rec["tolerances"]["rtol"] == pytest.approx(1e-5, rel=0, abs=0)  # documented default
    assert [d["role"] for d in rec["documents"]] == ["reference", "model"]
    canonical_bytes = json.dumps(body["reference"], sort_keys=True, separators=(",", ":"),
                       ensure_ascii=False).encode()
    assert rec["documents"][0]["sha256"] == hashlib.sha256(canonical_bytes).hexdigest()
    got = svc.client.get(f"/audits/{rec['id']}", headers=svc.auth(svc.team))
    assert got.status_code == 200 and got.json()["report"] == rec["report"]
    exact = svc.client.get(f"/audits/{rec['id']}/body", headers=svc.auth(svc.acme))
    assert exact.content == raw
    assert exact.headers["X-Content-SHA256"] == hashlib.sha256(raw).hexdigest()


def test_different_model_is_reported_different(svc: Service) -> None:
    r = svc.submit({"models": [demo("conveyor_drive_gain_slip")],
                    "reference": demo("conveyor_drive_reference")})
    assert r.status_code == 200
    assert r.json()["verdict"] == "different"


def test_rerun_reproduces_with_stored_tolerances(svc: Service) -> None:
    r = svc.submit({"models": [demo("conveyor_drive_gain_slip")],
                    "reference": demo("conveyor_drive_reference"), "rtol": 0.05,
                    "claims": {"dc_gain": 0.025}})
    rec = r.json()
    # rtol 0.05 > the 2 % gain slip: equivalent under the submitted tolerance
    assert rec["verdict"] == "equivalent"
    rr = svc.client.post(f"/audits/{rec['id']}/rerun", headers=svc.auth(svc.team))
    assert rr.status_code == 200
    out = rr.json()
    assert out["reproduced"] is True and out["same_verdict"] is True
    assert out["rerun_verdict"] == "equivalent" and out["claim_changes"] == []
    assert out["report"]["tolerances"]["rtol"] == pytest.approx(0.05, rel=0, abs=0)


def test_single_model_without_reference_checks_claims_only(svc: Service) -> None:
    r = svc.submit({"models": [demo("conveyor_drive_reference")],
                    "claims": {"stable": True}})
    assert r.status_code == 200
    assert r.json()["verdict"] == "not_compared"
    assert r.json()["claims_outcome"] == "hold"
    page = svc.client.get(f"/audits/{r.json()['id']}/report.html", headers=svc.auth(svc.team))
    assert page.status_code == 200 and 'id="plot-bode-magnitude"' in page.text


# ------------------------------------------------------------------ claims
def _claims(rec: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return {c["claim"]: c for c in rec["report"]["claims"]}


def test_dc_gain_poles_and_stability_claims(svc: Service) -> None:
    den = [1.0, 14.0, 424.0, 800.0]
    poles = np.roots(den)  # independent: numpy.roots of the conveyor denominator
    body = {"models": [demo("conveyor_drive_reference")],
            "claims": {"dc_gain": 20.0 / 800.0,  # closed form G(0) = 20 / 800
                       "poles": [[p.real, p.imag] for p in poles], "stable": True}}
    c = _claims(svc.submit(body).json())
    assert c["dc_gain"]["outcome"] == "holds"
    assert c["dc_gain"]["measured"] == pytest.approx(0.025, rel=1e-12)  # closed form 20/800
    assert c["poles"]["outcome"] == "holds"
    assert c["stable"]["outcome"] == "holds"
    body["claims"] = {"dc_gain": 0.0255, "poles": [[-1.0, 0.0], [-5.0, 20.0], [-5.0, -20.0]],
                      "stable": False}
    c = _claims(svc.submit(body).json())
    assert {k: v["outcome"] for k, v in c.items()} == {
        "dc_gain": "fails", "poles": "fails", "stable": "fails"}


def test_unstable_hidden_mode_fails_stability_claim(svc: Service) -> None:
    rec = svc.submit({"models": [demo("valve_actuator_supplier")],
                      "reference": demo("valve_actuator_reference"),
                      "claims": {"stable": True}}).json()
    assert _claims(rec)["stable"]["outcome"] == "fails"
    assert rec["claims_outcome"] == "fail"


def test_unaccepted_unstable_hidden_mode_fails_the_submission_without_a_claim(svc: Service) -> None:
    # issue 11: no stability claim at all, the transfer functions agree, and still the
    # supplier's new unstable hidden mode fails the submission unless accepted
    body = {"models": [demo("valve_actuator_supplier")],
            "reference": demo("valve_actuator_reference")}
    rec = svc.submit(body).json()
    assert rec["verdict"] == "equivalent"
    assert rec["claims_outcome"] == "fail"
    entry = _claims(rec)["internal_stability"]
    assert entry["outcome"] == "fails" and "unstable hidden mode" in entry["message"]
    assert [p["accepted"] for p in rec["report"]["comparison"]["problems"]] == [False]
    body["accept_hidden_instability"] = "supplier's inner loop stabilises it (review VA-17)"
    rec = svc.submit(body).json()
    assert rec["claims_outcome"] == "hold"
    entry = _claims(rec)["internal_stability"]
    assert entry["outcome"] == "holds" and entry["details"]["reason"].startswith("supplier's inner loop")
    (problem,) = rec["report"]["comparison"]["problems"]
    assert problem["accepted"] and problem["reason"] == body["accept_hidden_instability"]


def test_bandwidth_closed_forms_and_python_control() -> None:
    from audit.core.realization import Realization

    a = 7.0
    first = Realization.from_arrays([[-a]], [[a]], [[1.0]], [[0.0]])
    # closed form: a / (s + a) has |G(j a)| = 1/sqrt(2) (common practice, no source)
    assert bandwidth(first) == pytest.approx(a, rel=1e-10)
    wn, zeta = 3.0, 0.3
    second = Realization.from_arrays([[0.0, 1.0], [-wn ** 2, -2 * zeta * wn]], [[0.0], [wn ** 2]],
                                     [[1.0, 0.0]], [[0.0]])
    # closed form for wn^2 / (s^2 + 2 zeta wn s + wn^2), from memory:
    # wb = wn sqrt(1 - 2 zeta^2 + sqrt(4 zeta^4 - 4 zeta^2 + 2))
    wb = wn * np.sqrt(1 - 2 * zeta ** 2 + np.sqrt(4 * zeta ** 4 - 4 * zeta ** 2 + 2))
    assert bandwidth(second) == pytest.approx(wb, rel=1e-9)
    control = pytest.importorskip("control")
    sys = control.ss(second.a, second.b, second.c, second.d)
    # independent: python-control's bandwidth search; its default drop is exactly 3 dB,
    # ours is the half-power point 20 log10(1/sqrt(2)) = -3.0103 dB, so pass that drop
    their = float(control.bandwidth(sys, dbdrop=20 * np.log10(1 / np.sqrt(2))))
    assert bandwidth(second) == pytest.approx(their, rel=1e-6)
    integrator = Realization.from_arrays([[0.0]], [[1.0]], [[1.0]], [[0.0]])
    assert bandwidth(integrator) is None  # infinite DC gain: undefined by definition


def test_bandwidth_claim(svc: Service) -> None:
    doc = ss_doc("first order", [[-7.0]], [[7.0]], [[1.0]], [[0.0]])
    c = _claims(svc.submit({"models": [doc], "claims": {"bandwidth_rad_s": 7.0}}).json())
    assert c["bandwidth_rad_s"]["outcome"] == "holds"
    assert c["bandwidth_rad_s"]["measured"] == pytest.approx(7.0, rel=1e-10)  # closed form
    c = _claims(svc.submit({"models": [doc], "claims": {"bandwidth_rad_s": 7.5}}).json())
    assert c["bandwidth_rad_s"]["outcome"] == "fails"


@pytest.mark.parametrize("name", ["zoh", "tustin", "euler"])
def test_unknown_discretization_method_is_422_listing_the_accepted_names(svc: Service, name: str) -> None:
    body = {"models": [demo("conveyor_drive_reference")],
            "claims": {"discretization": {"method": name}}}
    r = svc.submit(body)
    assert r.status_code == 422
    text = json.dumps(r.json())
    assert f"got '{name}' but one of these discretization methods was expected" in text
    for accepted in ("zero-order-hold", "triangle-hold", "bilinear", "matched-pole-zero",
                     "impulse-invariant"):
        assert accepted in text


def test_discretization_and_sample_period_claims(svc: Service) -> None:
    import scipy.signal

    a = np.array([[0.0, 1.0], [-400.0, -12.0]])
    b = np.array([[0.0], [400.0]])
    c = np.array([[1.0, 0.0]])
    d = np.array([[0.0]])
    period = 1e-3
    # independent: scipy.signal.cont2discrete (zero-order hold)
    ad, bd, cd, dd, _ = scipy.signal.cont2discrete((a, b, c, d), period, method="zoh")
    body = {"reference": ss_doc("plant", a, b, c, d),
            "models": [ss_doc("plant at 1 kHz", ad, bd, cd, dd, period)],
            "claims": {"sample_period": 1e-3, "discretization": {"method": "zero-order-hold"}}}
    rec = svc.submit(body).json()
    cl = _claims(rec)
    assert cl["sample_period"]["outcome"] == "holds"
    assert cl["discretization"]["outcome"] == "holds"
    assert rec["verdict"] == "equivalent"  # the zero-order-hold-discretized reference against the model
    body["claims"] = {"sample_period": 2e-3, "discretization": {"method": "bilinear"}}
    rec = svc.submit(body).json()
    cl = _claims(rec)
    assert cl["sample_period"]["outcome"] == "fails"
    assert cl["discretization"]["outcome"] == "fails"
    assert "zero-order-hold" in cl["discretization"]["message"]
    # without a discretization claim a continuous reference cannot meet discrete models
    body.pop("claims")
    r = svc.submit(body)
    assert r.status_code == 422 and r.json()["error"] == "incompatible_models"
    assert "claims.discretization" in r.json()["message"]


def test_form_claims(svc: Service) -> None:
    rng = np.random.default_rng(7)
    modal = ss_doc("modal", np.diag([-1.0, -2.0, -3.0]), rng.standard_normal((3, 1)),
                   rng.standard_normal((1, 3)), [[0.0]])
    full = ss_doc("full", [[-1.0, 0.5, 0.2], [0.3, -2.0, 0.4], [0.1, 0.2, -3.0]],
                  rng.standard_normal((3, 1)), rng.standard_normal((1, 3)), [[0.0]])
    rec = svc.submit({"models": [modal, full], "claims": {"claimed_form": "modal"}}).json()
    outcomes = {c["model"]: c["outcome"] for c in rec["report"]["claims"]}
    assert outcomes == {"modal": "holds", "full": "fails"}


# ------------------------------------------------------------------ bad input
def test_bad_document_gets_the_cli_message(svc: Service, tmp_path: Path,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    from audit.cli import main

    bad = ss_doc("bad", [[-1.0, 0.0], [0.0, -2.0]], [[1.0], [1.0]], [[1.0, 2.0, 3.0]], [[0.0]])
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(bad))
    assert main(["inspect", str(path)]) == 2
    cli_message = capsys.readouterr().err.strip().removeprefix("lti-audit: error: ")
    r = svc.submit({"models": [bad]})
    assert r.status_code == 422
    err = r.json()
    assert err["error"] == "invalid_model" and err["field"].startswith("models[0]")
    # same message, with the source "models[0]" in place of the file name
    assert err["message"].removeprefix("models[0]: ") == cli_message.removeprefix(f"{path}: ")


@pytest.mark.parametrize(
    ("body", "field", "fragment"),
    [
        pytest.param({"models": []}, "body.models", "at least 1", id="no-models"),
        pytest.param({"model": [{}]}, "body.models", "Field required", id="misspelt-field"),
        pytest.param({"models": [{}], "rtol": 2}, "body.rtol", "less than 1", id="rtol-range"),
        pytest.param({"models": [{}], "claims": {"dc_gain": "big"}}, "body.claims.dc_gain",
                     "", id="dc-gain-type"),
    ],
)
def test_bad_requests_name_the_field(svc: Service, body: Any, field: str, fragment: str) -> None:
    r = svc.submit(body)
    assert r.status_code == 422
    assert r.json()["error"] == "invalid_request"
    assert r.json()["field"].startswith(field)
    assert fragment in r.json()["message"]


def test_dc_gain_claim_shape_must_match(svc: Service) -> None:
    r = svc.submit({"models": [demo("heated_zones_reference")], "claims": {"dc_gain": 1.0}})
    assert r.status_code == 422
    assert r.json()["field"] == "claims.dc_gain"
    assert "2 output(s) x 2 input(s)" in r.json()["message"]


def test_invalid_json_is_422(svc: Service) -> None:
    r = svc.client.post("/audits", content=b"{not json", headers={
        **svc.auth(svc.team), "Content-Type": "application/json"})
    assert r.status_code == 422 and r.json()["error"] == "invalid_request"


def test_order_limit_is_422_naming_the_model(tmp_path: Path) -> None:
    s = Service(f"sqlite:///{tmp_path / 'o.sqlite3'}", max_order=4)
    doc = ss_doc("big", -np.eye(5), np.ones((5, 1)), np.ones((1, 5)), [[0.0]])
    r = s.submit({"models": [demo("conveyor_drive_reference"), doc]})
    assert r.status_code == 422
    assert r.json()["field"] == "models[1]"
    assert "order 5" in r.json()["message"] and "max_order=4" in r.json()["message"]


def test_body_size_limit_is_413(tmp_path: Path) -> None:
    s = Service(f"sqlite:///{tmp_path / 's.sqlite3'}", max_body_bytes=2000)
    r = s.submit({"models": [demo("heated_zones_reference")] * 4})
    assert r.status_code == 413
    assert r.json()["error"] == "request_too_large" and "max_body_bytes=2000" in r.json()["message"]

    def chunks() -> Iterator[bytes]:  # no Content-Length: the streamed size is counted
        for _ in range(10):
            yield b" " * 500

    r = s.client.post("/audits", content=chunks(), headers={
        **s.auth(s.team), "Content-Type": "application/json"})
    assert r.status_code == 413 and r.json()["field"] == "body"


# ------------------------------------------------------------------ access
def test_missing_invalid_and_revoked_tokens_are_401(svc: Service) -> None:
    body = {"models": [demo("conveyor_drive_reference")]}
    assert svc.client.post("/audits", json=body).status_code == 401
    r = svc.client.get("/audits", headers={"Authorization": "Bearer lta_not-a-token"})
    assert r.status_code == 401 and r.json()["error"] == "unauthorized"
    assert r.headers["WWW-Authenticate"] == "Bearer"
    assert svc.client.get("/audits", headers={"Authorization": "Basic abc"}).status_code == 401
    with svc.sessions() as s:
        revoke_token(s, 2)  # bob's (ACME) token
    assert svc.client.get("/audits", headers=svc.auth(svc.acme)).status_code == 401
    assert svc.client.get("/health").status_code == 200


def test_suppliers_see_only_their_own_audits(svc: Service) -> None:
    mine = svc.submit({"models": [demo("conveyor_drive_reference")]}, svc.acme).json()
    theirs = svc.submit({"models": [demo("heated_zones_reference")]}, svc.other).json()
    assert mine["supplier"] == "ACME" and theirs["supplier"] == "Globex"
    assert svc.client.get(f"/audits/{theirs['id']}", headers=svc.auth(svc.acme)).status_code == 403
    assert svc.client.get(f"/audits/{theirs['id']}/body", headers=svc.auth(svc.acme)).status_code == 403
    assert svc.client.post(f"/audits/{theirs['id']}/rerun",
                           headers=svc.auth(svc.acme)).status_code == 403
    assert svc.client.get(f"/audits/{mine['id']}", headers=svc.auth(svc.acme)).status_code == 200
    listed = svc.client.get("/audits", headers=svc.auth(svc.acme)).json()
    assert [i["id"] for i in listed["items"]] == [mine["id"]]
    assert svc.client.get("/audits?supplier=Globex", headers=svc.auth(svc.acme)).status_code == 403
    r = svc.submit({"models": [demo("conveyor_drive_reference")], "supplier": "Globex"}, svc.acme)
    assert r.status_code == 403 and r.json()["field"] == "supplier"
    assert svc.client.get("/audits", headers=svc.auth(svc.team)).json()["total"] == 2
    assert svc.client.get("/audits/nope", headers=svc.auth(svc.team)).status_code == 404


def test_list_filters(svc: Service) -> None:
    ref = demo("conveyor_drive_reference")
    a = svc.submit({"models": [demo("conveyor_drive_gain_slip")], "reference": ref,
                    "supplier": "ACME"}).json()
    b = svc.submit({"models": [demo("conveyor_drive_refactored")], "reference": ref,
                    "supplier": "Globex"}).json()
    c = svc.submit({"models": [demo("heated_zones_reference"),
                               demo("heated_zones_swapped_outputs")]}).json()
    h = svc.auth(svc.team)

    def ids(query: str) -> set[str]:
        r = svc.client.get(f"/audits{query}", headers=h)
        assert r.status_code == 200, r.text
        return {i["id"] for i in r.json()["items"]}

    assert ids("") == {a["id"], b["id"], c["id"]}
    assert ids("?model=GEARBOX") == {a["id"]}  # case-insensitive substring
    assert ids("?model=conveyor") == {a["id"], b["id"]}
    assert ids("?model=100%25") == set()  # '%' is matched literally
    assert ids("?supplier=Globex") == {b["id"]}
    assert ids("?verdict=different") == {a["id"], c["id"]}
    assert ids("?verdict=equivalent&supplier=Globex") == {b["id"]}
    assert ids("?until=2000-01-01T00:00:00Z") == set()
    assert ids("?since=2000-01-01T00:00:00%2B02:00") == {a["id"], b["id"], c["id"]}
    page = svc.client.get("/audits?limit=2", headers=h).json()
    assert page["total"] == 3 and len(page["items"]) == 2
    assert svc.client.get("/audits?verdict=maybe", headers=h).status_code == 422


def test_html_page_and_signed_link(svc: Service) -> None:
    rec = svc.submit({"models": [demo("valve_actuator_supplier")],
                      "reference": demo("valve_actuator_reference"),
                      "claims": {"stable": True}}, svc.acme).json()
    url = f"/audits/{rec['id']}/report.html"
    assert svc.client.get(url).status_code == 401
    page = svc.client.get(url, headers=svc.auth(svc.acme))
    assert page.status_code == 200 and page.headers["content-type"].startswith("text/html")
    assert 'id="claims"' in page.text and 'id="plot-pole-zero"' in page.text
    assert svc.client.get(url, headers=svc.auth(svc.other)).status_code == 403
    link = svc.client.post(f"/audits/{rec['id']}/view-link", headers=svc.auth(svc.acme)).json()
    assert svc.client.get(link["url"]).status_code == 200
    tampered = link["url"][:-1] + ("0" if link["url"][-1] != "0" else "1")
    assert svc.client.get(tampered).status_code == 401
    other_id = link["url"].replace(rec["id"], "0" * 32)
    assert svc.client.get(other_id).status_code == 401  # the signature binds the id


# ------------------------------------------------------------------ reliability
def _audit_count(url: str) -> int:
    from sqlalchemy import func, select

    from audit.service.db import Audit, AuditDocument

    _, sessions = open_database(url, migrate_schema=False)
    with sessions() as s:
        return int(s.scalar(select(func.count()).select_from(Audit)) or 0) * 1000 + int(
            s.scalar(select(func.count()).select_from(AuditDocument)) or 0)


def test_crash_mid_write_leaves_no_half_written_audit(svc: Service,
                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    import audit.service.app as app_module

    before = _audit_count(svc.url)
    real = app_module._document_row
    calls = {"n": 0}

    def crash_on_second(audit_id: str, d: dict[str, Any]) -> Any:
        calls["n"] += 1
        if calls["n"] == 2:
            raise RuntimeError("simulated crash while writing /secret/path")
        return real(audit_id, d)

    monkeypatch.setattr(app_module, "_document_row", crash_on_second)
    r = svc.submit({"models": [demo("conveyor_drive_refactored")],
                    "reference": demo("conveyor_drive_reference")})
    assert r.status_code == 500
    body = r.json()
    assert body["error"] == "internal_error" and len(body["incident"]) == 16
    assert "Traceback" not in r.text and "/secret/path" not in r.text
    assert _audit_count(svc.url) == before  # nothing written: one transaction


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@contextlib.contextmanager
def running_server(app: Any) -> Iterator[str]:
    """Serve ``app`` with uvicorn on a free local port in a thread; yield its base URL."""
    import uvicorn

    port = _free_port()
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 15
    while not server.started:
        if time.monotonic() > deadline or not thread.is_alive():
            raise RuntimeError("uvicorn did not start")
        time.sleep(0.02)
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=10)


def test_concurrent_submissions_do_not_lose_or_mix_records(svc: Service) -> None:
    import httpx

    base = demo("conveyor_drive_reference")
    n_threads, per_thread = 6, 3
    results: list[tuple[str, str, str]] = []
    errors: list[str] = []
    lock = threading.Lock()
    with running_server(svc.app) as url:
        def worker(t: int) -> None:
            with httpx.Client(base_url=url, headers=svc.auth(svc.team), timeout=60) as client:
                for k in range(per_thread):
                    doc = copy.deepcopy(base)
                    doc["name"] = f"worker {t} submission {k}"
                    raw = json.dumps({"models": [doc], "supplier": f"S{t}"}).encode()
                    r = client.post("/audits", content=raw,
                                    headers={"Content-Type": "application/json"})
                    with lock:
                        if r.status_code != 202:
                            errors.append(r.text)
                        else:
                            results.append((r.json()["id"], doc["name"],
                                            hashlib.sha256(raw).hexdigest()))

        threads = [threading.Thread(target=worker, args=(t,)) for t in range(n_threads)]
        for th in threads:
            th.start()
        for th in threads:
            th.join()
        # the jobs finish while the server runs (its shutdown stops the job dispatcher)
        for audit_id, _, _ in results:
            assert wait_done(svc.client, audit_id, svc.auth(svc.team)).json()["status"] == "done"
    assert errors == []
    assert len({r[0] for r in results}) == n_threads * per_thread
    listed = svc.client.get("/audits?limit=500", headers=svc.auth(svc.team)).json()
    assert listed["total"] == n_threads * per_thread
    for audit_id, name, sha in results:
        rec = wait_done(svc.client, audit_id, svc.auth(svc.team)).json()
        assert rec["status"] == "done" and rec["verdict"] == "not_compared"
        assert rec["model_names"] == [name]  # not mixed with another submission
        assert rec["body_sha256"] == sha
        assert rec["supplier"] == "S" + name.split()[1]
        assert [d["name"] for d in rec["documents"]] == [name]


# ------------------------------------------------------------------ CLI
@sqlite_only
def test_token_command_prints_once_and_lists_without_token(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from audit.cli import main

    url = f"sqlite:///{tmp_path / 'cli.sqlite3'}"
    assert main(["token", "--database", url, "create", "--holder", "dana", "--supplier", "ACME"]) == 0
    token = capsys.readouterr().out.strip()
    assert token.startswith("lta_") and len(token) == 4 + 43  # 32 bytes in URL-safe base64
    assert main(["token", "--database", url, "list", "--format", "json"]) == 0
    listed = json.loads(capsys.readouterr().out)
    assert listed[0]["supplier"] == "ACME" and token not in json.dumps(listed)
    assert main(["token", "--database", url, "revoke", "1"]) == 0
    assert main(["token", "--database", url, "revoke", "7"]) == 2
    assert "no token with id 7" in capsys.readouterr().err
    client = TestClient(create_app(url, start_jobs=False))
    assert client.get("/audits", headers={"Authorization": f"Bearer {token}"}).status_code == 401


# ------------------------------------------------------------------ PostgreSQL
def test_postgresql_round_trip() -> None:
    url = os.environ.get("LTI_AUDIT_TEST_POSTGRES_URL")
    if not url:
        pytest.skip("PostgreSQL not tested: set LTI_AUDIT_TEST_POSTGRES_URL to a reachable "
                    "database URL (e.g. postgresql+psycopg://user@localhost/lti_audit_test)")
    pytest.importorskip("psycopg")
    s = Service(url)
    rec = s.submit({"models": [demo("conveyor_drive_refactored")],
                    "reference": demo("conveyor_drive_reference")}).json()
    assert rec["verdict"] == "equivalent"
    got = s.client.get(f"/audits?model=conveyor&verdict=equivalent", headers=s.auth(s.team))
    assert rec["id"] in {i["id"] for i in got.json()["items"]}
