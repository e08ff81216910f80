"""Recover the change of state coordinates between two minimal realizations.

Two minimal realizations of the same transfer function and equal order ``n`` are related
by a unique nonsingular ``T`` (the state-space isomorphism theorem; T. Kailath, *Linear
Systems*, Prentice-Hall, 1980, section 2.4 / 6.2)::

    A2 = T A1 T^-1,   B2 = T B1,   C2 = C1 T^-1.

Written without inverses these are *linear* in ``T``::

    A2 T - T A1 = 0,   T B1 = B2,   C2 T = C1,

and for minimal realizations this linear system has exactly one solution (``T`` is fixed
on the controllability space by ``T A1^k B1 = A2^k B2``).  We solve it in the least-squares
sense:

* ``n <= dense_limit`` (default 30): the Kronecker form (``vec(X Y Z) = (Z^T kron X)
  vec(Y)``, H. V. Henderson and S. R. Searle, "The vec-permutation matrix, the vec operator
  and Kronecker products: a review", *Linear and Multilinear Algebra* 9, 1981) of the
  ``n^2`` unknowns, solved by Householder QR with column pivoting (orthogonal, no explicit
  inverse) followed by one step of iterative refinement with the same factorization;
  a rank-deficient system (non-unique ``T``, e.g. non-minimal realizations) falls back to
  the SVD-based minimum-norm least-squares solution and says so in ``note``.
* larger ``n``: a starting value from the frequency-scaled Krylov equations
  ``T [B1, A1' B1, ...] = [B2, A2' B2, ...]`` (``A' = A / w0``, columns normalized per
  block, solved with ``lstsq``), refined by LSQR (C. C. Paige and M. A. Saunders, "LSQR: An
  algorithm for sparse linear equations and sparse least squares", *ACM TOMS* 8, 1982)
  applied matrix-free to the same linear equations.

The equations are frequency scaled (``A / w0``) and block-weighted so that the three
blocks have comparable size.  The reported residuals are relative backward-error-like
quantities that do not depend on the weighting.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import scipy.linalg
import scipy.sparse.linalg
from numpy.typing import NDArray

from audit.errors import IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from audit.evidence.markov import common_frequency_scale
from audit.core.realization import Realization, check_comparable

FloatArray = NDArray[np.float64]

__all__ = ["SimilarityResult", "similarity_transform_between"]

_EPS = float(np.finfo(float).eps)
# Largest order for which T is included in as_dict() (brief: keep reports small).
_AS_DICT_MAX_ORDER = 20
# Rank decision in the pivoted QR: |R_kk| / |R_11| below this (times the number of
# unknowns) means the linear system does not fix T uniquely in floating point (common
# practice, no source).  Note |R_kk| / |R_11| also falls like cond(T)^-2 for an
# ill-conditioned but unique T, so a "not unique" flag can also mean cond(T) > ~1e6.
_RANK_RTOL = _EPS


@dataclass(frozen=True, eq=False)
class SimilarityResult:
    """A recovered state-coordinate transformation and how well it fits.

    Attributes
    ----------
    transform : (n, n) ndarray
        ``T`` with ``A2 ~ T A1 T^-1``, ``B2 ~ T B1``, ``C2 ~ C1 T^-1`` (read-only).
    condition_number : float
        2-norm condition number of ``T`` (``inf`` when ``T`` is singular).
    residual_a : float
        ``||A2 T - T A1||_F / ((||A1||_F + ||A2||_F) ||T||_F)``.
    residual_b : float
        ``||T B1 - B2||_F / (||T||_F ||B1||_F + ||B2||_F)``.
    residual_c : float
        ``||C2 T - C1||_F / (||C2||_F ||T||_F + ||C1||_F)``.
    tolerance : float
        The ``rtol`` used for ``found``.
    found : bool
        All three residuals ``<= tolerance`` and ``condition_number < 1/eps``.
    method : {"kronecker_qr", "krylov_lsqr", "trivial"}
    unique : bool
        False when the linear equations for ``T`` were numerically rank deficient
        (non-minimal realizations, or ``cond(T)`` beyond about ``1e6``); always True on
        the ``krylov_lsqr`` route, which does not assess it.
    note : str
        Plain-language explanation of the outcome.
    """

    transform: FloatArray
    condition_number: float
    residual_a: float
    residual_b: float
    residual_c: float
    tolerance: float
    found: bool
    method: Literal["kronecker_qr", "krylov_lsqr", "modal", "trivial"]
    unique: bool
    note: str

    @property
    def order(self) -> int:
        return int(self.transform.shape[0])

    def as_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary; ``transform`` is included only for ``n <= 20``."""
        cond = self.condition_number
        return {
            "order": self.order,
            "transform": (
                self.transform.tolist() if self.order <= _AS_DICT_MAX_ORDER else None
            ),
            "condition_number": float(cond) if math.isfinite(cond) else "inf",
            "residual_a": float(self.residual_a),
            "residual_b": float(self.residual_b),
            "residual_c": float(self.residual_c),
            "tolerance": float(self.tolerance),
            "found": bool(self.found),
            "method": self.method,
            "unique": bool(self.unique),
            "note": self.note,
        }


# ----------------------------------------------------------------------- helpers
def _norm(x: FloatArray) -> float:
    return float(np.linalg.norm(x)) if x.size else 0.0


def _safe_ratio(num: float, den: float) -> float:
    if den > 0.0:
        return num / den
    return 0.0 if num == 0.0 else math.inf


def _residuals(
    r1: Realization, r2: Realization, t: FloatArray
) -> tuple[float, float, float]:
    nt = _norm(t)
    res_a = _safe_ratio(
        _norm(r2.a @ t - t @ r1.a), (_norm(r1.a) + _norm(r2.a)) * nt
    )
    res_b = _safe_ratio(_norm(t @ r1.b - r2.b), nt * _norm(r1.b) + _norm(r2.b))
    res_c = _safe_ratio(_norm(r2.c @ t - r1.c), _norm(r2.c) * nt + _norm(r1.c))
    return res_a, res_b, res_c


def _weights(r1: Realization, r2: Realization) -> tuple[float, float, float]:
    """Weights (w_a, w_b, w_c) for the blocks A2'T - TA1' = 0, TB1 = B2, C2T = C1.

    ``||T||`` is estimated as the geometric mean of ``||B2||/||B1||`` and
    ``||C1||/||C2||`` (whichever exist); the A block is divided by it so that all three
    blocks measure relative misfit.
    """
    estimates = []
    nb1, nb2, nc1, nc2 = _norm(r1.b), _norm(r2.b), _norm(r1.c), _norm(r2.c)
    if nb1 > 0.0 and nb2 > 0.0:
        estimates.append(nb2 / nb1)
    if nc1 > 0.0 and nc2 > 0.0:
        estimates.append(nc1 / nc2)
    t_scale = math.exp(sum(math.log(e) for e in estimates) / len(estimates)) if estimates else 1.0
    w_a = 1.0 / t_scale
    w_b = 1.0 / nb2 if nb2 > 0.0 else 1.0
    w_c = 1.0 / nc1 if nc1 > 0.0 else 1.0
    return w_a, w_b, w_c


def _kronecker_solve(
    a1: FloatArray,
    a2: FloatArray,
    r1: Realization,
    r2: Realization,
    weights: tuple[float, float, float],
) -> tuple[FloatArray, bool]:
    n = a1.shape[0]
    w_a, w_b, w_c = weights
    eye = np.eye(n)
    # column-major vec: vec(A2 T) = (I kron A2) vec T, vec(T A1) = (A1^T kron I) vec T,
    # vec(T B1) = (B1^T kron I) vec T, vec(C2 T) = (I kron C2) vec T.
    m_a = w_a * (np.kron(eye, a2) - np.kron(a1.T, eye))
    m_b = w_b * np.kron(r1.b.T, eye)
    m_c = w_c * np.kron(eye, r2.c)
    mat = np.vstack([m_a, m_b, m_c])
    rhs = np.concatenate(
        [
            np.zeros(n * n),
            w_b * r2.b.ravel(order="F"),
            w_c * r1.c.ravel(order="F"),
        ]
    )
    q, rr, piv = scipy.linalg.qr(mat, mode="economic", pivoting=True)
    diag = np.abs(np.diag(rr))
    unique = bool(diag.size and diag[-1] > _RANK_RTOL * diag.size * diag[0])
    if not unique:  # rank-deficient or extremely ill-conditioned: minimum-norm solution
        x = scipy.linalg.lstsq(mat, rhs)[0]
        return x.reshape((n, n), order="F"), False

    def solve(b: FloatArray) -> FloatArray:
        z = scipy.linalg.solve_triangular(rr, q.T @ b)
        x = np.empty_like(z)
        x[piv] = z
        return x

    x = solve(rhs)
    x = x + solve(rhs - mat @ x)  # one step of iterative refinement
    return x.reshape((n, n), order="F"), True


def _krylov_start(
    a1: FloatArray, a2: FloatArray, r1: Realization, r2: Realization
) -> FloatArray:
    n = a1.shape[0]
    k1_blocks, k2_blocks = [], []
    x1, x2 = r1.b.copy(), r2.b.copy()
    for _ in range(n):
        s = _norm(x1)
        s = s if s > 0.0 else 1.0
        k1_blocks.append(x1 / s)
        k2_blocks.append(x2 / s)
        x1, x2 = a1 @ x1, a2 @ x2
    k1 = np.hstack(k1_blocks)
    k2 = np.hstack(k2_blocks)
    # T K1 = K2  <=>  K1^T T^T = K2^T
    return scipy.linalg.lstsq(k1.T, k2.T)[0].T


def _lsqr_refine(
    t0: FloatArray,
    a1: FloatArray,
    a2: FloatArray,
    r1: Realization,
    r2: Realization,
    weights: tuple[float, float, float],
    steps: int = 2,
) -> FloatArray:
    n, m, p = a1.shape[0], r1.n_inputs, r1.n_outputs
    w_a, w_b, w_c = weights
    sizes = (n * n, n * m, p * n)

    def forward(v: FloatArray) -> FloatArray:
        t = v.reshape((n, n), order="F")
        return np.concatenate(
            [
                (w_a * (a2 @ t - t @ a1)).ravel(order="F"),
                (w_b * (t @ r1.b)).ravel(order="F"),
                (w_c * (r2.c @ t)).ravel(order="F"),
            ]
        )

    def adjoint(u: FloatArray) -> FloatArray:
        ua = u[: sizes[0]].reshape((n, n), order="F")
        ub = u[sizes[0] : sizes[0] + sizes[1]].reshape((n, m), order="F")
        uc = u[sizes[0] + sizes[1] :].reshape((p, n), order="F")
        t = w_a * (a2.T @ ua - ua @ a1.T) + w_b * (ub @ r1.b.T) + w_c * (r2.c.T @ uc)
        return t.ravel(order="F")

    op = scipy.sparse.linalg.LinearOperator(
        (sum(sizes), n * n), matvec=forward, rmatvec=adjoint, dtype=float
    )
    rhs = np.concatenate(
        [np.zeros(n * n), w_b * r2.b.ravel(order="F"), w_c * r1.c.ravel(order="F")]
    )
    x = t0.ravel(order="F").copy()
    for _ in range(steps):  # refinement: solve for corrections from the residual
        res = rhs - forward(x)
        dx = scipy.sparse.linalg.lsqr(
            op, res, atol=1e-15, btol=1e-15, conlim=1e16, iter_lim=4 * n * n
        )[0]
        x = x + dx
    return x.reshape((n, n), order="F")


def _modal_route(r1: Realization, r2: Realization) -> FloatArray:
    """T from matched eigenvector bases (O(n^3), for large diagonalisable models).

    With ``A1 = V1 L V1^-1`` and ``A2 = V2 L V2^-1`` (eigenvalues matched by optimal
    assignment), every T with ``A2 T = T A1`` is ``T = V2 diag(d) V1^-1``; the modal
    scale factors ``d`` are fitted to ``T B1 = B2`` and ``C2 T = C1`` together by
    least squares per mode. Uses solves, never an explicit inverse. Requires distinct
    (well separated) eigenvalues; otherwise the residual check reports failure.
    """
    from audit.evidence.matching import match_points

    w1, v1 = np.linalg.eig(r1.a)
    w2, v2 = np.linalg.eig(r2.a)
    matching = match_points(w1, w2)
    order = np.empty(len(w1), dtype=int)
    for pair in matching.pairs:
        order[pair.first_index] = pair.second_index
    v2 = v2[:, order]
    x1 = np.linalg.solve(v1, r1.b.astype(complex))  # modal input coefficients
    x2 = np.linalg.solve(v2, r2.b.astype(complex))
    y1 = (r1.c @ v1).T  # modal output coefficients, one row per mode
    y2 = (r2.c @ v2).T
    num = np.sum(np.conj(x1) * x2, axis=1) + np.sum(np.conj(y2) * y1, axis=1)
    den = np.sum(np.abs(x1) ** 2, axis=1) + np.sum(np.abs(y2) ** 2, axis=1)
    d = num / np.where(den > 0, den, 1.0)
    # T = V2 diag(d) V1^-1  <=>  V1^T T^T = (V2 diag(d))^T
    t = np.linalg.solve(v1.T, (v2 * d).T).T
    return np.real(t)


# ------------------------------------------------------------------------ public
def similarity_transform_between(
    r1: Realization,
    r2: Realization,
    *,
    rtol: float = 1e-8,
    dense_limit: int = 30,
    lsqr_limit: int = 45,
) -> SimilarityResult:
    """Find ``T`` with ``A2 = T A1 T^-1``, ``B2 = T B1``, ``C2 = C1 T^-1``.

    Parameters
    ----------
    r1, r2 : Realization
        Minimal realizations of equal order ``n``: ``A : (n, n)``, ``B : (n, m)``,
        ``C : (p, n)``; ``D`` is not used (compare it separately).
    rtol : float, keyword-only
        ``found`` requires every relative residual ``<= rtol``.
    dense_limit : int, keyword-only
        Largest ``n`` solved by the dense Kronecker least-squares method; above it T
        is built from matched eigenvector bases (O(n^3)).
    lsqr_limit : int, keyword-only
        When the eigenvector route fails (repeated or clustered poles) and
        ``n <= lsqr_limit``, a matrix-free Krylov + LSQR route is tried (slow:
        O(n^4) per iteration sweep, so it is capped).

    Returns
    -------
    SimilarityResult

    Raises
    ------
    IncompatibleModelsError
        If the orders, input/output counts or time domains differ.
    InvalidModelError
        If ``rtol`` or ``dense_limit`` is out of range.
    NumericalTroubleError
        If a LAPACK routine fails.

    Examples
    --------
    >>> r1 = Realization.from_arrays([[-1.0, 0.0], [0.0, -2.0]], [[1.0], [1.0]],
    ...                              [[1.0, 1.0]], [[0.0]])
    >>> r2 = Realization.from_arrays([[-2.0, 0.0], [0.0, -1.0]], [[2.0], [1.0]],
    ...                              [[0.5, 1.0]], [[0.0]])
    >>> res = similarity_transform_between(r1, r2)
    >>> res.found, (np.round(res.transform, 12) + 0.0).tolist()
    (True, [[0.0, 2.0], [1.0, 0.0]])
    """
    if r1.order != r2.order:
        label1 = r1.name or "first model"
        label2 = r2.name or "second model"
        raise IncompatibleModelsError(
            f"{label1} has order {r1.order} but {label2} has order {r2.order}; a state "
            "similarity needs two realizations of equal order (reduce both to minimal "
            "realizations first)"
        )
    check_comparable(r1, r2)
    try:
        tol = float(rtol)
    except (TypeError, ValueError):
        tol = math.nan
    if not math.isfinite(tol) or tol <= 0.0:
        raise InvalidModelError(
            f"rtol: got {rtol!r} but a positive finite number was expected", field="rtol"
        )
    if isinstance(dense_limit, bool) or not isinstance(dense_limit, (int, np.integer)) \
            or dense_limit < 0:
        raise InvalidModelError(
            f"dense_limit: got {dense_limit!r} but a non-negative integer was expected",
            field="dense_limit",
        )
    n = r1.order
    if n == 0:
        t0 = np.zeros((0, 0))
        t0.setflags(write=False)
        return SimilarityResult(
            transform=t0, condition_number=1.0, residual_a=0.0, residual_b=0.0,
            residual_c=0.0, tolerance=tol, found=True, method="trivial", unique=True,
            note="both models have order 0 (pure gains); the empty transformation fits",
        )
    w0 = common_frequency_scale(r1, r2)
    a1, a2 = r1.a / w0, r2.a / w0
    weights = _weights(r1, r2)
    try:
        with np.errstate(all="ignore"):
            if n <= dense_limit:
                t, unique = _kronecker_solve(a1, a2, r1, r2, weights)
                method: Literal["kronecker_qr", "krylov_lsqr", "modal", "trivial"] = "kronecker_qr"
            else:
                t = _modal_route(r1, r2)
                unique = True  # not assessed on this route
                method = "modal"
                if max(_residuals(r1, r2, t)) > tol and n <= lsqr_limit:
                    t = _lsqr_refine(_krylov_start(a1, a2, r1, r2), a1, a2, r1, r2, weights)
                    method = "krylov_lsqr"
            if not np.all(np.isfinite(t)):
                raise NumericalTroubleError(
                    "similarity transformation: the least-squares solution is not finite"
                )
            res_a, res_b, res_c = _residuals(r1, r2, t)
            sv = np.linalg.svd(t, compute_uv=False)
    except (np.linalg.LinAlgError, ValueError) as exc:
        raise NumericalTroubleError(f"similarity transformation: {exc}") from exc
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0.0 else math.inf
    residual_ok = max(res_a, res_b, res_c) <= tol
    invertible = cond < 1.0 / _EPS
    found = residual_ok and invertible
    route = (
        f"dense Kronecker least squares ({n * n} unknowns, pivoted QR + 1 refinement step)"
        if method == "kronecker_qr"
        else f"matched eigenvector bases ({n} modes)" if method == "modal"
        else f"Krylov start + matrix-free LSQR refinement ({n * n} unknowns)"
    )
    if found:
        note = f"T found by {route}; cond(T) = {cond:.3g}"
    elif not residual_ok:
        worst = max(
            ("A", res_a), ("B", res_b), ("C", res_c), key=lambda kv: kv[1]
        )
        note = (
            f"no T fits within rtol={tol:g}: relative residual of the {worst[0]} equation "
            f"is {worst[1]:.3g} ({route}); the realizations are not related by a change "
            "of state coordinates"
        )
        if method in ("krylov_lsqr", "modal"):
            note += (
                " -- or the iterative route did not converge (ill-conditioned T); "
                "a larger dense_limit gives the direct method"
            )
    else:
        note = (
            f"residuals fit but T is numerically singular (cond(T) = {cond:.3g}); "
            "the realizations are probably not minimal"
        )
    if not unique:
        note += (
            "; the linear equations for T are numerically rank deficient, so T is not "
            "determined uniquely (realizations not minimal, or T extremely ill-conditioned)"
        )
    t.setflags(write=False)
    return SimilarityResult(
        transform=t,
        condition_number=cond,
        residual_a=res_a,
        residual_b=res_b,
        residual_c=res_c,
        tolerance=tol,
        found=found,
        method=method,
        unique=unique,
        note=note,
    )
