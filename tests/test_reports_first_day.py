"""What a controls engineer reads on the first day: numbers in dB and degrees, tidy text
reports, produced forms that lti-audit accepts, commands that behave as expected."""

from __future__ import annotations

import json
import math
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from audit.cli import main
from audit.commands.convert import FORM_NAMES
from audit.core.from_transfer_function import realization_from_transfer_function
from audit.dynamics.discretization_checks import check_discretization_claim
from audit.forms.catalogue import jordan_form
from audit.core.realization import Realization
from audit.reports.shapes import CAUTION, compare_report, render_compare_text
from audit.verdict.compare import Options, compare_models, overall_verdict

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "fixtures" / "demo"


def _write(path: Path, doc: dict) -> Path:
    path.write_text(json.dumps({"lti_model": 1, **doc}))
    return path


def _text_report(models: list[Realization]) -> tuple[str, dict]:
    opts = Options(escalate=False)
    pairs = compare_models(models, options=opts)
    data = compare_report(models, [m.name for m in models], pairs, opts, overall_verdict(pairs), 0.0)
    return render_compare_text(data), data


# ------------------------------------------------------------ 1. the trade's units
def test_gain_change_is_reported_in_db_with_both_dc_gains(capsys) -> None:
    code = main(["compare", str(DEMO / "conveyor_drive_reference.json"),
                 str(DEMO / "conveyor_drive_refactored.json"),
                 str(DEMO / "conveyor_drive_gain_slip.json"), "--format", "json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 1
    pair = data["comparisons"][1]
    grid = next(e for e in pair["evidence"] if e["key"] == "frequency_grid")
    at = grid["details"]["trade_units"]["channels"][0]["at_worst"]
    # the demo's gearbox change scales the output by 1.02 (diagnosed as x1.02 in the
    # report): 20 log10(1.02) = 0.172 dB, no phase change (closed form)
    assert at["gain_difference_db"] == pytest.approx(20 * math.log10(1.02), abs=1e-6)
    assert abs(at["phase_difference_deg"]) < 1e-9
    static = next(e for e in pair["evidence"] if e["key"] == "static_gains")
    # DC gain of 0.5 s + 20 over s^3 + 14 s^2 + 424 s + 800 is 20/800 = 0.025 (closed form)
    assert "DC gain differs: 0.025 vs 0.0255 (+0.172 dB)" in static["summary"]
    assert "+0.172 dB" in data["summary"]


def test_phase_difference_in_degrees_matches_an_independent_evaluation() -> None:
    import scipy.signal

    from audit.reports.trade_units import differences_in_trade_units

    # a heated-enclosure zone model and a copy with a 0.5 s transport-free lag added by
    # mistake: 1 / (40 s + 1) vs 1 / ((40 s + 1)(0.5 s + 1))
    w = np.logspace(-3, 1, 200)
    _, g1 = scipy.signal.freqresp(([1.0], [40.0, 1.0]), w)
    _, g2 = scipy.signal.freqresp(([1.0], np.polymul([40.0, 1.0], [0.5, 1.0])), w)
    out = differences_in_trade_units(w, g1[:, None, None], g2[:, None, None], scale=1.0)
    at = out["channels"][0]["at_worst"]
    # closed form of the ratio G2/G1 = 1/(0.5 j w + 1): gain -10 log10(1 + w^2/4) dB,
    # phase -atan(w/2) (common practice, no source)
    wk = at["frequency_rad_s"]
    assert at["gain_difference_db"] == pytest.approx(-10 * math.log10(1 + wk * wk / 4), abs=1e-9)
    assert at["phase_difference_deg"] == pytest.approx(-math.degrees(math.atan(wk / 2)), abs=1e-9)
    over = out["channels"][0]["over_band"]
    # the band is where both gains are within 60 dB of the peak gain 1 (closed forms of the
    # two magnitudes); the phase lag grows with w, so it is largest at the band's top
    g1_mag = 1 / np.sqrt(1 + 1600 * w**2)
    g2_mag = g1_mag / np.sqrt(1 + 0.25 * w**2)
    top = w[(g1_mag >= 1e-3) & (g2_mag >= 1e-3)].max()
    assert 5.0 < top < 10.0  # the lower gain leaves the band before the grid ends
    assert over["max_phase_difference_deg"] == pytest.approx(-math.degrees(math.atan(top / 2)), abs=1e-9)
    assert over["at_phase_rad_s"] == top


def test_text_report_has_no_minus_zero_no_empty_heading_and_names_every_model() -> None:
    ref = Realization.from_arrays([[-2.0]], [[1.0]], [[1.0]], [[0.0]], name="zone 1 heater")
    same = Realization.from_arrays([[-2.0]], [[2.0]], [[0.5]], [[0.0]], name="zone 1 rescaled")
    moved = Realization.from_arrays([[-2.0025]], [[1.0]], [[1.0]], [[0.0]], name="zone 1 retuned")
    gain = Realization.from_arrays([[-2.0]], [[1.0]], [[1.5]], [[0.0]], name="zone 1 new sensor")
    text, data = _text_report([ref, same, moved, gain])
    assert not re.search(r"(?<![\w.])-0(?![\d.e])", text)  # no "-0" anywhere
    assert "zone 1 retuned" in data["summary"] and "zone 1 new sensor" in data["summary"]
    # pole moves with at most 6 significant digits, never raw 16-digit doubles
    assert "-2 -> -2.0025" in text
    assert not re.search(r"\d\.\d{10,}", data["summary"])
    # the equivalent pair's diagnosis is empty: no bare heading
    lines = text.splitlines()
    for k, line in enumerate(lines):
        if line.strip() == "diagnosis:":
            assert lines[k + 1].startswith("     ")
    assert CAUTION in text


def test_similarity_not_found_and_infinite_dc_gains_are_said_in_words() -> None:
    # two integrators (DC gain infinite in both), different gains: no similarity exists
    a = Realization.from_arrays([[0.0]], [[1.0]], [[1.0]], [[0.0]], name="belt position")
    b = Realization.from_arrays([[0.0]], [[1.0]], [[1.2]], [[0.0]], name="belt position x1.2")
    text, data = _text_report([a, b])
    assert "value none found" in text  # not "value 67" for a transform that does not exist
    assert "both DC gains are infinite" in text
    assert "DC gain agrees" not in text


def test_reversed_coefficients_get_a_hint(tmp_path: Path, capsys) -> None:
    asc = _write(tmp_path / "asc.json", {
        "name": "conveyor drive (typed from a spreadsheet)", "sample_period": None,
        "transfer_function": {"numerator": [[[20.0, 0.5]]], "denominator": [[[800, 424, 14, 1]]]}})
    code = main(["compare", str(DEMO / "conveyor_drive_reference.json"), str(asc)])
    out = capsys.readouterr().out
    assert code == 1
    # the roots of a reversed polynomial are the reciprocals of the original's (algebra)
    assert "reciprocals of the reference's" in out and "ascending instead of descending" in out


# ------------------------------------------------------ 4. produced forms are accepted
@pytest.mark.parametrize("form", FORM_NAMES)
def test_every_produced_form_is_a_document_inspect_accepts(form: str, tmp_path: Path,
                                                           capsys) -> None:
    out = tmp_path / f"{form}.json"
    assert main(["convert", str(DEMO / "conveyor_drive_reference.json"), "--to", form,
                 "-o", str(out)]) == 0
    written = json.loads(out.read_text())
    assert main(["inspect", str(out)]) == 0, capsys.readouterr().err
    text = capsys.readouterr().out
    if form in ("kalman", "staircase"):
        assert written.get("claimed_form") is None
        assert "no claimed_form written" in written["provenance"]["notes"]
    else:
        assert written["claimed_form"] == form
        assert f"claimed form: {form} -> holds" in text


def test_jordan_warning_only_for_close_poles() -> None:
    # distinct poles -1, -5: the Jordan form is the modal form, nothing fragile about it
    distinct = Realization.from_arrays([[-1.0, 1.0], [0.0, -5.0]], [[0.0], [1.0]], [[1.0, 0.0]],
                                       [[0.0]])
    assert not any("fragile" in w for w in jordan_form(distinct).warnings)
    # a double pole at -1 (a Jordan block of size 2): the warning is due
    double = Realization.from_arrays([[-1.0, 1.0], [0.0, -1.0]], [[0.0], [1.0]], [[1.0, 0.0]],
                                     [[0.0]])
    assert any("fragile" in w for w in jordan_form(double).warnings)


def test_compare_html_of_a_mixed_pair_under_a_declared_discretization(tmp_path: Path,
                                                                      capsys) -> None:
    import scipy.signal

    cont = _write(tmp_path / "c.json", {"name": "heater lag", "sample_period": None,
                                        "transfer_function": {"numerator": [[[20.0]]],
                                                              "denominator": [[[1.0, 20.0]]]}})
    # independent: scipy.signal.cont2discrete, bilinear method, T = 0.01 s
    num, den, _ = scipy.signal.cont2discrete(([20.0], [1.0, 20.0]), 0.01, method="bilinear")
    disc = _write(tmp_path / "d.json", {"name": "heater lag, sampled", "sample_period": 0.01,
                                        "transfer_function": {"numerator": [[list(np.ravel(num))]],
                                                              "denominator": [[list(den)]]}})
    page = tmp_path / "mixed.html"
    method = "bilinear"  # the command-line name of the bilinear (Tustin) map
    code = main(["compare", str(cont), str(disc), "--discretization", method, "--format",
                 "html", "-o", str(page)])
    assert code == 0, capsys.readouterr().err
    text = page.read_text()
    assert text.count('src="data:image/png;base64,') == 6 and "v-equivalent" in text


# ------------------------------------------------------ 5. commands behave as expected
def test_prewarp_without_the_bilinear_method_is_an_error(capsys) -> None:
    code = main(["compare", str(DEMO / "conveyor_drive_reference.json"),
                 str(DEMO / "conveyor_drive_refactored.json"), "--prewarp", "3"])
    assert code == 2
    assert "--prewarp applies only to the bilinear (Tustin) discretization" in capsys.readouterr().err


def test_failed_discretization_claim_suggests_the_matching_prewarp() -> None:
    # bilinear map with prewarp w0: s = (w0 / tan(w0 T / 2)) (z - 1)/(z + 1) (from memory;
    # the prewarped bilinear map of Franklin, Powell & Workman, Digital Control of Dynamic
    # Systems, 3rd ed., ch. 6); applied by hand to 20 / (s + 20), w0 = 100 rad/s, T = 0.01 s
    t, w0 = 0.01, 100.0
    c = w0 / math.tan(w0 * t / 2)
    cont = realization_from_transfer_function([[[20.0]]], [[[1.0, 20.0]]])
    disc = realization_from_transfer_function([[[20.0, 20.0]]], [[[c + 20.0, 20.0 - c]]], t)
    check = check_discretization_claim(cont, disc, method="bilinear", rtol=1e-6)
    assert check.outcome == "fails"
    found = re.search(r"prewarp frequency ([0-9.]+) rad/s", check.message)
    assert found and float(found.group(1)) == pytest.approx(w0, rel=1e-4)


def test_inspect_of_a_directory_says_so(tmp_path: Path, capsys) -> None:
    assert main(["inspect", str(tmp_path)]) == 2
    assert "is a directory" in capsys.readouterr().err


def test_token_list_has_a_header(tmp_path: Path, capsys) -> None:
    db = f"sqlite:///{tmp_path / 't.sqlite3'}"
    assert main(["token", "--database", db, "list"]) == 0
    assert "no tokens yet" in capsys.readouterr().out
    assert main(["token", "--database", db, "create", "--holder", "Ana", "--team"]) == 0
    capsys.readouterr()
    assert main(["token", "--database", db, "list"]) == 0
    first, second = capsys.readouterr().out.splitlines()[:2]
    assert first.split() == ["id", "token", "starts", "role", "supplier", "holder", "state"]
    assert second.split()[0] == "1" and second.rstrip().endswith("active")


# ------------------------------------------------------------- 8. cautions everywhere
def test_junit_xml_carries_the_caution(capsys, monkeypatch) -> None:
    monkeypatch.chdir(ROOT / "fixtures" / "example_repo")
    code = main(["check", "--format", "junit"])
    xml = capsys.readouterr().out
    assert code == 0
    root = ET.fromstring(xml)
    values = [p.get("value") for p in root.iter("property") if p.get("name") == "lti-audit.caution"]
    assert values and all(v == CAUTION for v in values)


def test_readme_and_tests_readme_agree_on_suite_duration() -> None:
    readme = (ROOT / "README.md").read_text()
    tests_readme = (ROOT / "tests" / "README.md").read_text()
    said = re.search(r"runs the whole test suite \(([^)]*)\)", readme)
    assert said is not None
    assert said.group(1) in tests_readme


def test_pre_merge_walkthrough_quotes_a_real_run() -> None:
    import subprocess
    import sys

    run = subprocess.run([sys.executable, str(ROOT / "docs" / "run_premerge_example.py")],
                         capture_output=True, text=True, cwd=ROOT, timeout=600)
    assert run.returncode == 0, run.stderr[-2000:]
    doc = (ROOT / "docs" / "pre-merge.md").read_text()

    def status_lines(text: str) -> list[str]:
        # numbers below 1e-12 are rounding and may differ between machines
        return [re.sub(r"\[peak rel\. diff [0-9.e+-]+\]", "", line).rstrip()
                for line in text.splitlines()
                if re.match(r"\s+(HOLDS|FAILS|UNCHANGED|CHANGED|INCONCLUSIVE)\s", line)]

    real = status_lines(run.stdout)
    assert len(real) == 12  # 5 claims twice, 2 changed files
    assert real == status_lines(doc)
    assert "(exit status 1)" in run.stdout and "(exit status 1)" in doc


def test_discrete_model_with_only_a_negative_real_pole_is_compared(tmp_path: Path, capsys) -> None:
    # regression: z = -0.3 made the time-response horizon NaN (real log of a negative
    # number) and compare stopped with an internal error
    one = _write(tmp_path / "a.json", {"name": "ringing filter", "sample_period": 0.01,
                                       "state_space": {"a": [[-0.3]], "b": [[1.0]], "c": [[1.0]],
                                                       "d": [[0.0]]}})
    two = _write(tmp_path / "b.json", {"name": "ringing filter, rescaled", "sample_period": 0.01,
                                       "state_space": {"a": [[-0.3]], "b": [[2.0]], "c": [[0.5]],
                                                       "d": [[0.0]]}})
    assert main(["compare", str(one), str(two)]) == 0  # x2 = 2 x1: the same system
    assert "EQUIVALENT" in capsys.readouterr().out
