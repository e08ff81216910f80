"""Orthogonal staircase forms of a realization, with every rank decision recorded.

Method
------
**Orthogonal staircase reduction** (controllability / observability staircase form):
P. Van Dooren, "The generalized eigenstructure problem in linear system theory",
IEEE Trans. Automatic Control AC-26 (1981) 111-129, Algorithm 1; also
A. Varga, "Minimal realization procedures based on balancing and related
techniques", in *Numerical Methods for Linear Control Systems Design and Analysis*
(F. Pichler, R. Moreno-Diaz eds.), 1991 -- the approach of SLICOT TB01UD / TB01PD.
Every rank decision is made with a singular value decomposition (not with a
pivoted QR), so the decision comes with the full set of singular values and the
gap between what is kept and what is dropped; each decision is recorded in a
:class:`RankDecision`. The two staircases in sequence (:func:`_minimal_parts`) are the
minimal realization of :mod:`audit.structure.minimal`.

Rank-decision rule (the numbers are module constants)
------------------------------------------------------
At each stage the block being ranked has singular values ``s_1 >= ... >= s_q``
(``q`` = ``candidate``). The *scale* of a stage is ``||B||_F`` for the first
controllability stage, ``||C||_F`` for the first observability stage and ``||A||_F``
for every later stage (always the norms of the realization handed in). Scaling the
first stage by ``||B||`` (or ``||C||``) is the same as rescaling ``B -> B/beta``,
``C -> beta C`` by a scalar, which changes neither the transfer function nor the
staircase; it makes the decision independent of the units of the input and output
signals. No diagonal (non-orthogonal) state scaling is applied: a model with badly
scaled state coordinates is analysed as given, and that typically shows up as
unclear rank decisions rather than as a silently wrong order.

* ``threshold = tol * scale`` with the relative tolerance
  ``tol = max(1e-10, 1000 * n * eps)`` unless given (``eps`` = 2.2e-16); singular values
  ``> threshold`` are kept (``rank`` = how many). With the defaults, relative values
  below 1e-11 are dropped clearly, above 1.5e-8 kept clearly, and in between the
  decision is unclear.
* The decision is **clear** when (1) every kept value is at least
  ``CLEAR_MARGIN`` (10) times the threshold *and* above the doubt ceiling
  ``DOUBT_CEILING * scale`` (``sqrt(eps)`` ≈ 1.5e-8 relative: a value below it would
  be flipped by a relative perturbation of the data of the size of the rounding in
  decimal-printed coefficients or of the default tolerance of other tools), (2) every
  dropped value is at most ``threshold / CLEAR_MARGIN``, and (3) the gap
  ``smallest_kept / largest_dropped`` is at least ``CLEAR_MIN_GAP`` (1e3).
  An unclear decision is what makes a later verdict "inconclusive".
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.linalg

from audit.errors import InvalidModelError, NumericalTroubleError
from audit.core.realization import FloatArray, Realization
from audit.structure.shared import (
    _EPS, ComplexArray, StaircaseKind, _check_realization, _complex_list, _eigenvalues,
    _float_or_none, _json_float,
)

#: default relative tolerance: tol = max(DEFAULT_TOL_FLOOR, DEFAULT_TOL_FACTOR * n * eps).
#: The orthogonal reductions are backward stable, but a block that is zero in exact
#: arithmetic does not come out at eps * scale: the perturbation travels through the
#: earlier stages and we observed up to about 3e3 * eps * scale (6e-13) on random
#: well-separated systems of order <= 10. The floor 1e-10 keeps such blocks a factor
#: >= 10 below the threshold (so they are dropped *clearly*); the n-proportional term
#: takes over for n > 450 (common practice, no source; SLICOT TB01UD uses n*n*eps,
#: the slycot wrapper of TB01PD defaults to 1e-8).
DEFAULT_TOL_FLOOR = 1e-10
DEFAULT_TOL_FACTOR = 1000.0
#: kept singular values below DOUBT_CEILING * scale make a decision unclear.
DOUBT_CEILING = math.sqrt(_EPS)
#: kept values must exceed threshold * CLEAR_MARGIN, dropped ones be below threshold / it.
CLEAR_MARGIN = 10.0
#: minimal ratio smallest_kept / largest_dropped for a clear decision.
CLEAR_MIN_GAP = 1e3


# --------------------------------------------------------------------------- helpers
def _relative_tolerance(tol: float | None, n: int) -> float:
    if tol is None:
        return max(DEFAULT_TOL_FLOOR, DEFAULT_TOL_FACTOR * max(n, 1) * _EPS)
    try:
        value = float(tol)
    except (TypeError, ValueError):
        raise InvalidModelError(
            f"tol: expected a number in (0, 1) (relative tolerance), got {tol!r}",
            field="tol",
        ) from None
    if not math.isfinite(value) or not 0.0 < value < 1.0:
        raise InvalidModelError(
            f"tol: expected a relative tolerance in (0, 1), got tol={value!r}", field="tol"
        )
    return value


def _svd(m: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Full left singular vectors and singular values of ``m``."""
    try:
        u, s, _ = scipy.linalg.svd(m, full_matrices=True, lapack_driver="gesvd")
    except (np.linalg.LinAlgError, ValueError) as exc:
        raise NumericalTroubleError(f"singular value decomposition failed: {exc}") from exc
    return u, s


def _thin_svd(m: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Left singular vectors (rows x min(rows, cols)) and singular values of ``m``."""
    try:
        u, s, _ = scipy.linalg.svd(m, full_matrices=False, lapack_driver="gesvd")
    except (np.linalg.LinAlgError, ValueError) as exc:
        raise NumericalTroubleError(f"singular value decomposition failed: {exc}") from exc
    return u, s


def _apply_orthogonal(u: FloatArray, a: FloatArray, b: FloatArray, q: FloatArray, row0: int) -> None:
    """In place: ``a[row0:, :] = W^T a[row0:, :]``, ``a[:, row0:] = a[:, row0:] W``,
    ``b[row0:] = W^T b[row0:]``, ``q[:, row0:] = q[:, row0:] W`` with ``W`` orthogonal
    and ``W[:, :c] = u`` up to column signs (Householder QR of the orthonormal ``u``,
    whose triangular factor is diagonal with entries +-1; LAPACK dgeqrf/dormqr)."""
    from scipy.linalg.lapack import dgeqrf, dormqr

    rows, cols = u.shape
    if rows == 0:
        return
    if cols == rows:
        a[row0:, :] = u.T @ a[row0:, :]
        a[:, row0:] = a[:, row0:] @ u
        b[row0:, :] = u.T @ b[row0:, :]
        q[:, row0:] = q[:, row0:] @ u
        return
    qr, tau, _, info = dgeqrf(np.array(u, order="F"))
    if info != 0:  # pragma: no cover - dgeqrf only fails on invalid arguments
        raise NumericalTroubleError(f"Householder QR failed (info={info})")
    n = a.shape[0]
    lw = max(1, 64 * max(n, b.shape[1]))

    def left(mat: FloatArray) -> FloatArray:
        if mat.shape[1] == 0:
            return mat
        out, _, inf = dormqr("L", "T", qr, tau, np.array(mat, order="F"), lwork=lw)
        if inf != 0:  # pragma: no cover
            raise NumericalTroubleError(f"applying Householder reflectors failed (info={inf})")
        return out

    def right(mat: FloatArray) -> FloatArray:
        if mat.shape[0] == 0:
            return mat
        out, _, inf = dormqr("R", "N", qr, tau, np.array(mat, order="F"), lwork=lw)
        if inf != 0:  # pragma: no cover
            raise NumericalTroubleError(f"applying Householder reflectors failed (info={inf})")
        return out

    a[row0:, :] = left(a[row0:, :])
    a[:, row0:] = right(a[:, row0:])
    b[row0:, :] = left(b[row0:, :])
    q[:, row0:] = right(q[:, row0:])


# ------------------------------------------------------------------ rank decisions
@dataclass(frozen=True)
class RankDecision:
    """One rank decision of a staircase reduction, with its evidence.

    Attributes
    ----------
    stage : int
        1 for the block of B (or C), 2, 3, ... for the following blocks of A.
    kind : {"controllability", "observability"}
    candidate : int
        Number of singular values of the ranked block (the largest possible rank).
    rank : int
        Number of singular values above ``threshold``.
    smallest_kept, largest_dropped : float or None
        ``None`` when nothing was kept / dropped.
    threshold : float
        Absolute threshold, ``tol * scale``.
    gap : float
        ``smallest_kept / largest_dropped``; ``inf`` when nothing was kept or nothing
        was dropped, or when the largest dropped value is exactly zero.
    clear : bool
        Whether the decision is clear by the module's documented rule.
    scale : float
        The norm the threshold is relative to (``||B||_F``, ``||C||_F`` or ``||A||_F``).
    singular_values : tuple of float
        All singular values of the ranked block, largest first.
    """

    stage: int
    kind: StaircaseKind
    candidate: int
    rank: int
    smallest_kept: float | None
    largest_dropped: float | None
    threshold: float
    gap: float
    clear: bool
    scale: float
    singular_values: tuple[float, ...]

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-friendly dictionary (``inf`` written as the string "inf")."""
        return {
            "stage": self.stage,
            "kind": self.kind,
            "candidate": self.candidate,
            "rank": self.rank,
            "smallest_kept": _float_or_none(self.smallest_kept),
            "largest_dropped": _float_or_none(self.largest_dropped),
            "threshold": float(self.threshold),
            "gap": _json_float(self.gap),
            "clear": self.clear,
            "scale": float(self.scale),
            "singular_values": [float(x) for x in self.singular_values],
        }


def _decide_rank(
    singular_values: FloatArray, *, stage: int, kind: StaircaseKind, scale: float, rtol: float
) -> RankDecision:
    s = np.asarray(singular_values, dtype=float)
    threshold = rtol * scale
    rank = int(np.count_nonzero(s > threshold)) if scale > 0.0 else 0
    smallest_kept = float(s[rank - 1]) if rank > 0 else None
    largest_dropped = float(s[rank]) if rank < s.size else None
    if smallest_kept is None or largest_dropped is None or largest_dropped == 0.0:
        gap = math.inf
    else:
        gap = smallest_kept / largest_dropped
    kept_ok = smallest_kept is None or (
        smallest_kept >= CLEAR_MARGIN * threshold and smallest_kept >= DOUBT_CEILING * scale
    )
    dropped_ok = largest_dropped is None or largest_dropped <= threshold / CLEAR_MARGIN
    clear = bool(kept_ok and dropped_ok and gap >= CLEAR_MIN_GAP)
    return RankDecision(
        stage=stage,
        kind=kind,
        candidate=int(s.size),
        rank=rank,
        smallest_kept=smallest_kept,
        largest_dropped=largest_dropped,
        threshold=float(threshold),
        gap=float(gap),
        clear=clear,
        scale=float(scale),
        singular_values=tuple(float(x) for x in s),
    )


# --------------------------------------------------------------------- staircases
@dataclass(frozen=True)
class StaircaseResult:
    """Result of an orthogonal staircase reduction.

    For ``kind == "controllability"``: ``Q^T A Q = [[A_c, *], [0, A_uc]]``,
    ``Q^T B = [B_c; 0]``, with ``A_c`` (``order`` x ``order``) block upper Hessenberg.
    For ``kind == "observability"``: ``Q^T A Q = [[A_o, 0], [*, A_uo]]``,
    ``C Q = [C_o, 0]``.

    Attributes
    ----------
    kind : {"controllability", "observability"}
    realization : Realization
        The transformed realization ``(Q^T A Q, Q^T B, C Q, D)``; blocks judged to be
        zero are set to exactly zero (it is the exact staircase of a nearby system).
    transformation : (n, n) ndarray
        The orthogonal ``Q``.
    order : int
        Size of the controllable (observable) part.
    block_sizes : tuple of int
        Sizes of the diagonal blocks of the staircase (they sum to ``order``).
    decisions : tuple of RankDecision
    tolerance : float
        The relative tolerance used.
    discarded_norm : float
        Frobenius norm of everything set to zero, relative to ``max(||A||, ||B||, ||C||)``.
    """

    kind: StaircaseKind
    realization: Realization
    transformation: FloatArray
    order: int
    block_sizes: tuple[int, ...]
    decisions: tuple[RankDecision, ...]
    tolerance: float
    discarded_norm: float

    @property
    def decisions_clear(self) -> bool:
        """True when every rank decision was clear."""
        return all(d.clear for d in self.decisions)

    @property
    def hidden_modes(self) -> ComplexArray:
        """Eigenvalues of the uncontrollable (unobservable) block."""
        k = self.order
        return _eigenvalues(np.asarray(self.realization.a[k:, k:]))

    def as_dict(self) -> dict[str, Any]:
        return {
            "kind": self.kind,
            "realization": self.realization.as_dict(),
            "transformation": self.transformation.tolist(),
            "order": self.order,
            "block_sizes": list(self.block_sizes),
            "decisions": [d.as_dict() for d in self.decisions],
            "decisions_clear": self.decisions_clear,
            "tolerance": float(self.tolerance),
            "discarded_norm": float(self.discarded_norm),
            "hidden_modes": _complex_list(self.hidden_modes),
        }


def _controllable_reduction(
    a_in: FloatArray,
    b_in: FloatArray,
    *,
    rtol: float,
    a_scale: float,
    b_scale: float,
    kind: StaircaseKind,
) -> tuple[FloatArray, FloatArray, FloatArray, int, tuple[int, ...], tuple[RankDecision, ...], float]:
    """Van Dooren's staircase on (A, B) with SVD rank decisions.

    Returns (Q, Q^T A Q, Q^T B, order, block sizes, decisions, discarded Frobenius norm).
    """
    n = a_in.shape[0]
    a = np.array(a_in, dtype=float, copy=True)
    b = np.array(b_in, dtype=float, copy=True)
    q = np.eye(n)
    decisions: list[RankDecision] = []
    blocks: list[int] = []
    discarded_sq = 0.0
    row0 = 0
    prev_cols: slice | None = None
    stage = 1
    while row0 < n:
        if prev_cols is None:
            block = b[row0:, :]
            scale = b_scale
        else:
            block = a[row0:, prev_cols]
            scale = a_scale
        if block.shape[1] == 0:
            u = np.eye(n - row0)
            s = np.zeros(0)
        else:
            u, s = _thin_svd(block)
        decision = _decide_rank(s, stage=stage, kind=kind, scale=scale, rtol=rtol)
        decisions.append(decision)
        k = decision.rank
        # Orthogonal similarity on the trailing rows / columns: the left singular
        # vectors completed to an orthogonal matrix as Householder reflectors, so a
        # stage costs O(n^2 c) for a block of c columns instead of O(n^3).
        _apply_orthogonal(u, a, b, q, row0)
        # Set the part judged to be zero to exactly zero, keeping track of its size.
        if prev_cols is None:
            discarded_sq += float(np.sum(b[row0 + k :, :] ** 2))
            b[row0 + k :, :] = 0.0
        else:
            discarded_sq += float(np.sum(a[row0 + k :, prev_cols] ** 2))
            a[row0 + k :, prev_cols] = 0.0
        if k == 0:
            break
        blocks.append(k)
        prev_cols = slice(row0, row0 + k)
        row0 += k
        stage += 1
    return q, a, b, row0, tuple(blocks), tuple(decisions), math.sqrt(discarded_sq)


def _system_scale(r: Realization) -> float:
    return max(
        float(np.linalg.norm(r.a)), float(np.linalg.norm(r.b)), float(np.linalg.norm(r.c)), 1e-300
    )


def _staircase(
    r: Realization, kind: StaircaseKind, *, rtol: float, a_scale: float, first_scale: float,
    rel_scale: float,
) -> StaircaseResult:
    """The staircase of ``kind`` with the given scales (``first_scale``: ``||B||`` for the
    controllability staircase, ``||C||`` for the observability one)."""
    if kind == "controllability":
        q, a, b, order, blocks, decisions, discarded = _controllable_reduction(
            np.asarray(r.a), np.asarray(r.b), rtol=rtol, a_scale=a_scale, b_scale=first_scale,
            kind=kind,
        )
        c = np.asarray(r.c) @ q
        transformed = r.with_matrices(a, b, c)
    else:
        # Dual: the controllability staircase of (A^T, C^T), transposed back.
        q, at, ct, order, blocks, decisions, discarded = _controllable_reduction(
            np.asarray(r.a).T, np.asarray(r.c).T, rtol=rtol, a_scale=a_scale,
            b_scale=first_scale, kind=kind,
        )
        b = q.T @ np.asarray(r.b)
        transformed = r.with_matrices(at.T, b, ct.T)
    return StaircaseResult(
        kind=kind,
        realization=transformed,
        transformation=q,
        order=order,
        block_sizes=blocks,
        decisions=decisions,
        tolerance=rtol,
        discarded_norm=discarded / rel_scale,
    )


def _staircase_as_given(r: Realization, tol: float | None, kind: StaircaseKind) -> StaircaseResult:
    """The staircase of ``kind`` of ``r`` with thresholds relative to its own norms."""
    r = _check_realization(r)
    rtol = _relative_tolerance(tol, r.order)
    first = r.b if kind == "controllability" else r.c
    return _staircase(
        r,
        kind,
        rtol=rtol,
        a_scale=float(np.linalg.norm(r.a)),
        first_scale=float(np.linalg.norm(first)),
        rel_scale=_system_scale(r),
    )


def controllable_staircase(r: Realization, *, tol: float | None = None) -> StaircaseResult:
    """Orthogonal controllability staircase form of a realization.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    tol : float, optional, keyword-only
        Relative rank tolerance in (0, 1); the threshold of a stage is ``tol`` times
        ``||B||_F`` (first stage) or ``||A||_F`` (later stages). Default
        ``max(1e-10, 1000 * n * eps)``.

    Returns
    -------
    StaircaseResult
        ``Q^T A Q = [[A_c, *], [0, A_uc]]``, ``Q^T B = [B_c; 0]``, ``C Q``; ``order`` is
        the dimension of the controllable subspace.

    Raises
    ------
    InvalidModelError
        If ``r`` is not a Realization or ``tol`` is not in (0, 1).
    NumericalTroubleError
        If a singular value decomposition fails.

    Examples
    --------
    >>> r = Realization.from_arrays([[-1.0, 0.0], [0.0, 0.5]], [[1.0], [0.0]],
    ...                             [[1.0, 1.0]], [[0.0]])
    >>> res = controllable_staircase(r)
    >>> res.order, [round(float(z.real), 12) for z in res.hidden_modes]
    (1, [0.5])
    """
    return _staircase_as_given(r, tol, "controllability")


def observable_staircase(r: Realization, *, tol: float | None = None) -> StaircaseResult:
    """Orthogonal observability staircase form (the dual of :func:`controllable_staircase`).

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    tol : float, optional, keyword-only
        Relative rank tolerance in (0, 1); thresholds are relative to ``||C||_F`` (first
        stage) and ``||A||_F`` (later stages). Default ``max(1e-10, 1000 * n * eps)``.

    Returns
    -------
    StaircaseResult
        ``Q^T A Q = [[A_o, 0], [*, A_uo]]``, ``C Q = [C_o, 0]``, ``Q^T B``; ``order`` is
        the dimension of the observable part (``n - order`` = dimension of the
        unobservable subspace).

    Raises
    ------
    InvalidModelError, NumericalTroubleError
        As :func:`controllable_staircase`.

    Examples
    --------
    >>> r = Realization.from_arrays([[-1.0, 0.0], [0.0, -3.0]], [[1.0], [1.0]],
    ...                             [[1.0, 0.0]], [[0.0]])
    >>> res = observable_staircase(r)
    >>> res.order, [round(float(z.real), 12) for z in res.hidden_modes]
    (1, [-3.0])
    """
    return _staircase_as_given(r, tol, "observability")


def _leading(r: Realization, k: int) -> Realization:
    return r.with_matrices(r.a[:k, :k], r.b[:k, :], r.c[:, :k])



def _minimal_parts(
    r: Realization, rtol: float
) -> tuple[Realization, ComplexArray, ComplexArray, tuple[RankDecision, ...], float]:
    a_scale = float(np.linalg.norm(r.a))
    rel_scale = _system_scale(r)
    cs = _staircase(
        r, "controllability", rtol=rtol, a_scale=a_scale,
        first_scale=float(np.linalg.norm(r.b)), rel_scale=rel_scale,
    )
    controllable = _leading(cs.realization, cs.order)
    os_ = _staircase(
        controllable,
        "observability",
        rtol=rtol,
        a_scale=a_scale,
        first_scale=float(np.linalg.norm(r.c)),
        rel_scale=rel_scale,
    )
    return (
        _leading(os_.realization, os_.order),
        cs.hidden_modes,
        os_.hidden_modes,
        cs.decisions + os_.decisions,
        math.hypot(cs.discarded_norm, os_.discarded_norm),
    )


__all__ = [
    "CLEAR_MARGIN",
    "CLEAR_MIN_GAP",
    "DEFAULT_TOL_FACTOR",
    "DEFAULT_TOL_FLOOR",
    "DOUBT_CEILING",
    "RankDecision",
    "StaircaseResult",
    "controllable_staircase",
    "observable_staircase",
]
