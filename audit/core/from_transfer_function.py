"""Transfer matrix -> minimal state space.

The matrix is written as columns (or rows, whichever gives the smaller total degree)
over common denominators and realised by SLICOT ``TD04AD`` (Wolovich's structure
theorem followed by the orthogonal minimal-realization step of R. V. Patel,
"Computation of minimal-order state-space realizations and observability indices using
orthogonal transformations", Int. J. Control 33, 1981).  The result is then passed
through our own orthogonal staircase reduction (the controllability / observability
staircase of P. Van Dooren, "The generalized eigenstructure problem in linear system
theory", IEEE Trans. Automat. Control 26, 1981), which both checks and, when needed,
completes minimality.  If slycot fails, an own construction (one controllable companion
block per distinct denominator of each column, no polynomial products) followed by the
same staircase is used.

Examples
--------
>>> r = realization_from_transfer_function([[[1.0]], [[1.0]]], [[[1.0, 1.0]], [[1.0, 1.0]]])
>>> r.order, r.n_outputs, r.n_inputs
(1, 2, 1)
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from audit.errors import InvalidModelError, NumericalTroubleError
from audit.core.conversion_common import (
    DEFAULT_COEFFICIENT_RTOL, DEFAULT_RANK_RTOL, FloatArray, _block_diagonal,
    _check_sample_period, _grid_shape, _minimal_part, _real_vector,
)
from audit.core.realization import Realization


# ====================================================================== validation
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


__all__ = [
    "REDUCTION_CHECK_RTOL",
    "realization_from_transfer_function",
]
