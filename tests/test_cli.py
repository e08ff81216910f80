"""The command-line contract of DESIGN.md: exit statuses, JSON reports, clear errors."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import jsonschema
import pytest

from audit.cli import main

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "fixtures" / "demo"
SCHEMAS = ROOT / "schemas"


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def demo(name: str) -> str:
    return str(DEMO / name)


def test_equivalent_refactor_exits_0(capsys):
    code, out, _ = run(capsys, "compare", demo("conveyor_drive_reference.json"),
                       demo("conveyor_drive_refactored.json"))
    assert code == 0
    assert "EQUIVALENT" in out
    assert out.rstrip().splitlines()[-1].startswith("Caution:")


def test_gain_slip_exits_1_with_unit_change_diagnosis(capsys):
    code, out, _ = run(capsys, "compare", demo("conveyor_drive_reference.json"),
                       demo("conveyor_drive_gain_slip.json"))
    assert code == 1
    assert "DIFFERENT" in out and "unit change" in out


def test_json_report_follows_the_published_schema(capsys):
    code, out, _ = run(capsys, "compare", demo("conveyor_drive_reference.json"),
                       demo("conveyor_drive_refactored.json"), demo("conveyor_drive_gain_slip.json"),
                       "--format", "json")
    assert code == 1
    data = json.loads(out)
    schema = json.loads((SCHEMAS / "compare-report.schema.json").read_text())
    jsonschema.validate(data, schema)
    assert data["verdict"] == "different"
    assert [c["verdict"] for c in data["comparisons"]] == ["equivalent", "different"]
    assert data["caution"].startswith("Caution:")
    decisive = [e for e in data["comparisons"][0]["evidence"] if e["decisive"]]
    assert len(decisive) == 1 and decisive[0]["precision"]


def test_unstable_hidden_mode_is_prominent(capsys):
    code, out, _ = run(capsys, "compare", demo("valve_actuator_reference.json"),
                       demo("valve_actuator_supplier.json"))
    # the transfer functions agree, but internal stability does not: a problem (issue 11)
    assert code == 1
    assert out.splitlines()[0].startswith("lti-audit compare: EQUIVALENT input-output, but ")
    assert "!! UNSTABLE HIDDEN MODE" in out
    code, out, _ = run(capsys, "inspect", demo("valve_actuator_supplier.json"))
    assert code == 1
    assert "UNSTABLE HIDDEN MODE" in out


def test_inspect_json_follows_schema(capsys):
    code, out, _ = run(capsys, "inspect", demo("conveyor_drive_refactored.json"), "--format", "json")
    assert code == 0
    data = json.loads(out)
    jsonschema.validate(data, json.loads((SCHEMAS / "inspect-report.schema.json").read_text()))
    assert data["properties"]["minimal_order"] == 3
    # DC gain of (0.5 s + 20)/(s^3 + 14 s^2 + 424 s + 800) is 20/800 (closed form, common practice)
    assert data["properties"]["dc_gain"][0][0] == pytest.approx(0.025, rel=1e-12)


def test_permutation_demo(capsys):
    code, out, _ = run(capsys, "compare", demo("heated_zones_reference.json"),
                       demo("heated_zones_swapped_outputs.json"))
    assert code == 1
    assert "outputs reordered as [1, 0]" in out


@pytest.mark.parametrize(
    "argv, fragment",
    [
        pytest.param(["compare", "missing.json", "also-missing.json"], "missing.json", id="missing-file"),
        pytest.param(["compare", "{ref}"], "at least two models", id="one-model"),
        pytest.param(["compare", "{ref}", "{ref}", "--rtol", "2"], "--rtol must be between 0 and 1", id="bad-rtol"),
        pytest.param(["compare", "{ref}", "{ref}", "--rtol", "x"], "--rtol must be a number", id="rtol-text"),
        pytest.param(["compare", "{ref}", "{zones}"], "input", id="io-mismatch"),
        pytest.param(["inspect", "{notmodel}"], "not an lti-audit model document", id="not-a-model"),
        pytest.param(["frobnicate"], "invalid choice", id="unknown-command"),
    ],
)
def test_invalid_input_exits_2_with_a_message(capsys, tmp_path, argv, fragment):
    notmodel = tmp_path / "notes.json"
    notmodel.write_text('{"hello": 1}')
    subs = {"{ref}": demo("conveyor_drive_reference.json"), "{zones}": demo("heated_zones_reference.json"),
            "{notmodel}": str(notmodel)}
    try:
        code = main([subs.get(a, a) for a in argv])
    except SystemExit as exc:  # argparse usage errors
        code = exc.code
    err = capsys.readouterr().err
    assert code == 2
    assert fragment in err
    assert "Traceback" not in err


def test_continuous_vs_discrete_is_a_usage_error(capsys, tmp_path):
    doc = json.loads(Path(demo("conveyor_drive_reference.json")).read_text())
    doc["sample_period"] = 0.01
    disc = tmp_path / "sampled.json"
    disc.write_text(json.dumps(doc))
    code, _, err = run(capsys, "compare", demo("conveyor_drive_reference.json"), str(disc))
    assert code == 2
    assert "continuous-time" in err and "discrete-time" in err


def test_console_script_no_traceback_and_inputs_untouched(tmp_path):
    bad = tmp_path / "bad.json"
    text = '{"lti_model": 1, "name": "x", "sample_period": null, "state_space": {"a": [[1, 2]], "b": [[1]], "c": [[1]], "d": [[0]]}}'
    bad.write_text(text)
    proc = subprocess.run([sys.executable, "-m", "audit.cli", "inspect", str(bad)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert "state_space.a" in proc.stderr
    assert bad.read_text() == text


# ------------------------------------------------------------- issue 4 commands
def _sampled_conveyor(tmp_path, method: str, period: float, label_period: float | None = None) -> str:
    # independent reference discretization: scipy.signal.cont2discrete
    import scipy.signal

    doc = json.loads(Path(demo("conveyor_drive_reference.json")).read_text())
    num = doc["transfer_function"]["numerator"][0][0]
    den = doc["transfer_function"]["denominator"][0][0]
    a, b, c, d = scipy.signal.tf2ss(num, den)
    ad, bd, cd, dd, _ = scipy.signal.cont2discrete((a, b, c, d), period, method=method)
    out = {"lti_model": 1, "name": f"sampled {method}", "sample_period": label_period or period,
           "state_space": {"a": ad.tolist(), "b": bd.tolist(), "c": cd.tolist(), "d": dd.tolist()}}
    path = tmp_path / f"sampled_{method}_{label_period or period}.json"
    path.write_text(json.dumps(out))
    return str(path)


def test_declared_zero_order_hold_discretization_holds(capsys, tmp_path):
    disc = _sampled_conveyor(tmp_path, "zoh", 0.01)  # scipy's name for the zero-order hold
    code, out, _ = run(capsys, "compare", demo("conveyor_drive_reference.json"), disc,
                       "--discretization", "zero-order-hold")
    assert code == 0, out
    assert "Claim:" in out


def test_wrong_discretization_claim_names_the_matching_method(capsys, tmp_path):
    disc = _sampled_conveyor(tmp_path, "bilinear", 0.01)  # scipy's name for Tustin
    code, out, _ = run(capsys, "compare", demo("conveyor_drive_reference.json"), disc,
                       "--discretization", "zero-order-hold", "--format", "json")
    assert code == 1
    pair = json.loads(out)["comparisons"][0]
    assert pair["diagnosis"]["discretization"]["matching_method"] == "bilinear"
    assert "match a bilinear discretization, not zero-order-hold" in pair["explanation"]


@pytest.mark.parametrize("name", ["zoh", "foh", "tustin", "matched", "impulse", "Zero-Order-Hold"])
def test_unknown_discretization_name_lists_the_accepted_names(capsys, tmp_path, name):
    disc = _sampled_conveyor(tmp_path, "zoh", 0.01)
    with pytest.raises(SystemExit) as stop:  # a usage error: argparse exits with status 2
        main(["compare", demo("conveyor_drive_reference.json"), disc, "--discretization", name])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert f"got {name!r} but one of these discretization methods was expected" in err
    for accepted in ("zero-order-hold", "triangle-hold", "bilinear", "matched-pole-zero",
                     "impulse-invariant"):
        assert accepted in err
    assert "Traceback" not in err


def test_mislabelled_sample_period_is_detected(capsys, tmp_path):
    right = _sampled_conveyor(tmp_path, "zoh", 0.01)
    wrong = _sampled_conveyor(tmp_path, "zoh", 0.01, label_period=0.001)
    code, out, _ = run(capsys, "compare", right, wrong, "--format", "json")
    assert code == 1
    data = json.loads(out)
    ev = data["comparisons"][0]["evidence"][0]
    assert ev["key"] == "sample_period"
    assert ev["details"]["outcome"] == "period_mismatch"


def test_convert_writes_certified_form_and_never_overwrites(capsys, tmp_path):
    out_path = tmp_path / "modal.json"
    code, out, _ = run(capsys, "convert", demo("conveyor_drive_reference.json"), "--to", "modal",
                       "-o", str(out_path))
    assert code == 0
    doc = json.loads(out_path.read_text())
    assert doc["claimed_form"] == "modal"
    assert doc["certificate"]["verdict"] == "equivalent"
    assert doc["certificate"]["relative_error"] <= 1e-5
    before = out_path.read_text()
    code, _, err = run(capsys, "convert", demo("conveyor_drive_reference.json"), "--to", "balanced",
                       "-o", str(out_path))
    assert code == 2 and "never overwrites" in err
    assert out_path.read_text() == before
    code, out, _ = run(capsys, "inspect", str(out_path))
    assert code == 0 and "claimed form: modal -> holds" in out


def test_wrong_claimed_form_is_a_problem(capsys, tmp_path):
    doc = json.loads(Path(demo("conveyor_drive_refactored.json")).read_text())
    doc["claimed_form"] = "modal"
    path = tmp_path / "claims_modal.json"
    path.write_text(json.dumps(doc))
    code, out, _ = run(capsys, "inspect", str(path))
    assert code == 1
    assert "claims the modal form but is not in it" in out


def test_html_report_is_written_once(capsys, tmp_path):
    out_path = tmp_path / "report.html"
    code, out, _ = run(capsys, "compare", demo("conveyor_drive_reference.json"),
                       demo("conveyor_drive_gain_slip.json"), "--format", "html", "-o", str(out_path))
    assert code == 1 and "report written" in out
    page = out_path.read_text()
    assert 'id="plot-bode-magnitude"' in page and "Caution:" in page
    code, _, err = run(capsys, "compare", demo("conveyor_drive_reference.json"),
                       demo("conveyor_drive_gain_slip.json"), "--format", "html", "-o", str(out_path))
    assert code == 2 and "never overwrites" in err


def test_convert_offers_exactly_the_claimable_forms():
    from audit.commands.convert import FORM_NAMES
    from audit.documents.schema import CLAIMED_FORMS

    assert tuple(FORM_NAMES) == tuple(CLAIMED_FORMS)
