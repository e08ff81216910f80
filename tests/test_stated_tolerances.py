"""Tolerances a team can state (issue 15, deliverable 2): absolute tolerance, band of
interest, per-channel tolerances; the band-limited peak they rest on.

Outside references, named beside each check:
- second-order resonance: peak 1 / (2 zeta sqrt(1 - zeta^2)) at wn sqrt(1 - 2 zeta^2)
  (K. Ogata, Modern Control Engineering, 5th ed., sec. 7-2 -- from memory);
- python-control / scipy.signal frequency responses on dense grids (a dense grid gives a
  lower bound of the peak over the band; our certified upper bound must lie above it);
- differences built in closed form (a constant feedthrough offset, a high-pass term
  eps s / (s + 100) whose magnitude eps w / sqrt(w^2 + 10^4) increases with w).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import control
import jsonschema
import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

from audit.evidence.band_peak import band_limited_peak, check_band
from audit.cli import main
from audit.errors import InvalidModelError
from audit.core.realization import Realization
from audit.evidence.tolerances import parse_channel_tolerance, resolve_channel_tolerances
from audit.verdict.compare import Options, compare_pair

ROOT = Path(__file__).resolve().parent.parent
SCHEMAS = ROOT / "schemas"


# ------------------------------------------------------------ band-limited peak
def _resonance(wn: float = 10.0, zeta: float = 0.05) -> Realization:
    return Realization.from_arrays([[0.0, 1.0], [-wn**2, -2 * zeta * wn]], [[0.0], [wn**2]],
                                   [[1.0, 0.0]], [[0.0]])


def _dense_peak_continuous(r: Realization, lo: float, hi: float, n: int = 20_001) -> float:
    # independent: python-control frequency response of the same matrices on a dense grid
    w = np.linspace(lo, hi, n)
    sys = control.ss(r.a, r.b, r.c, r.d)
    g = np.asarray(sys(1j * w)).reshape(r.n_outputs, r.n_inputs, -1)
    return float(np.linalg.norm(np.moveaxis(g, -1, 0), ord=2, axis=(1, 2)).max())


def test_band_containing_the_resonance_finds_the_closed_form_peak():
    wn, zeta = 10.0, 0.05
    peak = band_limited_peak(_resonance(wn, zeta), (1.0, 100.0))
    # Ogata, Modern Control Engineering, 5th ed., sec. 7-2 (from memory)
    expected = 1.0 / (2 * zeta * math.sqrt(1 - zeta**2))
    assert peak.certified
    assert peak.value == pytest.approx(expected, rel=1e-10)
    assert peak.frequency == pytest.approx(wn * math.sqrt(1 - 2 * zeta**2), rel=1e-5)
    assert expected <= peak.upper <= expected * (1 + 1e-8)


@pytest.mark.parametrize("band", [(0.0, 1.0), (1.0, 5.0), (20.0, 30.0), (50.0, math.inf)])
def test_band_away_from_the_resonance_peaks_at_the_nearer_edge(band):
    wn, zeta = 10.0, 0.05
    r = _resonance(wn, zeta)
    peak = band_limited_peak(r, band)
    edge = band[1] if band[1] < wn else band[0]
    # closed form |wn^2 / (wn^2 - w^2 + 2 j zeta wn w)| at the edge (common practice, no source)
    at_edge = wn**2 / abs(wn**2 - edge**2 + 2j * zeta * wn * edge)
    assert peak.certified and peak.frequency == edge
    assert peak.value == pytest.approx(at_edge, rel=1e-12)
    assert peak.upper >= _dense_peak_continuous(r, band[0], min(band[1], 1e4))


@pytest.mark.parametrize("band", [(0.0, 50.0), (50.0, 200.0), (100.0, 400.0), (150.0, 260.0)])
def test_discrete_band_peak_against_python_control(band):
    period = 0.01
    r = Realization.from_arrays([[0.5, 0.3], [-0.4, -0.7]], [[1.0, 0.0], [0.5, 1.0]],
                                [[1.0, 2.0], [0.0, 1.0]], [[0.1, 0.0], [0.0, 0.0]], period)
    peak = band_limited_peak(r, band)
    hi = min(band[1], math.pi / period)
    # independent: python-control's discrete response on a dense grid (a lower bound)
    w = np.linspace(band[0], hi, 20_001)
    g = np.asarray(control.ss(r.a, r.b, r.c, r.d, period)(np.exp(1j * w * period)))
    dense = float(np.linalg.norm(np.moveaxis(g, -1, 0), ord=2, axis=(1, 2)).max())
    assert peak.certified
    assert peak.band[1] == pytest.approx(hi, rel=1e-15)
    assert dense * (1 - 1e-12) <= peak.value <= dense * (1 + 1e-5)
    assert peak.upper >= dense


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 10_000), lo=st.floats(0.0, 5.0), width=st.floats(0.1, 50.0))
def test_property_band_peak_is_bracketed_against_a_dense_grid(seed, lo, width):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 6))
    poles = -10 ** rng.uniform(-1, 1.5, n)
    a = np.diag(poles) + np.triu(rng.normal(size=(n, n)), 1)
    r = Realization.from_arrays(a, rng.normal(size=(n, 2)), rng.normal(size=(2, n)),
                                rng.normal(size=(2, 2)) * 0.1)
    peak = band_limited_peak(r, (lo, lo + width))
    dense = _dense_peak_continuous(r, lo, lo + width, 4_001)
    assert peak.certified
    assert peak.value >= dense * (1 - 1e-12)
    assert peak.upper >= dense * (1 - 1e-12)
    assert peak.upper <= peak.value * (1 + 1e-6) + 1e-300


@pytest.mark.parametrize("band,fragment", [
    ((2.0, 1.0), "0 <= LOW < HIGH"), ((-1.0, 1.0), "0 <= LOW < HIGH"),
    ((float("nan"), 1.0), "0 <= LOW < HIGH"), (("a", 1.0), "two frequencies"),
    ((1.0,), "two frequencies")])
def test_bad_bands_are_clear_errors(band, fragment):
    with pytest.raises(InvalidModelError, match=fragment.replace("(", r"\(")):
        check_band(band)


def test_band_above_nyquist_is_refused_for_discrete_models():
    with pytest.raises(InvalidModelError, match="Nyquist frequency 314.159"):
        check_band((400.0, 500.0), sample_period=0.01)


# --------------------------------------------------------------- the decision
def _first_order():
    return Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]]).with_name("lag")


def _plus_high_pass(eps: float):
    # G2 = 1/(s+1) + eps s/(s+100): the difference eps s/(s+100) grows with frequency
    return Realization.from_arrays([[-1.0, 0.0], [0.0, -100.0]], [[1.0], [1.0]],
                                   [[1.0, -100.0 * eps]], [[eps]]).with_name("lag with high-pass")


def _high_pass_difference(eps: float, w: float) -> float:
    # independent: scipy.signal.freqresp of eps s / (s + 100)
    _, h = scipy.signal.freqresp(([eps, 0.0], [1.0, 100.0]), [w])
    return float(abs(h[0]))


def test_band_of_interest_decides_and_the_rest_is_reported():
    eps = 1e-3
    r1, r2 = _first_order(), _plus_high_pass(eps)
    assert compare_pair(r1, r2).verdict == "different"  # whole axis: eps at high frequency
    below = _high_pass_difference(eps, 1.0)  # 9.9995e-6 at 1 rad/s, the band's top
    pair = compare_pair(r1, r2, options=Options(rtol=1.01 * below, band=(0.0, 1.0)))
    assert pair.verdict == "equivalent"
    decisive = pair.evidence[0]
    assert decisive.key == "difference_peak_gain" and decisive.decisive
    # the reference peak gain is 1 (DC gain of both), so the relative value is absolute
    assert decisive.value == pytest.approx(below, rel=1e-9)
    assert decisive.details["whole_axis"]["relative_difference"] == pytest.approx(eps, rel=1e-9)
    assert decisive.details["whole_axis"]["decides"] is False
    assert "outside the band: reported, does not decide" in decisive.summary
    assert decisive.details["targets"][0]["band_peak"]["certified"] is True
    pair = compare_pair(r1, r2, options=Options(rtol=0.99 * below, band=(0.0, 1.0)))
    assert pair.verdict == "different"
    at50 = _high_pass_difference(eps, 50.0)
    pair = compare_pair(r1, r2, options=Options(rtol=0.99 * at50, band=(0.0, 50.0)))
    assert pair.verdict == "different"
    assert pair.evidence[0].value == pytest.approx(at50, rel=1e-9)
    assert pair.evidence[0].details["peak_frequency_rad_s"] == pytest.approx(50.0)


def test_discrete_band_against_scipy_dfreqresp():
    period = 0.01
    # G1 = 0.5 / (z - 0.5); G2 = G1 + 1e-3 (z - 1) / (z + 0.5): the extra term vanishes at DC
    # and is largest at Nyquist (magnitude 1e-3 * 2 / 0.5 = 4e-3)
    r1 = Realization.from_arrays([[0.5]], [[1.0]], [[0.5]], [[0.0]], period).with_name("slow")
    r2 = Realization.from_arrays([[0.5, 0.0], [0.0, -0.5]], [[1.0], [1.0]], [[0.5, -1.5e-3]],
                                 [[1e-3]], period).with_name("slow with a fast term")
    # independent: scipy.signal.dfreqresp of 1e-3 (z - 1) / (z + 0.5) at the band's top
    top = 20.0
    _, h = scipy.signal.dfreqresp(([1e-3, -1e-3], [1.0, 0.5], period), w=[top * period])
    peak_gain = 1.0  # G1(1) = 0.5 / 0.5, the largest gain of both (closed form)
    rel = abs(h[0]) / peak_gain
    eq = compare_pair(r1, r2, options=Options(rtol=1.02 * rel, band=(0.0, top)))
    assert eq.verdict == "equivalent"
    assert eq.evidence[0].value == pytest.approx(rel, rel=1e-6)
    diff = compare_pair(r1, r2, options=Options(rtol=0.98 * rel, band=(0.0, top)))
    assert diff.verdict == "different"


def test_absolute_tolerance_in_gain_units():
    # G2 = G1 + 0.002: the difference is 0.002 at every frequency (by construction)
    r1 = _first_order()
    r2 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.002]]).with_name("offset")
    assert compare_pair(r1, r2).verdict == "different"
    ok = compare_pair(r1, r2, options=Options(atol=0.0021))
    assert ok.verdict == "equivalent"
    assert "atol (0.0021)" in ok.evidence[0].summary
    assert ok.evidence[0].details["allowed_difference"] == pytest.approx(0.0021, rel=1e-12)
    assert compare_pair(r1, r2, options=Options(atol=0.0019)).verdict == "different"


def _two_by_two(offset: float):
    a = np.diag([-1.0, -3.0])
    b = np.array([[1.0, 0.5], [0.2, 1.0]])
    c = np.array([[1.0, 0.0], [0.3, 2.0]])
    d = np.zeros((2, 2))
    d2 = d.copy()
    d2[1, 0] = offset
    return (Realization.from_arrays(a, b, c, d).with_name("plant"),
            Realization.from_arrays(a, b, c, d2).with_name("plant, output 1 offset"))


def test_channel_tolerances_decide_channel_by_channel():
    r1, r2 = _two_by_two(1e-3)
    # reference peak gain: sigma_max of G1 over frequency, from python-control on a grid
    # (independent; the peak is at DC for this stable, non-resonant model)
    g0 = np.asarray(control.ss(r1.a, r1.b, r1.c, r1.d).dcgain())
    scale = float(np.linalg.norm(g0, 2))
    rel = 1e-3 / scale
    assert compare_pair(r1, r2).verdict == "different"
    loose = compare_pair(r1, r2, options=Options(channel_rtol=((1, 0, 1.05 * rel),)))
    assert loose.verdict == "equivalent"
    targets = {t["channel"]: t for t in loose.evidence[0].details["targets"]}
    assert len(targets) == 4
    assert targets["output 1 <- input 0"]["difference"] == pytest.approx(1e-3, rel=1e-9)
    assert targets["output 0 <- input 0"]["difference"] <= 1e-15
    tight = compare_pair(r1, r2, options=Options(channel_rtol=((1, 0, 0.95 * rel),)))
    assert tight.verdict == "different"
    assert "output 1 <- input 0" in tight.evidence[0].summary
    # loosening another channel does not help the one that differs
    other = compare_pair(r1, r2, options=Options(channel_rtol=((0, 0, 0.5),)))
    assert other.verdict == "different"


def test_channel_specs_resolve_indices_names_and_wildcards():
    specs = [parse_channel_tolerance(t) for t in ("belt_speed=1e-3", "*:motor_voltage=2e-4",
                                                  "1:0=5e-5")]
    got = resolve_channel_tolerances(specs, n_outputs=2, n_inputs=2,
                                     output_names=["belt_speed", "belt_tension"],
                                     input_names=["motor_voltage", "brake_current"])
    assert got == ((0, 0, 2e-4), (0, 1, 1e-3), (1, 0, 5e-5))
    with pytest.raises(InvalidModelError, match="no output named 'speed'; known output names: "
                       "'belt_speed', 'belt_tension'"):
        resolve_channel_tolerances([parse_channel_tolerance("speed=1e-3")], n_outputs=2,
                                   n_inputs=2, output_names=["belt_speed", "belt_tension"])
    with pytest.raises(InvalidModelError, match="output 2 does not exist"):
        resolve_channel_tolerances([parse_channel_tolerance("2:0=1e-3")], n_outputs=2, n_inputs=2)
    for bad in ("1:0", "1:0=2", ":0=1e-3", "1:0=abc"):
        with pytest.raises(InvalidModelError):
            parse_channel_tolerance(bad)


# ------------------------------------------------------------------ front ends
def _doc(path: Path, name: str, r: Realization, signals: bool = True) -> str:
    doc = {"lti_model": 1, "name": name, "sample_period": r.sample_period,
           "state_space": {"a": r.a.tolist(), "b": r.b.tolist(), "c": r.c.tolist(), "d": r.d.tolist()}}
    if signals:
        doc["inputs"] = [{"name": "motor_voltage", "unit": "V"}, {"name": "brake_current", "unit": "A"}]
        doc["outputs"] = [{"name": "belt_speed", "unit": "m/s"}, {"name": "belt_tension", "unit": "N"}]
    p = path / f"{name}.json"
    p.write_text(json.dumps(doc))
    return str(p)


def test_cli_states_every_tolerance_in_json_and_text(tmp_path, capsys):
    r1, r2 = _two_by_two(1e-3)
    a, b = _doc(tmp_path, "plant", r1), _doc(tmp_path, "plant_offset", r2)
    assert main(["compare", a, b]) == 1
    capsys.readouterr()
    code = main(["compare", a, b, "--channel-rtol", "belt_tension:motor_voltage=1e-2",
                 "--atol", "1e-9", "--band", "0", "1000", "--format", "json"])
    out = capsys.readouterr().out
    assert code == 0
    data = json.loads(out)
    jsonschema.validate(data, json.loads((SCHEMAS / "compare-report.schema.json").read_text()))
    tol = data["tolerances"]
    assert tol["atol"] == 1e-9 and tol["band_rad_s"] == [0.0, 1000.0]
    assert tol["channel_rtol"] == [{"output": 1, "input": 0, "rtol": 0.01,
                                    "label": "output 1 (belt_tension [N]) <- input 0 (motor_voltage [V])"}]
    assert "inside the band" in tol["rule"] and "in each channel" in tol["rule"]
    assert main(["compare", a, b, "--channel-rtol", "1:0=1e-2", "--band", "0", "1000"]) == 0
    text = capsys.readouterr().out
    assert "band 0 to 1000 rad/s" in text and "rtol 1.0e-02 for output 1" in text
    assert "tolerance rule:" in text


@pytest.mark.parametrize("argv,fragment", [
    (["--channel-rtol", "speed:motor_voltage=1e-3"], "no output named 'speed'"),
    (["--channel-rtol", "belt_speed:motor_voltage"], "OUT:IN=VALUE or OUT=VALUE"),
    (["--band", "10", "1"], "0 <= LOW < HIGH"),
])
def test_cli_bad_tolerances_exit_2(tmp_path, capsys, argv, fragment):
    r1, r2 = _two_by_two(1e-3)
    a, b = _doc(tmp_path, "plant", r1), _doc(tmp_path, "plant_offset", r2)
    assert main(["compare", a, b, *argv]) == 2
    err = capsys.readouterr().err
    assert fragment in err and "Traceback" not in err


def test_cli_negative_atol_is_a_usage_error(tmp_path, capsys):
    r1, r2 = _two_by_two(1e-3)
    a, b = _doc(tmp_path, "plant", r1), _doc(tmp_path, "plant_offset", r2)
    with pytest.raises(SystemExit) as stop:
        main(["compare", a, b, "--atol", "-1"])
    assert stop.value.code == 2
    assert "number >= 0" in capsys.readouterr().err


def test_manifest_claim_with_stated_tolerances(tmp_path):
    from audit.workflows.manifest import evaluate_claims, load_claims_manifest

    r1, r2 = _two_by_two(1e-3)
    _doc(tmp_path, "plant", r1)
    _doc(tmp_path, "plant_offset", r2)
    (tmp_path / "lti-audit.toml").write_text(
        '[[claim]]\nname = "plain"\nmodels = ["plant.json", "plant_offset.json"]\nexpect = "equivalent"\n'
        '[[claim]]\nname = "tension channel loose"\nmodels = ["plant.json", "plant_offset.json"]\n'
        'expect = "equivalent"\nchannel_rtol = {"belt_tension:motor_voltage" = 1e-2}\n'
        'band_rad_s = [0.0, 100.0]\natol = 1e-9\n')
    results = evaluate_claims(load_claims_manifest(tmp_path / "lti-audit.toml"))
    assert [r.status for r in results] == ["fails", "holds"]
    assert "rtol 0.01 on channel belt_tension:motor_voltage" in results[1].expected
    assert "band 0 to 100 rad/s" in results[1].expected
    decisive = results[1].details[0]["evidence"][0]
    assert decisive["details"]["stated_tolerances"]["channel_rtol"] == [
        {"output": 1, "input": 0, "rtol": 0.01}]


@pytest.mark.parametrize("text,fragment", [
    ('atol = -1.0\n', "expected a finite number >= 0"),
    ('band_rad_s = [5.0, 1.0]\n', "0 <= LOW < HIGH"),
    ('channel_rtol = {"0:0" = 3.0}\n', "relative tolerance between 0 and 1"),
])
def test_manifest_bad_stated_tolerances_are_located_errors(tmp_path, text, fragment):
    from audit.workflows.manifest import load_claims_manifest

    (tmp_path / "lti-audit.toml").write_text(
        '[[claim]]\nmodels = ["a.json", "b.json"]\nexpect = "equivalent"\n' + text)
    with pytest.raises(InvalidModelError, match=r"claim #1, field") as err:
        load_claims_manifest(tmp_path / "lti-audit.toml")
    assert fragment in str(err.value)


def test_manifest_stated_tolerances_only_on_expect_claims(tmp_path):
    from audit.workflows.manifest import load_claims_manifest

    (tmp_path / "lti-audit.toml").write_text('[[claim]]\nmodels = ["a.json"]\nform = "modal"\natol = 1.0\n')
    with pytest.raises(InvalidModelError, match="apply to expect claims"):
        load_claims_manifest(tmp_path / "lti-audit.toml")


def test_service_submission_states_and_applies_tolerances(tmp_path):
    # submissions are jobs (202, then the audit runs on the in-process Dask cluster):
    # the harness of the service tests posts and waits until the job is done
    from .test_service import Service

    svc = Service(f"sqlite:///{tmp_path / 'audits.sqlite3'}")
    try:
        r1, r2 = _two_by_two(1e-3)

        def doc(name: str, r: Realization) -> dict:
            return json.loads(Path(_doc(tmp_path, name, r)).read_text())

        body = {"reference": doc("plant", r1), "models": [doc("plant_offset", r2)],
                "channel_rtol": ["belt_tension:motor_voltage=1e-2"], "band_rad_s": [0.0, 100.0],
                "atol": 1e-9}
        rec = svc.submit(body)
        assert rec.status_code == 200 and rec.json()["status"] == "done", rec.text
        report = rec.json()["report"]
        assert report["verdict"] == "equivalent"
        assert report["tolerances"]["band_rad_s"] == [0.0, 100.0]
        assert report["comparison"]["tolerances"]["channel_rtol"][0]["rtol"] == 0.01
        bad = svc.client.post("/audits", json={**body, "channel_rtol": ["speed=1e-3"]},
                              headers=svc.auth(svc.team))
        assert bad.status_code == 422 and "no output named 'speed'" in bad.text
    finally:
        svc.close()


def test_straddling_allowance_is_settled_in_extended_precision():
    # the difference is the feedthrough offset fl(0.002) at every frequency (by construction);
    # an allowance 1e-14 above it straddles the double-precision error estimate, so the band
    # decision goes to ball arithmetic, which proves it; 1e-14 below must never pass
    r1 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    r2 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.002]])
    above = compare_pair(r1, r2, options=Options(band=(0.0, 10.0), atol=0.002 * (1 + 1e-14)))
    assert above.verdict == "equivalent"
    assert above.evidence[0].precision.startswith("ball arithmetic")
    assert above.evidence[0].details["targets"][0]["extended_precision"]["complete"] is True
    below = compare_pair(r1, r2, options=Options(band=(0.0, 10.0), atol=0.002 * (1 - 1e-14)))
    assert below.verdict != "equivalent"


def test_options_refuse_bad_stated_tolerances():
    with pytest.raises(InvalidModelError, match="atol: got -1.0"):
        Options(atol=-1.0)
    with pytest.raises(InvalidModelError, match="channel_rtol: got"):
        Options(channel_rtol=((0, 0, 2.0),))
    r1, r2 = _two_by_two(1e-3)
    with pytest.raises(InvalidModelError, match=r"channel\(s\) \[\(2, 0\)\] do not exist"):
        compare_pair(r1, r2, options=Options(channel_rtol=((2, 0, 1e-3),)))


def test_html_page_states_the_tolerances(tmp_path, capsys):
    r1, r2 = _two_by_two(1e-3)
    a, b = _doc(tmp_path, "plant", r1), _doc(tmp_path, "plant_offset", r2)
    page = tmp_path / "report.html"
    assert main(["compare", a, b, "--band", "0", "100", "--channel-rtol", "1:0=1e-2", "--atol", "1e-9",
                 "--format", "html", "-o", str(page)]) == 0
    capsys.readouterr()
    html = page.read_text()
    assert "band of interest 0 to 100 rad/s" in html and "atol = 1e-09" in html
    assert "rtol = 0.01 for output 1 (belt_tension [N]) &lt;- input 0 (motor_voltage [V])" in html
    assert "Tolerance rule:" in html
