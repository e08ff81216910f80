"""The staircase at larger orders: Householder-applied stages, reuse of results.

References: SLICOT TB01PD through slycot (an independent minimal-realization routine,
QR-based staircase) for the minimal order; numpy LU evaluations of the transfer
function; modes placed by construction (closed form).
"""

from __future__ import annotations

import numpy as np
import pytest
import slycot

from audit.core.realization import Realization
from audit.structure.minimal import minimal_realization
from audit.structure.staircase import controllable_staircase


def _non_minimal(seed: int, n_min: int, n_hidden: int, io: tuple[int, int]) -> Realization:
    """A minimal block plus uncontrollable and unobservable modes, mixed by an orthogonal Q."""
    rng = np.random.default_rng(seed)
    m, p = io
    n = n_min + 2 * n_hidden
    a = np.zeros((n, n))
    a[:n_min, :n_min] = rng.standard_normal((n_min, n_min)) - 3.0 * np.eye(n_min)
    a[n_min:, n_min:] = np.diag(-rng.uniform(0.5, 4.0, 2 * n_hidden))
    b = np.zeros((n, m))
    c = np.zeros((p, n))
    b[:n_min] = rng.standard_normal((n_min, m))
    c[:, :n_min] = rng.standard_normal((p, n_min))
    # first n_hidden extra modes observable but not controllable, the rest controllable
    # but not observable
    c[:, n_min:n_min + n_hidden] = rng.standard_normal((p, n_hidden))
    b[n_min + n_hidden:] = rng.standard_normal((n_hidden, m))
    q, _ = np.linalg.qr(rng.standard_normal((n, n)))
    return Realization.from_arrays(q.T @ a @ q, q.T @ b, c @ q, np.zeros((p, m)))


@pytest.mark.parametrize("seed,n_min,n_hidden,io", [(3, 80, 20, (2, 4)), (2, 40, 10, (3, 3)),
                                                    (5, 60, 15, (4, 4))])
def test_minimal_order_matches_slycot_tb01pd(seed: int, n_min: int, n_hidden: int,
                                             io: tuple[int, int]) -> None:
    # (well-conditioned cases: a single-input Krylov staircase of a dense 80-state block
    # is itself numerically ambiguous, for TB01PD too)
    r = _non_minimal(seed, n_min, n_hidden, io)
    mr = minimal_realization(r)
    n, m, p = r.order, r.n_inputs, r.n_outputs
    # independent: SLICOT TB01PD (slycot), minimal ('M') realization, default tolerance
    # (TB01PD works in place on B padded to max(m, p) columns and C to max(m, p) rows)
    w = max(m, p)
    b_pad = np.zeros((n, w))
    b_pad[:, :m] = r.b
    c_pad = np.zeros((w, n))
    c_pad[:p] = r.c
    out = slycot.tb01pd(n, m, p, np.array(r.a), b_pad, c_pad, job="M", equil="S")
    assert mr.order == n_min and mr.decisions_clear  # by construction (closed form)
    assert out[-1] == mr.order
    # same transfer function (numpy LU evaluation of both)
    for s in (0.3j, 2.0 + 1j, 40j):
        g1 = r.c @ np.linalg.solve(s * np.eye(n) - r.a, r.b)
        mm = mr.realization
        g2 = mm.c @ np.linalg.solve(s * np.eye(mm.order) - mm.a, mm.b) + mm.d
        np.testing.assert_allclose(g2, g1, rtol=1e-8, atol=1e-12 * np.abs(g1).max())


def test_staircase_transformation_is_orthogonal_and_exposes_the_blocks() -> None:
    # Q^T A Q with Q orthogonal, and the uncontrollable part exactly zero below the
    # staircase (construction: 20 uncontrollable modes of 100)
    r = _non_minimal(4, 70, 15, (2, 2))
    st = controllable_staircase(r)
    q = np.asarray(st.transformation)
    np.testing.assert_allclose(q.T @ q, np.eye(r.order), atol=1e-12)
    assert st.order == 85  # 70 minimal + 15 controllable but unobservable (construction)
    a_t = np.asarray(st.realization.a)
    np.testing.assert_allclose(a_t, q.T @ r.a @ q, atol=1e-10 * np.linalg.norm(r.a))
    assert np.all(a_t[st.order:, :st.order] == 0.0)


def test_minimal_realization_is_reused_for_the_same_model() -> None:
    r = _non_minimal(5, 10, 2, (1, 1))
    first = minimal_realization(r)
    assert minimal_realization(r) is first
    # another tolerance is a different question
    assert minimal_realization(r, tol=1e-6) is not first
