"""Tests of the conversions (audit.core.from_transfer_function, from_zeros_poles_gain,
from_realization) against outside references.

Sources used (named beside each assertion):
* SLICOT published examples TD04AD and TB04AD (repo SLICOT/SLICOT-Reference,
  doc/TD04AD.html, doc/TB04AD.html "Program Data" / "Program Results"; examples/TD04AD.res).
* scipy.signal (tf2ss, zpk2ss), python-control (tf2ss, ss2tf), slycot ab08nd, scipy.linalg.eig.
* Closed forms (partial fractions, McMillan degree of a common-denominator matrix).
"""

from __future__ import annotations

import json

import control
import numpy as np
import pytest
import scipy.linalg
import scipy.signal
import slycot
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import linear_sum_assignment

from audit.core import from_realization, from_transfer_function
from audit.core.conversion_common import DEFAULT_RANK_RTOL
from audit.core.from_realization import (
    TransferFunctionData,
    ZerosPolesGainData,
    transfer_function_from_realization,
    zeros_poles_gain_from_realization,
)
from audit.core.from_transfer_function import realization_from_transfer_function
from audit.core.from_zeros_poles_gain import realization_from_zeros_poles_gain
from audit.errors import InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization, similarity_transformed

EPS = np.finfo(float).eps
S_POINTS = np.array([0.3j, 1.7j, 0.5 + 4.0j, 25.0j, -0.7 + 0.2j])


# ----------------------------------------------------------------- independent helpers
def response(a, b, c, d, s: complex) -> np.ndarray:
    """C (sI - A)^-1 B + D by a dense solve (closed form, common practice, no source)."""
    a, b, c, d = (np.atleast_2d(np.asarray(x, dtype=float)) for x in (a, b, c, d))
    n = a.shape[0] if a.size else 0
    if n == 0:
        return d.astype(complex)
    return c @ np.linalg.solve(s * np.eye(n) - a, b) + d


def real_response(r: Realization, s: complex) -> np.ndarray:
    return response(r.a, r.b, r.c, r.d, s)


def tf_response(num, den, s: complex) -> np.ndarray:
    """Polynomial ratios evaluated per channel (closed form, no source)."""
    return np.array(
        [[np.polyval(n_ij, s) / np.polyval(d_ij, s) for n_ij, d_ij in zip(nr, dr)]
         for nr, dr in zip(num, den)]
    )


def zeros_poles_gain_response(z, p, k, s: complex) -> complex:
    """k prod(s - z) / prod(s - p) as a running product (closed form, no source)."""
    value = complex(k)
    for zz in z:
        value *= s - zz
    for pp in p:
        value /= s - pp
    return value


def matched_distance(x, y) -> np.ndarray:
    """Distances after optimal assignment (scipy.optimize.linear_sum_assignment)."""
    x, y = np.asarray(x, dtype=complex), np.asarray(y, dtype=complex)
    assert x.size == y.size
    if x.size == 0:
        return np.zeros(0)
    cost = np.abs(x[:, None] - y[None, :])
    rows, cols = linear_sum_assignment(cost)
    return cost[rows, cols]


def matched_relative(x, y, floor: float = 0.0) -> np.ndarray:
    """Matched distances divided by max(floor, |reference|) of each matched reference."""
    x, y = np.asarray(x, dtype=complex), np.asarray(y, dtype=complex)
    assert x.size == y.size
    if x.size == 0:
        return np.zeros(0)
    cost = np.abs(x[:, None] - y[None, :])
    rows, cols = linear_sum_assignment(cost)
    return cost[rows, cols] / np.maximum(floor, np.abs(y[cols]))


# ============================================================ SLICOT TD04AD example
# doc/TD04AD.html "Program Data": M=2, P=2, ROWCOL='R', INDEX = 3 3; DCOEFF read row by
# row; UCOEFF read with the coefficient index innermost, then input, then output.
TD04AD_DEN_ROWS = [[1.0, 6.0, 11.0, 6.0], [1.0, 6.0, 11.0, 6.0]]
TD04AD_NUM = [
    [[1.0, 6.0, 12.0, 7.0], [0.0, 1.0, 4.0, 3.0]],
    [[0.0, 0.0, 1.0, 1.0], [1.0, 8.0, 20.0, 15.0]],
]
TD04AD_DEN = [[TD04AD_DEN_ROWS[i]] * 2 for i in range(2)]
# examples/TD04AD.res (printed to 4 decimals)
TD04AD_A = [[0.5000, -0.8028, 0.9387], [4.4047, -2.3380, 2.5076], [-5.5541, 1.6872, -4.1620]]
TD04AD_B = [[-0.2000, -1.2500], [0.0000, -0.6097], [0.0000, 2.2217]]
TD04AD_C = [[0.0000, -0.8679, 0.2119], [0.0000, 0.0000, 0.9002]]
TD04AD_D = [[1.0, 0.0], [0.0, 1.0]]


@pytest.mark.parametrize("use_slycot", [True, False], ids=["td04ad", "own-companion"])
def test_td04ad_published_example(use_slycot: bool) -> None:
    r = realization_from_transfer_function(TD04AD_NUM, TD04AD_DEN, use_slycot=use_slycot)
    # SLICOT TD04AD example results: "The order of the minimal realization = 3"
    assert r.order == 3
    # SLICOT TD04AD example results: D = identity (printed exactly)
    np.testing.assert_allclose(r.d, TD04AD_D, rtol=0, atol=1e-12)
    for s in S_POINTS:
        # the published transfer matrix itself (doc/TD04AD.html program data)
        np.testing.assert_allclose(
            real_response(r, s), tf_response(TD04AD_NUM, TD04AD_DEN, s), rtol=1e-10, atol=1e-12
        )
        # the published realization (examples/TD04AD.res, 4 printed decimals -> loose)
        np.testing.assert_allclose(
            real_response(r, s),
            response(TD04AD_A, TD04AD_B, TD04AD_C, TD04AD_D, s),
            rtol=0, atol=2e-3,
        )
    # McMillan degree 3: poles -1, -2, -3 (closed form: T22 keeps (s+1), T11 keeps (s+2)(s+3))
    np.testing.assert_allclose(np.sort(r.poles().real), [-3.0, -2.0, -1.0], rtol=0, atol=1e-9)


# ============================================================ SLICOT TB04AD example
# doc/TB04AD.html "Program Data": N=3, M=2, P=2; A row by row, B read COLUMN by column
# (READ ((B(I,J), I=1,N), J=1,M)), C row by row, D row by row.
TB04AD_A = np.diag([-1.0, -2.0, -3.0])
TB04AD_B = np.array([[0.0, 1.0, -1.0], [1.0, 1.0, 0.0]]).T
TB04AD_C = np.array([[0.0, 1.0, 1.0], [1.0, 1.0, 1.0]])
TB04AD_D = np.eye(2)
# doc/TB04AD.html "Program Results": rows over common denominators
TB04AD_NUM = [
    [[1.0, 5.0, 7.0], [0.0, 1.0, 3.0]],
    [[0.0, 0.0, 1.0, 1.0], [1.0, 8.0, 20.0, 15.0]],
]
TB04AD_DEN = [[[1.0, 5.0, 6.0]] * 2, [[1.0, 6.0, 11.0, 6.0]] * 2]


def test_tb04ad_published_example() -> None:
    r = Realization.from_arrays(TB04AD_A, TB04AD_B, TB04AD_C, TB04AD_D)
    tf = transfer_function_from_realization(r)
    for s in S_POINTS:
        # SLICOT TB04AD example results (doc/TB04AD.html, printed exactly to 2 decimals
        # and all integers)
        np.testing.assert_allclose(
            tf_response(tf.numerator, tf.denominator, s),
            tf_response(TB04AD_NUM, TB04AD_DEN, s),
            rtol=1e-12, atol=1e-12,
        )
    # Per-channel minimal degrees: cancelling the published polynomials by hand,
    # (s+3)/((s+2)(s+3)) -> 1, (s+1)/((s+1)(s+2)(s+3)) -> 2,
    # (s+3)(s^2+5s+5)/((s+1)(s+2)(s+3)) -> 2 (closed form, no source)
    degrees = [[len(d) - 1 for d in row] for row in tf.denominator]
    assert degrees == [[2, 1], [2, 2]]
    # monic denominators (documented)
    for row in tf.denominator:
        for den in row:
            assert den[0] == pytest.approx(1.0, rel=1e-15, abs=0)


# ================================================================= round trips
ROUND_TRIP_CASES = {
    "siso-3rd-order": ([[[2.0, 3.0, 1.0]]], [[[1.0, 4.0, 6.0, 4.0]]], None),
    "siso-biproper": ([[[3.0, -1.0, 2.0]]], [[[2.0, 1.0, 5.0]]], None),
    "mimo-mixed-denominators": (
        [[[1.0, 2.0], [0.5]], [[1.0], [1.0, 0.0, 1.0]], [[0.0, 2.0], [3.0]]],
        [[[1.0, 3.0, 2.0], [1.0, 1.0]], [[1.0, 0.5], [1.0, 2.0, 10.0]],
         [[1.0, 3.0, 2.0], [1.0, 7.0]]],
        None,
    ),
    "discrete-siso": ([[[0.5, -0.2]]], [[[1.0, -1.2, 0.5]]], 0.01),
    "discrete-mimo": ([[[1.0, 0.1], [0.3]]], [[[1.0, -0.9], [1.0, 0.4]]], 0.1),
}


@pytest.mark.parametrize("case", list(ROUND_TRIP_CASES), ids=list(ROUND_TRIP_CASES))
def test_round_trip_tf_ss_tf(case: str) -> None:
    num, den, dt = ROUND_TRIP_CASES[case]
    r = realization_from_transfer_function(num, den, dt)
    assert r.sample_period == dt
    back = transfer_function_from_realization(r)
    assert back.sample_period == dt
    points = S_POINTS if dt is None else np.exp(1j * np.array([0.1, 0.7, 1.9, 3.0]))
    for s in points:
        ref = tf_response(num, den, s)
        # closed-form evaluation of the original polynomials (no source), relative 1e-9
        np.testing.assert_allclose(real_response(r, s), ref, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(
            tf_response(back.numerator, back.denominator, s), ref, rtol=1e-9, atol=1e-12
        )


def test_siso_against_scipy_tf2ss() -> None:
    num, den = [1.0, -2.0, 5.0], [1.0, 3.0, 7.0, 2.0, 0.5]
    r = realization_from_transfer_function([[num]], [[den]])
    a, b, c, d = scipy.signal.tf2ss(num, den)
    for s in S_POINTS:
        # independent: scipy.signal.tf2ss
        np.testing.assert_allclose(real_response(r, s), response(a, b, c, d, s),
                                   rtol=1e-10, atol=1e-13)
    # independent: eigenvalues of scipy's companion realization
    assert matched_distance(r.poles(), np.linalg.eigvals(a)).max() <= 1e-9


def test_mimo_against_python_control_tf2ss() -> None:
    num = [[[1.0, 1.0], [2.0]], [[1.0], [1.0, 3.0]]]
    den = [[[1.0, 3.0, 2.0], [1.0, 1.0]], [[1.0, 2.0], [1.0, 5.0, 6.0]]]
    r = realization_from_transfer_function(num, den)
    ref = control.tf2ss(control.tf(num, den))
    for s in S_POINTS:
        # independent: python-control tf2ss (its MIMO path is slycot td04ad by rows)
        np.testing.assert_allclose(
            real_response(r, s), response(ref.A, ref.B, ref.C, ref.D, s), rtol=1e-9, atol=1e-12
        )
    # closed form: G = [[1/(s+2), 2/(s+1)], [1/(s+2), 1/(s+2)]]; McMillan degree:
    # residue at -2 is [[1,0],[1,1]] (rank 2), at -1 [[0,2],[0,0]] (rank 1) -> 3
    # (Kailath, Linear Systems, 1980, ch. 6, from memory)
    assert r.order == 3
    assert ref.nstates == 3  # python-control agrees
    assert matched_distance(r.poles(), [-2.0, -2.0, -1.0]).max() <= 1e-7


# ============================================================ McMillan degree
MCMILLAN_CASES = {
    # common denominator s+1, residue matrix R: degree = rank R
    # (Kailath, Linear Systems, 1980, ch. 6, from memory)
    "rank1-residue": ([[1.0, 2.0], [2.0, 4.0]], [[1.0, 1.0]], 1),
    "rank2-residue": ([[1.0, 2.0], [3.0, 4.0]], [[1.0, 1.0]], 2),
    "identity-residue": ([[1.0, 0.0], [0.0, 1.0]], [[1.0, 1.0]], 2),
    "3x2-rank1": ([[1.0, -1.0], [2.0, -2.0], [0.5, -0.5]], [[1.0, 4.0]], 1),
}


@pytest.mark.parametrize("case", list(MCMILLAN_CASES), ids=list(MCMILLAN_CASES))
def test_common_denominator_mimo_has_mcmillan_order(case: str) -> None:
    residue, den_rows, expected = MCMILLAN_CASES[case]
    den = den_rows[0]
    p, m = np.shape(residue)
    num = [[[residue[i][j]] for j in range(m)] for i in range(p)]
    dens = [[den] * m for _ in range(p)]
    for use_slycot in (True, False):
        r = realization_from_transfer_function(num, dens, use_slycot=use_slycot)
        assert r.order == expected
        for s in S_POINTS:
            np.testing.assert_allclose(real_response(r, s), tf_response(num, dens, s),
                                       rtol=1e-10, atol=1e-13)
        # the same matrix given as zeros-poles-gain
        rz = realization_from_zeros_poles_gain(
            [[[] for _ in range(m)] for _ in range(p)],
            [[[-den[1]] for _ in range(m)] for _ in range(p)],
            residue,
        )
        assert rz.order == expected


def test_two_poles_mcmillan_degree_is_sum_of_residue_ranks() -> None:
    # G = R1/(s+1) + R2/(s+2), rank R1 = 1, rank R2 = 2 -> McMillan degree 3
    # (sum of residue ranks for simple poles; Kailath, Linear Systems, 1980, ch. 6,
    # from memory)
    r1 = np.array([[1.0, 1.0], [1.0, 1.0]])
    r2 = np.array([[1.0, 0.0], [2.0, -3.0]])
    den = [1.0, 3.0, 2.0]
    num = [[list(r1[i, j] * np.array([1.0, 2.0]) + r2[i, j] * np.array([1.0, 1.0]))
            for j in range(2)] for i in range(2)]
    dens = [[den, den], [den, den]]
    r = realization_from_transfer_function(num, dens)
    assert r.order == 3
    assert matched_distance(r.poles(), [-1.0, -2.0, -2.0]).max() <= 1e-7


# ============================================================ zeros-poles-gain -> ss
def test_zeros_poles_gain_siso_against_scipy() -> None:
    z = [-1.0, 0.5 + 2.0j, 0.5 - 2.0j]
    p = [-0.5, -1.0 + 3.0j, -1.0 - 3.0j, -4.0, -0.2 + 0.1j, -0.2 - 0.1j]
    k = 2.5
    r = realization_from_zeros_poles_gain([[z]], [[p]], [[k]])
    a, b, c, d = scipy.signal.zpk2ss(z, p, k)
    assert r.order == 6
    for s in S_POINTS:
        # independent: scipy.signal.zpk2ss
        np.testing.assert_allclose(real_response(r, s), response(a, b, c, d, s),
                                   rtol=1e-10, atol=1e-13)
    # independent: the poles as given
    assert matched_distance(r.poles(), p).max() <= 1e-12 * 10


def test_zeros_poles_gain_high_order_cascade_is_accurate() -> None:
    # order 20 with poles spread over six decades: the cascade never expands polynomials
    rng = np.random.default_rng(7)
    mags = np.logspace(-2, 4, 10)
    angles = rng.uniform(0.1, 1.4, 10)
    poles = np.concatenate([-mags * np.cos(angles) + 1j * mags * np.sin(angles),
                            -mags * np.cos(angles) - 1j * mags * np.sin(angles)])
    zeros = -np.logspace(-1.5, 3.5, 8)
    k = 1e3
    r = realization_from_zeros_poles_gain([[list(zeros)]], [[list(poles)]], [[k]])
    assert r.order == 20
    for w in np.logspace(-3, 5, 9):
        s = 1j * w
        ref = zeros_poles_gain_response(zeros, poles, k, s)
        # closed form product (no source); relative 1e-9
        np.testing.assert_allclose(real_response(r, s)[0, 0], ref, rtol=1e-9)
    back = zeros_poles_gain_from_realization(r)
    # poles: relative accuracy per pole (closed form: the input poles)
    rel = matched_relative(back.poles[0][0], poles)
    assert rel.max() <= 1e-8
    rel_z = matched_relative(back.zeros[0][0], zeros)
    # relative degree 12 over six decades: the largest zero is ill-conditioned; 1e-6
    assert rel_z.max() <= 1e-6
    assert back.gain[0][0] == pytest.approx(k, rel=1e-8)


def test_zeros_poles_gain_stiff_siso_recovers_zeros_poles_gain() -> None:
    z, p, k = [-10.0, -1e4], [-1.0, -1e3, -1e6], 7.0
    r = realization_from_zeros_poles_gain([[z]], [[p]], [[k]])
    data = zeros_poles_gain_from_realization(r)
    # closed form: the given values (relative 1e-9)
    assert matched_relative(data.poles[0][0], p).max() <= 1e-9
    assert matched_relative(data.zeros[0][0], z).max() <= 1e-9
    assert data.gain[0][0] == pytest.approx(k, rel=1e-9)


def test_zeros_poles_gain_accepts_re_im_pairs_and_discrete_time() -> None:
    dt = 0.05
    z = [[[[0.2, 0.3], [0.2, -0.3]]]]
    p = [[[[0.5, 0.4], [0.5, -0.4], 0.9]]]
    r = realization_from_zeros_poles_gain(z, p, [[1.5]], dt)
    assert r.sample_period == dt
    zc = [0.2 + 0.3j, 0.2 - 0.3j]
    pc = [0.5 + 0.4j, 0.5 - 0.4j, 0.9]
    for w in [0.1, 1.0, 2.5]:
        zz = np.exp(1j * w)
        # closed form product at z = e^{j w} (no source)
        np.testing.assert_allclose(real_response(r, zz)[0, 0], zeros_poles_gain_response(zc, pc, 1.5, zz),
                                   rtol=1e-12)


def test_zeros_poles_gain_mimo_shared_poles_is_reduced() -> None:
    # every channel has the pole pair -1 +- 2j; residues of rank 1 -> order 2
    # (McMillan degree; Kailath, Linear Systems, 1980, ch. 6, from memory)
    poles = [-1 + 2j, -1 - 2j]
    zeros = [[[], []], [[], []]]
    gain = [[1.0, 3.0], [2.0, 6.0]]
    r = realization_from_zeros_poles_gain(zeros, [[poles] * 2] * 2, gain)
    assert r.order == 2
    for s in S_POINTS:
        ref = np.array([[zeros_poles_gain_response([], poles, g, s) for g in row] for row in gain])
        np.testing.assert_allclose(real_response(r, s), ref, rtol=1e-10)


def test_zeros_poles_gain_zero_gain_channel_and_order_zero() -> None:
    r = realization_from_zeros_poles_gain([[[-1.0], []]], [[[-2.0], []]], [[0.0, 4.0]])
    assert r.order == 0
    np.testing.assert_allclose(r.d, [[0.0, 4.0]], rtol=0, atol=0)  # closed form


# ============================================================ ss -> zeros_poles_gain / tf
def _random_minimal_siso(rng: np.random.Generator, n: int, with_d: bool) -> Realization:
    a = rng.standard_normal((n, n)) - 2.0 * np.eye(n)
    b = rng.standard_normal((n, 1))
    c = rng.standard_normal((1, n))
    d = [[rng.standard_normal()]] if with_d else [[0.0]]
    return Realization.from_arrays(a, b, c, d)


@pytest.mark.parametrize("with_d", [True, False], ids=["biproper", "strictly-proper"])
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_zeros_poles_gain_against_scipy(with_d: bool, seed: int) -> None:
    rng = np.random.default_rng(seed)
    r = _random_minimal_siso(rng, 5, with_d)
    data = zeros_poles_gain_from_realization(r)
    zeros = np.array(data.zeros[0][0])
    # independent: roots of the numerator from scipy.signal.ss2tf (order 5, well scaled)
    num, den = scipy.signal.ss2tf(r.a, r.b, r.c, r.d)
    num = np.trim_zeros(num[0], "f")
    ref = np.roots(num)
    assert zeros.size == ref.size == (5 if with_d else 4)
    assert matched_relative(zeros, ref, floor=1.0).max() <= 1e-7
    if with_d:
        # independent: scipy.linalg.eig of the full system pencil (one infinite eigenvalue)
        m = np.block([[r.a, r.b], [r.c, r.d]])
        nmat = np.zeros((6, 6))
        nmat[:5, :5] = np.eye(5)
        ev = scipy.linalg.eigvals(m, nmat)
        finite = ev[np.isfinite(ev) & (np.abs(ev) < 1e8)]
        assert matched_relative(zeros, finite, floor=1.0).max() <= 1e-8
    # gain: leading coefficient of scipy's numerator over its monic denominator
    assert data.gain[0][0] == pytest.approx(num[0] / den[0], rel=1e-9)
    # poles: eigenvalues of A (scipy) for a minimal system
    assert matched_distance(data.poles[0][0], scipy.linalg.eigvals(r.a)).max() <= 1e-9
    # the zeros_poles_gain data reproduce the frequency response (closed form product)
    for s in S_POINTS:
        np.testing.assert_allclose(
            zeros_poles_gain_response(data.zeros[0][0], data.poles[0][0], data.gain[0][0], s),
            real_response(r, s)[0, 0], rtol=1e-8,
        )


@pytest.mark.parametrize("relative_degree", [0, 1, 2, 3])
@pytest.mark.parametrize("seed", [4, 5])
def test_own_zero_fallback_against_slycot_ab08nd(relative_degree: int, seed: int) -> None:
    # G = (random numerator of degree 6 - k) / (random stable denominator of degree 6)
    rng = np.random.default_rng(seed)
    poles = -rng.uniform(0.5, 5.0, 6)
    zeros = rng.uniform(-4.0, 4.0, 6 - relative_degree)
    base = realization_from_zeros_poles_gain([[list(zeros)]], [[list(poles)]], [[1.5]])
    r = similarity_transformed(base, rng.standard_normal((6, 6)) + 3.0 * np.eye(6))
    ours = from_realization._siso_zeros(r.a, r.b[:, 0], r.c[0, :], float(r.d[0, 0]),
                                        rank_rtol=DEFAULT_RANK_RTOL)
    # independent: slycot ab08nd reduced pencil, scipy.linalg.eigvals
    nu, *_, af, bf = slycot.ab08nd(6, 1, 1, r.a, r.b, r.c, r.d)
    ref = scipy.linalg.eigvals(af[:nu, :nu], bf[:nu, :nu])
    assert ours.size == nu == 6 - relative_degree
    assert matched_relative(ours, ref, floor=1.0).max() <= 1e-8
    # closed form: the zeros we put in
    assert matched_relative(ours, zeros, floor=1.0).max() <= 1e-7


def test_ab08nd_failure_falls_back_to_own_zeros(monkeypatch: pytest.MonkeyPatch) -> None:
    def broken(*args, **kwargs):
        raise ValueError("simulated failure")

    monkeypatch.setattr(slycot, "ab08nd", broken)
    z, p, k = [-2.0, 1.0 + 1.0j, 1.0 - 1.0j], [-1.0, -3.0, -0.5 + 2.0j, -0.5 - 2.0j], 3.0
    r = realization_from_zeros_poles_gain([[z]], [[p]], [[k]])
    data = zeros_poles_gain_from_realization(r)
    # closed form: the values we put in
    assert matched_relative(data.zeros[0][0], z).max() <= 1e-10
    assert matched_relative(data.poles[0][0], p).max() <= 1e-10
    assert data.gain[0][0] == pytest.approx(k, rel=1e-12)


def test_gain_is_first_markov_parameter_for_relative_degree_two() -> None:
    # G = 5 / ((s+1)(s+2)) in scrambled coordinates: gain 5 = C A B (closed form,
    # Markov parameters, common practice); zeros none, poles -1, -2
    base = Realization.from_arrays([[-1.0, 0.0], [1.0, -2.0]], [[5.0], [0.0]], [[0.0, 1.0]],
                                   [[0.0]])
    t = np.array([[2.0, 1.0], [-0.5, 3.0]])
    r = similarity_transformed(base, t)
    data = zeros_poles_gain_from_realization(r)
    assert data.zeros[0][0] == []
    assert data.gain[0][0] == pytest.approx(5.0, rel=1e-12)
    assert matched_distance(data.poles[0][0], [-1.0, -2.0]).max() <= 1e-12


def test_hidden_modes_do_not_appear_in_channel_data() -> None:
    # mode -3 uncontrollable, mode -5 unobservable: G = 2/(s+1) (closed form)
    a = np.diag([-1.0, -3.0, -5.0])
    b = np.array([[1.0], [0.0], [1.0]])
    c = np.array([[2.0, 1.0, 0.0]])
    r = similarity_transformed(Realization.from_arrays(a, b, c, [[0.0]]),
                               scipy.linalg.hilbert(3) + np.eye(3))
    data = zeros_poles_gain_from_realization(r)
    assert matched_distance(data.poles[0][0], [-1.0]).max() <= 1e-9
    assert data.zeros[0][0] == []
    assert data.gain[0][0] == pytest.approx(2.0, rel=1e-9)
    tf = transfer_function_from_realization(r)
    np.testing.assert_allclose(tf.numerator[0][0], [0.0, 2.0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(tf.denominator[0][0], [1.0, 1.0], rtol=0, atol=1e-9)


def test_ss_to_tf_against_python_control() -> None:
    rng = np.random.default_rng(11)
    a = rng.standard_normal((4, 4)) - 3.0 * np.eye(4)
    b = rng.standard_normal((4, 2))
    c = rng.standard_normal((3, 4))
    d = rng.standard_normal((3, 2))
    r = Realization.from_arrays(a, b, c, d)
    tf = transfer_function_from_realization(r)
    ref = control.ss2tf(control.ss(a, b, c, d))
    for s in S_POINTS:
        # independent: python-control ss2tf (slycot tb04ad)
        ours = tf_response(tf.numerator, tf.denominator, s)
        np.testing.assert_allclose(ours, ref(s), rtol=1e-9, atol=1e-12)


def test_order_zero_everywhere() -> None:
    r = realization_from_transfer_function([[[2.0], [0.0, 3.0]]], [[[4.0], [0.0, 1.0]]])
    assert r.order == 0
    np.testing.assert_allclose(r.d, [[0.5, 3.0]], rtol=1e-15, atol=0)  # closed form
    tf = transfer_function_from_realization(r)
    assert tf.numerator == [[[0.5], [3.0]]]
    assert tf.denominator == [[[1.0], [1.0]]]
    data = zeros_poles_gain_from_realization(r)
    assert data.gain == [[0.5, 3.0]] and data.zeros == [[[], []]] and data.poles == [[[], []]]
    zero = transfer_function_from_realization(Realization.from_arrays([[-1.0]], [[0.0]],
                                                                      [[1.0]], [[0.0]]))
    assert zero.numerator == [[[0.0]]] and zero.denominator == [[[1.0]]]


def test_results_are_json_friendly() -> None:
    r = realization_from_zeros_poles_gain([[[-1.0 + 1j, -1.0 - 1j]]],
                                          [[[-2.0, -3.0 + 1j, -3.0 - 1j]]], [[2.0]], 0.5)
    zeros_poles_gain = zeros_poles_gain_from_realization(r).as_dict()
    tf = transfer_function_from_realization(r).as_dict()
    text = json.dumps({"zeros_poles_gain": zeros_poles_gain, "tf": tf})
    back = json.loads(text)
    assert back["zeros_poles_gain"]["sample_period"] == 0.5
    assert all(len(v) == 2 for v in back["zeros_poles_gain"]["zeros"][0][0])
    assert isinstance(zeros_poles_gain_from_realization(r), ZerosPolesGainData)
    assert isinstance(transfer_function_from_realization(r), TransferFunctionData)


# ============================================================ slycot failure fallback
def test_slycot_failure_falls_back_to_own_construction(monkeypatch: pytest.MonkeyPatch) -> None:
    def broken(*args, **kwargs):
        raise slycot.exceptions.SlycotArithmeticError("simulated failure", 1)

    monkeypatch.setattr(slycot, "td04ad", broken)
    with pytest.raises(NumericalTroubleError, match="TD04AD"):
        from_transfer_function._realize_with_slycot(
            [[(np.array([0.0, 1.0]), np.array([1.0, 1.0]))]], 1, 1, coefficient_rtol=1e-14
        )
    r = realization_from_transfer_function(TD04AD_NUM, TD04AD_DEN)
    assert r.order == 3  # SLICOT TD04AD example results (order 3)
    for s in S_POINTS:
        np.testing.assert_allclose(real_response(r, s), tf_response(TD04AD_NUM, TD04AD_DEN, s),
                                   rtol=1e-10)


# ============================================================ bad inputs
BAD_TF = [
    pytest.param([[[1.0, 0.0, 0.0]]], [[[1.0, 1.0]]], None,
                 "transfer_function.numerator[0][0]: has degree 2 but the denominator has "
                 "degree 1; channel [0][0] is improper",
                 id="improper-siso"),
    pytest.param([[[1.0], [1.0, 2.0, 3.0]]], [[[1.0, 1.0], [1.0, 1.0]]], None,
                 "channel [0][1] is improper", id="improper-mimo-names-channel"),
    pytest.param([[[1.0]], [[1.0], [2.0]]], [[[1.0]], [[1.0], [1.0]]], None,
                 "transfer_function.numerator[1]: has 2 input entries", id="ragged"),
    pytest.param([[[float("nan")]]], [[[1.0, 1.0]]], None, "contains NaN or infinity",
                 id="nan"),
    pytest.param([[[1.0]]], [[[0.0, 0.0]]], None,
                 "transfer_function.denominator[0][0]: is zero", id="zero-denominator"),
    pytest.param([[[1.0]]], [[[1.0, 1.0]], [[1.0]]], None, "same [output][input] layout",
                 id="shape-mismatch"),
    pytest.param([], [], None, "is empty", id="empty"),
    pytest.param([[["a"]]], [[[1.0]]], None, "expected a list of real numbers", id="not-a-number"),
    pytest.param([[[1.0]]], [[[1.0, 1.0]]], 0.0, "sample_period: got 0.0", id="zero-period"),
    pytest.param([[[1.0]]], [[[1.0, 1.0]]], float("inf"), "sample_period", id="inf-period"),
    pytest.param([[[1.0]]], [[[1.0, 1.0]]], "1ms", "sample_period: got '1ms'", id="str-period"),
]


@pytest.mark.parametrize("num,den,dt,message", BAD_TF)
def test_bad_transfer_functions(num, den, dt, message) -> None:
    with pytest.raises(InvalidModelError) as info:
        realization_from_transfer_function(num, den, dt)
    assert message in str(info.value)


BAD_ZEROS_POLES_GAIN = [
    pytest.param([[[1.0 + 1.0j]]], [[[-1.0, -2.0]]], [[1.0]],
                 "zeros_poles_gain.zeros[0][0]: channel [0][0] has 1 value(s) with positive",
                 id="unpaired-complex"),
    pytest.param([[[]]], [[[-1.0 + 1.0j, -1.0 - 1.1j]]], [[1.0]],
                 "has no conjugate partner", id="mismatched-conjugate"),
    pytest.param([[[-1.0, -2.0]]], [[[-3.0]]], [[1.0]],
                 "channel [0][0] has 2 zeros but only 1 poles; it is improper", id="improper"),
    pytest.param([[[]]], [[[-1.0]]], [[float("nan")]], "zeros_poles_gain.gain[0][0]",
                 id="nan-gain"),
    pytest.param([[[]]], [[["x"]]], [[1.0]], "zeros_poles_gain.poles[0][0][0]",
                 id="bad-pole"),
    pytest.param([[[]]], [[[[1.0, 2.0, 3.0]]]], [[1.0]], "expected a number or an [re, im] pair",
                 id="bad-pair"),
    pytest.param([[[]], [[]]], [[[-1.0]]], [[1.0]], "zeros_poles_gain.poles: is 1x1",
                 id="shape-mismatch"),
]


@pytest.mark.parametrize("z,p,k,message", BAD_ZEROS_POLES_GAIN)
def test_bad_zeros_poles_gain(z, p, k, message) -> None:
    with pytest.raises(InvalidModelError) as info:
        realization_from_zeros_poles_gain(z, p, k)
    assert message in str(info.value)


def test_bad_realization_argument() -> None:
    with pytest.raises(InvalidModelError, match="expected an audit.core.realization.Realization"):
        zeros_poles_gain_from_realization([[1.0]])  # type: ignore[arg-type]


# ============================================================ property
def _separated(values: list[complex], new: complex, gap: float) -> bool:
    return all(abs(new - v) >= gap * max(1.0, abs(v)) for v in values)


@st.composite
def stable_siso_zeros_poles_gain(draw: st.DrawFn) -> tuple[list[complex], list[complex], float]:
    n_poles = draw(st.integers(1, 6), label="n_poles")
    n_zeros = draw(st.integers(0, n_poles), label="n_zeros")

    def roots(count: int, existing: list[complex], stable: bool) -> list[complex]:
        out: list[complex] = []
        while len(out) < count:
            mag = draw(st.floats(0.1, 10.0), label="magnitude")
            if count - len(out) >= 2 and draw(st.booleans(), label="complex"):
                ang = draw(st.floats(0.2, 1.4), label="angle")
                val = complex(-mag * np.cos(ang), mag * np.sin(ang))
                if not stable and draw(st.booleans(), label="rhp"):
                    val = complex(-val.real, val.imag)
                if _separated(out + existing, val, 0.2) and _separated(
                        out + existing, val.conjugate(), 0.2):
                    out += [val, val.conjugate()]
            else:
                val = complex(-mag if (stable or draw(st.booleans(), label="lhp")) else mag)
                if _separated(out + existing, val, 0.2):
                    out.append(val)
        return out

    poles = roots(n_poles, [], True)
    zeros = roots(n_zeros, poles, False)
    gain = draw(st.floats(0.1, 10.0), label="gain") * draw(st.sampled_from([-1.0, 1.0]))
    return zeros, poles, gain


def _eigen_condition(m: np.ndarray, n: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues and their condition numbers ||x|| ||y|| / |y^H N x| (scipy.linalg.eig)."""
    nmat = np.eye(m.shape[0]) if n is None else n
    w, vl, vr = scipy.linalg.eig(m, nmat, left=True, right=True)
    kappa = np.array([
        np.linalg.norm(vl[:, k]) * np.linalg.norm(vr[:, k])
        / max(abs(vl[:, k].conj() @ nmat @ vr[:, k]), 1e-300)
        for k in range(w.size)
    ])
    return w, kappa


@settings(max_examples=40, deadline=None)
@given(stable_siso_zeros_poles_gain())
def test_property_zeros_poles_gain_round_trip_recovers_poles_and_zeros(zeros_poles_gain) -> None:
    zeros, poles, gain = zeros_poles_gain
    r = realization_from_zeros_poles_gain([[zeros]], [[poles]], [[gain]])
    assert r.order == len(poles)
    data = zeros_poles_gain_from_realization(r)
    scale = max(1.0, float(np.linalg.norm(np.block([[r.a, r.b], [r.c, r.d]]))))
    # poles: tolerance scaled by the eigenvalue condition numbers of A (scipy.linalg.eig)
    _, kappa_p = _eigen_condition(r.a)
    tol_p = 1e3 * EPS * scale * kappa_p.max()
    assert matched_distance(data.poles[0][0], poles).max() <= tol_p
    # zeros: condition numbers of the finite eigenvalues of the system pencil
    assert len(data.zeros[0][0]) == len(zeros)
    if zeros:
        size = r.order + 1
        nmat = np.zeros((size, size))
        nmat[:-1, :-1] = np.eye(r.order)
        w, kappa = _eigen_condition(np.block([[r.a, r.b], [r.c, r.d]]), nmat)
        finite = np.isfinite(w) & (np.abs(w) < 1e6)
        kz = kappa[finite].max() if np.any(finite) else 1.0
        tol_z = 1e3 * EPS * scale * kz * max(1.0, max(abs(z) for z in zeros))
        assert matched_distance(data.zeros[0][0], zeros).max() <= tol_z
    assert data.gain[0][0] == pytest.approx(gain, rel=1e-8)


def test_row_common_denominators_give_mcmillan_order() -> None:
    # each output row has its own denominator with 3 distinct simple poles and rank-1
    # residues (a row), so the McMillan degree is 4 x 3 = 12 (sum of residue ranks;
    # Kailath, Linear Systems, 1980, ch. 6, from memory)
    rng = np.random.default_rng(0)
    num = [[list(rng.standard_normal(3)) for _ in range(4)] for _ in range(4)]
    den = [[list(np.real(np.poly(-np.array([1.0, 2.0, 3.0]) * (i + 1.3))))] * 4
           for i in range(4)]
    for use_slycot in (True, False):
        r = realization_from_transfer_function(num, den, use_slycot=use_slycot)
        assert r.order == 12
        for s in S_POINTS:
            # closed-form evaluation of the polynomials (no source)
            np.testing.assert_allclose(real_response(r, s), tf_response(num, den, s),
                                       rtol=1e-10, atol=1e-13)


@pytest.mark.parametrize("offset,expected", [(0.0, 1), (1e-3, 2)], ids=["exact", "near"])
def test_pole_zero_cancellation_only_when_exact(offset: float, expected: int) -> None:
    # (s + 1 + offset) / ((s + 1)(s + 2)): exact cancellation -> 1/(s+2) (closed form)
    num = [[[1.0, 1.0 + offset]]]
    den = [[[1.0, 3.0, 2.0]]]
    assert realization_from_transfer_function(num, den).order == expected
    rz = realization_from_zeros_poles_gain([[[-1.0 - offset]]], [[[-1.0, -2.0]]], [[1.0]])
    assert rz.order == expected
