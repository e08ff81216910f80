"""End-to-end: `lti-audit check --against REF` on a throwaway git repository.

The ground truth is by construction: a change of state coordinates keeps the transfer
function (the state-space isomorphism theorem; T. Kailath, *Linear Systems*, 1980,
sec. 2.4 -- from memory), a moved pole changes it. Peak differences are checked against
an independent dense-grid evaluation of C (jwI - A)^-1 B + D with numpy.linalg.solve.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from audit.cli import main
from audit.workflows.gitbase import GitBaseError, classify_changes, resolve_revision
from audit.workflows.manifest import default_manifest, load_claims_manifest
from audit.reports.shapes import CAUTION
from tests.systems import random_transform, realization_with_poles

pytestmark = pytest.mark.skipif(shutil.which("git") is None, reason="git is not installed")

POLES = [-1.0 + 0j, -3.0 + 4j, -3.0 - 4j, -20.0 + 0j]


@pytest.fixture
def git_env(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    """Isolate git from the user's configuration."""
    (tmp_path / "gitconfig").write_text("")
    monkeypatch.setenv("GIT_CONFIG_GLOBAL", str(tmp_path / "gitconfig"))
    monkeypatch.setenv("GIT_CONFIG_NOSYSTEM", "1")
    for who in ("AUTHOR", "COMMITTER"):
        monkeypatch.setenv(f"GIT_{who}_NAME", "lti-audit test")
        monkeypatch.setenv(f"GIT_{who}_EMAIL", "test@example.invalid")


def git(repo: Path, *args: str) -> str:
    proc = subprocess.run(["git", *args], cwd=repo, capture_output=True, text=True, check=True)
    return proc.stdout


def commit_all(repo: Path, message: str) -> None:
    git(repo, "add", "-A")
    git(repo, "commit", "-q", "-m", message)


def write_model(path: Path, a, b, c, d, name: str = "plant") -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps({
        "lti_model": 1, "name": name, "sample_period": None,
        "state_space": {"a": np.asarray(a).tolist(), "b": np.asarray(b).tolist(),
                        "c": np.asarray(c).tolist(), "d": np.asarray(d).tolist()}}, indent=1))


def dense_relative_peak(m1, m2) -> float:
    """sup_w |G1 - G2| / max(sup |G1|, sup |G2|) on a dense log grid (SISO), by solves."""
    w = np.concatenate([[0.0], np.logspace(-3, 4, 20000)])

    def resp(a, b, c, d):
        n = a.shape[0]
        return np.array([(c @ np.linalg.solve(1j * x * np.eye(n) - a, b) + d)[0, 0] for x in w])

    g1, g2 = resp(*m1), resp(*m2)
    return float(np.abs(g1 - g2).max() / max(np.abs(g1).max(), np.abs(g2).max()))


def run_check(capsys, repo: Path, *extra: str) -> tuple[int, str, str, ET.Element, str]:
    junit = repo.parent / "out" / "junit.xml"
    md = repo.parent / "out" / "summary.md"
    code = main(["check", str(repo / "lti-audit.toml"), "--junit", str(junit),
                 "--markdown", str(md), "--overwrite", *extra])
    out, err = capsys.readouterr()
    return code, out, err, ET.parse(junit).getroot(), md.read_text()


def junit_case(root: ET.Element, name: str) -> ET.Element:
    cases = [c for c in root.iter("testcase") if c.get("name") == name]
    assert len(cases) == 1, [c.get("name") for c in root.iter("testcase")]
    return cases[0]


def table_row(markdown: str, label: str) -> list[str]:
    for line in markdown.splitlines():
        if line.startswith(f"| `{label}` |"):
            return [cell.strip() for cell in line.strip("|").split(" | ")]
    raise AssertionError(f"no table row for {label}:\n{markdown}")


@pytest.fixture
def repo(tmp_path: Path, git_env: None) -> Path:
    repo = tmp_path / "models-repo"
    repo.mkdir()
    git(repo, "init", "-q")
    (repo / "lti-audit.toml").write_text('[files]\nexclude = ["drafts/**"]\n')
    (repo / "package.json").write_text('{"name": "not-a-model"}\n')
    commit_all(repo, "manifest only")
    return repo


def test_new_then_refactored_then_broken(repo: Path, capsys) -> None:
    rng = np.random.default_rng(6)
    r = realization_with_poles(rng, POLES, 1, 1)
    a, b, c, d = r.a, r.b, r.c, r.d
    plant = repo / "plant.json"

    # Step 1: the model is committed (new since HEAD~1).
    write_model(plant, a, b, c, d)
    commit_all(repo, "add plant")
    code, out, _, junit, md = run_check(capsys, repo, "--against", "HEAD~1")
    assert code == 0, out
    case = junit_case(junit, "plant.json")
    assert case.find("failure") is None and case.find("error") is None
    assert case.findtext("system-out").startswith("new:")
    assert table_row(md, "plant.json")[1] == "new"

    # Step 2: a refactor -- a random change of state coordinates, cond(T) = 100.
    t = random_transform(rng, 4, 100.0)
    a2 = np.linalg.solve(t.T, (t @ a).T).T          # T A T^-1
    c2 = np.linalg.solve(t.T, c.T).T                # C T^-1
    write_model(plant, a2, t @ b, c2, d)
    commit_all(repo, "refactor: new state coordinates")
    code, out, _, junit, md = run_check(capsys, repo, "--against", "HEAD~1")
    assert code == 0, out
    assert "UNCHANGED" in out and "Only the state coordinates changed" in out
    case = junit_case(junit, "plant.json")
    assert case.find("failure") is None
    assert case.findtext("system-out").startswith("unchanged:")
    assert junit.get("failures") == "0" and junit.get("errors") == "0"
    row = table_row(md, "plant.json")
    assert row[1] == "unchanged"
    assert row[3] == "only the state coordinates changed"
    # closed form (similarity invariance): the difference is rounding-level;
    # a bound of 1e-9 leaves room for cond(T) = 100 (common practice, no source)
    assert float(row[2]) <= 1e-9

    # Step 3: broken -- the slow pole moves from -1 to -1.2 (in the old coordinates).
    a3 = a.copy()
    a3[0, 0] = -1.2
    write_model(plant, a3, b, c, d)
    commit_all(repo, "oops: slow pole moved")
    code, out, _, junit, md = run_check(capsys, repo, "--against", "HEAD~1")
    assert code == 1, out
    assert "CHANGED" in out
    case = junit_case(junit, "plant.json")
    failure = case.find("failure")
    assert failure is not None and failure.get("type") == "changed"
    assert "does not have the same transfer function" in failure.text
    assert "pole moved: -1 -> -1.2" in failure.text
    assert junit.get("failures") == "1" and junit.get("tests") == "1"
    row = table_row(md, "plant.json")
    assert row[1] == "**changed**"
    peak = float(row[2])
    # independent: dense-grid numpy evaluation of both transfer functions (a lower bound
    # of the supremum; a 20000-point grid gets within 1 % for these smooth responses)
    expected = dense_relative_peak((a, b, c, d), (a3, b, c, d))
    assert peak == pytest.approx(expected, rel=1e-2)
    assert "### Largest discrepancies" in md
    assert re.search(r"^1\. plant\.json: [0-9.e+-]+ at [0-9.e+-]+ rad/s \(changed\)$", md, re.M)
    assert md.rstrip().endswith(CAUTION)
    assert out.rstrip().endswith(CAUTION)

    # The whole history at once: plant.json is new since the manifest-only commit.
    code, out, _, junit, _ = run_check(capsys, repo, "--against", "HEAD~3")
    assert code == 0 and junit_case(junit, "plant.json").findtext("system-out").startswith("new:")


def test_identical_realization_deleted_unreadable_skipped_and_excluded(repo: Path, capsys) -> None:
    rng = np.random.default_rng(7)
    r = realization_with_poles(rng, POLES[:3], 1, 1)
    write_model(repo / "keep.json", r.a, r.b, r.c, r.d, name="keep")
    write_model(repo / "gone.json", r.a, r.b, r.c, r.d, name="gone")
    write_model(repo / "broken.json", r.a, r.b, r.c, r.d, name="broken")
    commit_all(repo, "three models")
    # Working-tree changes only (nothing committed): compared with the working tree.
    write_model(repo / "keep.json", r.a, r.b, r.c, r.d, name="keep, renamed in metadata only")
    (repo / "gone.json").unlink()
    (repo / "broken.json").write_text('{"lti_model": 1, "name": "broken", "sample_period": null,'
                                      ' "state_space": {"a": [[1, 2]]}}')
    (repo / "package.json").write_text('{"name": "still-not-a-model"}\n')
    write_model(repo / "drafts" / "sketch.json", r.a, r.b, r.c, r.d)   # excluded glob
    write_model(repo / "fresh.json", r.a, r.b, r.c, r.d)                # untracked
    manifest = load_claims_manifest(repo / "lti-audit.toml")
    changes, commit, skipped = classify_changes(manifest, "HEAD")
    by_path = {ch.path: ch for ch in changes}
    assert set(by_path) == {"keep.json", "gone.json", "broken.json", "fresh.json"}
    assert skipped == ("package.json",)
    assert by_path["keep.json"].status == "unchanged"
    assert by_path["keep.json"].coordinate_change == "identical"
    assert by_path["gone.json"].status == "deleted"
    assert by_path["fresh.json"].status == "new" and by_path["fresh.json"].git_status == "??"
    assert by_path["broken.json"].status == "unreadable"
    assert "state_space" in by_path["broken.json"].explanation
    assert commit == git(repo, "rev-parse", "HEAD").strip()
    json.dumps([ch.as_dict() for ch in changes])        # JSON-friendly
    code, out, _, junit, md = run_check(capsys, repo, "--against", "HEAD")
    assert code == 2                                     # an unreadable model is invalid input
    assert junit_case(junit, "broken.json").find("error") is not None
    assert table_row(md, "broken.json")[1] == "**unreadable**"
    assert "package.json" in md and "drafts/sketch.json" not in md


def test_changed_input_count_is_a_behaviour_change(repo: Path, capsys) -> None:
    write_model(repo / "m.json", [[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    commit_all(repo, "siso")
    write_model(repo / "m.json", [[-1.0]], [[1.0, 2.0]], [[1.0]], [[0.0, 0.0]])
    code, out, _, junit, _ = run_check(capsys, repo, "--against", "HEAD")
    assert code == 1
    assert "cannot be compared" in junit_case(junit, "m.json").find("failure").text


def test_rename_compares_old_path_with_new(repo: Path, capsys) -> None:
    write_model(repo / "old_name.json", [[-2.0]], [[1.0]], [[3.0]], [[0.0]])
    commit_all(repo, "model")
    git(repo, "mv", "old_name.json", "new_name.json")
    changes, _, _ = classify_changes(load_claims_manifest(repo / "lti-audit.toml"), "HEAD")
    assert [(c.path, c.old_path, c.status) for c in changes] == [
        ("new_name.json", "old_name.json", "unchanged")]


def test_missing_ref_in_shallow_clone_has_clear_message(repo: Path, tmp_path: Path, capsys) -> None:
    write_model(repo / "m.json", [[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    commit_all(repo, "model")
    clone = tmp_path / "shallow"
    subprocess.run(["git", "clone", "-q", "--depth", "1", f"file://{repo}", str(clone)],
                   check=True, capture_output=True)
    code = main(["check", str(clone / "lti-audit.toml"), "--against", "HEAD~1"])
    err = capsys.readouterr().err
    assert code == 2
    # a relative ref cannot be fetched by name: deepen the clone instead (git-fetch(1))
    assert "HEAD~1 not found (this is a shallow clone); deepen the clone first: " \
           "git fetch --deepen=50" in err
    with pytest.raises(GitBaseError, match="no-such-branch not found"):
        resolve_revision("no-such-branch", cwd=repo)


@pytest.mark.parametrize(("ref", "hint"), [
    ("origin/release-2", "fetch it first: git fetch --depth=50 origin "
                         "release-2:refs/remotes/origin/release-2"),
    ("release-2", "git fetch --depth=50 origin release-2:refs/remotes/origin/release-2, then "
                  "use --against origin/release-2"),
    ("0123456789abcdef0123456789abcdef01234567",
     "fetch the commit first: git fetch --depth=50 origin 0123456789abcdef"),
])
def test_unknown_ref_suggests_a_fetch_that_fits_it(repo: Path, tmp_path: Path, ref: str,
                                                   hint: str) -> None:
    write_model(repo / "m.json", [[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    commit_all(repo, "model")
    write_model(repo / "m.json", [[-2.0]], [[1.0]], [[1.0]], [[0.0]])
    commit_all(repo, "model changed")  # two commits: a depth-1 clone is really shallow
    git(repo, "branch", "release-2")
    clone = tmp_path / "shallow"
    subprocess.run(["git", "clone", "-q", "--depth", "1", "--single-branch", f"file://{repo}",
                    str(clone)], check=True, capture_output=True)
    with pytest.raises(GitBaseError) as info:
        resolve_revision(ref, cwd=clone)
    assert hint in str(info.value)
    if ref.startswith("origin/"):
        # the suggested command really makes the ref resolvable (git itself, no mock)
        command = hint.split("fetch it first: ")[1].split()
        subprocess.run([*command[:2], "-q", *command[2:]], cwd=clone, check=True,
                       capture_output=True)
        assert len(resolve_revision(ref, cwd=clone)) == 40


def test_unknown_ref_without_remote(repo: Path) -> None:
    write_model(repo / "m.json", [[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    commit_all(repo, "model")
    with pytest.raises(GitBaseError, match="no remote to fetch it from"):
        resolve_revision("origin/main", cwd=repo)


def test_not_a_git_repository(tmp_path: Path, git_env: None, monkeypatch, capsys) -> None:
    plain = tmp_path / "plain"
    plain.mkdir()
    monkeypatch.setenv("GIT_CEILING_DIRECTORIES", str(tmp_path))
    with pytest.raises(GitBaseError, match="not inside a git repository"):
        classify_changes(default_manifest(plain), "HEAD")
    monkeypatch.chdir(plain)
    assert main(["check", "--against", "HEAD"]) == 2
    assert "not inside a git repository" in capsys.readouterr().err


def test_without_manifest_uses_default_globs_in_cwd(repo: Path, monkeypatch, capsys) -> None:
    (repo / "lti-audit.toml").unlink()
    write_model(repo / "sub" / "m.yaml.json", [[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    monkeypatch.chdir(repo)
    code = main(["check", "--against", "HEAD", "--format", "json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 0
    assert data["manifest"] is None and data["compared_with"] == "working tree"
    assert [(c["path"], c["status"]) for c in data["changes"]] == [("sub/m.yaml.json", "new")]


# --------------------------------------------------------- internal stability (issue 11)
# Invented scenario: a supplier's valve actuator. The new version adds a third state
# (an unstable mode at s = 0.5) that reaches the output only through a rounding-level
# C entry: same transfer function, internally unstable.
VALVE_A = [[-1.2, 2.7], [-2.7, -10.8]]
VALVE_B = [[-0.37], [-0.37]]
VALVE_C = [[-0.37, 0.37]]
HIDDEN_A = [[-1.2, 2.7, 0.0], [-2.7, -10.8, 0.0], [0.0, 0.0, 0.5]]
HIDDEN_B = [[-0.37], [-0.37], [0.2]]
HIDDEN_C = [[-0.37, 0.37, 3e-17]]


def test_new_unstable_hidden_mode_is_changed_in_internal_stability(repo: Path, capsys) -> None:
    valve = repo / "valve.json"
    write_model(valve, VALVE_A, VALVE_B, VALVE_C, [[0.0]], name="valve")
    commit_all(repo, "valve actuator, minimal")
    write_model(valve, HIDDEN_A, HIDDEN_B, HIDDEN_C, [[0.0]], name="valve")
    code, out, _, junit, md = run_check(capsys, repo, "--against", "HEAD")
    assert code == 1
    assert "changed_internal_stability" in out
    # closed form: A is block diagonal, the third state's eigenvalue is A[2, 2] = 0.5 and
    # its only link to the output is C[0, 2] = 3e-17 (rounding level)
    assert "unstable hidden mode at 0.5 (unobservable" in out
    assert junit_case(junit, "valve.json").find("failure") is not None
    row = table_row(md, "valve.json")
    assert row[1] == "**changed_internal_stability**" and row[-1].startswith("changed in internal stability")

    # explicit acceptance in the manifest, with a reason that the report prints
    (repo / "lti-audit.toml").write_text(
        '[files]\nexclude = ["drafts/**"]\n\n[[accept_hidden_instability]]\n'
        'model = "valve.json"\nlocation = [0.5, 0.0]\n'
        'reason = "stabilised by the inner current loop (review VA-17)"\n')
    code, out, _, _, _ = run_check(capsys, repo, "--against", "HEAD", "--format", "json")
    assert code == 0
    data = json.loads(out)
    (change,) = [c for c in data["changes"] if c["path"] == "valve.json"]
    assert change["status"] == "unchanged"
    (problem,) = change["problems"]
    assert problem["accepted"] and problem["reason"] == "stabilised by the inner current loop (review VA-17)"
    assert "stabilised by the inner current loop" in change["explanation"]

    # an acceptance of another location does not cover this mode
    (repo / "lti-audit.toml").write_text(
        '[[accept_hidden_instability]]\nmodel = "valve.json"\nlocation = [0.7, 0.0]\n'
        'reason = "a different mode"\n')
    code, _, _, _, _ = run_check(capsys, repo, "--against", "HEAD")
    assert code == 1
