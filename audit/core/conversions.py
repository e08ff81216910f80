"""Conversions between transfer-function, zeros-poles-gain and state-space forms.

Methods implemented
-------------------
* Transfer matrix -> minimal state space: the matrix is written as columns (or rows,
  whichever gives the smaller total degree) over common denominators and realised by
  SLICOT ``TD04AD`` (Wolovich's structure theorem followed by
  the orthogonal minimal-realization step of R. V. Patel, "Computation of minimal-order
  state-space realizations and observability indices using orthogonal transformations",
  Int. J. Control 33, 1981).  The result is then passed through our own orthogonal
  staircase reduction (the controllability / observability staircase of P. Van Dooren,
  "The generalized eigenstructure problem in linear system theory", IEEE Trans. Automat.
  Control 26, 1981), which both checks and, when needed, completes minimality.  If slycot
  fails, an own construction (one controllable companion block per distinct denominator
  of each column, no polynomial products) followed by the same staircase is used.
* Zeros-poles-gain -> minimal state space: each SISO channel is a cascade (series
  connection) of real first- and second-order sections, complex pole pairs in the normal
  rotation form ``[[sigma, omega], [-omega, sigma]]``; polynomials of high degree are never
  expanded.  MIMO channels are stacked and reduced by the orthogonal staircase.
* State space -> zeros-poles-gain: per channel, the minimal SISO subsystem (staircase),
  its poles (eigenvalues), its transmission zeros by the reduced-pencil method of
  A. Emami-Naeini and P. Van Dooren, "Computation of zeros of linear multivariable
  systems", Automatica 18, 1982, specialised to one input and one output (orthogonal
  deflation of infinite zeros, then a regular n-by-n generalised eigenproblem), and the
  gain: ``D`` when the channel is biproper, otherwise the first non-vanishing Markov
  parameter ``C A^(k-1) B`` of the minimal channel, ``k = n - (number of finite zeros)``
  being its relative degree.
* State space -> transfer function: the zeros-poles-gain data expanded to polynomial
  coefficients.  Coefficient form is numerically poor for high orders (roots of
  polynomials are badly conditioned functions of the coefficients); it is meant for
  display and export, not as evidence.

Rank and negligibility decisions all use the keyword-only ``rank_rtol`` (relative to the
norm of the data being decided on).

Examples
--------
>>> r = realization_from_transfer_function([[[1.0]], [[1.0]]], [[[1.0, 1.0]], [[1.0, 1.0]]])
>>> r.order, r.n_outputs, r.n_inputs
(1, 2, 1)
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.linalg
from numpy.typing import NDArray
from scipy.optimize import linear_sum_assignment

from audit.errors import InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization

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


# ============================================================================ results
@dataclass(frozen=True)
class TransferFunctionData:
    """A transfer matrix as polynomial coefficients (display / export form).

    Attributes
    ----------
    numerator : list of list of list of float, [p][m][k]
        Numerator coefficients of channel ``[i][j]`` in descending powers of s (or z),
        padded with leading zeros to the length of the denominator.
    denominator : list of list of list of float, [p][m][k]
        Monic denominator coefficients of channel ``[i][j]``.
    sample_period : float or None
        ``None`` for continuous time.
    """

    numerator: list[list[list[float]]]
    denominator: list[list[list[float]]]
    sample_period: float | None = None

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-friendly dictionary."""
        return {
            "numerator": [[[float(c) for c in poly] for poly in row] for row in self.numerator],
            "denominator": [
                [[float(c) for c in poly] for poly in row] for row in self.denominator
            ],
            "sample_period": self.sample_period,
        }


@dataclass(frozen=True)
class ZerosPolesGainData:
    """Per-channel zeros, poles and gain ``G_ij = k_ij prod(s - z) / prod(s - p)``.

    Attributes
    ----------
    zeros : list of list of list of complex, [p][m][*]
        Transmission zeros of the minimal SISO channel ``[i][j]``.
    poles : list of list of list of complex, [p][m][*]
        Poles of the minimal SISO channel ``[i][j]``.
    gain : list of list of float, [p][m]
        Leading-coefficient ratio of channel ``[i][j]`` (0.0 for a vanishing channel).
    sample_period : float or None
        ``None`` for continuous time.
    """

    zeros: list[list[list[complex]]]
    poles: list[list[list[complex]]]
    gain: list[list[float]]
    sample_period: float | None = None

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-friendly dictionary; complex numbers as ``[re, im]`` pairs."""

        def pairs(values: list[list[list[complex]]]) -> list[list[list[list[float]]]]:
            return [
                [[[float(v.real), float(v.imag)] for v in cell] for cell in row]
                for row in values
            ]

        return {
            "zeros": pairs(self.zeros),
            "poles": pairs(self.poles),
            "gain": [[float(g) for g in row] for row in self.gain],
            "sample_period": self.sample_period,
        }


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


def _strip_leading(coeffs: FloatArray, rtol: float) -> FloatArray:
    """Drop leading coefficients ``<= rtol * max|coeff|`` (keep at least one).

    With ``rtol = 0`` (the default everywhere) only coefficients that ARE zero are dropped:
    the stored polynomial is the model, and a coefficient small relative to the others
    (the leading 1.0 of a polynomial whose constant term is 1e38) is kept.
    """
    scale = float(np.max(np.abs(coeffs))) if coeffs.size else 0.0
    if scale == 0.0:
        return np.zeros(1)
    keep = np.nonzero(np.abs(coeffs) > rtol * scale)[0]
    return coeffs[keep[0]:].copy()


def _normalized_channels(
    numerator: Any, denominator: Any, coefficient_rtol: float,
    rounding_improper: list[dict[str, Any]] | None = None,
) -> tuple[int, int, list[list[tuple[FloatArray, FloatArray]]]]:
    """Validate and normalise: monic denominator, stripped leading zeros, proper.

    Excess leading numerator coefficients at rounding level
    (:func:`audit.core.stored_evaluation.is_rounding_improper`) are left out of the returned
    (realizable) channel and described in ``rounding_improper``; the stored data keep
    them and the decisive evidence evaluates them.
    """
    from audit.core.stored_evaluation import improper_excess, is_rounding_improper

    p, m = _grid_shape(numerator, "transfer_function.numerator")
    pd, md = _grid_shape(denominator, "transfer_function.denominator")
    if (pd, md) != (p, m):
        raise InvalidModelError(
            f"transfer_function.denominator: is {pd}x{md} (outputs x inputs) but the "
            f"numerator is {p}x{m}; both must have the same [output][input] layout",
            field="transfer_function.denominator",
        )
    channels: list[list[tuple[FloatArray, FloatArray]]] = []
    for i in range(p):
        row: list[tuple[FloatArray, FloatArray]] = []
        for j in range(m):
            num_name = f"transfer_function.numerator[{i}][{j}]"
            den_name = f"transfer_function.denominator[{i}][{j}]"
            num = _real_vector(numerator[i][j], num_name)
            den = _real_vector(denominator[i][j], den_name)
            if num.size == 0:
                raise InvalidModelError(
                    f"{num_name}: is empty; expected at least one coefficient", field=num_name
                )
            if den.size == 0 or not np.any(den != 0.0):
                raise InvalidModelError(
                    f"{den_name}: is zero; expected a non-zero polynomial", field=den_name
                )
            den = _strip_leading(den, coefficient_rtol)
            num = _strip_leading(num, coefficient_rtol)
            if num.size > den.size:
                if np.any(num != 0.0) and is_rounding_improper(num, den):
                    excess, rel = improper_excess(num, den)
                    if rounding_improper is not None:
                        rounding_improper.append({
                            "channel": [i, j], "coefficients": num[:excess].tolist(),
                            "numerator_degree": num.size - 1, "denominator_degree": den.size - 1,
                            "relative_size": rel})
                    num = num[excess:]
                else:
                    raise InvalidModelError(
                        f"{num_name}: has degree {num.size - 1} but the denominator has degree "
                        f"{den.size - 1}; channel [{i}][{j}] is improper (only proper transfer "
                        "functions have a state-space realization)",
                        field=num_name,
                    )
            lead = den[0]
            den = den / lead
            num = num / lead
            padded = np.zeros(den.size)
            padded[den.size - num.size:] = num
            row.append((padded, den))
        channels.append(row)
    return p, m, channels


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


# ============================================== transfer function -> state space
def _companion_column(
    column: list[tuple[FloatArray, FloatArray]], *, coefficient_rtol: float
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """SIMO realization of one column: one controllable companion block per distinct
    denominator (channels sharing a denominator share the block)."""
    p = len(column)
    groups: list[tuple[FloatArray, list[int]]] = []
    for i, (_, den) in enumerate(column):
        for g_den, members in groups:
            if g_den.size == den.size and np.all(
                np.abs(g_den - den) <= coefficient_rtol * np.maximum(1.0, np.abs(den)) * 100
            ):
                members.append(i)
                break
        else:
            groups.append((den, [i]))
    a_blocks, b_blocks, c_blocks = [], [], []
    d = np.zeros((p, 1))
    for den, members in groups:
        k = den.size - 1
        # Controllable companion form in the diagonal power-of-two coordinates
        # x_r -> w0^r x_r (w0 the balancing frequency of the denominator): the first row
        # holds -a_(c+1) / w0^c, the subdiagonal w0, C the numerator residue / w0^c.
        # Every entry is a stored coefficient times a power of two (exact), and a
        # high-degree polynomial neither overflows nor needs truncating.
        from audit.core.stored_evaluation import balancing_frequency

        e = int(round(math.log2(balancing_frequency(den))))
        shifts = -e * np.arange(k)
        a_g = np.zeros((k, k))
        if k:
            a_g[0, :] = np.ldexp(-den[1:], shifts)
            a_g[np.arange(1, k), np.arange(k - 1)] = math.ldexp(1.0, e)
        b_g = np.zeros((k, 1))
        if k:
            b_g[0, 0] = 1.0
        c_g = np.zeros((p, k))
        for i in members:
            num = column[i][0]
            d[i, 0] = num[0]
            c_g[i, :] = np.ldexp(num[1:] - num[0] * den[1:], shifts)
        a_blocks.append(a_g)
        b_blocks.append(b_g)
        c_blocks.append(c_g)
    n = sum(blk.shape[0] for blk in a_blocks)
    a = _block_diagonal(a_blocks, n, n)
    b = np.vstack(b_blocks) if n else np.zeros((0, 1))
    c = np.hstack(c_blocks) if n else np.zeros((p, 0))
    return a, b, c, d


def _realize_columns_own(
    channels: list[list[tuple[FloatArray, FloatArray]]],
    p: int,
    m: int,
    *,
    coefficient_rtol: float,
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Non-minimal realization: columns stacked block-diagonally (input j drives column j)."""
    parts = [
        _companion_column([channels[i][j] for i in range(p)], coefficient_rtol=coefficient_rtol)
        for j in range(m)
    ]
    n = sum(part[0].shape[0] for part in parts)
    a = _block_diagonal([part[0] for part in parts], n, n)
    b = _block_diagonal([part[1] for part in parts], n, m)
    c = np.hstack([part[2] for part in parts]) if n else np.zeros((p, 0))
    d = np.hstack([part[3] for part in parts])
    return a, b, c, d


def _column_common_denominators(
    channels: list[list[tuple[FloatArray, FloatArray]]], p: int, m: int, *, coefficient_rtol: float
) -> tuple[list[FloatArray], list[list[FloatArray]]]:
    """Per column: product of its distinct denominators, numerators brought over it."""
    dens: list[FloatArray] = []
    nums: list[list[FloatArray]] = [[np.zeros(1)] * m for _ in range(p)]
    for j in range(m):
        distinct: list[FloatArray] = []
        for i in range(p):
            den = channels[i][j][1]
            if not any(
                g.size == den.size
                and np.all(np.abs(g - den) <= coefficient_rtol * np.maximum(1.0, np.abs(den)) * 100)
                for g in distinct
            ):
                distinct.append(den)
        common = np.array([1.0])
        for g in distinct:
            common = np.polymul(common, g)
        dens.append(common)
        for i in range(p):
            num, den = channels[i][j]
            # common / den is exact when den is one of the distinct factors; otherwise
            # (a near-duplicate was merged) use the merged factor's cofactor.
            cofactor = np.array([1.0])
            used = False
            for g in distinct:
                if not used and g.size == den.size and np.all(
                    np.abs(g - den) <= coefficient_rtol * np.maximum(1.0, np.abs(den)) * 100
                ):
                    used = True
                    continue
                cofactor = np.polymul(cofactor, g)
            full = np.polymul(num, cofactor)
            padded = np.zeros(common.size)
            padded[common.size - full.size:] = full
            nums[i][j] = padded
    return dens, nums


def _realize_with_slycot(
    channels: list[list[tuple[FloatArray, FloatArray]]], p: int, m: int, *, coefficient_rtol: float
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """SLICOT TD04AD over common column (or row) denominators, whichever gives the
    smaller total degree; rows are handled as columns of the transpose, then dualised.
    Errors become :class:`NumericalTroubleError`."""
    col_dens, _ = _column_common_denominators(channels, p, m, coefficient_rtol=coefficient_rtol)
    transposed = [[channels[i][j] for i in range(p)] for j in range(m)]
    row_dens, _ = _column_common_denominators(transposed, m, p, coefficient_rtol=coefficient_rtol)
    if sum(d.size for d in row_dens) < sum(d.size for d in col_dens):
        a, b, c, d = _td04ad_by_columns(transposed, m, p, coefficient_rtol=coefficient_rtol)
        return a.T.copy(), c.T.copy(), b.T.copy(), d.T.copy()
    return _td04ad_by_columns(channels, p, m, coefficient_rtol=coefficient_rtol)


def _td04ad_by_columns(
    channels: list[list[tuple[FloatArray, FloatArray]]], p: int, m: int, *, coefficient_rtol: float
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """SLICOT TD04AD with ROWCOL='C' (columns over common denominators)."""
    try:
        import slycot
    except ImportError as exc:  # pragma: no cover - slycot is a declared dependency
        raise NumericalTroubleError(f"slycot is not available: {exc}") from exc
    dens, nums = _column_common_denominators(channels, p, m, coefficient_rtol=coefficient_rtol)
    index = np.array([den.size - 1 for den in dens], dtype=int)
    kdcoef = int(index.max()) + 1
    dcoeff = np.zeros((m, kdcoef))
    mp = max(m, p)
    ucoeff = np.zeros((mp, mp, kdcoef))
    for j in range(m):
        dcoeff[j, : dens[j].size] = dens[j]
        for i in range(p):
            # coefficient k is in s**(index[j] - k): left-aligned per column
            ucoeff[i, j, : nums[i][j].size] = nums[i][j]
    try:
        nr, a, b, c, d = slycot.td04ad("C", m, p, index, dcoeff, ucoeff)
    except Exception as exc:  # slycot raises several types; translate all
        raise NumericalTroubleError(f"SLICOT TD04AD failed: {exc}") from exc
    a = np.asarray(a, dtype=float)[:nr, :nr]
    b = np.asarray(b, dtype=float)[:nr, :m]
    c = np.asarray(c, dtype=float)[:p, :nr]
    d = np.asarray(d, dtype=float)[:p, :m]
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b)) and np.all(np.isfinite(c))
            and np.all(np.isfinite(d))):
        raise NumericalTroubleError("SLICOT TD04AD returned non-finite matrices")
    return a, b, c, d


def realization_from_transfer_function(
    numerator: Sequence[Sequence[Sequence[float]]],
    denominator: Sequence[Sequence[Sequence[float]]],
    sample_period: float | None = None,
    *,
    rank_rtol: float = DEFAULT_RANK_RTOL,
    coefficient_rtol: float = DEFAULT_COEFFICIENT_RTOL,
    use_slycot: bool = False,
) -> Realization:
    """Minimal state-space realization of a proper transfer matrix (MIMO included).

    Parameters
    ----------
    numerator, denominator : nested lists [p][m][k]
        Coefficients of channel ``[i][j]`` (output i, input j) in descending powers of s
        (or z).  Lengths may differ between channels.
    sample_period : float or None
        ``None`` for continuous time, seconds > 0 for discrete time.
    rank_rtol : float, keyword-only
        Relative tolerance of the staircase rank decisions that remove uncontrollable and
        unobservable parts (pole-zero cancellations closer than this are cancelled).
    coefficient_rtol : float, keyword-only
        Leading coefficients at most ``coefficient_rtol * max|coefficients|`` of the
        same polynomial are treated as zero; denominators of one column whose monic
        coefficients agree to ``100 * coefficient_rtol`` are treated as the same.  The
        default 0 drops only zero coefficients and shares only equal denominators.
    use_slycot : bool, keyword-only
        Use SLICOT ``TD04AD`` first (it multiplies distinct denominators of a column into
        one polynomial, which rounds); by default, or if it fails, use the own
        construction: controllable companion blocks whose entries are the stored
        coefficients times powers of two, one block per denominator (shared only by
        denominators equal as stored), by columns or rows, whichever is smaller.  Both
        are followed by the orthogonal staircase.  The returned realization carries the
        stored coefficients (:attr:`Realization.stored`).

    Returns
    -------
    Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)`` with ``n`` the
        McMillan degree (up to the rank tolerance).

    Raises
    ------
    InvalidModelError
        Ragged or empty lists, NaN/inf, a zero denominator, an improper channel (the
        message names ``[i][j]``), or a bad sample period.
    NumericalTroubleError
        The result is not finite.

    Examples
    --------
    >>> r = realization_from_transfer_function([[[1.0, 0.0], [2.0]]], [[[1.0, 3.0], [1.0, 3.0]]])
    >>> r.order, r.d.tolist()
    (1, [[1.0, 0.0]])
    """
    from audit.core.stored_evaluation import StoredTransferFunction

    period = _check_sample_period(sample_period)
    improper: list[dict[str, Any]] = []
    p, m, channels = _normalized_channels(numerator, denominator, coefficient_rtol, improper)
    result: tuple[FloatArray, FloatArray, FloatArray, FloatArray] | None = None
    if use_slycot:
        try:
            result = _realize_with_slycot(channels, p, m, coefficient_rtol=coefficient_rtol)
        except NumericalTroubleError:
            result = None
    if result is None:
        result = _realize_own(channels, p, m, coefficient_rtol=coefficient_rtol)
    a, b, c, d = result
    stored = StoredTransferFunction(
        numerator=tuple(tuple(_strip_leading(_real_vector(numerator[i][j], "numerator"), 0.0)
                              for j in range(m)) for i in range(p)),
        denominator=tuple(tuple(_strip_leading(_real_vector(denominator[i][j], "denominator"), 0.0)
                                for j in range(m)) for i in range(p)),
        sample_period=period,
        rounding_improper=tuple(improper),
    )
    # Verify / complete minimality with our own orthogonal staircase; keep the reduction
    # only if it still realizes the stored data (rank decisions on companion blocks with
    # coefficients over many decades can remove modes that are there).
    a_m, b_m, c_m = _minimal_part(a, b, c, rank_rtol=rank_rtol)
    if a_m.shape[0] < a.shape[0] and _reduction_faithful(a_m, b_m, c_m, d, stored, period):
        a, b, c = a_m, b_m, c_m
    for name, arr in (("A", a), ("B", b), ("C", c), ("D", d)):
        if not np.all(np.isfinite(arr)):
            raise NumericalTroubleError(
                f"realization of the transfer matrix produced a non-finite {name}"
            )
    return Realization.from_arrays(a, b, c, d, period).with_stored(stored)


#: A staircase reduction of a transfer-function realization is kept when it reproduces
#: the stored data to this relative accuracy at the check points (common practice, no
#: source: far below the audit's default tolerance 1e-5, well above double rounding).
REDUCTION_CHECK_RTOL = 1e-9


def _reduction_faithful(a: FloatArray, b: FloatArray, c: FloatArray, d: FloatArray,
                        stored: Any, period: float | None) -> bool:
    """True when (a, b, c, d) matches the stored transfer function at 24 points of the
    stability boundary spread over the stored pole frequencies (relative to the
    largest gain there)."""
    poles = stored.poles()
    poles = poles[np.isfinite(poles)]
    if period is None:
        mags = np.abs(poles[np.abs(poles) > 0])
        lo, hi = (mags.min() / 10, mags.max() * 10) if mags.size else (1e-2, 1e2)
        pts = 1j * np.geomspace(lo, hi, 24)
    else:
        pts = np.exp(1j * np.linspace(1e-3, np.pi, 24))
    ref, bound = stored.evaluate(pts)
    ok = np.isfinite(bound)
    if not np.any(ok):
        return False
    n = a.shape[0]
    got = np.empty_like(ref)
    for k, lam in enumerate(pts):
        try:
            got[k] = c @ np.linalg.solve(lam * np.eye(n) - a, b) + d if n else d
        except np.linalg.LinAlgError:
            return False
    scale = float(np.max(np.abs(ref[ok]), initial=0.0))
    err = float(np.max(np.abs(got[ok] - ref[ok]) - bound[ok, None, None], initial=0.0))
    return bool(np.isfinite(err) and err <= REDUCTION_CHECK_RTOL * max(scale, 1e-300))


def _realize_own(
    channels: list[list[tuple[FloatArray, FloatArray]]], p: int, m: int, *, coefficient_rtol: float
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Companion blocks by columns, or by rows (the dual) when that needs fewer states."""
    col = _realize_columns_own(channels, p, m, coefficient_rtol=coefficient_rtol)
    if p > 1 and m > 1:
        transposed = [[channels[i][j] for i in range(p)] for j in range(m)]
        row = _realize_columns_own(transposed, m, p, coefficient_rtol=coefficient_rtol)
        if row[0].shape[0] < col[0].shape[0]:
            a, b, c, d = row
            return a.T.copy(), c.T.copy(), b.T.copy(), d.T.copy()
    return col


# =============================================== zeros-poles-gain -> state space
def _complex_list(value: Any, name: str) -> ComplexArray:
    if isinstance(value, (str, bytes)) or not isinstance(value, (Sequence, np.ndarray)):
        raise InvalidModelError(
            f"{name}: got {type(value).__name__} but expected a list of numbers", field=name
        )
    out = np.zeros(len(value), dtype=complex)
    for k, item in enumerate(value):
        if isinstance(item, (Sequence, np.ndarray)) and not isinstance(item, (str, bytes)):
            if len(item) != 2:
                raise InvalidModelError(
                    f"{name}[{k}]: got {item!r} but expected a number or an [re, im] pair",
                    field=f"{name}[{k}]",
                )
            try:
                out[k] = complex(float(item[0]), float(item[1]))
            except (TypeError, ValueError):
                raise InvalidModelError(
                    f"{name}[{k}]: got {item!r} but expected an [re, im] pair of numbers",
                    field=f"{name}[{k}]",
                ) from None
        elif isinstance(item, numbers.Number) and not isinstance(item, bool):
            out[k] = complex(item)  # type: ignore[arg-type]
        else:
            raise InvalidModelError(
                f"{name}[{k}]: got {item!r} but expected a number or an [re, im] pair",
                field=f"{name}[{k}]",
            )
    if not np.all(np.isfinite(out)):
        raise InvalidModelError(f"{name}: contains NaN or infinity", field=name)
    return out


def _real_and_pairs(
    values: ComplexArray, name: str, channel: str, conjugate_rtol: float
) -> tuple[FloatArray, ComplexArray]:
    """Split into real values and one representative (imag > 0) per conjugate pair."""
    mag = np.abs(values)
    is_real = np.abs(values.imag) <= conjugate_rtol * mag
    reals = values[is_real].real.astype(float)
    upper = values[(~is_real) & (values.imag > 0)]
    lower = values[(~is_real) & (values.imag < 0)]
    if upper.size != lower.size:
        raise InvalidModelError(
            f"{name}: channel {channel} has {upper.size} value(s) with positive and "
            f"{lower.size} with negative imaginary part; complex values must come in "
            "conjugate pairs (the system must be real)",
            field=name,
        )
    if upper.size == 0:
        return reals, upper
    cost = np.abs(upper[:, None] - np.conj(lower)[None, :])
    rows, cols = linear_sum_assignment(cost)
    pairs = np.zeros(upper.size, dtype=complex)
    for r_, c_ in zip(rows, cols):
        size = max(abs(upper[r_]), abs(lower[c_]))
        if cost[r_, c_] > conjugate_rtol * size:
            raise InvalidModelError(
                f"{name}: channel {channel} value {upper[r_]!r} has no conjugate partner "
                f"(nearest {lower[c_]!r}); complex values must come in conjugate pairs "
                f"within relative {conjugate_rtol:g}",
                field=name,
            )
        pairs[r_] = 0.5 * (upper[r_] + np.conj(lower[c_]))
    return reals, pairs


_Section = tuple[FloatArray, FloatArray, FloatArray, float]


def _section(
    real_poles: list[float],
    pole_pair: complex | None,
    real_zeros: list[float],
    zero_pair: complex | None,
) -> _Section:
    """Realization of one monic section (numerator degree <= denominator degree <= 2)."""
    # numerator polynomial (monic), descending powers
    num = np.array([1.0])
    for z in real_zeros:
        num = np.polymul(num, [1.0, -z])
    if zero_pair is not None:
        num = np.polymul(num, [1.0, -2.0 * zero_pair.real, abs(zero_pair) ** 2])
    if pole_pair is not None:
        sigma, omega = pole_pair.real, pole_pair.imag
        den = np.array([1.0, -2.0 * sigma, sigma * sigma + omega * omega])
        a = np.array([[sigma, omega], [-omega, sigma]])
        b = np.array([[0.0], [1.0]])
        # (sI - A)^-1 b = [omega, s - sigma] / den
        padded = np.zeros(3)
        padded[3 - num.size:] = num
        d = padded[0]
        r1, r0 = padded[1] - d * den[1], padded[2] - d * den[2]
        c = np.array([[(r0 + r1 * sigma) / omega, r1]])
        return a, b, c, float(d)
    if len(real_poles) == 2:
        p1, p2 = real_poles
        den = np.polymul([1.0, -p1], [1.0, -p2])
        a = np.array([[p1, 0.0], [1.0, p2]])
        b = np.array([[1.0], [0.0]])
        # (sI - A)^-1 b = [s - p2, 1] / den
        padded = np.zeros(3)
        padded[3 - num.size:] = num
        d = padded[0]
        r1, r0 = padded[1] - d * den[1], padded[2] - d * den[2]
        c = np.array([[r1, r0 + r1 * p2]])
        return a, b, c, float(d)
    (p1,) = real_poles
    a = np.array([[p1]])
    b = np.array([[1.0]])
    if num.size == 2:  # (s - z)/(s - p) = 1 + (p - z)/(s - p)
        return a, b, np.array([[p1 - real_zeros[0]]]), 1.0
    return a, b, np.array([[1.0]]), 0.0


def _series(first: _Section, second: _Section) -> _Section:
    """SISO series connection: ``first`` feeds ``second``."""
    a1, b1, c1, d1 = first
    a2, b2, c2, d2 = second
    n1, n2 = a1.shape[0], a2.shape[0]
    a = np.zeros((n1 + n2, n1 + n2))
    a[:n1, :n1] = a1
    a[n1:, :n1] = b2 @ c1
    a[n1:, n1:] = a2
    b = np.vstack([b1, b2 * d1])
    c = np.hstack([d2 * c1, c2])
    return a, b, c, d1 * d2


def _siso_cascade(
    zeros_real: FloatArray, zero_pairs: ComplexArray,
    poles_real: FloatArray, pole_pairs: ComplexArray, gain: float,
) -> _Section:
    """Cascade of real first/second-order sections realizing k prod(s-z)/prod(s-p)."""
    # Pole sections: complex pairs, then real poles in pairs, a last single one.
    pole_sections: list[tuple[list[float], complex | None]] = [([], pp) for pp in pole_pairs]
    reals = sorted(poles_real.tolist())
    while len(reals) >= 2:
        pole_sections.append(([reals.pop(0), reals.pop(0)], None))
    if reals:
        pole_sections.append(([reals.pop(0)], None))
    capacity = [2 if (pp is not None or len(rp) == 2) else 1 for rp, pp in pole_sections]
    size = [max([abs(v) for v in rp] + ([abs(pp)] if pp is not None else [])) for rp, pp in
            pole_sections]
    zero_pair_of: list[complex | None] = [None] * len(pole_sections)
    real_zeros_of: list[list[float]] = [[] for _ in pole_sections]

    def nearest(magnitude: float, need: int) -> int:
        # the free section whose pole magnitude is closest (log scale) to the zero's:
        # keeps each section's numerator and denominator of similar size
        best = min(
            (i for i, cap in enumerate(capacity) if cap >= need),
            key=lambda i: abs(math.log(max(size[i], 1e-300)) - math.log(max(magnitude, 1e-300))),
        )
        return best

    for zp in sorted(zero_pairs, key=abs):  # complex zero pairs need a free 2-slot section
        k = nearest(abs(zp), 2)
        zero_pair_of[k] = zp
        capacity[k] = 0
    for z in sorted(zeros_real.tolist(), key=abs):
        k = nearest(abs(z), 1)
        real_zeros_of[k].append(z)
        capacity[k] -= 1
    system: _Section = (np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), 1.0)
    for (rp, pp), zp, rz in zip(pole_sections, zero_pair_of, real_zeros_of):
        a_s, b_s, c_s, d_s = _section(rp, pp, rz, zp)
        nb, nc = float(np.linalg.norm(b_s)), float(np.linalg.norm(c_s))
        if nb > 0.0 and nc > 0.0:
            # uniform state scaling x -> alpha x keeps A (normal rotation form) unchanged
            alpha = math.sqrt(nb / nc)
            b_s, c_s = b_s / alpha, c_s * alpha
        system = _series(system, (a_s, b_s, c_s, d_s))
    a, b, c, d = system
    return a, b, c * gain, d * gain


def realization_from_zeros_poles_gain(
    zeros: Sequence[Sequence[Sequence[Any]]],
    poles: Sequence[Sequence[Sequence[Any]]],
    gain: Sequence[Sequence[float]],
    sample_period: float | None = None,
    *,
    rank_rtol: float = DEFAULT_RANK_RTOL,
    conjugate_rtol: float = DEFAULT_CONJUGATE_RTOL,
) -> Realization:
    """Minimal state-space realization from per-channel zeros, poles and gains.

    Channel ``[i][j]`` is ``gain[i][j] * prod(s - zeros[i][j]) / prod(s - poles[i][j])``.
    Each channel is realized as a cascade of real first- and second-order sections; the
    channels are stacked and reduced to a minimal realization by orthogonal staircase
    reductions.

    Parameters
    ----------
    zeros, poles : nested lists [p][m][*]
        Complex numbers (Python ``complex``, real numbers, or ``[re, im]`` pairs).
        Non-real values must come in conjugate pairs.
    gain : nested list [p][m] of float
    sample_period : float or None
    rank_rtol : float, keyword-only
        Relative tolerance of the staircase rank decisions.
    conjugate_rtol : float, keyword-only
        A value with ``|imag| <= conjugate_rtol * |value|`` is real; conjugate partners
        must agree to ``conjugate_rtol`` relative to their magnitude.

    Returns
    -------
    Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``, minimal.

    Raises
    ------
    InvalidModelError
        Ragged lists, non-numbers, NaN/inf, unpaired complex values, more zeros than
        poles (improper), or a bad sample period; the message names the channel.

    Examples
    --------
    >>> r = realization_from_zeros_poles_gain([[[-1.0]]], [[[-2.0, -3.0]]], [[4.0]])
    >>> r.order
    2
    """
    period = _check_sample_period(sample_period)
    p, m = _grid_shape(zeros, "zeros_poles_gain.zeros")
    shapes = {
        "zeros_poles_gain.poles": _grid_shape(poles, "zeros_poles_gain.poles"),
        "zeros_poles_gain.gain": _grid_shape(gain, "zeros_poles_gain.gain"),
    }
    for name, shape in shapes.items():
        if shape != (p, m):
            raise InvalidModelError(
                f"{name}: is {shape[0]}x{shape[1]} (outputs x inputs) but "
                f"zeros_poles_gain.zeros is {p}x{m}; all three must have the same layout",
                field=name,
            )
    a_blocks: list[FloatArray] = []
    b_cols: list[tuple[int, FloatArray]] = []
    c_rows: list[tuple[int, FloatArray]] = []
    d = np.zeros((p, m))
    for i in range(p):
        for j in range(m):
            ch = f"[{i}][{j}]"
            z = _complex_list(zeros[i][j], f"zeros_poles_gain.zeros{ch}")
            pl = _complex_list(poles[i][j], f"zeros_poles_gain.poles{ch}")
            k_raw = gain[i][j]
            if isinstance(k_raw, bool) or not isinstance(k_raw, numbers.Real):
                raise InvalidModelError(
                    f"zeros_poles_gain.gain{ch}: got {k_raw!r} but expected a real number",
                    field=f"zeros_poles_gain.gain{ch}",
                )
            k = float(k_raw)
            if not math.isfinite(k):
                raise InvalidModelError(
                    f"zeros_poles_gain.gain{ch}: is {k!r}; expected a finite number",
                    field=f"zeros_poles_gain.gain{ch}",
                )
            if z.size > pl.size:
                raise InvalidModelError(
                    f"zeros_poles_gain.zeros{ch}: channel {ch} has {z.size} zeros but only "
                    f"{pl.size} poles; it is improper (only proper systems have a "
                    "state-space realization)",
                    field=f"zeros_poles_gain.zeros{ch}",
                )
            zr, zp = _real_and_pairs(z, f"zeros_poles_gain.zeros{ch}", ch, conjugate_rtol)
            pr, pp = _real_and_pairs(pl, f"zeros_poles_gain.poles{ch}", ch, conjugate_rtol)
            if k == 0.0:
                continue  # vanishing channel: nothing to realize
            a_s, b_s, c_s, d_s = _siso_cascade(zr, zp, pr, pp, k)
            d[i, j] = d_s
            if a_s.shape[0]:
                a_blocks.append(a_s)
                b_cols.append((j, b_s[:, 0]))
                c_rows.append((i, c_s[0, :]))
    n = sum(blk.shape[0] for blk in a_blocks)
    a = _block_diagonal(a_blocks, n, n)
    b = np.zeros((n, m))
    c = np.zeros((p, n))
    offset = 0
    for blk, (j, bcol), (i, crow) in zip(a_blocks, b_cols, c_rows):
        size = blk.shape[0]
        b[offset:offset + size, j] = bcol
        c[i, offset:offset + size] = crow
        offset += size
    a, b, c = _minimal_part(a, b, c, rank_rtol=rank_rtol)
    from audit.core.stored_evaluation import StoredZerosPolesGain

    stored = StoredZerosPolesGain(
        zeros=tuple(tuple(_complex_list(zeros[i][j], "zeros") for j in range(m)) for i in range(p)),
        poles_=tuple(tuple(_complex_list(poles[i][j], "poles") for j in range(m)) for i in range(p)),
        gain=np.array([[float(gain[i][j]) for j in range(m)] for i in range(p)]),
        sample_period=period,
    )
    return Realization.from_arrays(a, b, c, d, period).with_stored(stored)


# =============================================== state space -> zeros-poles-gain
def _reflector_to_last(x: FloatArray) -> tuple[FloatArray, float]:
    """Householder H (symmetric, orthogonal) with ``H x = alpha e_last``."""
    n = x.size
    norm = float(np.linalg.norm(x))
    if norm == 0.0:
        return np.eye(n), 0.0
    alpha = -math.copysign(norm, x[-1]) if x[-1] != 0.0 else -norm
    v = x.astype(float).copy()
    v[-1] -= alpha
    vv = float(v @ v)
    if vv == 0.0:
        return np.eye(n), float(x[-1])
    return np.eye(n) - (2.0 / vv) * np.outer(v, v), alpha


def _siso_zeros(
    a: FloatArray, b: FloatArray, c: FloatArray, d: float, *, rank_rtol: float
) -> ComplexArray:
    """Finite transmission zeros of a SISO system (Emami-Naeini & Van Dooren 1982).

    ``b : (n,)``, ``c : (n,)``.  While the feedthrough is negligible, an orthogonal
    reflector moves ``b`` onto the last state and the last state is deflated (one
    infinite zero removed, the new feedthrough being the last entry of ``c``); once the
    feedthrough is significant, a reflector compresses the row ``[c, d]`` and the zeros
    are the eigenvalues of a regular n-by-n pencil.  No infinite eigenvalues are ever
    computed, so none has to be recognised afterwards.

    This is the fallback when SLICOT AB08ND fails.  It deflates from the input side only
    and has no balancing of its own, so for stiff channels of high relative degree
    (rounding in the vanishing feedthrough grows like ||A|| / ||b_k|| per deflation) it
    can keep spurious large zeros that AB08ND removes.
    """
    scale = float(np.linalg.norm(np.block([[a, b[:, None]], [c[None, :], np.array([[d]])]])))
    if scale == 0.0:
        return np.zeros(0, dtype=complex)
    tol = rank_rtol * scale
    while True:
        n = a.shape[0]
        if abs(d) > tol:
            if n == 0:
                return np.zeros(0, dtype=complex)
            h, _ = _reflector_to_last(np.concatenate([c, [d]]))
            system = np.block([[a, b[:, None]], [c[None, :], np.array([[d]])]]) @ h
            return np.asarray(scipy.linalg.eigvals(system[:n, :n], h[:n, :n]), dtype=complex)
        if n == 0 or float(np.linalg.norm(b)) <= tol or float(np.linalg.norm(c)) <= tol:
            return np.zeros(0, dtype=complex)  # vanishing transfer function
        h, _ = _reflector_to_last(b)
        a_t = h @ a @ h
        c_t = c @ h
        a, b, c, d = a_t[:-1, :-1], a_t[:-1, -1].copy(), c_t[:-1].copy(), float(c_t[-1])


def _siso_zeros_slycot(a: FloatArray, b: FloatArray, c: FloatArray, d: float) -> ComplexArray:
    """Finite zeros by SLICOT AB08ND (same published method, with its own balancing and
    rank tolerance); any slycot failure becomes :class:`NumericalTroubleError`.

    AB08ND's default tolerance is used on purpose: a looser one removes genuine large
    zeros of stiff systems with a high relative degree (observed on an order-20 cascade).
    """
    try:
        import slycot

        n = a.shape[0]
        out = slycot.ab08nd(n, 1, 1, a, b, c, np.array([[d]]), equil="S")
        nu, af, bf = int(out[0]), out[-2], out[-1]
        if nu == 0:
            return np.zeros(0, dtype=complex)
        zeros = scipy.linalg.eigvals(af[:nu, :nu], bf[:nu, :nu])
    except Exception as exc:  # slycot raises several types; translate all
        raise NumericalTroubleError(f"SLICOT AB08ND failed: {exc}") from exc
    zeros = np.asarray(zeros, dtype=complex)
    if not np.all(np.isfinite(zeros)):
        raise NumericalTroubleError("SLICOT AB08ND returned non-finite zeros")
    return zeros


def _channel_zeros_poles_gain(
    r: Realization, i: int, j: int, *, rank_rtol: float
) -> tuple[ComplexArray, ComplexArray, float]:
    a, b, c = _minimal_part(
        np.asarray(r.a), np.asarray(r.b)[:, [j]], np.asarray(r.c)[[i], :], rank_rtol=rank_rtol
    )
    d = float(r.d[i, j])
    n = a.shape[0]
    scale = max(float(np.linalg.norm(a, 2)) if n else 0.0, abs(d), 1e-300)
    if n == 0:
        return np.zeros(0, dtype=complex), np.zeros(0, dtype=complex), d
    poles = np.asarray(np.linalg.eigvals(a), dtype=complex)
    try:
        zeros = _siso_zeros_slycot(a, b, c, d)
    except NumericalTroubleError:
        zeros = _siso_zeros(a, b[:, 0], c[0, :], d, rank_rtol=rank_rtol)
    relative_degree = n - zeros.size
    if relative_degree == 0:
        gain = d
    else:
        # First non-vanishing Markov parameter C A^(k-1) B of the minimal channel.
        v = b[:, 0].copy()
        for _ in range(relative_degree - 1):
            v = a @ v
        gain = float(c[0, :] @ v)
    if not (np.all(np.isfinite(poles)) and np.all(np.isfinite(zeros)) and math.isfinite(gain)):
        raise NumericalTroubleError(
            f"channel [{i}][{j}]: zeros/poles/gain computation produced non-finite values "
            f"(scale {scale:g})"
        )
    return _tidy_conjugates(zeros), _tidy_conjugates(poles), gain


def _tidy_conjugates(values: ComplexArray) -> ComplexArray:
    """Sort: real values first (ascending), then pairs by real part, imag > 0 first."""
    order = np.lexsort((-values.imag, values.real, np.abs(values.imag) > 0))
    return values[order]


def zeros_poles_gain_from_realization(
    r: Realization, *, rank_rtol: float = DEFAULT_RANK_RTOL
) -> ZerosPolesGainData:
    """Per-channel zeros, poles and gain of a realization.

    For channel ``[i][j]`` the SISO subsystem ``(A, B[:, j], C[i, :], D[i, j])`` is reduced
    to a minimal realization (orthogonal staircase) of order ``n``; its poles are the
    eigenvalues of the reduced ``A``, its zeros the finite transmission zeros (reduced
    pencil of Emami-Naeini & Van Dooren), and its gain is ``D[i, j]`` when the channel
    is biproper and otherwise the Markov parameter ``C A^(k-1) B`` with relative degree
    ``k = n - (number of finite zeros)``, so that
    ``G_ij(s) = gain * prod(s - zeros) / prod(s - poles)``.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    rank_rtol : float, keyword-only
        Relative tolerance of the rank decisions (minimal channel, negligible
        feedthrough while deflating infinite zeros).

    Returns
    -------
    ZerosPolesGainData

    Raises
    ------
    InvalidModelError
        ``r`` is not a :class:`Realization`.
    NumericalTroubleError
        A non-finite result.

    Examples
    --------
    >>> r = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[1.0]])
    >>> data = zeros_poles_gain_from_realization(r)
    >>> [round(z.real, 9) for z in data.zeros[0][0]], data.poles[0][0], data.gain[0][0]
    ([-5.0], [(-2+0j)], 1.0)
    """
    if not isinstance(r, Realization):
        raise InvalidModelError(
            f"r: got {type(r).__name__} but expected an audit.core.realization.Realization",
            field="r",
        )
    zeros: list[list[list[complex]]] = []
    poles: list[list[list[complex]]] = []
    gains: list[list[float]] = []
    for i in range(r.n_outputs):
        zrow, prow, grow = [], [], []
        for j in range(r.n_inputs):
            z, p, k = _channel_zeros_poles_gain(r, i, j, rank_rtol=rank_rtol)
            zrow.append([complex(v) for v in z])
            prow.append([complex(v) for v in p])
            grow.append(float(k))
        zeros.append(zrow)
        poles.append(prow)
        gains.append(grow)
    return ZerosPolesGainData(zeros, poles, gains, r.sample_period)


def _real_polynomial(roots: list[complex]) -> FloatArray:
    if not roots:
        return np.array([1.0])
    return np.asarray(np.real(np.poly(np.array(roots, dtype=complex))), dtype=float)


def transfer_function_from_realization(
    r: Realization, *, rank_rtol: float = DEFAULT_RANK_RTOL
) -> TransferFunctionData:
    """Per-channel polynomial transfer function of a realization (display / export).

    Computed from :func:`zeros_poles_gain_from_realization`: denominator
    ``prod(s - p)`` (monic), numerator ``gain * prod(s - z)`` padded to the denominator's
    length, for the minimal SISO channel (common factors cancelled up to ``rank_rtol``).
    Coefficient form is numerically poor for high orders; use realizations or
    zeros-poles-gain data as evidence, and this only for display and export.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    rank_rtol : float, keyword-only
        Passed to :func:`zeros_poles_gain_from_realization`.

    Returns
    -------
    TransferFunctionData
        ``numerator``/``denominator`` [p][m][k]; a vanishing channel is ``[0.0] / [1.0]``.

    Raises
    ------
    InvalidModelError
        ``r`` is not a :class:`Realization`.
    NumericalTroubleError
        A non-finite result.

    Examples
    --------
    >>> r = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[0.0]])
    >>> transfer_function_from_realization(r).as_dict()["numerator"]
    [[[0.0, 3.0]]]
    """
    data = zeros_poles_gain_from_realization(r, rank_rtol=rank_rtol)
    numerators: list[list[list[float]]] = []
    denominators: list[list[list[float]]] = []
    for zrow, prow, grow in zip(data.zeros, data.poles, data.gain):
        nrow, drow = [], []
        for z, p, k in zip(zrow, prow, grow):
            den = _real_polynomial(p)
            num = k * _real_polynomial(z)
            padded = np.zeros(den.size)
            padded[den.size - num.size:] = num
            if k == 0.0:
                padded, den = np.zeros(1), np.ones(1)
            nrow.append([float(v) for v in padded])
            drow.append([float(v) for v in den])
        numerators.append(nrow)
        denominators.append(drow)
    return TransferFunctionData(numerators, denominators, r.sample_period)


__all__ = [
    "DEFAULT_COEFFICIENT_RTOL",
    "DEFAULT_CONJUGATE_RTOL",
    "DEFAULT_RANK_RTOL",
    "TransferFunctionData",
    "ZerosPolesGainData",
    "realization_from_transfer_function",
    "realization_from_zeros_poles_gain",
    "transfer_function_from_realization",
    "zeros_poles_gain_from_realization",
]
