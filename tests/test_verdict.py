"""Invariants of the equivalence verdict, hand-picked first, then fuzzed with hypothesis.

Facts of the trade used here (no numeric reference value is computed by lti-audit itself):
- the transfer function is invariant under a change of state coordinates
  (Kailath, Linear Systems, 1980, sec. 2.1 -- from memory);
- removing uncontrollable / unobservable modes leaves the transfer function unchanged
  (Kalman decomposition; Kailath 1980, sec. 2.4 -- from memory);
- a pole, zero, gain or feedthrough moved by a relative 1e-3 changes the transfer function
  by far more than the 1e-6 default tolerance (common practice, no source).
"""

from __future__ import annotations

import control
import numpy as np
import pytest
import scipy.signal
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from audit.errors import IncompatibleModelsError
from audit.core.realization import Realization, similarity_transformed
from audit.evidence.record import DEFAULT_RTOL
from audit.verdict.compare import Options, compare_models, compare_pair, overall_verdict

from .systems import random_poles, random_transform, realization_with_poles


def _pair(seed: int, n: int, m: int, p: int, *, discrete: bool = False, unstable: bool = False,
          cond: float = 1e3, with_d: bool = True):
    rng = np.random.default_rng(seed)
    poles = random_poles(rng, n, discrete=discrete, unstable=unstable)
    r1 = realization_with_poles(rng, poles, m, p, 0.05 if discrete else None, with_d=with_d)
    r2 = similarity_transformed(r1, random_transform(rng, n, cond))
    return r1.with_name("reference"), r2.with_name("transformed")


CASES = [
    pytest.param(dict(n=3, m=1, p=1), id="siso-continuous"),
    pytest.param(dict(n=6, m=2, p=3), id="mimo-continuous"),
    pytest.param(dict(n=5, m=1, p=1, discrete=True), id="siso-discrete"),
    pytest.param(dict(n=6, m=3, p=2, discrete=True), id="mimo-discrete"),
    pytest.param(dict(n=4, m=1, p=2, unstable=True), id="unstable-continuous"),
    pytest.param(dict(n=8, m=2, p=2, cond=1e6), id="cond-1e6"),
    pytest.param(dict(n=5, m=2, p=1, with_d=False), id="strictly-proper"),
]


@pytest.mark.parametrize("case", CASES)
def test_similarity_transform_is_equivalent(case):
    # invariance of the transfer function under a change of coordinates (Kailath 1980, from memory)
    r1, r2 = _pair(11, **case)
    res = compare_pair(r1, r2)
    assert res.verdict == "equivalent", res.explanation
    decisive = [e for e in res.evidence if e.decisive]
    assert len(decisive) == 1 and decisive[0].outcome == "pass"
    assert decisive[0].value <= DEFAULT_RTOL


def _mp_gain(r: Realization, omega: float, dps: int = 50):
    """G(j omega) of the stored doubles, evaluated independently with mpmath at `dps` digits."""
    import mpmath

    with mpmath.workdps(dps):
        n = r.order
        s = mpmath.mpc(0, omega)
        m = mpmath.matrix(n, n)
        for i in range(n):
            for j in range(n):
                m[i, j] = (s if i == j else 0) - mpmath.mpf(float(r.a[i, j]))
        x = mpmath.matrix(n, r.n_inputs)
        for k in range(r.n_inputs):  # lu_solve takes one right-hand side at a time
            col = mpmath.lu_solve(m, mpmath.matrix([float(v) for v in r.b[:, k]]))
            for i in range(n):
                x[i, k] = col[i]
        g = mpmath.matrix(r.c.tolist()) * x + mpmath.matrix(r.d.tolist())
        return np.array([[complex(g[i, j]) for j in range(g.cols)] for i in range(g.rows)])


def test_ill_conditioned_refactor_really_differs_at_a_tight_tolerance():
    # The transformed model, as stored in doubles, is a slightly different system: at a
    # tolerance below its true distance the verdict must be "different", and an
    # independent 50-digit mpmath evaluation (mpmath.lu_solve) must confirm the distance.
    r1, r2 = _pair(11, n=8, m=2, p=2, cond=1e6)
    res = compare_pair(r1, r2, options=Options(rtol=1e-7))
    assert res.verdict == "different"
    ev = next(e for e in res.evidence if e.decisive)
    w = ev.details["peak_frequency_rad_s"]
    worst = max(ev.details.get("extended_precision", {}).get("largest_relative_difference_enclosure", [0])[0], 0)
    diff = np.linalg.norm(_mp_gain(r1, w) - _mp_gain(r2, w), 2)
    scale = ev.details["reference_peak_gain"]
    assert diff / scale > 1e-7 or worst > 1e-7


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("change", ["pole", "zero", "gain", "d"])
def test_moved_element_is_different(case, change):
    # a relative change of 1e-2 in any element is far above the 1e-6 tolerance (common practice)
    r1, _ = _pair(23, **case)
    a, b, c, d = (np.array(x) for x in (r1.a, r1.b, r1.c, r1.d))
    if change == "pole":
        a[0, 0] *= 1.01
    elif change == "zero":
        # moving a zero: change the direction of B for one mode (residue direction change)
        b[0, 0] += 0.05 * max(1.0, abs(b[0, 0]))
    elif change == "gain":
        c = c * 1.01
    else:
        d[0, 0] += 0.05 * max(1.0, float(np.abs(r1.d).max()))
    r2 = r1.with_matrices(a, b, c, d).with_name("changed")
    res = compare_pair(r1, r2)
    assert res.verdict == "different", res.explanation
    assert res.diagnosis["differing_channels"], res.diagnosis


def test_non_minimal_side_is_equivalent_and_hidden_modes_reported():
    # python-control's minimal realization (slycot tb01pd) as an independent reduction
    rng = np.random.default_rng(5)
    r = realization_with_poles(rng, [-1.0, -2.0, -3.0 + 4j, -3.0 - 4j], 1, 1)
    n = r.order
    a = np.zeros((n + 2, n + 2))
    a[:n, :n] = r.a
    a[n, n], a[n + 1, n + 1] = -7.0, 0.4  # one stable, one unstable hidden mode
    a[n, 0] = 1.0  # driven by the system (controllable) but never seen (unobservable)
    b = np.vstack([r.b, [[1.0], [0.0]]])  # the mode at 0.4 is not driven: uncontrollable...
    c = np.hstack([r.c, [[0.0, 0.0]]])  # ...and unobservable
    big = Realization.from_arrays(a, b, c, r.d, name="with hidden modes")
    res = compare_pair(r.with_name("minimal"), big)
    assert res.verdict == "equivalent"
    assert any("UNSTABLE HIDDEN MODE" in w and "0.4" in w for w in res.warnings), res.warnings
    ref = control.minreal(control.ss(big.a, big.b, big.c, big.d), verbose=False)
    assert ref.nstates == n  # independent: python-control minreal finds the same order
    ev = next(e for e in res.evidence if e.key == "minimal_order:with hidden modes")
    assert ev.details["minimal_order"] == n


def test_scipy_realization_of_transfer_function_is_equivalent_to_ours():
    # independent route: scipy.signal.tf2ss (controller canonical form) vs our conversion
    from audit.core.from_transfer_function import realization_from_transfer_function

    num, den = [2.0, 3.0, 40.0], [1.0, 6.0, 45.0, 100.0, 50.0]
    ours = realization_from_transfer_function([[num]], [[den]])
    a, b, c, d = scipy.signal.tf2ss(num, den)
    theirs = Realization.from_arrays(a, b, c, d, name="scipy")
    assert compare_pair(ours.with_name("ours"), theirs).verdict == "equivalent"


def test_permutation_is_diagnosed():
    rng = np.random.default_rng(8)
    r1 = realization_with_poles(rng, [-1.0, -5.0, -2.0 + 3j, -2.0 - 3j], 2, 3)
    r2 = r1.with_matrices(r1.a, r1.b[:, [1, 0]], r1.c[[2, 0, 1], :], r1.d[[2, 0, 1]][:, [1, 0]])
    res = compare_pair(r1.with_name("a"), r2.with_name("b"))
    assert res.verdict == "different"
    perm = res.diagnosis["permutation"]
    assert perm["output_order"] == [2, 0, 1] and perm["input_order"] == [1, 0]


def test_unit_change_is_diagnosed():
    rng = np.random.default_rng(9)
    r1 = realization_with_poles(rng, [-1.0, -4.0, -9.0], 2, 2)
    c = r1.c.copy()
    d = r1.d.copy()
    c[1] *= 1000.0  # output 1 reported in mm instead of m
    d[1] *= 1000.0
    res = compare_pair(r1.with_name("m"), r1.with_matrices(r1.a, r1.b, c, d).with_name("mm"))
    assert res.verdict == "different"
    assert res.diagnosis["constant_scale"]["per_output"] == {1: pytest.approx(1000.0, rel=1e-9)}


def test_integrator_models_are_compared_on_a_shifted_contour():
    # G(s) = 1/(s (s+1)): a pole on the imaginary axis makes the L-infinity norm infinite
    r1 = Realization.from_arrays([[0.0, 1.0], [0.0, -1.0]], [[0.0], [1.0]], [[1.0, 0.0]], [[0.0]], name="i1")
    rng = np.random.default_rng(3)
    r2 = similarity_transformed(r1, random_transform(rng, 2, 10.0)).with_name("i2")
    res = compare_pair(r1, r2)
    assert res.verdict == "equivalent"
    assert any("Re(s)" in w for w in res.warnings)
    r3 = r1.with_matrices(r1.a, r1.b * 1.001, r1.c).with_name("i3")
    assert compare_pair(r1, r3).verdict == "different"


def test_pure_gains():
    g1 = Realization.from_arrays(np.zeros((0, 0)), np.zeros((0, 2)), np.zeros((1, 0)), [[2.0, 3.0]], name="g1")
    g2 = Realization.from_arrays([[-1.0]], [[0.0, 0.0]], [[1.0]], [[2.0, 3.0]], name="g2")
    assert compare_pair(g1, g2).verdict == "equivalent"
    g3 = Realization.from_arrays(np.zeros((0, 0)), np.zeros((0, 2)), np.zeros((1, 0)), [[2.0, 3.1]], name="g3")
    assert compare_pair(g1, g3).verdict == "different"


def test_incompatible_models_raise():
    a = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]], name="a")
    b = Realization.from_arrays([[-1.0]], [[1.0, 1.0]], [[1.0]], [[0.0, 0.0]], name="b")
    with pytest.raises(IncompatibleModelsError, match="input"):
        compare_pair(a, b)
    c = Realization.from_arrays([[0.5]], [[1.0]], [[1.0]], [[0.0]], 0.1, name="c")
    with pytest.raises(IncompatibleModelsError, match="continuous-time"):
        compare_pair(a, c)


def test_sets_are_compared_pairwise_against_the_first():
    r1, r2 = _pair(4, 3, 1, 1)
    r3 = r1.with_matrices(r1.a, r1.b, 1.1 * r1.c).with_name("third")
    pairs = compare_models([r1, r2, r3])
    assert [p.verdict for p in pairs] == ["equivalent", "different"]
    assert all(p.reference == "reference" for p in pairs)
    assert overall_verdict(pairs) == "different"


def test_verdict_is_symmetric_on_hand_picked_pairs():
    r1, r2 = _pair(17, 5, 2, 2)
    r3 = r1.with_matrices(r1.a * 1.001, r1.b, r1.c).with_name("moved")
    for x, y in ((r1, r2), (r1, r3)):
        assert compare_pair(x, y).verdict == compare_pair(y, x).verdict


def test_precision_escalation_decides_when_double_cannot():
    # A realization reached through cond(T) = 1e8 (stored in doubles): the double-precision
    # error estimate straddles a tight tolerance, and ball arithmetic settles it.
    r1, r2 = _pair(31, 6, 1, 1, cond=1e8)
    res = compare_pair(r1, r2, options=Options(rtol=1e-9))
    ev = next(e for e in res.evidence if e.decisive)
    assert res.verdict in ("equivalent", "different")
    if "extended_precision" in ev.details:
        assert ev.precision.startswith("ball arithmetic")
    # without escalation the same question may only be answerable as inconclusive
    res_plain = compare_pair(r1, r2, options=Options(rtol=1e-9, escalate=False))
    assert res_plain.verdict in ("equivalent", "different", "inconclusive")
    if res_plain.verdict != "inconclusive":
        assert res_plain.verdict == res.verdict


# ------------------------------------------------------------------ properties
@st.composite
def systems(draw, *, max_order: int = 6):
    n = draw(st.integers(1, max_order), label="order")
    m = draw(st.integers(1, 3), label="inputs")
    p = draw(st.integers(1, 3), label="outputs")
    discrete = draw(st.booleans(), label="discrete")
    unstable = draw(st.booleans(), label="unstable")
    seed = draw(st.integers(0, 2**31 - 1), label="seed")
    rng = np.random.default_rng(seed)
    poles = random_poles(rng, n, discrete=discrete, unstable=unstable)
    return realization_with_poles(rng, poles, m, p, 0.05 if discrete else None), rng


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_property_random_similarity_is_equivalent(data):
    r1, rng = data.draw(systems(), label="system")
    log_cond = data.draw(st.floats(0.0, 5.0), label="log10 cond(T)")
    r2 = similarity_transformed(r1, random_transform(rng, r1.order, 10**log_cond))
    res = compare_pair(r1.with_name("a"), r2.with_name("b"))
    assert res.verdict == "equivalent", res.explanation


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_property_moved_pole_is_different(data):
    r1, rng = data.draw(systems(), label="system")
    factor = data.draw(st.sampled_from([1.01, 0.99, 1.05]), label="pole factor")
    # move the pole of the first diagonal block; every block is driven and observed (random B, C)
    a = np.array(r1.a)
    a[0, 0] *= factor
    if a.shape[0] > 1 and a[0, 1] != 0:
        a[1, 1] *= factor
    r2 = r1.with_matrices(a, r1.b, r1.c)
    res = compare_pair(r1.with_name("a"), r2.with_name("b"))
    assert res.verdict == "different", res.explanation


def test_identically_zero_systems_with_hidden_modes_are_equivalent():
    # regression: G = 0 realized with hidden modes made the norm routine return its
    # underflow floor, and 0-vs-floor was judged "different" (relative difference 1)
    z1 = Realization.from_arrays([[-1.0]], [[1.0]], [[0.0]], [[0.0]], name="z1")
    z2 = Realization.from_arrays([[-3.0, 0.0], [0.0, -2.0]], [[0.0], [1.0]], [[1.0, 0.0]], [[0.0]],
                                 name="z2")  # uncontrollable mode observed, observable mode not driven
    assert compare_pair(z1, z2).verdict == "equivalent"
    g = Realization.from_arrays([[-1.0]], [[1.0]], [[1e-3]], [[0.0]], name="small but nonzero")
    assert compare_pair(z1, g).verdict == "different"
