"""Orthogonal Kalman decomposition of a realization into the four parts co, cu, uo, uu.

In orthogonal coordinates: the controllable subspace, the unobservable subspace and
their intersection and sum are each obtained from a staircase (or, for the sum, a
principal-angle SVD), and an orthonormal basis adapted to the chain
``V_c ∩ V_uo ⊂ V_c ⊂ V_c + V_uo ⊂ R^n`` is used (R. E. Kalman, "Mathematical
description of linear dynamical systems", SIAM J. Control 1 (1963)).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from audit.core.realization import FloatArray, Realization
from audit.structure.scaling import _prepare
from audit.structure.shared import ComplexArray, _check_realization, _complex_list, _eigenvalues
from audit.structure.staircase import (
    DOUBT_CEILING, RankDecision, _leading, _relative_tolerance, _staircase, _svd, _system_scale,
)

@dataclass(frozen=True)
class KalmanDecomposition:
    """Orthogonal four-part (Kalman) decomposition.

    States are ordered (co, cu, uo, uu): controllable & observable, controllable &
    unobservable, uncontrollable & observable, neither. With ``D = diag(state_scaling)``
    and ``Q`` orthogonal, the realization is ``(Q^T D^-1 A D Q, Q^T D^-1 B, C D Q, D)``
    (``D = I`` without balancing). ``Q^T D^-1 A D Q`` has exact zeros in the blocks
    (co, cu), (uo, co), (uo, cu), (uo, uu), (uu, co), (uu, cu); the B rows uo and uu
    are zero; the C columns cu are zero. The transfer function is
    ``C_co (sI - A_co)^-1 B_co + D``.

    Unlike the textbook form (obtained with a general, possibly ill-conditioned,
    similarity), the (co, uu) block of A and the uu columns of C need not vanish:
    that would require the uu subspace to be orthogonal to the controllable subspace.
    The spectrum is nevertheless split correctly, because the transformed A is block
    upper triangular in the order (cu, co, uu, uo).

    Attributes
    ----------
    realization : Realization
        The transformed realization, with the zero blocks above set to exactly zero.
    transformation : (n, n) ndarray
        The orthogonal ``Q`` (columns: bases of co, cu, uo, uu in that order), acting
        on the scaled state coordinates.
    state_scaling : (n,) ndarray
        The diagonal ``d`` (powers of 2; all ones without balancing).
    block_sizes : dict
        ``{"co": n_co, "cu": n_cu, "uo": n_uo, "uu": n_uu}``.
    eigenvalues : dict
        Eigenvalues (complex ndarrays) of the four diagonal blocks, same keys.
    decisions : tuple of RankDecision
        Controllability staircase of the whole system, observability staircase of its
        controllable part, observability staircase of the whole system.
    decisions_clear : bool
        All decisions clear, subspace dimensions consistent, and the same block sizes
        found without state scaling.
    subspace_residual : float
        Principal-angle check of ``dim(V_c + V_uo)``: the largest sine that should be
        zero (0 when none); large values mean the rank decisions disagree.
    unscaled_block_sizes : dict
        Block sizes found on the realization as given (equal to ``block_sizes`` when
        no scaling was applied).
    tolerance : float
    discarded_norm : float
        Norm of everything set to zero, relative to ``max(||A||, ||B||, ||C||)``.
    """

    realization: Realization
    transformation: FloatArray
    state_scaling: FloatArray
    block_sizes: dict[str, int]
    eigenvalues: dict[str, ComplexArray]
    decisions: tuple[RankDecision, ...]
    decisions_clear: bool
    subspace_residual: float
    unscaled_block_sizes: dict[str, int]
    tolerance: float
    discarded_norm: float

    def block(self, row: str, col: str, matrix: Literal["a", "b", "c"] = "a") -> FloatArray:
        """Sub-block of A (rows ``row``, columns ``col``), of B (rows ``row``) or of C
        (columns ``col``); keys are "co", "cu", "uo", "uu"."""
        idx = self._slices()
        if matrix == "a":
            return np.asarray(self.realization.a[idx[row], idx[col]])
        if matrix == "b":
            return np.asarray(self.realization.b[idx[row], :])
        return np.asarray(self.realization.c[:, idx[col]])

    def _slices(self) -> dict[str, slice]:
        out: dict[str, slice] = {}
        start = 0
        for key in ("co", "cu", "uo", "uu"):
            out[key] = slice(start, start + self.block_sizes[key])
            start += self.block_sizes[key]
        return out

    def as_dict(self) -> dict[str, Any]:
        return {
            "realization": self.realization.as_dict(),
            "transformation": self.transformation.tolist(),
            "state_scaling": [float(x) for x in self.state_scaling],
            "block_sizes": dict(self.block_sizes),
            "eigenvalues": {k: _complex_list(v) for k, v in self.eigenvalues.items()},
            "decisions": [d.as_dict() for d in self.decisions],
            "decisions_clear": self.decisions_clear,
            "subspace_residual": float(self.subspace_residual),
            "unscaled_block_sizes": dict(self.unscaled_block_sizes),
            "tolerance": float(self.tolerance),
            "discarded_norm": float(self.discarded_norm),
        }


_KEYS = ("co", "cu", "uo", "uu")


def _kalman_parts(r: Realization, rtol: float) -> dict[str, Any]:
    n = r.order
    a_scale = float(np.linalg.norm(r.a))
    b_scale = float(np.linalg.norm(r.b))
    c_scale = float(np.linalg.norm(r.c))
    rel_scale = _system_scale(r)

    cs = _staircase(
        r, "controllability", rtol=rtol, a_scale=a_scale, first_scale=b_scale, rel_scale=rel_scale
    )
    nc = cs.order
    os_c = _staircase(
        _leading(cs.realization, nc), "observability", rtol=rtol, a_scale=a_scale,
        first_scale=c_scale,
        rel_scale=rel_scale,
    )
    n_co = os_c.order
    n_cu = nc - n_co
    os_full = _staircase(
        r, "observability", rtol=rtol, a_scale=a_scale, first_scale=c_scale, rel_scale=rel_scale
    )
    n_unobs = n - os_full.order

    q1 = cs.transformation
    vc = q1[:, :nc] @ os_c.transformation  # columns: co then cu
    w = q1[:, nc:]  # orthonormal basis of the orthogonal complement of V_c
    v_uo = os_full.transformation[:, os_full.order :]  # basis of the unobservable subspace
    n_uu_expected = n_unobs - n_cu
    consistent = 0 <= n_uu_expected <= n - nc
    n_uu = min(max(n_uu_expected, 0), n - nc)
    residual = 0.0
    if n - nc > 0:
        if v_uo.shape[1]:
            u, s = _svd(w.T @ v_uo)
        else:
            u, s = np.eye(n - nc), np.zeros(0)
        # Singular values of W^T V_uo are the sines of the principal angles between
        # V_uo and V_c; exactly n_unobs - n_cu of them are non-zero when the
        # decisions agree, and the left singular vectors of those span (V_c+V_uo)/V_c.
        if s.size > n_uu:
            residual = float(s[n_uu])
        if n_uu > 0 and s[n_uu - 1] <= DOUBT_CEILING:
            consistent = False
        w_uu = w @ u[:, :n_uu]
        w_uo = w @ u[:, n_uu:]
    else:
        w_uu = np.zeros((n, 0))
        w_uo = np.zeros((n, 0))
    if residual > DOUBT_CEILING:
        consistent = False
    q = np.hstack([vc, w_uo, w_uu]) if n else np.zeros((0, 0))
    sizes = {"co": n_co, "cu": n_cu, "uo": n - nc - n_uu, "uu": n_uu}

    a = q.T @ np.asarray(r.a) @ q
    b = q.T @ np.asarray(r.b)
    c = np.asarray(r.c) @ q
    starts = np.cumsum([0] + [sizes[k] for k in _KEYS])
    sl = {k: slice(int(starts[i]), int(starts[i + 1])) for i, k in enumerate(_KEYS)}
    discarded_sq = 0.0
    for row, col in (("co", "cu"), ("uo", "co"), ("uo", "cu"), ("uo", "uu"),
                     ("uu", "co"), ("uu", "cu")):
        discarded_sq += float(np.sum(a[sl[row], sl[col]] ** 2))
        a[sl[row], sl[col]] = 0.0
    for row in ("uo", "uu"):
        discarded_sq += float(np.sum(b[sl[row], :] ** 2))
        b[sl[row], :] = 0.0
    discarded_sq += float(np.sum(c[:, sl["cu"]] ** 2))
    c[:, sl["cu"]] = 0.0
    decisions = cs.decisions + os_c.decisions + os_full.decisions
    return {
        "realization": r.with_matrices(a, b, c),
        "transformation": q,
        "block_sizes": sizes,
        "eigenvalues": {k: _eigenvalues(a[sl[k], sl[k]]) for k in _KEYS},
        "decisions": decisions,
        "clear": bool(consistent and all(d.clear for d in decisions)),
        "residual": residual,
        "discarded": math.sqrt(discarded_sq) / rel_scale,
    }


def kalman_decomposition(
    r: Realization, *, tol: float | None = None, balance: bool = True
) -> KalmanDecomposition:
    """Orthogonal Kalman decomposition into the four parts co, cu, uo, uu.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    tol : float, optional, keyword-only
        Relative rank tolerance in (0, 1) (module docstring). Default
        ``max(1e-10, 1000 * n * eps)``.
    balance : bool, keyword-only
        Exact power-of-2 state scaling first, cross-checked against the unscaled
        computation (see :func:`minimal_realization`). Default True.

    Returns
    -------
    KalmanDecomposition

    Raises
    ------
    InvalidModelError, NumericalTroubleError
        As :func:`audit.structure.minimal.minimal_realization`.

    Examples
    --------
    >>> r = Realization.from_arrays(
    ...     [[-1.0, 0.0, 0.0], [0.0, -2.0, 0.0], [0.0, 0.0, 0.5]],
    ...     [[1.0], [1.0], [0.0]], [[1.0, 0.0, 1.0]], [[0.0]])
    >>> kalman_decomposition(r).block_sizes
    {'co': 1, 'cu': 1, 'uo': 1, 'uu': 0}
    """
    r = _check_realization(r)
    rtol = _relative_tolerance(tol, r.order)
    work, d, scaled, used_tol = _prepare(r, balance, rtol)
    parts = _kalman_parts(work, used_tol)
    unscaled_sizes = (_kalman_parts(r, rtol)["block_sizes"] if scaled or used_tol != rtol
                      else parts["block_sizes"])
    return KalmanDecomposition(
        realization=parts["realization"],
        transformation=parts["transformation"],
        state_scaling=d,
        block_sizes=parts["block_sizes"],
        eigenvalues=parts["eigenvalues"],
        decisions=parts["decisions"],
        decisions_clear=bool(parts["clear"] and unscaled_sizes == parts["block_sizes"]
                             and used_tol == rtol),
        subspace_residual=parts["residual"],
        unscaled_block_sizes=unscaled_sizes,
        tolerance=used_tol,
        discarded_norm=parts["discarded"],
    )


__all__ = [
    "KalmanDecomposition",
    "kalman_decomposition",
]
