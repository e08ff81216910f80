"""Browser test: headless Chromium opens the audit report page and finds the plots.

Skipped when /usr/bin/chromium is absent. CI needs (Debian):
``apt-get update && apt-get install -y chromium chromium-driver``.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import tempfile
import warnings
from pathlib import Path

import pytest

CHROMIUM = Path("/usr/bin/chromium")
pytestmark = pytest.mark.skipif(
    not CHROMIUM.exists(),
    reason="headless Chromium not installed at /usr/bin/chromium (Debian: apt-get install -y "
           "chromium chromium-driver)")

DEMO = Path(__file__).resolve().parents[1] / "fixtures" / "demo"


def test_report_page_shows_plots_in_chromium(tmp_path: Path) -> None:
    httpx = pytest.importorskip("httpx")
    from audit.service import create_app
    from audit.service.db import open_database
    from audit.service.tokens import create_token

    from .service_cluster import inproc_scheduler, wait_done
    from .test_service import running_server

    url = f"sqlite:///{tmp_path / 'browser.sqlite3'}"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        app = create_app(url, scheduler=inproc_scheduler())
    _, sessions = open_database(url)
    with sessions() as s:
        token, _ = create_token(s, holder="browser test", role="team")
    body = {"models": [json.loads((DEMO / "valve_actuator_supplier.json").read_text())],
            "reference": json.loads((DEMO / "valve_actuator_reference.json").read_text()),
            "claims": {"stable": True, "dc_gain": 1.0}}
    with running_server(app) as base:
        with httpx.Client(base_url=base, headers={"Authorization": f"Bearer {token}"},
                          timeout=60) as client:
            rec = client.post("/audits", json=body)
            assert rec.status_code == 202, rec.text
            rec = wait_done(client, rec.json()["id"], {})
            assert rec.json()["status"] == "done", rec.text
            link = client.post(f"/audits/{rec.json()['id']}/view-link").json()["url"]
        profile = tempfile.mkdtemp(prefix="lti-audit-chromium-")
        try:
            proc = subprocess.run(
                [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", f"--user-data-dir={profile}",
                 "--dump-dom", base + link],
                capture_output=True, text=True, timeout=90)
        finally:
            shutil.rmtree(profile, ignore_errors=True)
            app.state.dispatcher.close()
    dom = proc.stdout
    assert proc.returncode == 0, proc.stderr[-2000:]
    for plot in ("plot-bode-magnitude", "plot-bode-phase", "plot-pole-zero", "plot-markov"):
        assert f'id="{plot}"' in dom
    assert dom.count('src="data:image/png;base64,') == 4
    assert 'id="claims"' in dom and 'id="caution"' in dom
    assert 'id="verdict"' in dom and ">equivalent<" in dom
