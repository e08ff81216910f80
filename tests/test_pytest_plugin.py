"""The pytest plugin: the entry point, the assertion helper and the lti_audit fixture.

Ground truth by construction: a change of state coordinates keeps the transfer function
(closed form); a doubled output gain does not (closed form).
"""

from __future__ import annotations

import tomllib
from importlib import metadata
from pathlib import Path

import numpy as np
import pytest

from audit.errors import IncompatibleModelsError, InvalidModelError
from audit.pytest_plugin import assert_same_system
from audit.core.realization import Realization

pytest_plugins = ["pytester"]

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "fixtures" / "example_repo" / "models"

G = Realization.from_arrays([[-1.0, 0.0], [0.0, -4.0]], [[1.0], [1.0]], [[1.0, 1.0]], [[0.0]],
                            name="g")


def doc(c: list[list[float]], name: str = "plant") -> dict:
    return {"lti_model": 1, "name": name, "sample_period": None,
            "state_space": {"a": [[-1.0, 0.0], [0.0, -4.0]], "b": [[1.0], [1.0]], "c": c,
                            "d": [[0.0]]}}


def test_entry_point_is_declared_and_installed() -> None:
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())
    assert project["project"]["entry-points"]["pytest11"] == {"lti_audit": "audit.pytest_plugin"}
    installed = {ep.name: ep.value for ep in metadata.entry_points(group="pytest11")}
    if "lti_audit" not in installed:  # pragma: no cover - stale editable install
        pytest.skip("package installed before the entry point was added; reinstall it")
    assert installed["lti_audit"] == "audit.pytest_plugin"


def test_helper_accepts_paths_realizations_and_dicts() -> None:
    t = np.array([[2.0, 1.0], [0.0, 1.0]])
    moved = Realization.from_arrays(
        np.linalg.solve(t.T, (t @ G.a).T).T, t @ G.b, np.linalg.solve(t.T, G.c.T).T, G.d)
    assert assert_same_system(G, moved).verdict == "equivalent"
    assert assert_same_system(doc([[1.0, 1.0]]), G).verdict == "equivalent"
    assert assert_same_system(EXAMPLE / "pitch_axis_tf.json",
                              str(EXAMPLE / "pitch_axis_ss.json"), rtol=1e-8).verdict == "equivalent"


def test_failure_message_is_the_diagnosis() -> None:
    with pytest.raises(AssertionError) as info:
        assert_same_system(doc([[1.0, 1.0]], "reference"), doc([[2.0, 2.0]], "candidate"))
    text = str(info.value)
    assert text.startswith("lti-audit: models are DIFFERENT\ncandidate does not have the same "
                           "transfer function as reference")
    assert "constant factor on output 0 (x2): consistent with a unit change" in text
    assert "decisive evidence: Peak gain of the difference G1 - G2" in text


def test_bad_input_raises_our_errors() -> None:
    with pytest.raises(InvalidModelError, match="b: got int, expected a path to a model file"):
        assert_same_system(G, 3)
    with pytest.raises(InvalidModelError, match=r"a \(model-document dict\): state_space.c"):
        assert_same_system(doc([[1.0]]), G)
    with pytest.raises(InvalidModelError, match="no/such.json: file not found"):
        assert_same_system("no/such.json", G)
    two_inputs = Realization.from_arrays([[-1.0]], [[1.0, 1.0]], [[1.0]], [[0.0, 0.0]])
    with pytest.raises(IncompatibleModelsError):
        assert_same_system(G, two_inputs)


TEST_FILE = """
import json

def doc(gain):
    return {"lti_model": 1, "name": "plant", "sample_period": None,
            "state_space": {"a": [[-1.0]], "b": [[1.0]], "c": [[gain]], "d": [[0.0]]}}

def test_same(lti_audit):
    lti_audit.assert_same_system(doc(1.0), doc(1.0))

def test_small_change(lti_audit):
    lti_audit.assert_same_system(doc(1.0), doc(1.0 + 1e-3))

def test_rtol_is_visible(lti_audit):
    assert lti_audit.rtol == EXPECTED_RTOL
"""


def _run(pytester: pytest.Pytester, monkeypatch: pytest.MonkeyPatch, expected_rtol: float,
         *args: str) -> pytest.RunResult:
    # Load the plugin explicitly (and not twice through the installed entry point).
    monkeypatch.setenv("PYTEST_DISABLE_PLUGIN_AUTOLOAD", "1")
    pytester.makepyfile(test_models=TEST_FILE.replace("EXPECTED_RTOL", repr(expected_rtol)))
    return pytester.runpytest_inprocess("-p", "audit.pytest_plugin", "-p", "no:cacheprovider",
                                        *args)


def test_fixture_with_default_rtol_reports_the_diagnosis(pytester, monkeypatch) -> None:
    result = _run(pytester, monkeypatch, 1e-5)
    # closed form: c = 1 + 1e-3 changes the peak gain by 1e-3 / (1 + 1e-3) > 1e-5
    result.assert_outcomes(passed=2, failed=1)
    result.stdout.fnmatch_lines([
        "*AssertionError: lti-audit: models are DIFFERENT*",
        "*does not have the same transfer function as*",
        "*constant factor on output 0 (x1.001): consistent with a unit change*",
    ])


def test_rtol_from_command_line_and_ini(pytester, monkeypatch) -> None:
    _run(pytester, monkeypatch, 2e-3, "--lti-audit-rtol", "2e-3").assert_outcomes(passed=3)
    pytester.makeini("[pytest]\nlti_audit_rtol = 5e-3\n")
    _run(pytester, monkeypatch, 5e-3).assert_outcomes(passed=3)
    _run(pytester, monkeypatch, 1e-4, "--lti-audit-rtol", "1e-4").assert_outcomes(passed=2,
                                                                                   failed=1)
    result = _run(pytester, monkeypatch, 1e-3, "--lti-audit-rtol", "abc")
    result.assert_outcomes(errors=3)
    result.stdout.fnmatch_lines(["*--lti-audit-rtol: expected a number between 0 and 1*"])
