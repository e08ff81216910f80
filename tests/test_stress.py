"""The stress campaign engine (audit.workflows.stress) and the ``stress`` / ``promote`` commands."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from audit.workflows import stress
from audit.cli import main
from audit.errors import InvalidModelError
from audit.core.realization import Realization
from audit.workflows.strategies import SystemSpec

FAST = ("lti-audit: modal form", "scipy: transfer-function round trip", "verdict: different by construction")


def _gain_slip(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    """A deliberately broken conversion: 1 % gain error (closed form: relative 1/101 > rtol)."""
    return r, r.with_matrices(r.a, r.b, 1.01 * r.c, 1.01 * r.d)


@pytest.fixture
def broken_pipeline():
    p = stress.Pipeline("test: gain slip", "test", "multiplies C and D by 1.01", _gain_slip)
    stress.register_pipeline(p)
    yield p
    stress.unregister_pipeline(p.name)


def _settings(*names: str, **kw) -> stress.CampaignSettings:
    return stress.CampaignSettings(max_order=4, max_spread_decades=2.0, pipelines=names,
                                   escalation_seconds=0.5, **kw)


def test_same_seed_same_campaign() -> None:
    a = stress.run_campaign(budget=3, seed=5, settings=_settings(*FAST)).as_dict()
    b = stress.run_campaign(budget=3, seed=5, settings=_settings(*FAST)).as_dict()
    strip = lambda rep: [[(x["pipeline"], x["outcome"], x["verdict"]) for x in c["results"]]  # noqa: E731
                         for c in rep["cases"]]
    assert [c["spec"] for c in a["cases"]] == [c["spec"] for c in b["cases"]]
    assert strip(a) == strip(b)
    assert a["pipelines"] == b["pipelines"]


def test_shards_partition_the_campaign_and_merge() -> None:
    settings = _settings("verdict: different by construction")
    whole = stress.run_campaign(budget=4, seed=2, settings=settings).as_dict()
    parts = [stress.run_campaign(budget=4, seed=2, shard=(i, 2), settings=settings).as_dict()
             for i in range(2)]
    assert sorted(c["index"] for p in parts for c in p["cases"]) == [0, 1, 2, 3]
    merged = stress.merge_campaigns(parts)
    assert [c["spec"] for c in merged["cases"]] == [c["spec"] for c in whole["cases"]]
    assert merged["pipelines"] == whole["pipelines"]


def test_two_workers_give_the_same_results() -> None:
    settings = _settings("verdict: different by construction")
    one = stress.run_campaign(budget=4, seed=3, settings=settings, workers=1).as_dict()
    two = stress.run_campaign(budget=4, seed=3, settings=settings, workers=2).as_dict()
    assert one["pipelines"] == two["pipelines"]


def test_broken_pipeline_is_caught_shrunk_and_reproducible(broken_pipeline, tmp_path: Path,
                                                           capsys) -> None:
    settings = _settings(broken_pipeline.name, "lti-audit: modal form")
    result = stress.run_campaign(budget=3, seed=0, settings=settings)
    info = result.summary[broken_pipeline.name]
    assert info["counts"]["fail"] == 3 and info["pass_rate"] == 0.0
    assert info["envelope"]["order"] is None
    assert result.summary["lti-audit: modal form"]["counts"]["fail"] == 0
    # shrinking reaches the simplest system: order 1, SISO, continuous, no features
    shrunk = {json.dumps(c["spec"], sort_keys=True) for c in result.counterexamples}
    assert len(shrunk) == 1
    spec = SystemSpec(**json.loads(shrunk.pop()))
    assert (spec.order, spec.inputs, spec.outputs, spec.discrete, spec.spread_decades) == (1, 1, 1, False, 0.0)
    paths = stress.write_reports(result, tmp_path / "out")
    report = json.loads(paths["json"].read_text())
    assert report["completed_cases"] == 3 and paths["plot"].stat().st_size > 1000
    assert "| test: gain slip | 3 | 0 | 3 |" in paths["markdown"].read_text()
    cx = tmp_path / "out" / report["counterexamples"][0]["directory"]
    # lti-audit compare reproduces the counterexample: exit 1 = different
    assert main(["compare", str(cx / "reference.json"), str(cx / "converted.json")]) == 1
    capsys.readouterr()
    # promote it, then refuse to overwrite
    fixtures = tmp_path / "promoted"
    assert main(["promote", str(cx), "--name", "gain-slip", "--into", str(fixtures)]) == 0
    manifest = json.loads((fixtures / "gain-slip" / "manifest.json").read_text())
    assert manifest["promoted"]["expected"] == {"pipeline_outcome": "fail", "compare_verdict": "different"}
    assert main(["promote", str(cx / "manifest.json"), "--name", "gain-slip", "--into", str(fixtures)]) == 2
    assert "gain-slip" in capsys.readouterr().err


def test_stress_command_small_budget(tmp_path: Path, capsys) -> None:
    status = main(["stress", "--budget", "2", "--seed", "4", "--workers", "1", "--max-order", "3",
                   "--out", str(tmp_path), "--pipeline", "lti-audit: balanced form",
                   "--pipeline", "verdict: symmetric"])
    err = capsys.readouterr().err
    assert "stress: [" in err and "2/2 systems" in err
    assert status in (0, 1)
    report = json.loads((tmp_path / "campaign.json").read_text())
    assert report["completed_cases"] == 2 and set(report["pipelines"]) == {
        "lti-audit: balanced form", "verdict: symmetric"}
    assert status == (1 if any(v["counts"]["fail"] + v["counts"]["error"]
                               for v in report["pipelines"].values()) else 0)


def test_stress_command_time_limit_and_merge(tmp_path: Path, capsys) -> None:
    for i in range(2):
        assert main(["stress", "--budget", "2", "--shard", f"{i}/2", "--workers", "1", "--quiet",
                     "--max-order", "2", "--out", str(tmp_path / f"s{i}"),
                     "--pipeline", "verdict: different by construction"]) == 0
    assert main(["stress", "--merge", str(tmp_path / "s0"), str(tmp_path / "s1"),
                 "--out", str(tmp_path / "merged")]) == 0
    merged = json.loads((tmp_path / "merged" / "campaign.json").read_text())
    assert merged["completed_cases"] == 2
    assert main(["stress", "--minutes", "0.001", "--workers", "1", "--quiet", "--out",
                 str(tmp_path / "t"), "--pipeline", "verdict: different by construction"]) == 0
    assert json.loads((tmp_path / "t" / "campaign.json").read_text())["completed_cases"] <= 2


@pytest.mark.parametrize("argv, fragment", [
    (["stress", "--shard", "3/2"], "--shard i/N needs 0 <= i < N"),
    (["stress", "--budget", "-1"], "expected a whole number >= 0"),
    (["stress", "--budget", "2", "--minutes", "1"], "not allowed with argument"),
], ids=["shard", "budget", "exclusive"])
def test_stress_usage_errors(argv: list[str], fragment: str, capsys) -> None:
    with pytest.raises(SystemExit) as exc:
        main(argv)
    assert exc.value.code == 2 and fragment in capsys.readouterr().err


def test_unknown_pipeline_is_a_usage_error(tmp_path: Path, capsys) -> None:
    assert main(["stress", "--budget", "1", "--out", str(tmp_path), "--pipeline", "nope"]) == 2
    assert "pipelines: unknown ['nope']" in capsys.readouterr().err


def test_promote_errors(tmp_path: Path, capsys) -> None:
    assert main(["promote", str(tmp_path / "missing")]) == 2
    assert "does not exist" in capsys.readouterr().err
    (tmp_path / "cx").mkdir()
    assert main(["promote", str(tmp_path / "cx")]) == 2
    assert "has no manifest.json" in capsys.readouterr().err


def test_case_specs_are_deterministic_and_validated() -> None:
    assert stress.case_spec(7, 3) == stress.case_spec(7, 3)
    assert stress.case_spec(7, 3) != stress.case_spec(7, 4)
    with pytest.raises(InvalidModelError, match="seed"):
        stress.case_spec(-1, 0)
    with pytest.raises(InvalidModelError, match="budget"):
        stress.run_campaign()


@pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")
def test_third_party_pipeline_matches_scipy_directly() -> None:
    """The scipy pipeline really goes through scipy (independent: scipy.signal.ss2tf)."""
    import scipy.signal

    spec = SystemSpec(order=3, seed=1)
    from audit.workflows.strategies import build_system

    r = build_system(spec)
    ref, conv = stress.pipelines()["scipy: transfer-function round trip"].run(r, spec)
    num, den = scipy.signal.ss2tf(conv.a, conv.b, conv.c, conv.d)
    num0, den0 = scipy.signal.ss2tf(r.a, r.b, r.c, r.d)
    # same polynomial coefficients up to rounding (rtol 1e-9, common practice for order 3)
    np.testing.assert_allclose(den, den0, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(num, num0, rtol=1e-9, atol=1e-12)


def test_stress_out_must_be_empty_or_replaced_explicitly(tmp_path: Path, capsys) -> None:
    argv = ["stress", "--budget", "2", "--seed", "1", "--workers", "1", "--max-order", "2",
            "--pipeline", "verdict: different by construction"]
    out = tmp_path / "report"
    assert main([*argv, "--out", str(out)]) == 0
    err = capsys.readouterr().err
    # the progress shows from the start (0 of 2 done), then as cases finish
    assert "stress: [--------------------] 0/2 systems" in err and "2/2 systems" in err
    stale = out / "counterexamples" / "stale-case"
    stale.mkdir(parents=True)
    assert main([*argv, "--out", str(out)]) == 2
    assert "is not empty" in capsys.readouterr().err and stale.is_dir()  # nothing deleted
    assert main([*argv, "--out", str(out), "--replace"]) == 0
    assert not stale.exists() and (out / "campaign.json").is_file()
    other = tmp_path / "notes"
    other.mkdir()
    (other / "mine.txt").write_text("keep me")
    assert main([*argv, "--out", str(other), "--replace"]) == 2
    assert "holds no campaign.json" in capsys.readouterr().err
    assert (other / "mine.txt").read_text() == "keep me"


def test_campaign_reports_carry_the_caution(tmp_path: Path) -> None:
    from audit.reports.shapes import CAUTION

    result = stress.run_campaign(budget=1, seed=0, settings=_settings(FAST[2]))
    paths = stress.write_reports(result, tmp_path / "c")
    assert json.loads(paths["json"].read_text())["caution"] == CAUTION
    assert CAUTION in paths["markdown"].read_text()
