"""Tests for audit.evidence.similarity: recovering T with A2 = T A1 T^-1, B2 = T B1, C2 = C1 T^-1.

The true T is drawn by the test (outside the code under test); every numeric assertion
names its source and tolerance.
"""

from __future__ import annotations

import json
import math

import control
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from audit.errors import IncompatibleModelsError, InvalidModelError
from audit.core.realization import Realization, similarity_transformed
from audit.evidence.similarity import similarity_transform_between


def _random_system(rng, n, m, p, dt=None) -> Realization:
    return Realization.from_arrays(
        rng.standard_normal((n, n)), rng.standard_normal((n, m)),
        rng.standard_normal((p, n)), rng.standard_normal((p, m)), dt,
    )


def _conditioned_transform(rng, n, cond) -> np.ndarray:
    u, _ = np.linalg.qr(rng.standard_normal((n, n)))
    v, _ = np.linalg.qr(rng.standard_normal((n, n)))
    return 3.0 * u @ np.diag(np.logspace(0.0, -math.log10(cond), n)) @ v.T


CASES = [
    # (n, m, p, sample period)
    (1, 1, 1, None),
    (2, 1, 1, None),
    (4, 2, 3, None),
    (6, 1, 1, 0.01),
    (8, 3, 2, None),
    (8, 1, 2, 0.5),
]


@pytest.mark.parametrize("cond", [1.0, 1e3, 1e6], ids=["cond1", "cond1e3", "cond1e6"])
@pytest.mark.parametrize("n, m, p, dt", CASES, ids=[f"n{c[0]}m{c[1]}p{c[2]}{'d' if c[3] else 'c'}" for c in CASES])
def test_recovers_known_transform(n, m, p, dt, cond):
    rng = np.random.default_rng(1000 * n + 10 * m + p)
    r1 = _random_system(rng, n, m, p, dt)
    t_true = _conditioned_transform(rng, n, cond if n > 1 else 1.0)
    r2 = similarity_transformed(r1, t_true)
    res = similarity_transform_between(r1, r2)
    assert res.found, res.note
    # the true T was drawn by the test; accuracy degrades ~ linearly with cond(T)
    # (perturbation theory of linear least squares; common practice, no source)
    err = np.linalg.norm(res.transform - t_true) / np.linalg.norm(t_true)
    assert err <= 1e-11 * max(cond, 1.0)
    # condition number of the drawn T is known by construction (3 * diag(1 .. 1/cond))
    assert res.condition_number == pytest.approx(cond if n > 1 else 1.0, rel=1e-4)
    # residuals at rounding level (tolerance: rounding in forming r2 ~ eps * cond)
    assert max(res.residual_a, res.residual_b, res.residual_c) <= 1e-12 * max(cond, 1.0)


def test_matches_controllability_matrix_route_for_siso():
    # independent: T = K2 K1^-1 with K = [b, Ab, ..., A^(n-1) b] from python-control's
    # controllability matrix (Kailath, Linear Systems, 1980 -- from memory), solved
    # with numpy (K1^T T^T = K2^T).
    rng = np.random.default_rng(42)
    r1 = Realization.from_arrays(np.diag([-1.0, -2.0, -3.0]) + 0.1 * rng.standard_normal((3, 3)),
                                 rng.standard_normal((3, 1)), rng.standard_normal((1, 3)), [[0.0]])
    r2 = similarity_transformed(r1, _conditioned_transform(rng, 3, 20.0))
    k1 = control.ctrb(r1.a, r1.b)
    k2 = control.ctrb(r2.a, r2.b)
    t_ref = np.linalg.solve(k1.T, k2.T).T
    res = similarity_transform_between(r1, r2)
    np.testing.assert_allclose(res.transform, t_ref, rtol=0, atol=1e-10 * np.linalg.norm(t_ref))


def test_moved_pole_is_not_similar():
    a1 = np.diag([-1.0, -4.0, -9.0])
    b = np.array([[1.0], [1.0], [1.0]])
    c = np.array([[1.0, 2.0, 3.0]])
    r1 = Realization.from_arrays(a1, b, c, [[0.0]])
    rng = np.random.default_rng(0)
    t = _conditioned_transform(rng, 3, 10.0)
    r2 = similarity_transformed(r1.with_matrices(np.diag([-1.0, -4.4, -9.0]), b, c), t)
    res = similarity_transform_between(r1, r2)
    assert not res.found
    # a 10 % pole move leaves a residual of order 1e-2 at least (no T intertwines two
    # matrices with different spectra; closed form, common practice, no source)
    assert max(res.residual_a, res.residual_b, res.residual_c) > 1e-3
    assert "no T fits" in res.note


def test_same_a_different_b_is_not_similar():
    rng = np.random.default_rng(3)
    r1 = _random_system(rng, 4, 1, 1)
    r2 = r1.with_matrices(r1.a, r1.b * np.array([[1.0], [1.0], [1.3], [1.0]]), r1.c)
    res = similarity_transform_between(r1, r2)
    assert not res.found
    assert max(res.residual_a, res.residual_b, res.residual_c) > 1e-4  # no source: gross change


def test_order_zero_is_trivial():
    r = Realization.from_arrays(np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), [[1.0]])
    res = similarity_transform_between(r, r)
    assert res.found and res.transform.shape == (0, 0) and res.method == "trivial"


def test_non_unique_transform_is_flagged():
    # a state that is neither controllable nor observable leaves T undetermined in that
    # direction (Kalman decomposition; Kailath 1980 -- from memory)
    a = np.diag([-1.0, -2.0, -3.0])
    b = np.array([[1.0], [1.0], [0.0]])
    c = np.array([[1.0, 1.0, 0.0]])
    r1 = Realization.from_arrays(a, b, c, [[0.0]])
    res = similarity_transform_between(r1, r1)
    assert res.unique is False
    assert "not determined uniquely" in res.note


@pytest.mark.parametrize("route", ["modal", "krylov_lsqr"])
def test_routes_for_larger_order(route):
    rng = np.random.default_rng(5)
    r1 = _random_system(rng, 35, 2, 2)
    t_true = _conditioned_transform(rng, 35, 10.0)
    r2 = similarity_transformed(r1, t_true)
    if route == "krylov_lsqr":
        # force the iterative route: a lsqr_limit above n and a modal route that fails
        import audit.evidence.similarity as sim

        original = sim._modal_route
        sim._modal_route = lambda a, b: np.zeros((35, 35))
        try:
            res = similarity_transform_between(r1, r2, lsqr_limit=40)
        finally:
            sim._modal_route = original
    else:
        res = similarity_transform_between(r1, r2)
    assert res.method == route
    assert res.found, res.note
    err = np.linalg.norm(res.transform - t_true) / np.linalg.norm(t_true)
    assert err <= 1e-8  # drawn T; looser than the dense route (iterative LSQR)
    assert res.as_dict()["transform"] is None  # n > 20: matrix left out of the report


def test_as_dict_json_friendly():
    rng = np.random.default_rng(6)
    r1 = _random_system(rng, 3, 1, 2)
    res = similarity_transform_between(r1, similarity_transformed(r1, _conditioned_transform(rng, 3, 5.0)))
    back = json.loads(json.dumps(res.as_dict()))
    assert back["found"] is True
    assert np.array(back["transform"]).shape == (3, 3)
    assert set(back) >= {"condition_number", "residual_a", "residual_b", "residual_c", "note"}


def test_incompatible_models_raise():
    rng = np.random.default_rng(7)
    r3 = _random_system(rng, 3, 1, 1)
    r4 = _random_system(rng, 4, 1, 1)
    with pytest.raises(IncompatibleModelsError, match="order 3 .* order 4"):
        similarity_transform_between(r3, r4)
    r3_mimo = _random_system(rng, 3, 2, 1)
    with pytest.raises(IncompatibleModelsError, match="input"):
        similarity_transform_between(r3, r3_mimo)
    r3_disc = Realization.from_arrays(r3.a, r3.b, r3.c, r3.d, 0.1)
    with pytest.raises(IncompatibleModelsError, match="discrete-time"):
        similarity_transform_between(r3, r3_disc)


@pytest.mark.parametrize("rtol", [0.0, -1.0, float("nan"), "x"])
def test_bad_rtol_raises(rtol):
    rng = np.random.default_rng(8)
    r = _random_system(rng, 2, 1, 1)
    with pytest.raises(InvalidModelError, match="rtol: got"):
        similarity_transform_between(r, r, rtol=rtol)


@settings(max_examples=40, deadline=None)
@given(data=st.data())
def test_property_similar_found_moved_pole_not(data):
    n = data.draw(st.integers(1, 8), label="order")
    m = data.draw(st.integers(1, 3), label="inputs")
    p = data.draw(st.integers(1, 3), label="outputs")
    discrete = data.draw(st.booleans(), label="discrete")
    log_cond = data.draw(st.floats(0.0, 4.0), label="log10 cond(T)")
    seed = data.draw(st.integers(0, 2**32 - 1), label="seed")
    rng = np.random.default_rng(seed)
    poles = rng.uniform(0.05, 0.95, n) if discrete else -np.exp(rng.uniform(-2, 2, n))
    b = rng.standard_normal((n, m))
    c = rng.standard_normal((p, n))
    b[:, 0] += np.sign(b[:, 0]) * 0.5  # every mode visible from input 0 / output 0
    c[0] += np.sign(c[0]) * 0.5
    dt = 0.1 if discrete else None
    basis = _conditioned_transform(rng, n, 10.0)
    r1 = similarity_transformed(Realization.from_arrays(np.diag(poles), b, c, np.zeros((p, m)), dt), basis)
    t_true = _conditioned_transform(rng, n, 10.0**log_cond)
    r2 = similarity_transformed(r1, t_true)
    res = similarity_transform_between(r1, r2)
    assert res.found, res.note
    # drawn T: relative error grows with cond(T) (least-squares perturbation theory)
    err = np.linalg.norm(res.transform - t_true) / np.linalg.norm(t_true)
    assert err <= 1e-9 * 10.0**log_cond
    # moving one pole by 20 % makes the pair non-similar (different spectra; no source)
    k = data.draw(st.integers(0, n - 1), label="moved pole")
    moved = poles.copy()
    moved[k] *= 0.8
    r3 = similarity_transformed(
        Realization.from_arrays(np.diag(moved), b, c, np.zeros((p, m)), dt), basis
    )
    assert not similarity_transform_between(r1, r3).found
