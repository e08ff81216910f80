"""Supporting evidence never takes the verdict down (issue 10, deliverable 7).

Regression pins:
- discrete models with a real pole on the negative real axis (z = -0.5 alone; z = -0.95 and
  z = -0.21 in a 2-state model with four outputs) and discrete models with a hidden mode
  there crashed the time-response horizon with "ValueError: zero-size array to reduction
  operation maximum" (the logarithm of a real negative array was NaN);
- any explanatory evidence that raised made the whole audit an internal error (exit 4).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

import audit.verdict.compare as verdict_module
from audit.cli import main
from audit.errors import NumericalTroubleError
from audit.core.realization import Realization
from audit.dynamics.time_responses import response_horizon, step_response
from audit.verdict.compare import compare_pair

_ZOH = "zero-order-hold"


def _write(tmp_path, name, a, b, c, d, period):
    doc = {"lti_model": 1, "name": name, "sample_period": period,
           "state_space": {"a": a, "b": b, "c": c, "d": d}}
    path = tmp_path / f"{name}.json"
    path.write_text(json.dumps(doc))
    return str(path)


NEGATIVE_AXIS_CASES = [
    pytest.param(([[-0.5]], [[1.0]], [[1.0]], [[0.0]]), id="first-order-z=-0.5"),
    pytest.param(([[-0.95, 0.0], [0.0, -0.21]], [[1.0], [0.5]],
                  [[1.0, 0.0], [0.0, 1.0], [1.0, 1.0], [0.3, -2.0]], [[0.0], [0.0], [0.1], [0.0]]),
                 id="two-state-four-outputs"),
    pytest.param(([[-0.5, 0.0], [0.0, -0.4]], [[1.0], [0.0]], [[1.0, 0.0]], [[0.0]]),
                 id="hidden-mode-on-negative-axis"),
]


@pytest.mark.parametrize("matrices", NEGATIVE_AXIS_CASES)
def test_negative_real_poles_give_a_verdict_through_the_cli(tmp_path, capsys, matrices):
    a, b, c, d = matrices
    path = _write(tmp_path, "sampled", a, b, c, d, 0.01)
    code = main(["compare", path, path, "--format", "json"])
    out, err = capsys.readouterr()
    assert code == 0, err
    assert "internal error" not in err and "invalid value" not in err
    data = json.loads(out)
    assert data["verdict"] == "equivalent"
    td = next(e for e in data["comparisons"][0]["evidence"] if e["key"] == "time_responses")
    assert td["outcome"] == "pass"


def test_hidden_mode_model_against_its_minimal_part_is_equivalent(tmp_path, capsys):
    # the hidden mode at z = -0.4 is uncontrollable: both models are 1 / (z + 0.5)
    # (Kalman decomposition; Kailath, Linear Systems, 1980, sec. 2.4 -- from memory)
    full = _write(tmp_path, "with_hidden", [[-0.5, 0.0], [0.0, -0.4]], [[1.0], [0.0]],
                  [[1.0, 1.0]], [[0.0]], 0.01)
    minimal = _write(tmp_path, "minimal", [[-0.5]], [[1.0]], [[1.0]], [[0.0]], 0.01)
    assert main(["compare", full, minimal]) == 0
    capsys.readouterr()


def test_horizon_of_a_negative_real_pole_uses_its_complex_logarithm():
    # z = -0.5 = exp(s T) with s = (ln 0.5 + j pi) / T: decay rate ln 2 / T and
    # magnitude sqrt(ln(2)^2 + pi^2) / T (the map z = exp(sT); common practice, no source)
    period = 0.01
    r = Realization.from_arrays([[-0.5]], [[1.0]], [[1.0]], [[0.0]], period)
    h = response_horizon(r)
    assert h.fastest_rate == pytest.approx(math.hypot(math.log(2.0), math.pi) / period, rel=1e-12)
    assert h.slowest_rate == pytest.approx(math.log(2.0) / period, rel=1e-12)
    # settle to 1e-3: ceil(ln(1000) / ln 2) = 10 samples, at least 2n + 2 = 4
    assert h.n_points == 11
    # step response of y[k+1] = -0.5 y[k] + u[k]: y[k] = (1 - (-0.5)^k) / 1.5 (geometric sum)
    y = step_response(r, h.times).outputs[:, 0, 0]
    k = np.arange(h.n_points)
    np.testing.assert_allclose(y, (1.0 - (-0.5) ** k) / 1.5, rtol=0, atol=1e-15)


def _pair(offset: float = 0.0):
    a = np.array([[-0.3, 0.2], [0.0, 0.6]])
    r1 = Realization.from_arrays(a, [[1.0], [1.0]], [[1.0, 0.5]], [[0.2]], 0.1).with_name("ref")
    r2 = Realization.from_arrays(a, [[1.0], [1.0]], [[1.0, 0.5 + offset]], [[0.2]], 0.1).with_name("other")
    return r1, r2


def _boom(*_args, **_kwargs):
    raise ValueError("zero-size array to reduction operation maximum which has no identity")


@pytest.mark.parametrize("builder", ["_markov", "_time_domain", "_static_gains", "_similarity",
                                     "_frequency_grid", "_difference_minimal_order", "_points_evidence"])
def test_a_raising_explanatory_evidence_is_not_computed_and_the_verdict_stands(monkeypatch, builder):
    monkeypatch.setattr(verdict_module, builder, _boom)
    for offset, expected in ((0.0, "equivalent"), (1e-2, "different")):
        pair = compare_pair(*_pair(offset))
        assert pair.verdict == expected
        decisive = [e for e in pair.evidence if e.decisive]
        assert [e.outcome for e in decisive] == ["pass" if expected == "equivalent" else "fail"]
        broken = [e for e in pair.evidence if e.outcome == "not_computed"]
        assert broken, [e.outcome for e in pair.evidence]
        for e in broken:
            assert e.summary.startswith("not computed: ValueError: zero-size array")
            assert e.precision == "-" and e.seconds >= 0.0
            assert e.details["error"] in e.summary
        assert any("could not be computed" in w for w in pair.warnings)


def test_cli_exit_status_is_that_of_the_verdict_when_evidence_fails(monkeypatch, tmp_path, capsys):
    monkeypatch.setattr(verdict_module, "_time_domain", _boom)
    monkeypatch.setattr(verdict_module, "_markov", _boom)
    a = [[-0.3, 0.2], [0.0, 0.6]]
    ref = _write(tmp_path, "ref", a, [[1.0], [1.0]], [[1.0, 0.5]], [[0.2]], 0.1)
    same = _write(tmp_path, "same", a, [[1.0], [1.0]], [[1.0, 0.5]], [[0.2]], 0.1)
    moved = _write(tmp_path, "moved", a, [[1.0], [1.0]], [[1.0, 0.51]], [[0.2]], 0.1)
    assert main(["compare", ref, same]) == 0
    out, _ = capsys.readouterr()
    assert "[not_computed]" in out and "not computed: ValueError" in out
    assert main(["compare", ref, moved, "--format", "json"]) == 1
    data = json.loads(capsys.readouterr()[0])
    outcomes = {e["key"]: e["outcome"] for e in data["comparisons"][0]["evidence"]}
    assert outcomes["markov_parameters"] == outcomes["time_responses"] == "not_computed"
    assert outcomes["difference_peak_gain"] == "fail"


@pytest.mark.parametrize("where", ["_difference_peak", "_shared"])
def test_decisive_evidence_that_cannot_be_computed_is_inconclusive_with_the_reason(monkeypatch, where):
    def trouble(*_args, **_kwargs):
        raise NumericalTroubleError("bilinear transform of the discrete model failed: I + A is singular")

    monkeypatch.setattr(verdict_module, where, trouble)
    pair = compare_pair(*_pair())
    assert pair.verdict == "inconclusive"
    decisive = next(e for e in pair.evidence if e.decisive)
    assert decisive.outcome == "unclear"
    assert "I + A is singular" in decisive.summary and "I + A is singular" in pair.explanation


def test_decisive_bug_is_inconclusive_not_a_crash(monkeypatch, tmp_path, capsys):
    monkeypatch.setattr(verdict_module, "_difference_peak", _boom)
    a = [[-0.3, 0.2], [0.0, 0.6]]
    ref = _write(tmp_path, "ref", a, [[1.0], [1.0]], [[1.0, 0.5]], [[0.2]], 0.1)
    assert main(["compare", ref, ref]) == 3
    out, err = capsys.readouterr()
    assert "internal error" not in err
    assert "could not be computed (ValueError: zero-size array" in out


def test_discretization_claim_that_raises_is_not_computed(monkeypatch):
    import audit.dynamics.discretization_checks as disc_module
    from audit.verdict.compare import compare_discretized

    monkeypatch.setattr(disc_module, "check_discretization_claim", _boom)
    # 1 / (s + 1) and its zero-order-hold sampling at T = 0.1: pole exp(-0.1), gain 1 - exp(-0.1)
    # (zero-order hold of a first-order lag; common practice, no source)
    cont = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]]).with_name("lag")
    disc = Realization.from_arrays([[math.exp(-0.1)]], [[1.0 - math.exp(-0.1)]], [[1.0]], [[0.0]],
                                   0.1).with_name("sampled lag")
    pair = compare_discretized(cont, disc, method=_ZOH)
    assert pair.verdict == "equivalent"
    claim = next(e for e in pair.evidence if e.key == "discretization_claim")
    assert claim.outcome == "not_computed" and "ValueError" in claim.summary


def test_sample_period_ratio_that_raises_still_reports_different(monkeypatch):
    import audit.dynamics.discretization_checks as disc_module
    from audit.verdict.compare import compare_sample_periods

    monkeypatch.setattr(disc_module, "detect_sample_period_mismatch", _boom)
    r1 = Realization.from_arrays([[0.5]], [[1.0]], [[1.0]], [[0.0]], 0.1)
    r2 = Realization.from_arrays([[0.5]], [[1.0]], [[1.0]], [[0.0]], 0.2)
    pair = compare_sample_periods(r1, r2)
    assert pair.verdict == "different"
    assert "not computed (ValueError" in pair.evidence[0].summary


def test_minimal_realization_that_raises_leaves_the_verdict_standing(monkeypatch):
    from audit.workflows.manifest import coordinate_change

    from audit.core.realization import similarity_transformed

    monkeypatch.setattr(verdict_module, "minimal_order_evidence", _boom)
    r1, _ = _pair()
    r2 = similarity_transformed(r1, np.array([[2.0, 1.0], [0.0, 1.0]])).with_name("other")
    pair = compare_pair(r1, r2)
    assert pair.verdict == "equivalent"
    outcomes = {e.key: e.outcome for e in pair.evidence}
    assert outcomes["minimal_order:ref"] == outcomes["minimal_order:other"] == "not_computed"
    # these need the minimal parts: not computed, with the reason
    for key in ("poles", "zeros", "similarity"):
        assert outcomes[key] == "not_computed"
    assert outcomes["difference_peak_gain"] == "pass"
    kind, words, settled = coordinate_change(r1, r2, pair)
    assert kind == "transfer_only" and not settled and "could not be computed" in words
