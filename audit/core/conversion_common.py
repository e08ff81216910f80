"""Shared by the conversions between transfer-function, zeros-poles-gain and state-space
forms: the default tolerances, the checks of the nested [output][input] data and the
sample period, and the orthogonal staircase that makes a stacked realization minimal.

Minimality: the controllability / observability staircase of P. Van Dooren, "The
generalized eigenstructure problem in linear system theory", IEEE Trans. Automat.
Control 26, 1981, after an exact power-of-two balancing of the system matrix (LAPACK
``gebal``, as SLICOT TB01ID does for systems). Rank and negligibility decisions all use
the keyword-only ``rank_rtol`` (relative to the norm of the data being decided on).

The conversions themselves: :mod:`audit.core.from_transfer_function`,
:mod:`audit.core.from_zeros_poles_gain` and :mod:`audit.core.from_realization`.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from typing import Any

import numpy as np
import scipy.linalg
from numpy.typing import NDArray

from audit.errors import InvalidModelError

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]

#: Default relative tolerance of every rank / negligibility decision (staircase ranks,
#: vanishing feedthrough in zero computations). Common practice, no source: well above
#: the ~1e-15 relative rounding of orthogonal transformations, well below any modelled
#: physical effect.
DEFAULT_RANK_RTOL = 1e-10
#: Default relative tolerance for stripping leading polynomial coefficients and merging
#: denominators: 0, i.e. only coefficients that are zero as stored are dropped and only
#: denominators equal as stored are shared (the stored polynomial is the model).
DEFAULT_COEFFICIENT_RTOL = 0.0
#: Default relative tolerance for conjugate-pair matching of complex zeros and poles.
DEFAULT_CONJUGATE_RTOL = 1e-9


# ====================================================================== validation
def _check_sample_period(sample_period: float | None) -> float | None:
    if sample_period is None:
        return None
    if isinstance(sample_period, bool) or not isinstance(sample_period, numbers.Real):
        raise InvalidModelError(
            f"sample_period: got {sample_period!r} but expected null (continuous time) "
            "or a number of seconds > 0",
            field="sample_period",
        )
    value = float(sample_period)
    if not math.isfinite(value) or value <= 0.0:
        raise InvalidModelError(
            f"sample_period: got {value!r} but expected a finite number of seconds > 0",
            field="sample_period",
        )
    return value


def _grid_shape(value: Any, name: str) -> tuple[int, int]:
    """Shape (p, m) of a nested [output][input] list, checking it is rectangular."""
    if isinstance(value, (str, bytes)) or not isinstance(value, (Sequence, np.ndarray)):
        raise InvalidModelError(
            f"{name}: got {type(value).__name__} but expected a nested list indexed "
            "[output][input]",
            field=name,
        )
    p = len(value)
    if p == 0:
        raise InvalidModelError(f"{name}: is empty; at least one output is expected", field=name)
    m = None
    for i, row in enumerate(value):
        if isinstance(row, (str, bytes)) or not isinstance(row, (Sequence, np.ndarray)):
            raise InvalidModelError(
                f"{name}[{i}]: got {type(row).__name__} but expected a list over inputs",
                field=f"{name}[{i}]",
            )
        if m is None:
            m = len(row)
        if len(row) != m or m == 0:
            raise InvalidModelError(
                f"{name}[{i}]: has {len(row)} input entries but {m or 'at least 1'} "
                "were expected (every output row must list the same inputs)",
                field=f"{name}[{i}]",
            )
    assert m is not None
    return p, m


def _real_vector(value: Any, name: str) -> FloatArray:
    try:
        arr = np.array(value, dtype=float)
    except (TypeError, ValueError):
        raise InvalidModelError(
            f"{name}: got {value!r} but expected a list of real numbers", field=name
        ) from None
    if arr.ndim != 1:
        raise InvalidModelError(
            f"{name}: has shape {arr.shape} but expected a flat list of coefficients",
            field=name,
        )
    if not np.all(np.isfinite(arr)):
        raise InvalidModelError(f"{name}: contains NaN or infinity", field=name)
    return arr


# ============================================================ orthogonal staircase
def _controllable_part(
    a: FloatArray, b: FloatArray, c: FloatArray, *, rank_rtol: float
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Controllable part of (A, B, C) by the orthogonal staircase (Van Dooren 1981).

    Each step compresses the current input block by an SVD and keeps the rows whose
    singular values exceed ``rank_rtol * max(||A||_2, ||B||_2)``.
    """
    n = a.shape[0]
    if n == 0:
        return a, b, c
    a = a.copy()
    b = b.copy()
    c = c.copy()
    scale = max(float(np.linalg.norm(a, 2)), float(np.linalg.norm(b, 2)) if b.size else 0.0)
    if scale == 0.0:
        return a[:0, :0], b[:0, :], c[:, :0]
    tol = rank_rtol * scale
    offset, previous = 0, 0
    while offset < n:
        block = b[offset:, :] if offset == 0 else a[offset:, previous:offset]
        if block.size == 0:
            break
        u, s, _ = np.linalg.svd(block, full_matrices=True)
        rank = int(np.sum(s > tol))
        if rank == 0:
            break
        a[offset:, :] = u.T @ a[offset:, :]
        a[:, offset:] = a[:, offset:] @ u
        b[offset:, :] = u.T @ b[offset:, :]
        c[:, offset:] = c[:, offset:] @ u
        previous, offset = offset, offset + rank
    return a[:offset, :offset].copy(), b[:offset, :].copy(), c[:, :offset].copy()


def _minimal_part(
    a: FloatArray, b: FloatArray, c: FloatArray, *, rank_rtol: float
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Controllable and observable part of (A, B, C) by two orthogonal staircases.

    The system matrix ``[[A, B], [C, 0]]`` is first balanced by a diagonal similarity of
    powers of two (LAPACK ``gebal`` via ``scipy.linalg.matrix_balance``, as SLICOT TB01ID
    does for systems), which is exact in floating point and makes the rank decisions
    insensitive to badly scaled states; input and output scalings are undone at the end.
    """
    n, m, p = a.shape[0], b.shape[1], c.shape[0]
    if n == 0:
        return a.copy(), b.copy(), c.copy()
    system = np.zeros((n + m + p, n + m + p))
    system[:n, :n] = a
    system[:n, n:n + m] = b
    system[n + m:, :n] = c
    try:
        _, (scaling, _) = scipy.linalg.matrix_balance(system, permute=False, separate=True)
    except (ValueError, np.linalg.LinAlgError):  # pragma: no cover - defensive
        scaling = np.ones(n + m + p)
    sx, su, sy = scaling[:n], scaling[n:n + m], scaling[n + m:]
    a_s = a * (sx[None, :] / sx[:, None])
    b_s = b * (su[None, :] / sx[:, None])
    c_s = c * (sx[None, :] / sy[:, None])
    a1, b1, c1 = _controllable_part(a_s, b_s, c_s, rank_rtol=rank_rtol)
    at, ct, bt = _controllable_part(a1.T, c1.T, b1.T, rank_rtol=rank_rtol)
    if at.shape[0] == n:
        # Already minimal: keep the caller's coordinates (structure such as a cascade's
        # exact zero couplings is worth more than the staircase's orthogonal form).
        return a.copy(), b.copy(), c.copy()
    return at.T.copy(), bt.T / su[None, :], ct.T * sy[:, None]


def _block_diagonal(blocks: list[FloatArray], rows: int, cols: int) -> FloatArray:
    out = np.zeros((rows, cols))
    r0 = c0 = 0
    for blk in blocks:
        out[r0:r0 + blk.shape[0], c0:c0 + blk.shape[1]] = blk
        r0 += blk.shape[0]
        c0 += blk.shape[1]
    return out


__all__ = [
    "DEFAULT_COEFFICIENT_RTOL",
    "DEFAULT_CONJUGATE_RTOL",
    "DEFAULT_RANK_RTOL",
]
