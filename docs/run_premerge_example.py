"""Re-run the walk-through of docs/pre-merge.md and print the real output it quotes.

Copies ``fixtures/example_repo`` into a temporary folder, makes it a git repository whose
``origin/main`` is the committed example, then applies the merge request of the
walk-through (the states of ``pitch_axis_ss.json`` reordered, and by mistake a feedthrough
``d = [[0.05]]`` added to ``pitch_axis_zero_order_hold_10ms.json``) and runs::

    lti-audit check
    lti-audit check --against origin/main --markdown lti-audit.md --junit lti-audit.xml

Usage: ``.venv/bin/python docs/run_premerge_example.py`` (needs git).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "fixtures" / "example_repo"


def _git(cwd: Path, *args: str) -> None:
    env = dict(os.environ, GIT_AUTHOR_NAME="docs", GIT_AUTHOR_EMAIL="docs@example.invalid",
               GIT_COMMITTER_NAME="docs", GIT_COMMITTER_EMAIL="docs@example.invalid",
               GIT_CONFIG_NOSYSTEM="1")
    subprocess.run(["git", *args], cwd=cwd, check=True, capture_output=True, env=env)


def _check(cwd: Path, *args: str) -> str:
    proc = subprocess.run([sys.executable, "-m", "audit.cli", "check", *args], cwd=cwd,
                          capture_output=True, text=True, env=dict(os.environ, COLUMNS="100"))
    shown = " ".join(["lti-audit check", *args])
    return f"$ {shown}\n{proc.stdout}{proc.stderr}(exit status {proc.returncode})\n"


def main() -> int:
    work = Path(tempfile.mkdtemp(prefix="lti-audit-premerge-"))
    try:
        origin = work / "origin.git"
        repo = work / "example_repo"
        shutil.copytree(EXAMPLE, repo)
        _git(repo, "init", "-q", "-b", "main")
        _git(repo, "add", "-A")
        _git(repo, "commit", "-q", "-m", "example models")
        _git(work, "clone", "-q", "--bare", str(repo), str(origin))
        _git(repo, "remote", "add", "origin", str(origin))
        _git(repo, "fetch", "-q", "origin")
        print(_check(repo))
        # the merge request: states of the state-space model reordered (a refactor) ...
        ss_path = repo / "models" / "pitch_axis_ss.json"
        doc = json.loads(ss_path.read_text())
        order = [2, 0, 1]
        ss = doc["state_space"]
        ss["a"] = [[ss["a"][i][j] for j in order] for i in order]
        ss["b"] = [ss["b"][i] for i in order]
        ss["c"] = [[row[j] for j in order] for row in ss["c"]]
        ss_path.write_text(json.dumps(doc, indent=2) + "\n")
        # ... and, by mistake, a feedthrough added to the flight-computer model
        held_path = repo / "models" / "pitch_axis_zero_order_hold_10ms.json"
        doc = json.loads(held_path.read_text())
        doc["state_space"]["d"] = [[0.05]]
        held_path.write_text(json.dumps(doc, indent=2) + "\n")
        print(_check(repo, "--against", "origin/main", "--markdown", "lti-audit.md",
                     "--junit", "lti-audit.xml"))
        print("--- lti-audit.md ---")
        print((repo / "lti-audit.md").read_text())
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
