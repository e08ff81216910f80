"""Hostile inputs that reach lti-audit indirectly: shard reports given to
``stress --merge`` and model files in the git revision given to ``check --against``.

Each must end with exit 2 and a message naming the file, never an internal error (issue
12, deliverable 4: "nothing is exit 4 for bad input"; common practice, no source).
"""

from __future__ import annotations

import json
import subprocess
from pathlib import Path

import pytest

from audit.cli import main

ROOT = Path(__file__).resolve().parents[1]

NOT_A_REPORT = [
    pytest.param('{"not": "a campaign"', "JSON syntax error", id="truncated-json"),
    pytest.param("[1, 2, 3]", "expected a campaign report", id="a-list"),
    pytest.param('{"settings": {}, "shard": [0, 1]}', "stopped_by_time_limit: missing", id="missing-fields"),
    pytest.param(json.dumps({"settings": {}, "shard": [0, 1], "planned_cases": 1,
                             "stopped_by_time_limit": False, "seconds": 1.0,
                             "counterexamples": [], "cases": ["x"]}),
                 "cases[0]: expected an object", id="case-not-an-object"),
    pytest.param(json.dumps({"settings": {}, "shard": [0, 1], "planned_cases": 1,
                             "stopped_by_time_limit": False, "seconds": 1.0,
                             "counterexamples": [], "cases": [{"index": 0, "results": [{}]}]}),
                 "cases: a result does not have the fields", id="result-fields"),
    pytest.param("[" * 5000, "nesting is too deep", id="deep-nesting"),
]


@pytest.mark.parametrize("text,message", NOT_A_REPORT)
def test_merge_refuses_what_is_not_a_campaign_report(tmp_path: Path, capsys, text: str,
                                                      message: str) -> None:
    shard = tmp_path / "shard0"
    shard.mkdir()
    (shard / "campaign.json").write_text(text)
    code = main(["stress", "--merge", str(shard), "--out", str(tmp_path / "merged")])
    err = capsys.readouterr().err
    assert code == 2
    assert message in err and "internal error" not in err


def test_merge_refuses_a_device_without_reading_it(tmp_path: Path, capsys) -> None:
    shard = tmp_path / "shard0"
    shard.mkdir()
    (shard / "campaign.json").symlink_to("/dev/zero")
    assert main(["stress", "--merge", str(shard), "--out", str(tmp_path / "merged")]) == 2
    assert "regular files only" in capsys.readouterr().err


def _git(repo: Path, *args: str) -> None:
    subprocess.run(["git", "-c", "user.email=ci@example.invalid", "-c", "user.name=ci", *args],
                   cwd=repo, check=True, capture_output=True)


def test_check_against_a_revision_holding_a_hostile_model_is_unreadable_not_a_crash(
        tmp_path: Path, capsys, monkeypatch) -> None:
    repo = tmp_path / "repo"
    repo.mkdir()
    _git(repo, "init", "-q")
    model = repo / "drive.json"
    model.write_text('{"lti_model": 1, "name": "x", "state_space": {"a": ' + "[" * 5000)
    _git(repo, "add", "drive.json")
    _git(repo, "commit", "-qm", "hostile")
    model.write_text((ROOT / "fixtures" / "demo" / "conveyor_drive_refactored.json").read_text())
    monkeypatch.chdir(repo)
    code = main(["check", "--against", "HEAD"])
    out = capsys.readouterr()
    assert code == 2
    assert "UNREADABLE" in out.out and "nesting is too deep" in out.out
    assert "internal error" not in out.err
