"""Tests for audit.dynamics.discretization and discretization_checks against outside references.

References used: scipy.signal.cont2discrete (its methods 'zoh', 'foh', 'bilinear', 'impulse'
against our zero-order-hold, triangle-hold, bilinear, impulse-invariant),
scipy.signal.lsim (linear input interpolation = triangle hold), python-control
sample_system (its 'matched' and 'tustin' with prewarp against our matched-pole-zero and
bilinear), SLICOT AB04MD example data, closed forms.
"""

from __future__ import annotations

import json
import math

import control
import numpy as np
import pytest
import scipy.signal as sig
from hypothesis import given, settings
from hypothesis import strategies as st

from audit.dynamics.discretization import discretize, transfer_values, zero_order_hold_pair
from audit.dynamics.discretization_checks import check_discretization_claim, detect_sample_period_mismatch
from audit.errors import IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization


def _mimo() -> Realization:
    # invented demo data: 3 states, 2 inputs, 2 outputs, stable
    a = np.array([[-1.0, 2.0, 0.0], [-3.0, -4.0, 1.0], [0.5, 0.0, -0.3]])
    b = np.array([[1.0, 0.0], [0.5, -1.0], [0.0, 2.0]])
    c = np.array([[1.0, -1.0, 0.0], [0.0, 0.3, 1.0]])
    d = np.zeros((2, 2))
    return Realization.from_arrays(a, b, c, d)


def _random_stable(seed: int, n: int, m: int, p: int, with_d: bool = True) -> Realization:
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((n, n))
    a = a - (np.max(np.linalg.eigvals(a).real) + 0.5) * np.eye(n)
    d = rng.standard_normal((p, m)) if with_d else np.zeros((p, m))
    return Realization.from_arrays(a, rng.standard_normal((n, m)), rng.standard_normal((p, n)), d)


def _tf_close(r1: Realization, r2: Realization, pts: np.ndarray) -> float:
    g1, g2 = transfer_values(r1, pts), transfer_values(r2, pts)
    return float(np.max(np.abs(g1 - g2)) / np.max(np.abs(g1)))


# ------------------------------------------------------------- scipy reference
@pytest.mark.parametrize("method,scipy_method", [("zero-order-hold", "zoh"), ("triangle-hold", "foh"),
                                                 ("impulse-invariant", "impulse")])
@pytest.mark.parametrize("period", [1e-3, 0.1, 2.0])
def test_matrices_match_scipy_cont2discrete(method: str, scipy_method: str, period: float) -> None:
    r = _mimo()
    d = discretize(r, period, method=method)  # type: ignore[arg-type]
    # independent: scipy.signal.cont2discrete with the same method
    ad, bd, cd, dd, dt = sig.cont2discrete((r.a, r.b, r.c, r.d), period, method=scipy_method)
    assert d.sample_period == dt
    for ours, ref in ((d.a, ad), (d.b, bd), (d.c, cd), (d.d, dd)):
        np.testing.assert_allclose(ours, ref, rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("period", [1e-3, 0.1, 2.0])
def test_bilinear_matches_scipy_bilinear_up_to_documented_io_scaling(period: float) -> None:
    r = _mimo()
    d = discretize(r, period, method="bilinear")
    # independent: scipy.signal.cont2discrete(method='bilinear') puts the factor T on B;
    # we split it symmetrically as sqrt(T) on B and on C (SLICOT AB04MD convention).
    ad, bd, cd, dd, _ = sig.cont2discrete((r.a, r.b, r.c, r.d), period, method="bilinear")
    np.testing.assert_allclose(d.a, ad, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(d.d, dd, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(d.b, bd / math.sqrt(period), rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(d.c, cd * math.sqrt(period), rtol=1e-12, atol=1e-14)


@settings(max_examples=30, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    n=st.integers(1, 6),
    m=st.integers(1, 3),
    p=st.integers(1, 3),
    log_period=st.floats(-3.0, 0.5),
    method=st.sampled_from(["zero-order-hold", "triangle-hold", "bilinear"]),
)
def test_property_transfer_function_matches_scipy(
    seed: int, n: int, m: int, p: int, log_period: float, method: str
) -> None:
    r = _random_stable(seed, n, m, p)
    period = 10.0**log_period
    d = discretize(r, period, method=method)  # type: ignore[arg-type]
    scipy_method = {"zero-order-hold": "zoh", "triangle-hold": "foh"}.get(method, method)
    # independent: scipy.signal.cont2discrete, compared as transfer functions on the unit circle
    ref = Realization.from_arrays(*sig.cont2discrete((r.a, r.b, r.c, r.d), period, method=scipy_method)[:4], period)
    z = np.exp(1j * np.linspace(0.01, math.pi, 50))
    assert _tf_close(d, ref, z) <= 1e-9


def test_triangle_hold_is_exact_for_linearly_interpolated_inputs() -> None:
    r = _mimo()
    period = 0.05
    t = np.arange(200) * period
    rng = np.random.default_rng(1)
    u = rng.standard_normal((t.size, 2))
    u[0] = 0.0  # start at rest: the FOH state xi = x - Gamma2 u is then 0 as well
    d = discretize(r, period, method="triangle-hold")
    x = np.zeros(d.order)
    y = np.empty((t.size, 2))
    for k in range(t.size):
        y[k] = d.c @ x + d.d @ u[k]
        x = d.a @ x + d.b @ u[k]
    # independent: scipy.signal.lsim with interp=True (linear interpolation of the input,
    # i.e. the triangle hold) on the continuous model
    _, y_ref, _ = sig.lsim((r.a, r.b, r.c, r.d), u, t, interp=True)
    np.testing.assert_allclose(y, y_ref, rtol=0, atol=1e-10 * np.max(np.abs(y_ref)))


# ----------------------------------------------------------------- closed forms
@pytest.mark.parametrize("a,period", [(1.0, 0.1), (50.0, 0.01), (0.02, 3.0), (-0.5, 0.2)])
def test_zero_order_hold_first_order_closed_form(a: float, period: float) -> None:
    r = Realization.from_arrays([[-a]], [[1.0]], [[1.0]], [[0.0]])
    d = discretize(r, period, method="zero-order-hold")
    # closed form, common practice, no source: ZOH of 1/(s+a) is g/(z - e^{-aT}),
    # g = (1 - e^{-aT})/a
    np.testing.assert_allclose(d.a[0, 0], math.exp(-a * period), rtol=1e-14)
    np.testing.assert_allclose(d.b[0, 0] * d.c[0, 0], -math.expm1(-a * period) / a, rtol=1e-13)


def test_zero_order_hold_pair_van_loan_double_integrator() -> None:
    # closed form, common practice, no source: double integrator, Phi = [[1, h], [0, 1]],
    # Gamma = [h^2/2, h]
    h = 0.3
    phi, gam = zero_order_hold_pair(np.array([[0.0, 1.0], [0.0, 0.0]]), np.array([[0.0], [1.0]]), h)
    np.testing.assert_allclose(phi, [[1.0, h], [0.0, 1.0]], rtol=1e-15, atol=1e-16)
    np.testing.assert_allclose(gam, [[h * h / 2], [h]], rtol=1e-15, atol=1e-16)


def test_impulse_invariant_samples_and_feedthrough_convention() -> None:
    r = _random_stable(7, 3, 1, 1, with_d=True)
    period = 0.1
    d = discretize(r, period, method="impulse-invariant")
    k = np.arange(30)
    # independent: scipy.signal.impulse of the strictly proper part, h(kT)
    _, h = sig.impulse((r.a, r.b, r.c, np.zeros((1, 1))), T=k * period)
    markov = [d.d[0, 0]]
    v = d.b
    for _ in range(29):
        markov.append(float((d.c @ v)[0, 0]))
        v = d.a @ v
    np.testing.assert_allclose(markov[1:], period * h[1:], rtol=1e-10, atol=1e-14)
    # documented D/T convention: first sample T h(0) + D
    np.testing.assert_allclose(markov[0], period * h[0] + r.d[0, 0], rtol=1e-12)


# ----------------------------------------------------------------- SLICOT AB04MD
def test_bilinear_matches_slicot_ab04md_example() -> None:
    # SLICOT AB04MD example data (examples/AB04MD.dat; doc/AB04MD.html: matrices read
    # column by column); TYPE='C', ALPHA=BETA=1, i.e. s -> z = (1 + s)/(1 - s), which is
    # our Tustin map with alpha = T/2 = 1, so T = 2.
    a = np.array([[1.0, 0.5], [0.5, 1.0]])
    b = np.array([[0.0, 1.0], [-1.0, 0.0]])
    c = np.array([[-1.0, 0.0], [0.0, 1.0]])
    d = np.array([[1.0, 0.0], [0.0, -1.0]])
    r = Realization.from_arrays(a, b, c, d)
    out = discretize(r, 2.0, method="bilinear")
    # SLICOT AB04MD example results (examples/AB04MD.res), printed to 4 decimals
    np.testing.assert_allclose(out.a, [[-1.0, -4.0], [-4.0, -1.0]], atol=5e-5)
    np.testing.assert_allclose(out.b, [[2.8284, 0.0], [0.0, -2.8284]], atol=5e-5)
    np.testing.assert_allclose(out.c, [[0.0, 2.8284], [-2.8284, 0.0]], atol=5e-5)
    np.testing.assert_allclose(out.d, [[-1.0, 0.0], [0.0, -3.0]], atol=5e-5)


# ------------------------------------------------------------------- prewarp
def test_bilinear_prewarp_matches_python_control_and_is_exact_at_w0() -> None:
    r = _random_stable(3, 4, 1, 1)
    period, w0 = 0.05, 20.0
    d = discretize(r, period, method="bilinear", prewarp_frequency=w0)
    # closed form, common practice, no source: prewarped Tustin agrees exactly at w0
    g_c = transfer_values(r, np.array([1j * w0]))
    g_d = transfer_values(d, np.array([np.exp(1j * w0 * period)]))
    np.testing.assert_allclose(g_d, g_c, rtol=1e-10)
    # independent: python-control sample_system(method='tustin', prewarp_frequency=w0)
    ref = control.sample_system(control.ss(r.a, r.b, r.c, r.d), period, method="tustin",
                                prewarp_frequency=w0)
    ref_r = Realization.from_arrays(ref.A, ref.B, ref.C, ref.D, period)
    z = np.exp(1j * np.linspace(0.01, math.pi, 60))
    assert _tf_close(d, ref_r, z) <= 1e-10


# ------------------------------------------------------------------- matched
def test_matched_relative_degree_one_equals_python_control() -> None:
    # (s + 2) / ((s + 1)(s + 3)): relative degree 1, so no zero is mapped to -1 and our
    # convention coincides with python-control's.
    num, den = [1.0, 2.0], [1.0, 4.0, 3.0]
    a, b, c, dd = sig.tf2ss(num, den)
    r = Realization.from_arrays(a, b, c, dd)
    period = 0.1
    ours = discretize(r, period, method="matched-pole-zero")
    # independent: python-control sample_system(method='matched') on the transfer function
    ref = control.sample_system(control.tf(num, den), period, method="matched")
    ref_ss = control.ss(ref)
    ref_r = Realization.from_arrays(ref_ss.A, ref_ss.B, ref_ss.C, ref_ss.D, period)
    z = np.exp(1j * np.linspace(0.001, math.pi, 80))
    assert _tf_close(ours, ref_r, z) <= 1e-10


def test_matched_higher_relative_degree_convention() -> None:
    # 10 (s + 5) / ((s + 1)(s^2 + 2 s + 4)(s + 8)): relative degree 3
    num = [10.0, 50.0]
    den = np.polymul(np.polymul([1.0, 1.0], [1.0, 2.0, 4.0]), [1.0, 8.0])
    a, b, c, dd = sig.tf2ss(num, den)
    r = Realization.from_arrays(a, b, c, dd)
    period = 0.2
    ours = discretize(r, period, method="matched-pole-zero")
    # independent: python-control 'matched' leaves infinite zeros at infinity; poles and
    # the mapped finite zero must agree, and so must the DC gain.
    ref = control.sample_system(control.tf(num, den), period, method="matched")
    np.testing.assert_allclose(np.sort_complex(ours.poles()), np.sort_complex(ref.poles()), rtol=1e-10)
    ours_tf = control.ss2tf(control.ss(ours.a, ours.b, ours.c, ours.d, period))
    zeros = np.sort_complex(ours_tf.zeros())
    # our documented convention: relative degree 3 -> two zeros at z = -1, one at infinity
    np.testing.assert_allclose(zeros[:2], [-1.0, -1.0], atol=1e-6)  # double root: ~sqrt(eps)
    np.testing.assert_allclose(zeros[2], ref.zeros()[0], rtol=1e-10)
    np.testing.assert_allclose(np.real(ours_tf.dcgain()), np.real(ref.dcgain()), rtol=1e-10)
    # closed form: DC gain of the continuous model 10*5/(1*4*8)
    np.testing.assert_allclose(np.real(ours_tf.dcgain()), 50.0 / 32.0, rtol=1e-10)
    assert len(ours_tf.den[0][0]) - len(ours_tf.num[0][0]) == 1  # one-sample delay kept


def test_matched_integrator_matches_low_frequency_asymptote() -> None:
    # 3 / (s (s + 2)): G(s) ~ 1.5 / s near DC; documented convention G_d ~ 1.5 T / (z - 1)
    r = Realization.from_arrays([[0.0, 1.0], [0.0, -2.0]], [[0.0], [1.0]], [[3.0, 0.0]], [[0.0]])
    period = 0.1
    d = discretize(r, period, method="matched-pole-zero")
    eps = 1e-6
    z = np.array([1.0 + eps])
    g = transfer_values(d, z)[0, 0, 0]
    # closed form, common practice, no source: (z - 1) G_d(z) / T -> K0 = 1.5
    np.testing.assert_allclose(np.real(g * eps / period), 1.5, rtol=1e-5)
    np.testing.assert_allclose(np.sort(d.poles().real), [math.exp(-2 * period), 1.0], rtol=1e-12)


# ------------------------------------------------------------------ claim check
def test_bilinear_model_claimed_as_zero_order_hold_fails_and_is_recognised() -> None:
    r = _mimo()
    period = 0.1
    vendor = discretize(r, period, method="bilinear")
    res = check_discretization_claim(r, vendor, method="zero-order-hold", rtol=1e-8)
    assert res.outcome == "fails"
    assert res.matching_method == "bilinear"
    assert "look like a bilinear discretization, not zero-order-hold" in res.message
    assert res.relative_peak_difference > 1e-3
    json.dumps(res.as_dict())


def test_true_zero_order_hold_claim_holds_against_scipy_model() -> None:
    r = _mimo()
    period = 0.02
    # independent: the vendor model is produced by scipy.signal.cont2discrete('zoh') and
    # put in other state coordinates
    ad, bd, cd, dd, _ = sig.cont2discrete((r.a, r.b, r.c, r.d), period, method="zoh")
    t = np.array([[2.0, 1.0, 0.0], [0.0, 1.0, 3.0], [1.0, 0.0, 1.0]])
    ad2 = t @ ad @ np.linalg.inv(t)
    vendor = Realization.from_arrays(ad2, t @ bd, cd @ np.linalg.inv(t), dd, period)
    res = check_discretization_claim(r, vendor, method="zero-order-hold", rtol=1e-9)
    assert res.outcome == "holds", res.message
    assert res.relative_peak_difference <= 1e-9
    assert res.pole_difference is not None and res.pole_difference <= 1e-9


def test_wrong_model_matches_no_method() -> None:
    r = _mimo()
    other = Realization.from_arrays(r.a * 1.3, r.b, r.c, r.d)
    vendor = discretize(other, 0.1, method="zero-order-hold")
    res = check_discretization_claim(r, vendor, method="zero-order-hold", rtol=1e-6)
    assert res.outcome == "fails"
    assert res.matching_method is None
    names = {a.method for a in res.alternatives}
    assert names == {"triangle-hold", "bilinear", "matched-pole-zero", "impulse-invariant"}
    assert any("not applicable" in a.note for a in res.alternatives if a.method == "matched-pole-zero")


# -------------------------------------------------------------- period mismatch
def test_period_mismatch_ratio_found() -> None:
    r = _mimo()
    t1 = 0.01
    d1 = discretize(r, t1, method="zero-order-hold")
    d2_true = discretize(r, 0.05, method="zero-order-hold")
    mislabelled = Realization.from_arrays(d2_true.a, d2_true.b, d2_true.c, d2_true.d, t1)
    res = detect_sample_period_mismatch(d1, mislabelled, rtol=1e-8)
    assert res.outcome == "period_mismatch"
    assert res.ratio is not None
    # closed form: matrices sampled at 0.05 s read against 0.01 s -> ratio 5
    np.testing.assert_allclose(res.ratio, 5.0, rtol=1e-9)
    assert res.simple_ratio == "5"
    json.dumps(res.as_dict())


def test_period_consistent_and_unrelated() -> None:
    r = _mimo()
    d1 = discretize(r, 0.01, method="zero-order-hold")
    d2 = discretize(r, 0.03, method="zero-order-hold")
    res = detect_sample_period_mismatch(d1, d2, rtol=1e-8)
    assert res.outcome == "consistent"
    np.testing.assert_allclose(res.ratio, 3.0, rtol=1e-9)  # closed form: 0.03/0.01
    other = discretize(Realization.from_arrays(r.a, r.b, r.c * 1.1, r.d), 0.03, method="zero-order-hold")
    res2 = detect_sample_period_mismatch(d1, other, rtol=1e-8)
    assert res2.outcome == "unrelated"
    assert res2.ratio is None


# ------------------------------------------------------------------ bad inputs
_CONT = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
_DISC = Realization.from_arrays([[0.5]], [[1.0]], [[1.0]], [[0.0]], 0.1)


@pytest.mark.parametrize(
    "kwargs,exc,fragment",
    [
        pytest.param(dict(r=_CONT, period=0.0, method="zero-order-hold"), InvalidModelError,
                     "period: got 0.0 but a finite sample period in seconds > 0 was expected", id="zero-period"),
        pytest.param(dict(r=_CONT, period=-1.0, method="zero-order-hold"), InvalidModelError, "period: got -1.0", id="negative-period"),
        pytest.param(dict(r=_CONT, period=float("nan"), method="zero-order-hold"), InvalidModelError, "period: got nan", id="nan-period"),
        pytest.param(dict(r=_CONT, period="abc", method="zero-order-hold"), InvalidModelError, "period: got 'abc'", id="text-period"),
        pytest.param(dict(r=_DISC, period=0.1, method="zero-order-hold"), InvalidModelError,
                     "model: is already discrete-time", id="discrete-input"),
        pytest.param(dict(r=_CONT, period=0.1, method="euler"), InvalidModelError,
                     "method: got 'euler' but one of these discretization methods was expected: "
                     "zero-order-hold (input held constant over each sample period); triangle-hold",
                     id="unknown-method"),
        *[pytest.param(dict(r=_CONT, period=0.1, method=short), InvalidModelError,
                       f"method: got {short!r} but one of these discretization methods was expected",
                       id=f"short-keyword-{short}")
          for short in ("zoh", "foh", "tustin", "matched", "impulse")],
        pytest.param(dict(r=_CONT, period=0.1, method="zero-order-hold", prewarp_frequency=1.0), InvalidModelError,
                     "prewarping only applies to method='bilinear'", id="prewarp-not-bilinear"),
        pytest.param(dict(r=_CONT, period=0.1, method="bilinear", prewarp_frequency=40.0), InvalidModelError,
                     "prewarp_frequency: got 40.0 rad/s but a value in (0, pi/T)", id="prewarp-above-nyquist"),
        pytest.param(dict(r=_mimo(), period=0.1, method="matched-pole-zero"), InvalidModelError,
                     "defined per channel for SISO", id="matched-mimo"),
        pytest.param(dict(r=Realization.from_arrays([[20.0]], [[1.0]], [[1.0]], [[0.0]]), period=0.1,
                          method="bilinear"), NumericalTroubleError, "I - alpha*A is singular", id="bilinear-singular"),
        pytest.param(dict(r=Realization.from_arrays([[800.0]], [[1.0]], [[1.0]], [[0.0]]), period=1.0,
                          method="zero-order-hold"), NumericalTroubleError, "overflowed", id="zero-order-hold-overflow"),
        pytest.param(dict(r="not a model", period=0.1, method="zero-order-hold"), InvalidModelError,
                     "model: got str but an audit Realization was expected", id="not-a-realization"),
    ],
)
def test_bad_inputs(kwargs: dict, exc: type, fragment: str) -> None:
    args = dict(kwargs)
    r = args.pop("r")
    period = args.pop("period")
    with pytest.raises(exc) as info:
        discretize(r, period, **args)
    assert fragment in str(info.value)


def test_claim_check_bad_inputs() -> None:
    with pytest.raises(InvalidModelError, match="discrete: is continuous-time"):
        check_discretization_claim(_CONT, _CONT, method="zero-order-hold", rtol=1e-6)
    with pytest.raises(InvalidModelError, match="continuous: is discrete-time"):
        check_discretization_claim(_DISC, _DISC, method="zero-order-hold", rtol=1e-6)
    with pytest.raises(IncompatibleModelsError, match="input"):
        check_discretization_claim(_mimo(), _DISC, method="zero-order-hold", rtol=1e-6)
    with pytest.raises(InvalidModelError, match="rtol: got -1.0"):
        check_discretization_claim(_CONT, _DISC, method="zero-order-hold", rtol=-1.0)
    with pytest.raises(InvalidModelError, match="d2: is continuous-time"):
        detect_sample_period_mismatch(_DISC, _CONT, rtol=1e-6)


def test_order_zero_passes_through() -> None:
    r = Realization.from_arrays(np.zeros((0, 0)), np.zeros((0, 2)), np.zeros((1, 0)), [[2.0, -1.0]])
    for method in ("zero-order-hold", "triangle-hold", "bilinear", "impulse-invariant"):
        d = discretize(r, 0.1, method=method)  # type: ignore[arg-type]
        assert d.order == 0 and d.sample_period == 0.1
        np.testing.assert_allclose(d.d, [[2.0, -1.0]], rtol=0, atol=0)  # static gain unchanged (definition)
