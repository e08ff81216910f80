"""Accuracy of the frequency-response routes used for large models.

References: python-flint (Arb) ball arithmetic on the STORED matrices, precision raised
until the enclosure radius is below 1e-20 of the value (an independent
arbitrary-precision library); numpy's dense LU solve (LAPACK) where digits are not at
stake.  The published heat-diffusion model is from Y. Chahlaoui and P. Van Dooren, "A
collection of benchmark examples for model reduction of linear time invariant dynamical
systems", SLICOT Working Note 2002-2 (copied to benchmarks/data/).
"""

from __future__ import annotations

from pathlib import Path

import flint
import numpy as np
import pytest

from audit.evidence.frequency import TransferEvaluator
from audit.documents.loading import load_realization
from audit.core.realization import Realization

DATA = Path(__file__).resolve().parent.parent / "benchmarks" / "data"


def _flint_values(r: Realization, points: np.ndarray) -> np.ndarray:
    """G at complex points, from the stored doubles in ball arithmetic (python-flint)."""
    out = []
    old = flint.ctx.prec
    try:
        for lam in points:
            prec = 128
            while True:
                flint.ctx.prec = prec
                n = r.order
                m = flint.acb_mat(n, n, [flint.acb(-float(v)) for v in r.a.ravel()])
                for i in range(n):
                    m[i, i] += flint.acb(float(lam.real), float(lam.imag))
                b = flint.acb_mat(n, r.n_inputs, [flint.acb(float(v)) for v in r.b.ravel()])
                c = flint.acb_mat(r.n_outputs, n, [flint.acb(float(v)) for v in r.c.ravel()])
                d = flint.acb_mat(r.n_outputs, r.n_inputs, [flint.acb(float(v)) for v in r.d.ravel()])
                g = c * m.solve(b) + d
                mid = np.array([complex(float(z.real.mid()), float(z.imag.mid())) for z in g.entries()])
                rad = np.array([float(z.real.rad()) + float(z.imag.rad()) for z in g.entries()])
                if np.linalg.norm(rad) <= 1e-20 * np.linalg.norm(mid) or prec >= 8192:
                    out.append(mid.reshape(r.n_outputs, r.n_inputs))
                    break
                prec *= 2
    finally:
        flint.ctx.prec = old
    return np.array(out)


def _rel_errors(g: np.ndarray, ref: np.ndarray) -> np.ndarray:
    return np.linalg.norm(g - ref, 2, axis=(1, 2)) / np.linalg.norm(ref, 2, axis=(1, 2))


def test_heat_model_keeps_digits_where_the_gain_is_tiny() -> None:
    # |G| falls to ~1e-178 at 1.6e5 rad/s: a dense orthogonal basis keeps no digit
    # there (measured: relative error 1e154 before this route); the banded route on the
    # stored tridiagonal matrix keeps ~14 (python-control's TB05AD route: 1.3e-14).
    r = load_realization(DATA / "heat200.json")
    points = 1j * np.array([0.0, 1.0, 300.0, 2.0e4, 1.6e5])
    ev = TransferEvaluator(r)
    assert ev._band is not None  # tridiagonal after reverse Cuthill-McKee
    ref = _flint_values(r, points)
    assert np.abs(ref[-1]).max() < 1e-150  # the regime where digits are at stake
    err = _rel_errors(ev.at(points), ref)
    assert err.max() <= 1e-12, err  # tolerance: ~100 eps, common practice, no source


def test_dense_schur_route_matches_ball_arithmetic_on_a_rotated_model() -> None:
    # a dense A (random orthogonal rotation of a block-diagonal model) takes the Schur
    # route; a well-conditioned model loses at most a few digits (reference: python-flint)
    rng = np.random.default_rng(3)
    n = 40
    blocks = np.zeros((n, n))
    for k in range(0, n, 2):
        sig, om = -rng.uniform(0.1, 2.0), rng.uniform(0.5, 20.0)
        blocks[k:k + 2, k:k + 2] = [[sig, om], [-om, sig]]
    q, _ = np.linalg.qr(rng.standard_normal((n, n)))
    r = Realization.from_arrays(q.T @ blocks @ q, rng.standard_normal((n, 2)),
                                rng.standard_normal((2, n)), np.zeros((2, 2)))
    ev = TransferEvaluator(r)
    assert ev._band is None
    points = 1j * np.array([0.0, 0.7, 5.0, 19.0, 300.0])
    err = _rel_errors(ev.at(points), _flint_values(r, points))
    assert err.max() <= 1e-10, err  # tolerance: eps * cond(lam I - A) * margin, no source


def test_banded_route_agrees_with_lapack_dense_solve_on_a_permuted_chain() -> None:
    # a chain of states stored in scrambled order: banded only after reordering
    rng = np.random.default_rng(8)
    n = 120
    a = np.diag(-rng.uniform(1.0, 5.0, n)) + np.diag(rng.uniform(0.5, 2.0, n - 1), 1) \
        + np.diag(rng.uniform(0.5, 2.0, n - 1), -1)
    p = rng.permutation(n)
    a = a[np.ix_(p, p)]
    b = rng.standard_normal((n, 2))
    c = rng.standard_normal((3, n))
    r = Realization.from_arrays(a, b, c, np.zeros((3, 2)))
    ev = TransferEvaluator(r)
    assert ev._band is not None and ev._band.lower <= 2
    lam = 1j * np.geomspace(1e-2, 1e2, 30)
    dense = np.array([c @ np.linalg.solve(v * np.eye(n) - a, b) for v in lam])  # numpy LU
    np.testing.assert_allclose(ev.at(lam), dense, rtol=1e-11, atol=0)


def test_singular_point_is_reported_by_every_route() -> None:
    # a pole exactly at s = 0 (closed form): the banded and Schur routes both refuse
    n = 20
    a = np.diag(-np.arange(0.0, n)) + np.diag(np.ones(n - 1), 1)
    r = Realization.from_arrays(a, np.ones((n, 1)), np.ones((1, n)), [[0.0]])
    ev = TransferEvaluator(r)
    g, err = ev.values_and_errors(np.array([0.0j, 1.0j]))
    assert not np.isfinite(g[0]).all() and err[0] == np.inf
    assert np.isfinite(g[1]).all() and np.isfinite(err[1])


@pytest.mark.parametrize("seed", [0, 1])
def test_error_estimate_of_the_fast_route_covers_the_actual_error(seed: int) -> None:
    # values_and_errors: its estimate must not be smaller than the true error
    # (reference values from python-flint)
    rng = np.random.default_rng(seed)
    n = 30
    a = rng.standard_normal((n, n))
    a -= (np.max(np.linalg.eigvals(a).real) + 0.05) * np.eye(n)
    r = Realization.from_arrays(a, rng.standard_normal((n, 1)), rng.standard_normal((2, n)),
                                np.zeros((2, 1)))
    points = 1j * np.geomspace(1e-2, 1e2, 8)
    g, err = TransferEvaluator(r).values_and_errors(points)
    actual = np.linalg.norm(g - _flint_values(r, points), 2, axis=(1, 2))
    assert np.all(actual <= err), (actual, err)
