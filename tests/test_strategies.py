"""Tests of the public hypothesis strategies (audit.workflows.strategies).

Independent references: numpy/scipy eigenvalues and SVD ranks, mpmath extended-precision
evaluation of transfer functions, python-control ``linfnorm`` (SLICOT AB13DD via slycot).
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
import scipy.linalg
from hypothesis import find, given
from hypothesis import strategies as st

from audit.errors import InvalidModelError
from audit.core.realization import Realization
from audit.workflows.strategies import (
    SystemSpec,
    build_system,
    different_pair,
    different_pairs,
    equivalent_pair,
    equivalent_pairs,
    exact_similarity,
    lti_systems,
    random_coordinates,
    system_specs,
)


def _mp_transfer(r: Realization, s: complex, dps: int = 40) -> mpmath.matrix:
    """G(s) = C (sI - A)^-1 B + D in mpmath (independent of our numerics)."""
    with mpmath.workdps(dps):
        n = r.order
        if n == 0:
            return mpmath.matrix(r.d.tolist())
        m = mpmath.matrix(n, n)
        for i in range(n):
            for j in range(n):
                m[i, j] = (mpmath.mpc(s) if i == j else 0) - mpmath.mpf(float(r.a[i, j]))
        x = mpmath.inverse(m) * mpmath.matrix(r.b.tolist())  # 40 digits: an inverse is fine here
        return mpmath.matrix(r.c.tolist()) * x + mpmath.matrix(r.d.tolist())


def _mp_norm(m: mpmath.matrix) -> float:
    return float(mpmath.sqrt(sum(abs(m[i, j]) ** 2 for i in range(m.rows) for j in range(m.cols))))


# ------------------------------------------------------------------- knobs and shapes
@given(system_specs(max_order=6, max_inputs=3, max_outputs=3))
def test_built_system_has_the_requested_shape(spec: SystemSpec) -> None:
    r = build_system(spec)
    assert (r.order, r.n_inputs, r.n_outputs) == (spec.order, spec.inputs, spec.outputs)
    assert r.is_discrete == spec.discrete
    if spec.discrete:
        assert r.sample_period is not None and r.sample_period > 0


@given(system_specs(min_order=1, max_order=6, stabilities=("stable",), max_spread_decades=2.0,
                    time_domain="both", coordinate_condition=(1.0, 10.0)))
def test_stable_systems_have_stable_poles(spec: SystemSpec) -> None:
    r = build_system(spec)
    poles = scipy.linalg.eigvals(r.a)  # independent: scipy (LAPACK geev)
    radius = np.abs(poles) if r.is_discrete else poles.real
    # closed form, common practice: |z| < 1 / Re s < 0; margin 1e-9 for rounding
    assert np.all(radius < (1.0 - 1e-9 if r.is_discrete else -1e-9))


@given(system_specs(min_order=1, max_order=6, stabilities=("unstable",), max_spread_decades=2.0,
                    coordinate_condition=(1.0, 10.0)))
def test_unstable_systems_have_an_unstable_pole(spec: SystemSpec) -> None:
    r = build_system(spec)
    poles = scipy.linalg.eigvals(r.a)  # independent: scipy
    worst = np.abs(poles).max() - 1.0 if r.is_discrete else poles.real.max()
    assert worst > 1e-6  # closed form: reflected pole lies at distance >= 10**-1 from the boundary


@pytest.mark.parametrize("kind", ["uncontrollable", "unobservable"])
def test_hidden_mode_lowers_the_rank(kind: str) -> None:
    spec = SystemSpec(order=4, inputs=1, outputs=1, hidden=kind, seed=3)  # type: ignore[arg-type]
    r = build_system(spec)
    # independent: Krylov matrix and its singular values (numpy SVD)
    if kind == "uncontrollable":
        k = np.hstack([np.linalg.matrix_power(r.a, i) @ r.b for i in range(4)])
    else:
        k = np.vstack([r.c @ np.linalg.matrix_power(r.a, i) for i in range(4)])
    sv = np.linalg.svd(k, compute_uv=False)
    assert sv[-1] / sv[0] < 1e-12  # one mode hidden up to rounding (rtol: 1e4 * eps, common practice)
    assert sv[-2] / sv[0] > 1e-8   # and only one


def test_near_cancellation_has_a_zero_near_a_pole() -> None:
    import control

    r = build_system(SystemSpec(order=3, near_cancellation=True, seed=5))
    sys = control.ss(r.a, r.b, r.c, r.d)
    zeros, poles = control.zeros(sys), control.poles(sys)  # independent: python-control
    gap = min(abs(z - p) / abs(p) for z in zeros for p in poles)
    assert gap < 1e-4  # closed form: residue 1e-6 -> zero within ~1e-6 relative, from memory


def test_clustered_and_repeated_poles() -> None:
    r = build_system(SystemSpec(order=4, clustered=1, repeated=1, seed=2))
    poles = np.sort_complex(scipy.linalg.eigvals(r.a))  # independent: scipy
    rel = [abs(poles[i + 1] - poles[i]) / abs(poles[i]) for i in range(3)]
    # the Jordan pair splits by ~sqrt(eps) ~ 1e-8; the cluster is CLUSTER_RTOL = 1e-3 apart
    assert sorted(rel)[0] < 1e-6 and 5e-4 < sorted(rel)[1] < 2e-3


def test_building_is_deterministic() -> None:
    spec = SystemSpec(order=5, inputs=2, outputs=2, complex_pairs=1, coordinate_condition=50.0, seed=11)
    r1, r2 = build_system(spec), build_system(spec)
    for x, y in zip((r1.a, r1.b, r1.c, r1.d), (r2.a, r2.b, r2.c, r2.d)):
        np.testing.assert_array_equal(x, y)  # determinism: bit-identical on purpose


def test_coordinate_condition_is_as_requested() -> None:
    rng = np.random.default_rng(0)
    t = random_coordinates(6, 1e4, rng)
    # independent: numpy 2-norm condition number
    assert math.isclose(np.linalg.cond(t), 1e4, rel_tol=1e-8)


# ---------------------------------------------------------------------- shrinking
def test_shrinks_toward_small_simple_systems() -> None:
    r = find(lti_systems(min_order=1, max_order=8, max_inputs=3, max_outputs=3),
             lambda r: r.order >= 3)
    assert (r.order, r.n_inputs, r.n_outputs, r.is_discrete) == (3, 1, 1, False)
    spec = find(system_specs(max_order=8, hidden=True, near_cancellation=True),
                lambda s: s.order >= 2)
    assert spec == SystemSpec(order=2, coordinate_condition=1.0, seed=0)


# ------------------------------------------------------------------ exact similarity
def test_exact_similarity_is_correctly_rounded() -> None:
    spec = SystemSpec(order=4, inputs=2, outputs=1, complex_pairs=1, seed=4)
    r = build_system(spec)
    t = random_coordinates(4, 1e3, np.random.default_rng(1))
    ours = exact_similarity(r, t)
    with mpmath.workdps(60):  # independent: mpmath at 60 digits
        tm, am = mpmath.matrix(t.tolist()), mpmath.matrix(r.a.tolist())
        ref = tm * am * mpmath.inverse(tm)
    ref_a = np.array([[float(ref[i, j]) for j in range(4)] for i in range(4)])
    # correct rounding: agreement to 1 ulp (rtol 2.3e-16 relative to each entry)
    np.testing.assert_allclose(ours.a, ref_a, rtol=2.3e-16, atol=0)


@given(equivalent_pairs(max_order=5, max_spread_decades=2.0, hidden=True, near_cancellation=True))
def test_equivalent_pairs_agree_in_extended_precision(pair) -> None:
    r1, r2 = pair.first, pair.second
    pts = [0.37j, 1.9j, 11.0j] if not r1.is_discrete else [complex(np.exp(1j * w)) for w in (0.3, 1.1, 2.9)]
    diff = max(_mp_norm(_mp_transfer(r1, s) - _mp_transfer(r2, s)) for s in pts)
    ref = max(_mp_norm(_mp_transfer(r1, s)) for s in pts)
    # documented guarantee (DEFAULT_MAX_CONSTRUCTION_ERROR = 1e-7) checked by mpmath at other points;
    # allowance x10 because these points are not the probe points
    assert diff <= 1e-6 * max(ref, 1e-300)
    assert pair.construction_error <= 1e-7


@given(different_pairs(max_order=5, max_spread_decades=2.0, relative_amount=(1e-4, 0.3)))
def test_different_pairs_differ_by_at_least_the_amount(pair) -> None:
    r1, r2 = pair.first, pair.second
    pts = [0.37j, 1.9j, 11.0j] if not r1.is_discrete else [complex(np.exp(1j * w)) for w in (0.3, 1.1, 2.9)]
    a = pair.relative_difference
    delta = a / (1 - a)
    # independent: mpmath at 40 digits. G2 = (1 + delta) G1 pointwise (up to the construction
    # rounding), hence ||G1 - G2|| / max(||G1||, ||G2||) = delta / (1 + delta) in every norm.
    for s in pts:
        g1, g2 = _mp_transfer(r1, s), _mp_transfer(r2, s)
        assert _mp_norm(g2 - g1 * (1 + delta)) <= 1e-7 * _mp_norm(g1) + 1e-300
    assert a >= 1e-4 and math.isclose(delta / (1 + delta), a, rel_tol=1e-12)


def test_different_pair_peak_ratio_with_python_control() -> None:
    import control

    pair = different_pair(SystemSpec(order=3, complex_pairs=1, seed=2), relative_amount=0.01)
    r1, r2 = pair.first, pair.second
    g1, g2 = control.ss(r1.a, r1.b, r1.c, r1.d), control.ss(r2.a, r2.b, r2.c, r2.d)
    # independent: python-control linfnorm (SLICOT AB13DD) on minimal models; tolerance 1e-6
    # because AB13DD's relative accuracy on the difference is ~1e-8..1e-4 (measured, non-minimal input)
    ratio = control.linfnorm(g2)[0] / control.linfnorm(g1)[0]
    assert math.isclose(ratio, 1 / (1 - pair.relative_difference), rel_tol=1e-6)


def test_different_pair_amount_closed_form() -> None:
    pair = different_pair(SystemSpec(order=3, seed=1), relative_amount=0.01)
    s = 0.5j
    ratio = _mp_norm(_mp_transfer(pair.second, s)) / _mp_norm(_mp_transfer(pair.first, s))
    # closed form: G2 = (1 + delta) G1 with delta = a / (1 - a) (1 + 1e-6 margin), from the construction
    delta = 0.01 * (1 + 1e-6) / (1 - 0.01 * (1 + 1e-6))
    assert math.isclose(ratio, 1 + delta, rel_tol=1e-12)


def test_equivalent_pair_as_dict_is_plain_json() -> None:
    import json

    pair = equivalent_pair(SystemSpec(order=2, seed=9), transform_condition=10.0)
    data = json.loads(json.dumps(pair.as_dict()))
    assert data["relation"] == "equivalent" and data["spec"]["order"] == 2


# ---------------------------------------------------------------------- bad knobs
@pytest.mark.parametrize(
    "kwargs, fragment",
    [
        ({"order": -1}, "order: got -1"),
        ({"inputs": 0}, "inputs: got 0"),
        ({"stability": "wobbly"}, "stability: got 'wobbly'"),
        ({"coordinate_condition": 0.5}, "coordinate_condition: got 0.5"),
        ({"spread_decades": -1.0}, "spread_decades: got -1.0"),
        ({"hidden": "both"}, "hidden: got 'both'"),
    ],
    ids=["order", "inputs", "stability", "condition", "spread", "hidden"],
)
def test_bad_spec_names_the_field(kwargs: dict, fragment: str) -> None:
    with pytest.raises(InvalidModelError, match=fragment):
        SystemSpec(**kwargs)


def test_bad_strategy_knobs() -> None:
    with pytest.raises(InvalidModelError, match="min_order"):
        system_specs(min_order=5, max_order=2)
    with pytest.raises(InvalidModelError, match="stabilities"):
        system_specs(stabilities=("sideways",))
    with pytest.raises(InvalidModelError, match="relative_amount"):
        different_pair(SystemSpec(), relative_amount=0.9)
    with pytest.raises(InvalidModelError, match="condition"):
        random_coordinates(3, 1e9, np.random.default_rng(0))


def test_strategy_draws_respect_order_range() -> None:
    @given(st.data())
    def inner(data: st.DataObject) -> None:
        r = data.draw(lti_systems(min_order=2, max_order=3), label="system")
        assert 2 <= r.order <= 3

    inner()
