"""python-control and scipy.signal objects in, and out of, lti-audit (audit.documents.interop)."""

from __future__ import annotations

import numpy as np
import pytest

control = pytest.importorskip("control")
import scipy.signal  # noqa: E402

import audit  # noqa: E402
from audit.errors import InvalidModelError  # noqa: E402
from audit.evidence.frequency import frequency_response  # noqa: E402
from audit.documents.interop import realization_from_object  # noqa: E402
from audit.pytest_plugin import assert_same_system  # noqa: E402
from audit.core.realization import Realization  # noqa: E402

W = np.logspace(-2, 3, 60)

# an invented scenario: a supplier's valve actuator, 12 (s + 4) / ((s + 2)(s^2 + 6 s + 90))
NUM = [12.0, 48.0]
DEN = list(np.polymul([1.0, 2.0], [1.0, 6.0, 90.0]))


def _closed_form(w: np.ndarray) -> np.ndarray:
    s = 1j * w
    return 12.0 * (s + 4.0) / ((s + 2.0) * (s * s + 6.0 * s + 90.0))


@pytest.mark.parametrize("make", [
    pytest.param(lambda: control.tf(NUM, DEN), id="control-transfer-function"),
    pytest.param(lambda: control.ss(control.tf(NUM, DEN)), id="control-state-space"),
    pytest.param(lambda: scipy.signal.TransferFunction(NUM, DEN), id="scipy-transfer-function"),
    pytest.param(lambda: scipy.signal.TransferFunction(NUM, DEN).to_ss(), id="scipy-state-space"),
    pytest.param(lambda: scipy.signal.ZerosPolesGain(
        [-4.0], np.roots(DEN), 12.0), id="scipy.zeros-poles-gain"),
])
def test_foreign_objects_keep_their_transfer_function(make) -> None:
    r = realization_from_object(make())
    assert not r.is_discrete and r.order == 3
    # closed form of the invented transfer function (evaluated directly, no library)
    np.testing.assert_allclose(frequency_response(r, W)[:, 0, 0], _closed_form(W), rtol=1e-10)


def test_python_api_and_plugin_take_the_objects_a_team_already_has() -> None:
    plant = control.tf(NUM, DEN)
    refactored = control.ss(plant)  # python-control's own realization of it
    assert audit.compare_pair(plant, refactored).verdict == "equivalent"
    assert_same_system(plant, scipy.signal.TransferFunction(NUM, DEN))
    detuned = control.tf([12.0, 48.5], DEN)  # zero moved from -4 to -4.04: about 1 % off
    with pytest.raises(AssertionError, match="DIFFERENT"):
        assert_same_system(plant, detuned)


def test_mimo_and_discrete_objects() -> None:
    # 2 outputs x 1 input, discrete at 0.05 s (python-control MIMO transfer function)
    g = control.tf([[[0.5]], [[1.0, -0.2]]], [[[1.0, -0.9]], [[1.0, -0.5]]], 0.05)
    r = realization_from_object(g)
    assert (r.n_outputs, r.n_inputs, r.sample_period) == (2, 1, 0.05)
    z = np.exp(1j * W[:20] * 0.05)
    expected = np.stack([0.5 / (z - 0.9), (z - 0.2) / (z - 0.5)], axis=1)  # closed form
    np.testing.assert_allclose(frequency_response(r, W[:20])[:, :, 0], expected, rtol=1e-10)
    # scipy's SIMO transfer function (num rows = outputs), discrete
    t = scipy.signal.TransferFunction([[0.0, 0.5], [1.0, -0.2]], [1.0, -0.9], dt=0.05)
    rt = realization_from_object(t)
    assert (rt.n_outputs, rt.sample_period) == (2, 0.05)


def test_realization_round_trips_through_both_libraries() -> None:
    rng = np.random.default_rng(7)
    a = np.diag([-1.0, -3.0, -7.0]) + 0.1 * rng.standard_normal((3, 3))
    r = Realization.from_arrays(a, rng.standard_normal((3, 2)), rng.standard_normal((2, 3)),
                                np.zeros((2, 2)), name="conveyor drive")
    for back in (Realization.from_object(r.to_python_control()),
                 Realization.from_object(r.to_scipy())):
        for x, y in ((back.a, r.a), (back.b, r.b), (back.c, r.c), (back.d, r.d)):
            np.testing.assert_array_equal(x, y)  # the stored numbers are kept exactly
    assert r.to_python_control().dt == 0 and r.to_scipy().dt is None
    assert Realization.from_object(r.to_python_control()).name == "conveyor drive"
    d = r.with_matrices(0.5 * np.eye(3), r.b, r.c)
    d = Realization(d.a, d.b, d.c, d.d, 0.1, "sampled")
    assert r.to_scipy().__class__.__name__.startswith("StateSpace")
    assert d.to_scipy().dt == 0.1 and d.to_python_control().dt == 0.1


@pytest.mark.parametrize(("obj", "fragment"), [
    pytest.param(lambda: control.ss([[0.5]], [[1.0]], [[1.0]], [[0.0]], True),
                 "unspecified sample period", id="control-dt-true"),
    pytest.param(lambda: np.eye(2), "expected a Realization, a python-control", id="ndarray"),
])
def test_unsupported_objects_get_a_clear_error(obj, fragment: str) -> None:
    with pytest.raises(InvalidModelError, match=fragment):
        realization_from_object(obj())


def test_readme_interop_example_runs() -> None:
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    section = readme.split("### Python objects you already have", 1)[1]
    code = section.split("```python\n", 1)[1].split("```", 1)[0]
    namespace: dict = {}
    exec(compile(code, "README.md", "exec"), namespace)  # noqa: S102 - our own README
    assert namespace["scipy_copy"].__class__.__name__.startswith("StateSpace")
