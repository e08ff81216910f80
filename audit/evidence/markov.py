"""Frequency-scaled Markov parameters and their term-by-term comparison.

Method
------
The Markov parameters of ``G(s) = D + C (sI - A)^-1 B`` are the coefficients of its
expansion in powers of ``1/s``: ``M_0 = D`` and ``M_k = C A^(k-1) B`` (C.-T. Chen,
*Introduction to Linear System Theory*, Holt, Rinehart and Winston, 1970; the method
SLICOT's routine TF01RD implements).  For a discrete-time model the same numbers are the
samples of the impulse response, ``h[0] = D``, ``h[k] = C A^(k-1) B``.

Frequency scaling.  Raw Markov parameters of a model with fast modes grow like
``rho(A)^k`` and overflow (or, for slow models, vanish) long before the ``n1 + n2``
terms an equivalence test needs.  We therefore compute the parameters of
``G(w0 s')`` instead::

    M'_0 = D,   M'_k = C (A/w0)^(k-1) B / w0  =  C A^(k-1) B / w0^k ,

where ``w0`` is the *frequency scale*.  For a discrete-time model the scaling means
replacing ``z`` by ``w0 z'``: the scaled parameters are the exponentially weighted impulse
response ``h[k] / w0^k``; with ``w0`` equal to the spectral radius ``rho`` they are
``C (A/rho)^(k-1) B / rho``.  Two models have equal transfer functions if and only if their
scaled Markov parameters are equal for every scale, and (Cayley-Hamilton) equal for the
first ``n1 + n2`` terms plus ``D``.  The parameters are formed by the recursion
``X_0 = B/w0, X_k = (A/w0) X_(k-1)``, never by forming matrix powers.

Rounding-error estimate.  Each product obeys the standard bound
``||fl(A X) - A X||_F <= gamma_n ||A||_F ||X||_F`` with ``gamma_n ~ n u`` (N. J. Higham,
*Accuracy and Stability of Numerical Algorithms*, 2nd ed., SIAM, 2002, section 3.5).  The
bound is propagated through the recursion to first order in ``u``: the rounding error
made at step ``j`` reaches term ``k`` through ``C (A/w0)^(k-1-j)``, whose norm is computed
alongside (a transposed recursion), rather than bounded by ``||A/w0||^(k-1-j)``.  The
result is bounded by the textbook estimate ``eps (k+1) n ||C|| ||A/w0||^(k-1) ||B||
/ w0`` and for non-normal ``A`` usually many orders of magnitude smaller.  It covers the
computation's own error (first order), so a difference below it is never declared.
Errors in the data themselves are not included.

Exact re-run.  :func:`compare_markov_parameters_exact` repeats the deciding computation in
exact rational arithmetic (FLINT ``fmpq_mat`` via python-flint): every double is an exact
dyadic rational and :func:`common_frequency_scale` returns a power of two, so the scaled
parameters of the models *as stored* are computed without any rounding.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import Any, Literal

import flint
import numpy as np
from numpy.typing import NDArray

from audit.errors import InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization, check_comparable
from audit.evidence.inputs import finite_number

FloatArray = NDArray[np.float64]
Outcome = Literal["same", "different", "unresolved"]

__all__ = [
    "MarkovComparison",
    "common_frequency_scale",
    "compare_markov_parameters",
    "compare_markov_parameters_exact",
    "exact_markov_parameters",
    "markov_parameters",
]

# Unit roundoff of IEEE double.  We use eps = 2u in the bounds: the factor 2 absorbs the
# 1/(1 - n u) of gamma_n and the roundings of the scaling itself (common practice).
_EPS = float(np.finfo(float).eps)
# Below this a spectral radius / norm is treated as zero when choosing w0 (order of the
# smallest normal double times a margin; common practice, no source).
_TINY_SCALE = 1e-290
# Exponent range allowed for the power-of-two frequency scale.
_MAX_EXPONENT = 1000


# --------------------------------------------------------------------------- checks
def _check_count(count: object, name: str = "count") -> int:
    if isinstance(count, bool) or not isinstance(count, (int, np.integer)) or count < 0:
        raise InvalidModelError(
            f"{name}: got {count!r} but a non-negative integer was expected", field=name
        )
    return int(count)


# ------------------------------------------------------------------- float route
def _scaled_parameters_with_errors(
    r: Realization, count: int, frequency_scale: float, *, with_errors: bool = True
) -> tuple[FloatArray, FloatArray]:
    """Scaled Markov parameters ``(count, p, m)`` and absolute error bounds ``(count,)``.

    Error bounds are in the Frobenius norm of each ``p x m`` term.  With
    ``X_0 = B/w0``, ``X_j = fl(A' X_(j-1))`` the computed ``X_j`` carries a local rounding
    error ``loc_j <= (eps + gamma_n) ||A'||_F ||X_(j-1)||_F`` (the ``eps`` covers forming
    ``A' = A/w0``), which reaches term ``k`` multiplied by ``C A'^(k-1-j)``; hence, to
    first order, ``err_k <= sum_j ||C A'^(k-1-j)||_F loc_j + gamma_n ||C||_F ||X_(k-1)||_F``.
    The norms ``||C A'^i||_F`` come from the transposed recursion ``Y_i = Y_(i-1) A'``.
    """
    p, m, n = r.n_outputs, r.n_inputs, r.order
    out = np.zeros((count, p, m))
    err = np.zeros(count)
    if count == 0:
        return out, err
    out[0] = r.d
    if count == 1:
        return out, err
    w0 = frequency_scale
    gamma = max(n, 1) * _EPS
    norm_x = np.zeros(count - 1)
    with np.errstate(over="ignore", invalid="ignore", under="ignore"):
        a_s = r.a / w0
        x = r.b / w0
        for k in range(1, count):
            term = r.c @ x
            if not (np.all(np.isfinite(term)) and np.all(np.isfinite(x))):
                raise NumericalTroubleError(
                    f"Markov parameter {k} overflowed with frequency_scale={w0:g}; "
                    "choose a frequency scale near the spectral radius of A "
                    "(see common_frequency_scale) or fewer terms"
                )
            out[k] = term
            norm_x[k - 1] = float(np.linalg.norm(x))
            if k + 1 < count:
                x = a_s @ x
        if not with_errors:
            return out, err
        norm_a = float(np.linalg.norm(a_s)) if n else 0.0
        norm_c = float(np.linalg.norm(r.c))
        norm_y = np.zeros(count - 1)
        y = np.array(r.c)
        for i in range(count - 1):
            norm_y[i] = float(np.linalg.norm(y))
            if i + 2 < count:
                y = y @ a_s
        local = np.empty(count - 1)
        local[0] = _EPS * norm_x[0]  # rounding of B / w0
        local[1:] = (_EPS + gamma) * norm_a * norm_x[:-1]
        # propagated[k-1] = sum_{j<=k-1} norm_y[k-1-j] * local[j]  (a convolution)
        propagated = np.convolve(norm_y, local)[: count - 1]
        err[1:] = propagated + gamma * norm_c * norm_x
    if not np.all(np.isfinite(err)):
        raise NumericalTroubleError(
            f"rounding-error estimate of the Markov parameters overflowed with "
            f"frequency_scale={w0:g}"
        )
    return out, err


def markov_parameters(
    r: Realization, count: int, *, frequency_scale: float = 1.0
) -> FloatArray:
    """Frequency-scaled Markov parameters ``D, C B/w0, C A B/w0^2, ...``.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    count : int
        Number of terms, including ``D`` as term 0.
    frequency_scale : float, keyword-only
        ``w0 > 0``.  Term ``k >= 1`` is ``C A^(k-1) B / w0^k``: the Markov parameters of
        ``G(w0 s')`` (continuous time) or the impulse response weighted by ``w0^-k``
        (discrete time; ``w0 = 1`` gives the plain impulse-response samples).

    Returns
    -------
    (count, p, m) ndarray of float

    Raises
    ------
    InvalidModelError
        If ``count`` is not a non-negative integer or ``frequency_scale`` is not
        positive and finite.
    NumericalTroubleError
        If a term overflows (a poorly chosen ``frequency_scale``).

    Examples
    --------
    >>> r = Realization.from_arrays([[-2.0]], [[1.0]], [[1.0]], [[0.5]])
    >>> markov_parameters(r, 4)[:, 0, 0].tolist()
    [0.5, 1.0, -2.0, 4.0]
    >>> markov_parameters(r, 4, frequency_scale=2.0)[:, 0, 0].tolist()
    [0.5, 0.5, -0.5, 0.5]
    """
    count = _check_count(count)
    w0 = finite_number(frequency_scale, "frequency_scale")
    params, _ = _scaled_parameters_with_errors(r, count, w0, with_errors=False)
    return params


def _raw_scale(a: FloatArray) -> float:
    n = a.shape[0]
    if n == 0:
        return 0.0
    try:
        rho = float(np.max(np.abs(np.linalg.eigvals(a))))
    except np.linalg.LinAlgError as exc:  # pragma: no cover - LAPACK failure
        raise NumericalTroubleError(f"eigenvalues of A did not converge: {exc}") from exc
    rms = float(np.linalg.norm(a)) / math.sqrt(n)
    return max(rho, rms)


def common_frequency_scale(r1: Realization, r2: Realization) -> float:
    """A frequency scale ``w0`` suited to the Markov parameters of both models.

    For each model of order ``n > 0`` take ``max(rho(A), ||A||_F / sqrt(n))``: the spectral
    radius sets the asymptotic growth rate of ``C A^k B``; the root-mean-square entry size
    guards nilpotent or strongly non-normal ``A`` (whose spectral radius understates the
    growth of the first ``n`` powers).  ``w0`` is the larger of the two models' values,
    so that neither model's parameters grow exponentially, rounded to the nearest power of
    two (so that dividing by it is exact in binary floating point and the exact re-run,
    :func:`compare_markov_parameters_exact`, uses the very same scale).  When both models
    have order 0 or ``A = 0``, ``w0 = 1``.

    Parameters
    ----------
    r1, r2 : Realization
        ``A : (n1, n1)`` and ``A : (n2, n2)``; the other matrices are not used.

    Returns
    -------
    float
        A power of two in ``[2^-1000, 2^1000]``.

    Raises
    ------
    NumericalTroubleError
        If an eigenvalue computation fails.

    Examples
    --------
    >>> r1 = Realization.from_arrays([[-3.0]], [[1.0]], [[1.0]], [[0.0]])
    >>> r2 = Realization.from_arrays([[-1000.0]], [[1.0]], [[1.0]], [[0.0]])
    >>> common_frequency_scale(r1, r2)
    1024.0
    """
    w = max(_raw_scale(r1.a), _raw_scale(r2.a))
    if not math.isfinite(w) or w <= _TINY_SCALE:
        return 1.0
    exponent = int(round(math.log2(w)))
    exponent = max(-_MAX_EXPONENT, min(_MAX_EXPONENT, exponent))
    return math.ldexp(1.0, exponent)


# -------------------------------------------------------------------- comparison
@dataclass(frozen=True)
class MarkovComparison:
    """Term-by-term comparison of the scaled Markov parameters of two models.

    Attributes
    ----------
    method : {"floating_point", "exact_rational"}
    frequency_scale : float
        ``w0`` used for both models.
    count : int
        Number of terms compared (term 0 is ``D``).
    tolerance : float
        The ``rtol`` used.
    reference_magnitude : float
        Largest Frobenius norm of any term of either model; all relative numbers are
        relative to it.
    relative_differences : tuple of float, length ``count``
        ``||M1_k - M2_k||_F / reference_magnitude``.
    error_estimates : tuple of float, length ``count``
        Bound on the rounding error of ``relative_differences[k]`` (same units; all
        zero for the exact route).
    term_outcomes : tuple of {"same", "different", "unresolved"}
        ``same`` when difference + error <= tolerance, ``different`` when difference -
        error > tolerance, ``unresolved`` when the error straddles the tolerance.
    first_differing_index : int or None
        First term whose outcome is ``different``.
    first_differing_channel : (int, int) or None
        ``(output, input)`` of the largest entry of that term's difference.
    outcome : {"same", "different", "unresolved"}
        ``different`` if any term differs, else ``unresolved`` if any term is, else
        ``same``.
    """

    method: Literal["floating_point", "exact_rational"]
    frequency_scale: float
    count: int
    tolerance: float
    reference_magnitude: float
    relative_differences: tuple[float, ...]
    error_estimates: tuple[float, ...]
    term_outcomes: tuple[Outcome, ...]
    first_differing_index: int | None
    first_differing_channel: tuple[int, int] | None
    outcome: Outcome

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-friendly dictionary (floats, ints, strings, lists, None)."""
        return {
            "method": self.method,
            "frequency_scale": float(self.frequency_scale),
            "count": int(self.count),
            "tolerance": float(self.tolerance),
            "reference_magnitude": float(self.reference_magnitude),
            "relative_differences": [float(x) for x in self.relative_differences],
            "error_estimates": [float(x) for x in self.error_estimates],
            "term_outcomes": list(self.term_outcomes),
            "first_differing_index": self.first_differing_index,
            "first_differing_channel": (
                None
                if self.first_differing_channel is None
                else [int(i) for i in self.first_differing_channel]
            ),
            "outcome": self.outcome,
        }


def _overall(outcomes: list[Outcome]) -> Outcome:
    if "different" in outcomes:
        return "different"
    if "unresolved" in outcomes:
        return "unresolved"
    return "same"


def _first_different(outcomes: list[Outcome]) -> int | None:
    """Index of the first term whose outcome is ``different`` (None when none is)."""
    return next((k for k, o in enumerate(outcomes) if o == "different"), None)


def _default_count(r1: Realization, r2: Realization, count: int | None) -> int:
    if count is None:
        return r1.order + r2.order + 1
    return _check_count(count)


def compare_markov_parameters(
    r1: Realization,
    r2: Realization,
    *,
    rtol: float,
    count: int | None = None,
    frequency_scale: float | None = None,
) -> MarkovComparison:
    """Compare the scaled Markov parameters of two models term by term.

    Parameters
    ----------
    r1, r2 : Realization
        Models with equal input/output counts and the same time domain;
        ``A1 : (n1, n1)``, ``A2 : (n2, n2)``, ``B : (n, m)``, ``C : (p, n)``,
        ``D : (p, m)``.
    rtol : float, keyword-only
        Tolerance on ``||M1_k - M2_k||_F`` relative to the largest term norm of both
        models over all compared terms.
    count : int or None, keyword-only
        Number of terms including ``D``; default ``n1 + n2 + 1``, which decides transfer
        equality (Cayley-Hamilton applied to the difference system of order ``n1 + n2``).
    frequency_scale : float or None, keyword-only
        ``w0``; default :func:`common_frequency_scale`.

    Returns
    -------
    MarkovComparison

    Raises
    ------
    IncompatibleModelsError
        If the models differ in input/output counts or time domain.
    InvalidModelError
        If ``rtol``, ``count`` or ``frequency_scale`` is out of range.
    NumericalTroubleError
        If a term overflows.

    Examples
    --------
    >>> r1 = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[0.0]])
    >>> r2 = Realization.from_arrays([[-2.0]], [[3.0]], [[1.0]], [[0.0]])
    >>> compare_markov_parameters(r1, r2, rtol=1e-9).outcome
    'same'
    """
    check_comparable(r1, r2)
    tol = finite_number(rtol, "rtol", zero_allowed=True)
    count = _default_count(r1, r2, count)
    w0 = (
        common_frequency_scale(r1, r2)
        if frequency_scale is None
        else finite_number(frequency_scale, "frequency_scale")
    )
    m1, e1 = _scaled_parameters_with_errors(r1, count, w0)
    m2, e2 = _scaled_parameters_with_errors(r2, count, w0)
    diff = m1 - m2
    diff_norms = np.array([float(np.linalg.norm(diff[k])) for k in range(count)])
    term_norms = [float(np.linalg.norm(m[k])) for m in (m1, m2) for k in range(count)]
    reference = max(term_norms, default=0.0)
    if reference > 0.0:
        rel = diff_norms / reference
        rel_err = (e1 + e2) / reference
    else:  # every term of both models is zero
        rel = np.zeros(count)
        rel_err = np.zeros(count)
    outcomes: list[Outcome] = []
    for d_k, e_k in zip(rel, rel_err):
        if d_k + e_k <= tol:
            outcomes.append("same")
        elif d_k - e_k > tol:
            outcomes.append("different")
        else:
            outcomes.append("unresolved")
    first = _first_different(outcomes)
    channel: tuple[int, int] | None = None
    if first is not None:
        i, j = np.unravel_index(int(np.argmax(np.abs(diff[first]))), diff[first].shape)
        channel = (int(i), int(j))
    return MarkovComparison(
        method="floating_point",
        frequency_scale=w0,
        count=count,
        tolerance=tol,
        reference_magnitude=reference,
        relative_differences=tuple(float(x) for x in rel),
        error_estimates=tuple(float(x) for x in rel_err),
        term_outcomes=tuple(outcomes),
        first_differing_index=first,
        first_differing_channel=channel,
        outcome=_overall(outcomes),
    )


# -------------------------------------------------------------------- exact route
def _to_fmpq_matrix(x: FloatArray) -> "flint.fmpq_mat":
    rows, cols = x.shape
    entries = [flint.fmpq(*float(v).as_integer_ratio()) for v in x.ravel(order="C")]
    return flint.fmpq_mat(rows, cols, entries)


def _power_of_two(exponent: int) -> "flint.fmpq":
    return flint.fmpq(2) ** exponent if exponent >= 0 else flint.fmpq(1, 2 ** (-exponent))


def exact_markov_parameters(
    r: Realization,
    count: int,
    *,
    frequency_scale_exponent: int = 0,
    max_seconds: float = 10.0,
) -> list["flint.fmpq_mat"]:
    """Scaled Markov parameters in exact rational arithmetic.

    Every stored double is converted to the rational number it represents, and
    ``M'_0 = D``, ``M'_k = C (A/w0)^(k-1) B / w0`` with ``w0 = 2^frequency_scale_exponent``
    is evaluated without rounding (python-flint ``fmpq_mat``).

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    count : int
        Number of terms including ``D``.
    frequency_scale_exponent : int, keyword-only
        ``w0 = 2**frequency_scale_exponent`` (an exact scale).
    max_seconds : float, keyword-only
        Wall-clock budget, checked between terms.

    Returns
    -------
    list of ``flint.fmpq_mat``
        ``count`` exact ``(p, m)`` rational matrices.

    Raises
    ------
    InvalidModelError
        If ``count``, ``frequency_scale_exponent`` or ``max_seconds`` is out of range.
    NumericalTroubleError
        If the time budget is exceeded.

    Examples
    --------
    >>> r = Realization.from_arrays([[-0.5]], [[1.0]], [[1.0]], [[0.0]])
    >>> [str(t[0, 0]) for t in exact_markov_parameters(r, 4, frequency_scale_exponent=-1)]
    ['0', '2', '-2', '2']
    """
    count = _check_count(count)
    if isinstance(frequency_scale_exponent, bool) or not isinstance(
        frequency_scale_exponent, (int, np.integer)
    ) or abs(int(frequency_scale_exponent)) > 4 * _MAX_EXPONENT:
        raise InvalidModelError(
            f"frequency_scale_exponent: got {frequency_scale_exponent!r} but an integer "
            f"with magnitude <= {4 * _MAX_EXPONENT} was expected",
            field="frequency_scale_exponent",
        )
    budget = finite_number(max_seconds, "max_seconds")
    start = time.monotonic()
    out: list[flint.fmpq_mat] = []
    if count == 0:
        return out
    out.append(_to_fmpq_matrix(r.d))
    if count == 1:
        return out
    inv_w0 = _power_of_two(-int(frequency_scale_exponent))
    a_s = _to_fmpq_matrix(r.a) * inv_w0
    c = _to_fmpq_matrix(r.c)
    x = _to_fmpq_matrix(r.b) * inv_w0
    for k in range(1, count):
        elapsed = time.monotonic() - start
        if elapsed > budget:
            raise NumericalTroubleError(
                f"exact Markov parameters: max_seconds={budget:g} exceeded after {k} of "
                f"{count} terms ({elapsed:.3g} s)"
            )
        out.append(c * x)
        if k + 1 < count:
            x = a_s * x
    return out


def _squared_frobenius(x: "flint.fmpq_mat") -> "flint.fmpq":
    total = flint.fmpq(0)
    for v in x.entries():
        total += v * v
    return total


def _ratio_sqrt_to_float(num: "flint.fmpq", den: "flint.fmpq") -> float:
    """``sqrt(num/den)`` rounded to float (two roundings)."""
    q = num / den
    try:
        return math.sqrt(float(q))
    except OverflowError:  # pragma: no cover - ratio beyond double range
        return math.inf


def _exact_terms_of_both(r1: Realization, r2: Realization, count: int, exponent: int,
                         budget: float) -> tuple[list["flint.fmpq_mat"], list["flint.fmpq_mat"]]:
    """The exact scaled terms of both models within one time budget of ``budget`` s."""
    start = time.monotonic()
    m1 = exact_markov_parameters(
        r1, count, frequency_scale_exponent=exponent, max_seconds=budget
    )
    remaining = budget - (time.monotonic() - start)
    if remaining <= 0.0:
        raise NumericalTroubleError(
            f"exact Markov comparison: max_seconds={budget:g} exceeded after the first model"
        )
    m2 = exact_markov_parameters(
        r2, count, frequency_scale_exponent=exponent, max_seconds=remaining
    )
    return m1, m2


def _exact_term_outcomes(m1: list["flint.fmpq_mat"], m2: list["flint.fmpq_mat"],
                         tol: float) -> tuple[list[float], list[Outcome], "flint.fmpq"]:
    """Per term: the relative difference (rounded) and the exact decision
    ``||M1_k - M2_k||_F^2 <= tol^2 max ||M_k||_F^2``; also that maximum (exact)."""
    diff2 = [_squared_frobenius(a - b) for a, b in zip(m1, m2)]
    norms2 = [_squared_frobenius(t) for t in m1 + m2]
    reference2 = max(norms2, default=flint.fmpq(0))
    tol2 = flint.fmpq(*tol.as_integer_ratio()) ** 2
    outcomes: list[Outcome] = []
    rel: list[float] = []
    for d2 in diff2:
        if reference2 == 0:
            rel.append(0.0)
            outcomes.append("same")
            continue
        rel.append(_ratio_sqrt_to_float(d2, reference2))
        outcomes.append("same" if d2 <= tol2 * reference2 else "different")
    return rel, outcomes, reference2


def _largest_exact_entry(d: "flint.fmpq_mat") -> tuple[int, int] | None:
    """``(output, input)`` of the entry of largest magnitude (the first such)."""
    best = flint.fmpq(-1)
    channel: tuple[int, int] | None = None
    for i in range(d.nrows()):
        for j in range(d.ncols()):
            v = abs(d[i, j])
            if v > best:
                best, channel = v, (i, j)
    return channel


def compare_markov_parameters_exact(
    r1: Realization,
    r2: Realization,
    *,
    rtol: float,
    count: int | None = None,
    max_seconds: float = 10.0,
) -> MarkovComparison:
    """Exact re-run of :func:`compare_markov_parameters` for the models as stored.

    Uses the power-of-two scale from :func:`common_frequency_scale` and exact rational
    arithmetic; the decision ``||M1_k - M2_k||_F <= rtol * max_k ||M_k||_F`` is taken
    exactly (squared norms compared as rationals), and only the reported relative
    differences are rounded to float.  Outcomes are ``same`` or ``different``, never
    ``unresolved``; ``error_estimates`` are zero.

    Parameters
    ----------
    r1, r2 : Realization
        As for :func:`compare_markov_parameters`.
    rtol : float, keyword-only
        Relative tolerance (same meaning as the floating-point route).
    count : int or None, keyword-only
        Number of terms including ``D``; default ``n1 + n2 + 1``.
    max_seconds : float, keyword-only
        Wall-clock budget for both models together, checked between terms.

    Returns
    -------
    MarkovComparison
        With ``method == "exact_rational"``.

    Raises
    ------
    IncompatibleModelsError
        If the models cannot be compared.
    InvalidModelError
        If an option is out of range.
    NumericalTroubleError
        If the time budget is exceeded.

    Examples
    --------
    >>> r1 = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[0.0]])
    >>> r2 = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[1e-3]])
    >>> compare_markov_parameters_exact(r1, r2, rtol=1e-9).first_differing_index
    0
    """
    check_comparable(r1, r2)
    tol = finite_number(rtol, "rtol", zero_allowed=True)
    count = _default_count(r1, r2, count)
    budget = finite_number(max_seconds, "max_seconds")
    w0 = common_frequency_scale(r1, r2)
    exponent = math.frexp(w0)[1] - 1  # w0 == 2**exponent exactly
    m1, m2 = _exact_terms_of_both(r1, r2, count, exponent, budget)
    rel, outcomes, reference2 = _exact_term_outcomes(m1, m2, tol)
    first = _first_different(outcomes)
    channel = None if first is None else _largest_exact_entry(m1[first] - m2[first])
    return MarkovComparison(
        method="exact_rational",
        frequency_scale=w0,
        count=count,
        tolerance=tol,
        reference_magnitude=_ratio_sqrt_to_float(reference2, flint.fmpq(1)),
        relative_differences=tuple(rel),
        error_estimates=tuple(0.0 for _ in rel),
        term_outcomes=tuple(outcomes),
        first_differing_index=first,
        first_differing_channel=channel,
        outcome=_overall(outcomes),
    )
