"""Tests for audit.dynamics.time_responses and response_comparison against closed forms and scipy.signal.

References used: first/second-order closed forms (Ogata, Modern Control Engineering,
5th ed., sec. 5-3 -- from memory), scipy.signal.step / impulse / lsim / dstep / dimpulse,
scipy.signal.cont2discrete (independent ZOH), python-control forced_response.
"""

from __future__ import annotations

import json
import math

import control
import numpy as np
import pytest
import scipy.linalg
import scipy.signal as sig
from hypothesis import given, settings
from hypothesis import strategies as st

from audit.errors import IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization, similarity_transformed
from audit.dynamics.response_comparison import compare_time_responses
from audit.dynamics.time_responses import (
    impulse_response,
    initial_condition_response,
    piecewise_constant_response,
    response_horizon,
    step_response,
)


def _mimo() -> Realization:
    # invented demo data: 3 states, 2 inputs, 2 outputs, stable, with feedthrough
    a = np.array([[-1.0, 2.0, 0.0], [-3.0, -4.0, 1.0], [0.5, 0.0, -0.3]])
    b = np.array([[1.0, 0.0], [0.5, -1.0], [0.0, 2.0]])
    c = np.array([[1.0, -1.0, 0.0], [0.0, 0.3, 1.0]])
    d = np.array([[0.1, 0.0], [0.0, -0.2]])
    return Realization.from_arrays(a, b, c, d)


def _random_stable(seed: int, n: int, m: int, p: int) -> Realization:
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((n, n))
    a = a - (np.max(np.linalg.eigvals(a).real) + 0.3) * np.eye(n)
    return Realization.from_arrays(a, rng.standard_normal((n, m)), rng.standard_normal((p, n)),
                                   rng.standard_normal((p, m)))


# ------------------------------------------------------------------ closed forms
@pytest.mark.parametrize("tau", [1e-3, 0.5, 200.0])
def test_first_order_step_reaches_63_percent_at_tau(tau: float) -> None:
    r = Realization.from_arrays([[-1.0 / tau]], [[1.0 / tau]], [[1.0]], [[0.0]])
    t = np.linspace(0.0, 5 * tau, 51)  # tau is at index 10
    y = step_response(r, t).outputs[:, 0, 0]
    # closed form (Ogata, Modern Control Engineering, 5th ed., sec. 5-2, from memory):
    # y = 1 - exp(-t/tau); 63.2 % at t = tau
    np.testing.assert_allclose(y[10], 1.0 - math.exp(-1.0), rtol=1e-13)
    np.testing.assert_allclose(y, -np.expm1(-t / tau), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("zeta,wn", [(0.2, 1.0), (0.5, 30.0), (0.05, 2.0)])
def test_second_order_overshoot_and_peak_time(zeta: float, wn: float) -> None:
    a = [[0.0, 1.0], [-wn * wn, -2 * zeta * wn]]
    r = Realization.from_arrays(a, [[0.0], [wn * wn]], [[1.0, 0.0]], [[0.0]])
    wd = wn * math.sqrt(1 - zeta * zeta)
    tp = math.pi / wd
    t = np.array([0.0, 0.999 * tp, tp, 1.001 * tp])
    y = step_response(r, t).outputs[:, 0, 0]
    # closed form (Ogata, Modern Control Engineering, 5th ed., sec. 5-3, from memory):
    # peak time pi/(wn sqrt(1-zeta^2)), overshoot exp(-zeta pi / sqrt(1-zeta^2))
    overshoot = math.exp(-zeta * math.pi / math.sqrt(1 - zeta * zeta))
    np.testing.assert_allclose(y[2], 1.0 + overshoot, rtol=1e-12)
    assert y[1] < y[2] and y[3] < y[2]


def test_stiff_diagonal_model_exact() -> None:
    lam = np.array([-1e-3, -1.0, -1e6])
    r = Realization.from_arrays(np.diag(lam), np.ones((3, 1)), np.ones((1, 3)), [[0.0]])
    t = np.linspace(0.0, 10.0, 101)
    y = step_response(r, t).outputs[:, 0, 0]
    # closed form, common practice, no source: sum_i (exp(lam_i t) - 1)/lam_i
    ref = np.sum(np.expm1(np.outer(t, lam)) / lam, axis=1)
    np.testing.assert_allclose(y, ref, rtol=1e-12, atol=1e-15)


# ------------------------------------------------------------- scipy references
def test_step_and_impulse_match_scipy_per_input() -> None:
    r = _mimo()
    t = np.linspace(0.0, 8.0, 401)
    s = step_response(r, t)
    im = impulse_response(r, t)
    assert s.outputs.shape == (401, 2, 2) and im.outputs.shape == (401, 2, 2)
    np.testing.assert_allclose(im.impulse_feedthrough, r.d, rtol=0, atol=0)  # documented: D stored as-is
    for j in range(2):
        for i in range(2):
            # independent: scipy.signal.step / scipy.signal.impulse (SISO channel i <- j)
            _, ys = sig.step((r.a, r.b[:, [j]], r.c[[i], :], r.d[[i]][:, [j]]), T=t)
            _, yi = sig.impulse((r.a, r.b[:, [j]], r.c[[i], :], np.zeros((1, 1))), T=t)
            np.testing.assert_allclose(s.outputs[:, i, j], ys, rtol=1e-9, atol=1e-12)
            np.testing.assert_allclose(im.outputs[:, i, j], yi, rtol=1e-9, atol=1e-12)


def test_piecewise_constant_matches_scipy_lsim_zoh() -> None:
    r = _mimo()
    t = np.arange(300) * 0.02
    rng = np.random.default_rng(4)
    u = rng.standard_normal((t.size, 2))
    x0 = np.array([1.0, -2.0, 0.5])
    res = piecewise_constant_response(r, t, u, x0)
    # independent: scipy.signal.lsim with interp=False (zero-order hold of the input)
    _, y_ref, x_ref = sig.lsim((r.a, r.b, r.c, r.d), u, t, X0=x0, interp=False)
    np.testing.assert_allclose(res.outputs, y_ref, rtol=1e-9, atol=1e-11)
    np.testing.assert_allclose(res.states, x_ref, rtol=1e-9, atol=1e-11)


def test_initial_condition_matches_python_control() -> None:
    r = _mimo()
    t = np.linspace(0.0, 5.0, 251)
    x0 = np.array([0.3, -1.0, 2.0])
    res = initial_condition_response(r, x0, t)
    # independent: python-control initial_response
    ref = control.initial_response(control.ss(r.a, r.b, r.c, r.d), T=t, X0=x0)
    np.testing.assert_allclose(res.outputs, np.asarray(ref.outputs).T, rtol=1e-8, atol=1e-10)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(1, 6), log_h=st.floats(-3.0, -0.5))
def test_property_step_matches_scipy_lsim(seed: int, n: int, log_h: float) -> None:
    r = _random_stable(seed, n, 1, 1)
    h = 10.0**log_h
    t = np.arange(120) * h
    y = step_response(r, t).outputs[:, 0, 0]
    # independent: scipy.signal.lsim with a constant input held by zero-order hold
    _, y_ref, _ = sig.lsim((r.a, r.b, r.c, r.d), np.ones(t.size), t, interp=False)
    scale = max(1.0, float(np.max(np.abs(y_ref))))
    np.testing.assert_allclose(y, y_ref, rtol=0, atol=1e-9 * scale)


# ---------------------------------------------------------------- discrete models
def test_discrete_step_and_impulse_match_scipy_dstep_dimpulse() -> None:
    r = _mimo()
    period = 0.1
    # independent: discretization by scipy.signal.cont2discrete('zoh')
    ad, bd, cd, dd, _ = sig.cont2discrete((r.a, r.b, r.c, r.d), period, method="zoh")
    d = Realization.from_arrays(ad, bd, cd, dd, period)
    t = np.arange(60) * period
    s = step_response(d, t).outputs
    im = impulse_response(d, t).outputs
    # independent: scipy.signal.dstep / scipy.signal.dimpulse (tuple per input)
    _, ys = sig.dstep((ad, bd, cd, dd, period), n=60)
    _, yi = sig.dimpulse((ad, bd, cd, dd, period), n=60)
    for j in range(2):
        np.testing.assert_allclose(s[:, :, j], ys[j], rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(im[:, :, j], yi[j], rtol=1e-12, atol=1e-14)


def test_sampled_continuous_step_equals_zoh_discretized_step() -> None:
    r = _mimo()
    period = 0.05
    # independent: ZOH model from scipy.signal.cont2discrete
    ad, bd, cd, dd, _ = sig.cont2discrete((r.a, r.b, r.c, r.d), period, method="zoh")
    d = Realization.from_arrays(ad, bd, cd, dd, period)
    t = np.arange(0, 200, 3) * period  # every third sample, starting at 0
    yc = step_response(r, t).outputs
    yd = step_response(d, t).outputs
    # closed form, common practice, no source: ZOH is exact for a step input
    np.testing.assert_allclose(yc, yd, rtol=1e-10, atol=1e-12)


def test_discrete_piecewise_input_held_between_sparse_times() -> None:
    d = Realization.from_arrays([[0.5]], [[1.0]], [[1.0]], [[0.0]], 1.0)
    t = np.array([0.0, 2.0, 3.0])
    res = piecewise_constant_response(d, t, [1.0, -1.0, 0.0])
    # closed form (hand computation): x1 = 1, x2 = 1.5 (u = 1 twice), x3 = 0.75 - 1 = -0.25
    np.testing.assert_allclose(res.outputs[:, 0], [0.0, 1.5, -0.25], rtol=1e-15, atol=1e-15)


# ------------------------------------------------------------------- time grids
def test_nonuniform_grid_and_late_start_agree_with_uniform_grid() -> None:
    r = _mimo()
    fine = np.linspace(0.0, 6.0, 601)
    ref = step_response(r, fine).outputs
    idx = np.array([5, 7, 30, 31, 200, 600])
    sub = step_response(r, fine[idx]).outputs
    np.testing.assert_allclose(sub, ref[idx], rtol=1e-11, atol=1e-13)
    # independent: closed form y(t) = C A^-1 (e^{At} - I) B + D per time point, with
    # scipy.linalg.expm and numpy.linalg.solve
    for k, tk in enumerate(fine[idx]):
        yk = r.c @ np.linalg.solve(r.a, (scipy.linalg.expm(r.a * tk) - np.eye(3)) @ r.b) + r.d
        np.testing.assert_allclose(sub[k], yk, rtol=1e-10, atol=1e-12)


# -------------------------------------------------------------------- horizon
def test_response_horizon_first_order() -> None:
    tau = 0.25
    r = Realization.from_arrays([[-1.0 / tau]], [[1.0]], [[1.0]], [[0.0]])
    h = response_horizon(r, settle_fraction=1e-3)
    # closed form: horizon = tau ln(1000); step tau/10 -> 10 points per time constant
    np.testing.assert_allclose(h.horizon, tau * math.log(1000.0), rtol=0.02)
    np.testing.assert_allclose(h.time_step, tau / 10.0, rtol=1e-12)
    assert not h.capped


def test_response_horizon_stiff_capped_unstable_marginal_discrete() -> None:
    stiff = Realization.from_arrays(np.diag([-1e-2, -1e4]), np.ones((2, 1)), np.ones((1, 2)), [[0.0]])
    h = response_horizon(stiff, max_points=5000)
    assert h.capped and h.n_points == 5000
    np.testing.assert_allclose(h.horizon, 100.0 * math.log(1000.0), rtol=1e-9)  # closed form: ln(1000)/0.01
    unstable = Realization.from_arrays(np.diag([-0.1, 0.5]), np.ones((2, 1)), np.ones((1, 2)), [[0.0]])
    hu = response_horizon(unstable)
    # closed form: the unstable mode caps the horizon at growth by 1000, ln(1000)/0.5
    # (the stable mode alone would ask for ln(1000)/0.1)
    np.testing.assert_allclose(hu.horizon, 2.0 * math.log(1000.0), rtol=0.02)
    osc = Realization.from_arrays([[0.0, 2.0], [-2.0, 0.0]], [[0.0], [1.0]], [[1.0, 0.0]], [[0.0]])
    ho = response_horizon(osc)
    np.testing.assert_allclose(ho.horizon, 5 * math.pi, rtol=0.02)  # closed form: 5 periods of 2 pi / 2
    disc = Realization.from_arrays([[0.9]], [[1.0]], [[1.0]], [[0.0]], 0.01)
    hd = response_horizon(disc)
    assert hd.time_step == 0.01
    # closed form: samples for 0.9^k to reach 1e-3 = ln(1e-3)/ln(0.9)
    np.testing.assert_allclose(hd.n_points - 1, math.ceil(math.log(1e-3) / math.log(0.9)), atol=1)
    json.dumps(hd.as_dict())


# ----------------------------------------------------------------- comparison
def test_compare_similar_models_same_and_transform_checked() -> None:
    r1 = _mimo()
    t = np.array([[1.0, 2.0, 0.0], [0.0, 1.0, -1.0], [3.0, 0.0, 1.0]])
    r2 = similarity_transformed(r1, t)
    res = compare_time_responses(r1, r2, rtol=1e-9, transform=t)
    assert res.outcome == "same"
    assert [d.kind for d in res.differences] == ["step", "impulse", "initial_condition"]
    assert res.relative_peak_difference <= 1e-9
    # a wrong transform is caught by the initial-condition comparison only
    res_bad = compare_time_responses(r1, r2, rtol=1e-9, transform=np.eye(3))
    assert res_bad.outcome == "different"
    assert res_bad.differences[0].relative_difference <= 1e-9
    assert res_bad.differences[2].relative_difference > 1e-3
    json.dumps(res_bad.as_dict())


def test_compare_detects_moved_pole_and_time_of_largest_difference() -> None:
    r1 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    r2 = Realization.from_arrays([[-1.1]], [[1.1]], [[1.0]], [[0.0]])  # same DC gain
    res = compare_time_responses(r1, r2, rtol=1e-6)
    assert res.outcome == "different"
    step = res.differences[0]
    # closed form: |e^{-t} - e^{-1.1 t}| peaks at t = ln(1.1)/0.1; the grid (step 1/11 s)
    # reports the nearest grid time, where the difference has the closed-form value
    t_star = math.log(1.1) / 0.1
    np.testing.assert_allclose(step.time, t_star, atol=0.1)
    at_grid = math.exp(-step.time) - math.exp(-1.1 * step.time)
    np.testing.assert_allclose(step.absolute_difference, at_grid, rtol=1e-10)
    np.testing.assert_allclose(step.relative_difference, at_grid / 1.0, rtol=2e-3)  # peak of step -> 1


def test_compare_discrete_models() -> None:
    d1 = Realization.from_arrays([[0.8]], [[1.0]], [[1.0]], [[0.0]], 0.1)
    d2 = Realization.from_arrays([[0.8]], [[2.0]], [[0.5]], [[0.0]], 0.1)
    assert compare_time_responses(d1, d2, rtol=1e-12).outcome == "same"
    d3 = Realization.from_arrays([[0.8]], [[1.0]], [[1.0]], [[0.01]], 0.1)
    res = compare_time_responses(d1, d3, rtol=1e-6)
    assert res.outcome == "different"
    # closed form: impulse differs only at k = 0 by 0.01, peak of d3's impulse is 1 (k = 1)
    np.testing.assert_allclose(res.differences[1].absolute_difference, 0.01, rtol=1e-12)
    assert res.differences[1].time == 0.0


# ------------------------------------------------------------------- bad inputs
_R = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
_D = Realization.from_arrays([[0.5]], [[1.0]], [[1.0]], [[0.0]], 0.1)


@pytest.mark.parametrize(
    "call,exc,fragment",
    [
        pytest.param(lambda: step_response(_R, [0.0, 1.0, 0.5]), InvalidModelError,
                     "times: is not strictly increasing", id="not-increasing"),
        pytest.param(lambda: step_response(_R, [-1.0, 1.0]), InvalidModelError,
                     "times: starts at -1.0 but times >= 0 were expected", id="negative-time"),
        pytest.param(lambda: step_response(_R, [0.0, float("nan")]), InvalidModelError,
                     "times: contains NaN or infinity", id="nan-time"),
        pytest.param(lambda: step_response(_R, [[0.0, 1.0]]), InvalidModelError,
                     "times: has shape (1, 2) but a non-empty 1-D array was expected", id="2d-times"),
        pytest.param(lambda: step_response(_R, []), InvalidModelError, "non-empty", id="empty-times"),
        pytest.param(lambda: step_response(_D, [0.0, 0.15]), InvalidModelError,
                     "times: 0.15 is not a multiple of the sample period 0.1 s", id="off-grid"),
        pytest.param(lambda: initial_condition_response(_R, [1.0, 2.0], [0.0, 1.0]), InvalidModelError,
                     "x0: has 2 entries but the model has 1 states", id="x0-length"),
        pytest.param(lambda: piecewise_constant_response(_R, [0.0, 1.0], [[1.0, 2.0]]), InvalidModelError,
                     "inputs: has shape (1, 2) but (2, 1) was expected", id="inputs-shape"),
        pytest.param(lambda: compare_time_responses(_R, _D, rtol=1e-6), IncompatibleModelsError,
                     "continuous-time", id="mixed-domains"),
        pytest.param(lambda: compare_time_responses(_R, _R, rtol=1e-6, transform=np.eye(2)),
                     InvalidModelError, "transform: has shape (2, 2) but (1, 1) was expected", id="transform-shape"),
        pytest.param(lambda: response_horizon(_R, settle_fraction=2.0), InvalidModelError,
                     "settle_fraction: got 2.0", id="settle-fraction"),
        pytest.param(lambda: step_response(Realization.from_arrays([[50.0]], [[1.0]], [[1.0]], [[0.0]]),
                                           np.linspace(0, 100, 11)), NumericalTroubleError,
                     "overflow", id="overflow"),
    ],
)
def test_bad_inputs(call, exc: type, fragment: str) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(exc) as info:
        call()
    assert fragment in str(info.value)


def test_as_dict_is_json() -> None:
    r = _mimo()
    res = impulse_response(r, np.linspace(0, 1, 5))
    doc = json.loads(json.dumps(res.as_dict()))
    assert doc["kind"] == "impulse" and len(doc["outputs"]) == 5
