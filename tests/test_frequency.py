"""Tests of audit.evidence.frequency against outside references.

Sources: SLICOT TB05AD example (doc/TB05AD.html in SLICOT/SLICOT-Reference, data read
row by row, printed to two decimals); python-control 0.10.2 and scipy.signal as
independent evaluations; mpmath at 50 digits as the extended-precision reference;
closed forms marked as such.
"""

from __future__ import annotations

import math
import warnings

import control
import mpmath
import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

from audit.errors import IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from audit.evidence.frequency import (
    TransferEvaluator,
    boundary_points,
    frequency_response,
)
from audit.evidence.frequency_grid import adaptive_frequency_grid
from audit.core.realization import Realization


def _random_system(seed: int, n: int, p: int, m: int, period: float | None = None):
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((n, n))
    if period is None:
        a -= (np.max(np.linalg.eigvals(a).real) + 0.5) * np.eye(n)
    else:
        a *= 0.9 / max(np.max(np.abs(np.linalg.eigvals(a))), 1e-9)
    return Realization.from_arrays(
        a, rng.standard_normal((n, m)), rng.standard_normal((p, n)),
        rng.standard_normal((p, m)), period,
    )


def _control_response(r: Realization, omegas: np.ndarray) -> np.ndarray:
    dt = 0 if r.sample_period is None else r.sample_period
    sys = control.ss(r.a, r.b, r.c, r.d, dt)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        resp = control.frequency_response(sys, omegas, squeeze=False)
    return np.moveaxis(np.asarray(resp.frdata), -1, 0)


# --------------------------------------------------------------- published data
def test_slicot_tb05ad_example() -> None:
    # SLICOT TB05AD example (doc/TB05AD.html, "Program Data"/"Program Results"):
    # N=3, M=1, P=2, FREQ=(0.0,0.5); A, B, C read row by row.
    a = [[1.0, 2.0, 0.0], [4.0, -1.0, 0.0], [0.0, 0.0, 1.0]]
    b = [[1.0], [0.0], [1.0]]
    c = [[1.0, 0.0, -1.0], [0.0, 0.0, 1.0]]
    r = Realization.from_arrays(a, b, c, [[0.0], [0.0]])
    g = TransferEvaluator(r).at([0.5j])[0]
    # results printed with two decimals: (0.69, 0.35) and (-0.80, -0.40)
    expected = np.array([[0.69 + 0.35j], [-0.80 - 0.40j]])
    np.testing.assert_allclose(g.real, expected.real, rtol=0, atol=0.0051)
    np.testing.assert_allclose(g.imag, expected.imag, rtol=0, atol=0.0051)
    # same point through frequency_response (omega = 0.5 rad/s)
    np.testing.assert_allclose(frequency_response(r, [0.5])[0], g, rtol=1e-14, atol=0)


# ------------------------------------------------------- independent libraries
@pytest.mark.parametrize(
    "seed,n,p,m", [(0, 1, 1, 1), (1, 4, 2, 3), (2, 12, 3, 2), (3, 40, 2, 2), (4, 80, 1, 1)]
)
def test_matches_python_control_continuous(seed: int, n: int, p: int, m: int) -> None:
    r = _random_system(seed, n, p, m)
    w = np.concatenate([[0.0], np.logspace(-3, 3, 200)])
    ours = frequency_response(r, w)
    ref = _control_response(r, w)  # independent: python-control LU per point
    scale = np.max(np.abs(ref))
    np.testing.assert_allclose(ours, ref, rtol=1e-9, atol=1e-11 * scale)


@pytest.mark.parametrize("seed,n,p,m", [(5, 3, 1, 1), (6, 10, 2, 3), (7, 30, 3, 1)])
def test_matches_python_control_discrete(seed: int, n: int, p: int, m: int) -> None:
    r = _random_system(seed, n, p, m, period=0.01)
    w = np.linspace(0.0, math.pi / 0.01, 300)
    ours = frequency_response(r, w)
    ref = _control_response(r, w)  # independent: python-control, z = exp(j w T)
    scale = np.max(np.abs(ref))
    np.testing.assert_allclose(ours, ref, rtol=1e-9, atol=1e-11 * scale)


def test_matches_scipy_signal_siso() -> None:
    r = _random_system(8, 6, 1, 1)
    w = np.logspace(-2, 2, 101)
    _, h = scipy.signal.freqresp(scipy.signal.StateSpace(r.a, r.b, r.c, r.d), w)
    # independent: scipy.signal.freqresp (via transfer-function polynomials)
    np.testing.assert_allclose(frequency_response(r, w)[:, 0, 0], h, rtol=1e-8, atol=1e-12)

    rd = _random_system(9, 6, 1, 1, period=0.5)
    _, hd = scipy.signal.dfreqresp(
        scipy.signal.StateSpace(rd.a, rd.b, rd.c, rd.d, dt=0.5), w * 0.5
    )
    # independent: scipy.signal.dfreqresp takes the normalised frequency w T
    np.testing.assert_allclose(frequency_response(rd, w)[:, 0, 0], hd, rtol=1e-8, atol=1e-12)


@settings(max_examples=25, deadline=None)
@given(data=st.data())
def test_property_matches_python_control(data: st.DataObject) -> None:
    n = data.draw(st.integers(0, 8), label="n")
    p = data.draw(st.integers(1, 3), label="p")
    m = data.draw(st.integers(1, 3), label="m")
    seed = data.draw(st.integers(0, 2**31 - 1), label="seed")
    discrete = data.draw(st.booleans(), label="discrete")
    period = 0.1 if discrete else None
    if n == 0:
        d = np.random.default_rng(seed).standard_normal((p, m))
        r = Realization.from_arrays(np.zeros((0, 0)), np.zeros((0, m)), np.zeros((p, 0)), d,
                                    period)
    else:
        r = _random_system(seed, n, p, m, period)
    w = np.linspace(0.0, 30.0, 41)
    ours = frequency_response(r, w)
    if n == 0:
        ref = np.broadcast_to(r.d, ours.shape)  # closed form: G = D
    else:
        ref = _control_response(r, w)  # independent: python-control
    scale = max(float(np.max(np.abs(ref))), 1.0)
    np.testing.assert_allclose(ours, ref, rtol=1e-8, atol=1e-10 * scale)


# ---------------------------------------------------------------- closed forms
@pytest.mark.parametrize("gain,tau", [(1.0, 1.0), (3.5, 0.02), (0.2, 400.0)])
def test_first_order_corner_frequency(gain: float, tau: float) -> None:
    # G(s) = K / (tau s + 1): |G(j / tau)| = K / sqrt(2), phase -45 degrees
    # (closed form, common practice, no source)
    r = Realization.from_arrays([[-1.0 / tau]], [[1.0]], [[gain / tau]], [[0.0]])
    g = frequency_response(r, [1.0 / tau])[0, 0, 0]
    assert abs(g) == pytest.approx(gain / math.sqrt(2.0), rel=1e-14)
    assert np.angle(g) == pytest.approx(-math.pi / 4, rel=1e-13)


def test_order_zero_is_static_gain() -> None:
    d = np.array([[1.0, -2.0], [0.5, 3.0]])
    r = Realization.from_arrays(np.zeros((0, 0)), np.zeros((0, 2)), np.zeros((2, 0)), d)
    g = frequency_response(r, [0.0, 1.0, 1e6])
    # closed form: G = D for a static gain
    np.testing.assert_allclose(g, np.broadcast_to(d, (3, 2, 2)), rtol=0, atol=0)


def test_boundary_points_mapping() -> None:
    rd = _random_system(10, 2, 1, 1, period=0.25)
    # closed form: z = exp(j w T)
    np.testing.assert_allclose(boundary_points(rd, [0.0, 4.0]), [1.0, np.exp(1j)],
                               rtol=1e-15, atol=1e-15)


# --------------------------------------------------- extended precision (mpmath)
def _mp_transfer(r: Realization, lam: complex, digits: int = 50) -> np.ndarray:
    with mpmath.workdps(digits):
        n = r.order
        mat = mpmath.matrix(n, n)
        for i in range(n):
            for j in range(n):
                mat[i, j] = (mpmath.mpc(lam) if i == j else 0) - mpmath.mpf(float(r.a[i, j]))
        out = np.empty((r.n_outputs, r.n_inputs), dtype=complex)
        for j in range(r.n_inputs):
            col = mpmath.matrix([mpmath.mpf(float(v)) for v in r.b[:, j]])
            x = mpmath.lu_solve(mat, col)
            for i in range(r.n_outputs):
                acc = mpmath.mpf(float(r.d[i, j]))
                for k in range(n):
                    acc += mpmath.mpf(float(r.c[i, k])) * x[k]
                out[i, j] = complex(acc)
    return out


def test_ill_conditioned_against_mpmath_and_error_bound() -> None:
    # Badly scaled, strongly non-normal A with a cluster of poles near -1 and a
    # lightly damped pair near 1 rad/s; evaluated near the resonance and near DC.
    rng = np.random.default_rng(11)
    n = 12
    poles = np.concatenate([-1.0 - 1e-3 * np.arange(8), [-1e-4, -2e4]])
    t = np.diag(poles)
    t = np.pad(t, ((0, 2), (0, 2)))
    t[10:, 10:] = [[-1e-3, 1.0], [-1.0, -1e-3]]
    t += np.triu(rng.standard_normal((n, n)) * 30.0, 1)
    s = np.diag(10.0 ** rng.uniform(-3, 3, n))
    a = np.linalg.solve(s, t @ s)
    r = Realization.from_arrays(a, rng.standard_normal((n, 2)), rng.standard_normal((2, n)),
                                np.zeros((2, 2)))
    lam = np.array([1.0j, 0.999j, 1e-4j, 0.5j, 3.0j, 1e4j])
    ev = TransferEvaluator(r)
    g = ev.at(lam)
    bound = ev.error_bound(lam)
    for k, point in enumerate(lam):
        exact = _mp_transfer(r, complex(point))  # independent: mpmath, 50 digits
        actual = float(np.linalg.norm(g[k] - exact))
        # the (estimated) error bound must cover the actual error
        assert actual <= bound[k], (point, actual, bound[k])
        # and the evaluation is accurate relative to the conditioning it reports
        assert actual <= 1e-6 * float(np.linalg.norm(exact)), (point, actual)


def test_error_bound_covers_random_systems() -> None:
    for seed in range(5):
        r = _random_system(100 + seed, 15, 2, 2)
        lam = 1j * np.array([0.0, 0.3, 1.0, 7.0])
        ev = TransferEvaluator(r)
        g, bound = ev.at(lam), ev.error_bound(lam)
        for k in range(lam.size):
            exact = _mp_transfer(r, complex(lam[k]), digits=40)  # independent: mpmath
            assert float(np.linalg.norm(g[k] - exact)) <= bound[k]
            # the estimate is not absurdly pessimistic for well-conditioned systems
            assert bound[k] <= 1e-9 * max(float(np.linalg.norm(exact)), 1.0)


# ------------------------------------------------------------------ bad inputs
@pytest.mark.parametrize(
    "omegas,fragment",
    [
        pytest.param([1.0, float("nan")], "omegas: contains NaN or infinity", id="nan"),
        pytest.param([[1.0, 2.0]], "omegas: has shape (1, 2)", id="2d"),
        pytest.param(["fast"], "omegas: could not be read", id="text"),
    ],
)
def test_bad_frequencies(omegas: object, fragment: str) -> None:
    r = _random_system(12, 2, 1, 1)
    with pytest.raises(InvalidModelError) as info:
        frequency_response(r, omegas)  # type: ignore[arg-type]
    assert fragment in str(info.value)


def test_evaluation_at_a_pole_raises_our_error() -> None:
    r = Realization.from_arrays([[0.0]], [[1.0]], [[1.0]], [[0.0]])  # integrator
    with pytest.raises(NumericalTroubleError, match="numerically a pole"):
        frequency_response(r, [0.0])


# --------------------------------------------------------------- adaptive grid
def test_grid_continuous_covers_dynamics() -> None:
    zeta, wn = 1e-3, 50.0
    res = Realization.from_arrays([[0.0, 1.0], [-wn**2, -2 * zeta * wn]], [[0.0], [1.0]],
                                  [[1.0, 0.0]], [[0.0]])
    slow = Realization.from_arrays([[-0.01]], [[1.0]], [[1.0]], [[0.0]])
    w = adaptive_frequency_grid([res, slow], extra=[3e3])
    assert w[0] == 0.0  # DC
    assert np.all(np.diff(w) > 0)
    assert w[-1] >= 100 * 3e3  # well past the fastest dynamics (extra at 3e3)
    assert w[1] <= 0.01 / 10  # below the slowest pole
    assert np.min(np.abs(w - 0.01)) <= 1e-12  # pole frequency itself
    # closed form: damped frequency wn sqrt(1 - zeta^2), bandwidth ~ zeta wn
    wd = wn * math.sqrt(1 - zeta**2)
    inside = np.sum(np.abs(w - wd) <= zeta * wn)
    assert inside >= 5
    assert np.any(np.abs(w - 3e3) <= 1e-9)  # extra frequencies included


def test_grid_discrete_stops_at_nyquist() -> None:
    r = _random_system(13, 6, 1, 1, period=0.002)
    w = adaptive_frequency_grid([r], zeros=[0.5 + 0.5j])
    nyquist = math.pi / 0.002
    assert w[0] == 0.0
    assert w[-1] == pytest.approx(nyquist, rel=1e-15)  # closed form: pi / T
    assert np.all(w <= nyquist)
    # the zero's frequency |log z| / T is covered (closed form)
    wz = abs(np.log(0.5 + 0.5j)) / 0.002
    assert np.min(np.abs(w - wz)) <= 1e-9 * wz


def test_grid_rejects_bad_input() -> None:
    c = _random_system(14, 2, 1, 1)
    d = _random_system(15, 2, 1, 1, period=0.1)
    with pytest.raises(IncompatibleModelsError, match="share the time domain"):
        adaptive_frequency_grid([c, d])
    with pytest.raises(InvalidModelError, match="realizations: is empty"):
        adaptive_frequency_grid([])
    with pytest.raises(InvalidModelError, match="points_per_decade=0"):
        adaptive_frequency_grid([c], points_per_decade=0)
