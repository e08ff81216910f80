"""`lti-audit check`: exit statuses, output formats, report files, bad input.

The worked example (fixtures/example_repo) was derived with python-control and scipy,
not with lti-audit (see fixtures/example_repo/generate_models.py).
"""

from __future__ import annotations

import json
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from audit.cli import main
from audit.reports.shapes import CAUTION

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "fixtures" / "example_repo"


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def example(tmp_path: Path) -> Path:
    target = tmp_path / "repo"
    shutil.copytree(EXAMPLE, target, ignore=shutil.ignore_patterns("*.py"))
    return target


def add_claim(repo: Path, text: str) -> None:
    manifest = repo / "lti-audit.toml"
    manifest.write_text(manifest.read_text() + "\n" + text)


def test_example_repository_passes(capsys, example: Path, monkeypatch) -> None:
    monkeypatch.chdir(example)
    code, out, err = run(capsys, "check")                 # default manifest in cwd
    assert code == 0, out + err
    assert out.startswith("lti-audit check: OK (exit 0)")
    assert "5 claim(s): 5 holds." in out
    assert out.rstrip().splitlines()[-1] == CAUTION


def test_failing_claim_exits_1_and_error_exits_2(capsys, example: Path) -> None:
    manifest = str(example / "lti-audit.toml")
    add_claim(example, '[[claim]]\nname = "stale copy"\nmodels = ["models/pitch_axis_tf.json", '
                       '"models/pitch_axis_retuned.json"]\nexpect = "equivalent"\n')
    code, out, _ = run(capsys, "check", manifest)
    assert code == 1
    assert "FAILS         claim #6: stale copy (equivalent)" in out
    assert "does not have the same transfer function" in out
    add_claim(example, '[[claim]]\nmodels = ["models/missing.json", '
                       '"models/pitch_axis_tf.json"]\nexpect = "equivalent"\n')
    code, out, _ = run(capsys, "check", manifest)
    assert code == 2
    assert "models/missing.json: file not found" in out


def test_inconclusive_exits_3(capsys, example: Path, monkeypatch) -> None:
    import audit.verdict.compare as verdict

    real = verdict.compare_pair

    def undecided(r1, r2, *, options=None):
        pair = real(r1, r2, options=options)
        return verdict.PairComparison(pair.reference, pair.other, "inconclusive",
                                      "Cannot tell (simulated).", pair.evidence)

    monkeypatch.setattr(verdict, "compare_pair", undecided)
    code, out, _ = run(capsys, "check", str(example / "lti-audit.toml"))
    assert code == 3
    assert "INCONCLUSIVE" in out


def test_invalid_manifest_is_usage_error(capsys, tmp_path: Path, monkeypatch) -> None:
    bad = tmp_path / "lti-audit.toml"
    bad.write_text('[[claim]]\nname = "x"\nmodels = ["a.json", "b.json"]\nexpect = "same"\n')
    code, out, err = run(capsys, "check", str(bad))
    assert code == 2 and out == ""
    assert f"lti-audit: error: {bad}: claim #1 ('x'), field expect: got 'same'" in err
    monkeypatch.chdir(tmp_path / "..")
    code, _, err = run(capsys, "check")
    assert code == 2 and "lti-audit.toml: manifest not found" in err
    with pytest.raises(SystemExit) as info:
        main(["check", str(bad), "--rtol", "2"])
    assert info.value.code == 2
    with pytest.raises(SystemExit):
        main(["check", str(bad), "--format", "html"])


def test_formats_on_stdout(capsys, example: Path) -> None:
    manifest = str(example / "lti-audit.toml")
    code, out, _ = run(capsys, "check", manifest, "--format", "json")
    data = json.loads(out)
    assert code == 0 and data["report"] == "check" and data["status"] == "ok"
    assert data["exit_status"] == 0 and data["caution"] == CAUTION
    assert [c["status"] for c in data["claims"]] == ["holds"] * 5
    assert data["claims"][1]["details"][0]["coordinate_change"] == "similar"
    code, out, _ = run(capsys, "check", manifest, "--format", "junit")
    root = ET.fromstring(out)
    assert root.tag == "testsuites" and root.get("tests") == "5" and root.get("failures") == "0"
    names = [c.get("name") for c in root.iter("testcase")]
    assert names[0] == "claim #1: state space realizes the identified transfer function (equivalent)"
    code, out, _ = run(capsys, "check", manifest, "--format", "markdown")
    assert "| file / claim | verdict | peak relative difference | note |" in out
    assert "| claim #2: modal model is a change of coordinates (similar) | holds |" in out
    assert "### Largest discrepancies" in out
    assert out.rstrip().endswith(CAUTION)


def test_report_files_are_written_besides_the_terminal_summary(capsys, example: Path) -> None:
    manifest = str(example / "lti-audit.toml")
    junit, md, js = example / "ci" / "junit.xml", example / "ci" / "summary.md", example / "r.json"
    code, out, _ = run(capsys, "check", manifest, "--junit", str(junit), "--markdown", str(md),
                       "--json", str(js))
    assert code == 0 and out.startswith("lti-audit check: OK")
    assert ET.parse(junit).getroot().get("tests") == "5"
    assert md.read_text().startswith("## lti-audit check: OK")
    assert json.loads(js.read_text())["status"] == "ok"
    assert sorted(p.name for p in (example / "ci").iterdir()) == ["junit.xml", "summary.md"]


@pytest.mark.parametrize("target", ["models/pitch_axis_ss.json", "lti-audit.toml"])
def test_never_overwrites_a_model_file_or_the_manifest(capsys, example: Path, target: str) -> None:
    path = example / target
    before = path.read_bytes()
    code, _, err = run(capsys, "check", str(example / "lti-audit.toml"), "--junit", str(path))
    assert code == 2 and "refusing to overwrite" in err
    assert path.read_bytes() == before


def test_refuses_an_unrelated_existing_model_document(capsys, example: Path, tmp_path: Path) -> None:
    other = tmp_path / "elsewhere.json"
    other.write_bytes((example / "models" / "pitch_axis_tf.json").read_bytes())
    code, _, err = run(capsys, "check", str(example / "lti-audit.toml"), "--markdown", str(other))
    assert code == 2 and "looks like a model document" in err


def test_pre_commit_hooks_run_the_check_command() -> None:
    import tomllib

    import yaml

    hooks = yaml.safe_load((ROOT / ".pre-commit-hooks.yaml").read_text())
    scripts = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["scripts"]
    assert {h["id"]: h["entry"] for h in hooks} == {
        "lti-audit-check": "lti-audit check",
        "lti-audit-check-changes": "lti-audit check --against HEAD"}
    assert "lti-audit" in scripts
    assert all(h["pass_filenames"] is False and h["language"] == "python" for h in hooks)
