"""Continuous-to-discrete conversion of realizations, and checks of discretization claims.

Methods implemented
-------------------
* **Zero-order hold** (``method="zero-order-hold"``) via one matrix exponential of the augmented matrix
  ``[[A, B], [0, 0]] T`` (C. F. Van Loan, "Computing integrals involving the matrix
  exponential", IEEE Trans. Automatic Control 23(3), 1978).
* **Triangle hold** (first-order hold, ``method="triangle-hold"``) via the matrix exponential of the 3x3 block matrix
  ``[[A T, B T, 0], [0, 0, I], [0, 0, 0]]`` (G. F. Franklin, J. D. Powell, M. L. Workman,
  *Digital Control of Dynamic Systems*, 3rd ed., 1998, sec. 6.3 -- from memory). The
  triangle hold is non-causal; the standard change of state ``xi = x - Gamma2 u`` gives
  a causal realization with a direct term.
* **Bilinear (Tustin)** (``method="bilinear"``) with optional frequency prewarping,
  ``s = (1/alpha) (z - 1)/(z + 1)`` with ``alpha = T/2`` or ``alpha = tan(w T/2)/w``.
  Computed with one LU factorization of ``I - alpha A`` and solves (no inverse). The
  input and output matrices are scaled symmetrically by ``sqrt(2 alpha)`` -- the
  convention of SLICOT routine AB04MD -- so ``B_d = sqrt(2 alpha) (I - alpha A)^-1 B``,
  ``C_d = sqrt(2 alpha) C (I - alpha A)^-1``, ``D_d = D + alpha C (I - alpha A)^-1 B``.
  Other tools put the whole factor ``2 alpha = T`` on ``B``; the transfer function is
  the same.
* **Matched pole-zero** (``method="matched-pole-zero"``, SISO only; Franklin, Powell and Workman, sec. 6.3.2 -- from
  memory): poles and finite zeros mapped by ``z = exp(s T)``; of the ``r`` zeros at
  infinity (``r`` = relative degree) ``r - 1`` are mapped to ``z = -1`` and one is left at
  infinity, so the discrete model keeps a one-sample delay (the "modified" matched
  method, convenient for real-time computation). The gain is matched at DC; when the
  model has ``k`` net integrators (or differentiators) the low-frequency asymptote is
  matched instead: ``G(s) ~ K0 s^-k`` corresponds to ``G_d(z) ~ K0 ((z-1)/T)^-k``.
* **Impulse invariant** (``method="impulse-invariant"``): ``h_d[k] = T h(k T)`` for ``k >= 0``, i.e.
  ``A_d = e^{AT}``, ``B_d = T e^{AT} B``, ``C_d = C``, ``D_d = D + T C B``. The direct
  term ``D delta(t)`` of the continuous impulse response has area ``D``; sampled with the
  same ``T`` weighting it contributes ``D`` to the first sample (our ``D/T`` convention:
  the delta is read as a pulse of height ``1/T`` over one period, times ``T``).

``check_discretization_claim`` re-discretizes a continuous model with the claimed method
and compares the frequency responses on the unit circle up to the Nyquist frequency
(plus the poles). ``detect_sample_period_mismatch`` finds the ratio by which one
discrete model's sample period must be re-read to agree with another's (poles map as
``z2 = z1^(T2/T1)``; confirmed after undoing a zero-order hold with the matrix logarithm).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any, Literal

import numpy as np
import scipy.linalg
from numpy.typing import NDArray
from scipy.optimize import linear_sum_assignment

from audit.dynamics.discretization_methods import METHODS, DiscretizationMethod, discretization_method
from audit.errors import IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization


FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]

# A matrix whose 2-norm condition number exceeds this is treated as singular for the
# Tustin solve (common practice, no source: ~ 1 / (100 eps)).
_SINGULAR_COND = 1e13


# --------------------------------------------------------------------------- helpers
def _check_period(period: Any, name: str = "period") -> float:
    try:
        value = float(period)
    except (TypeError, ValueError):
        raise InvalidModelError(
            f"{name}: got {period!r} but a sample period in seconds > 0 was expected",
            field=name,
        ) from None
    if not math.isfinite(value) or value <= 0.0:
        raise InvalidModelError(
            f"{name}: got {value!r} but a finite sample period in seconds > 0 was expected",
            field=name,
        )
    return value


def _require_realization(r: Any, name: str) -> Realization:
    if not isinstance(r, Realization):
        raise InvalidModelError(
            f"{name}: got {type(r).__name__} but an audit Realization was expected",
            field=name,
        )
    return r


def _finite_or_raise(arr: NDArray[Any], what: str) -> None:
    if not np.all(np.isfinite(arr)):
        raise NumericalTroubleError(
            f"{what}: the result overflowed or is not finite (period too long for this "
            "model's fastest unstable mode?)"
        )


def zero_order_hold_pair(a: FloatArray, b: FloatArray, step: float) -> tuple[FloatArray, FloatArray]:
    """Transition matrices of a zero-order hold over one step.

    ``Phi = e^{A h}`` and ``Gamma = int_0^h e^{A s} ds B`` from ONE matrix exponential of
    the augmented matrix ``[[A, B], [0, 0]] h`` (Van Loan 1978).

    Parameters
    ----------
    a : (n, n) array
    b : (n, m) array
    step : float
        Hold length ``h`` in seconds (> 0).

    Returns
    -------
    phi : (n, n) array
    gamma : (n, m) array

    Raises
    ------
    NumericalTroubleError
        If the exponential overflows or scipy fails.

    Examples
    --------
    >>> phi, gamma = zero_order_hold_pair(np.array([[-1.0]]), np.array([[1.0]]), 1.0)
    >>> round(float(phi[0, 0]), 6), round(float(gamma[0, 0]), 6)
    (0.367879, 0.632121)
    """
    n, m = b.shape
    aug = np.zeros((n + m, n + m))
    aug[:n, :n] = a * step
    aug[:n, n:] = b * step
    try:
        with np.errstate(over="ignore", invalid="ignore"):  # overflow is checked below
            e = scipy.linalg.expm(aug)
    except (ValueError, np.linalg.LinAlgError, OverflowError) as exc:  # pragma: no cover
        raise NumericalTroubleError(f"matrix exponential of [[A, B], [0, 0]]*h failed: {exc}") from exc
    _finite_or_raise(e, "matrix exponential of [[A, B], [0, 0]]*h")
    return e[:n, :n].copy(), e[:n, n:].copy()


def transfer_values(r: Realization, points: ComplexArray) -> ComplexArray:
    """``G(p) = C (p I - A)^-1 B + D`` at complex points ``p`` (s or z).

    The state matrix is first reduced to upper Hessenberg form by an orthogonal
    similarity (done once); each point is then one linear solve. Points where
    ``p I - A`` is exactly singular give ``nan`` entries.

    Parameters
    ----------
    r : Realization
    points : (k,) complex array

    Returns
    -------
    (k, p, m) complex array

    Raises
    ------
    NumericalTroubleError
        If the Hessenberg reduction fails.
    """
    pts = np.asarray(points, dtype=complex).ravel()
    k = pts.size
    p_out, m_in, n = r.n_outputs, r.n_inputs, r.order
    out = np.empty((k, p_out, m_in), dtype=complex)
    if n == 0:
        out[:] = r.d
        return out
    try:
        h, q = scipy.linalg.hessenberg(r.a, calc_q=True)
    except (ValueError, np.linalg.LinAlgError) as exc:  # pragma: no cover
        raise NumericalTroubleError(f"Hessenberg reduction of A failed: {exc}") from exc
    bh = q.T @ r.b
    ch = r.c @ q
    eye = np.eye(n)
    for j, p in enumerate(pts):
        try:
            x = np.linalg.solve(p * eye - h, bh)
        except np.linalg.LinAlgError:
            out[j] = np.nan
            continue
        out[j] = ch @ x + r.d
    return out


def _relative_peak(g1: ComplexArray, g2: ComplexArray) -> tuple[float, int, float, float]:
    """Relative peak difference of two (k, p, m) response arrays.

    Returns (relative difference, index of the largest difference, absolute peak
    difference, reference peak). Points where either is not finite are ignored. Norms are
    spectral norms per point.
    """
    ok = np.all(np.isfinite(g1), axis=(1, 2)) & np.all(np.isfinite(g2), axis=(1, 2))
    if not np.any(ok):
        raise NumericalTroubleError("no frequency point could be evaluated for both models")
    n1 = np.linalg.norm(g1[ok], ord=2, axis=(1, 2))
    n2 = np.linalg.norm(g2[ok], ord=2, axis=(1, 2))
    nd = np.linalg.norm(g1[ok] - g2[ok], ord=2, axis=(1, 2))
    idx_ok = np.flatnonzero(ok)
    worst = int(np.argmax(nd))
    peak = float(max(n1.max(), n2.max()))
    absdiff = float(nd[worst])
    if absdiff == 0.0:
        rel = 0.0
    else:
        rel = absdiff / peak if peak > 0.0 else math.inf
    return rel, int(idx_ok[worst]), absdiff, peak


def _matched_pole_distance(p1: ComplexArray, p2: ComplexArray) -> float:
    """Largest distance between optimally paired poles, relative to max(1, |pole|)."""
    if p1.size == 0:
        return 0.0
    cost = np.abs(p1[:, None] - p2[None, :])
    rows, cols = linear_sum_assignment(cost)
    scale = np.maximum(1.0, np.maximum(np.abs(p1[rows]), np.abs(p2[cols])))
    return float(np.max(cost[rows, cols] / scale))


# ----------------------------------------------------------------------- methods
def _bilinear(r: Realization, period: float, prewarp: float | None) -> tuple[FloatArray, ...]:
    if prewarp is None:
        alpha = period / 2.0
    else:
        alpha = math.tan(prewarp * period / 2.0) / prewarp
    n = r.order
    m_mat = np.eye(n) - alpha * r.a
    cond = float(np.linalg.cond(m_mat))
    if not math.isfinite(cond) or cond > _SINGULAR_COND:
        raise NumericalTroubleError(
            f"Tustin transformation: I - alpha*A is singular to working precision "
            f"(alpha={alpha:g}, cond={cond:.3g}); A has an eigenvalue near 1/alpha = "
            f"{1.0 / alpha:g}, which the bilinear map sends to z = infinity"
        )
    lu = scipy.linalg.lu_factor(m_mat)
    scale = math.sqrt(2.0 * alpha)
    ad = scipy.linalg.lu_solve(lu, np.eye(n) + alpha * r.a)
    x_b = scipy.linalg.lu_solve(lu, r.b)                 # (I - alpha A)^-1 B
    ct = scipy.linalg.lu_solve(lu, r.c.T, trans=1).T      # C (I - alpha A)^-1
    bd = scale * x_b
    cd = scale * ct
    dd = r.d + alpha * (r.c @ x_b)
    return ad, bd, cd, dd


def _triangle_hold(r: Realization, period: float) -> tuple[FloatArray, ...]:
    n, m = r.order, r.n_inputs
    big = np.zeros((n + 2 * m, n + 2 * m))
    big[:n, :n] = r.a * period
    big[:n, n:n + m] = r.b * period
    big[n:n + m, n + m:] = np.eye(m)
    try:
        with np.errstate(over="ignore", invalid="ignore"):  # overflow is checked below
            e = scipy.linalg.expm(big)
    except (ValueError, np.linalg.LinAlgError, OverflowError) as exc:  # pragma: no cover
        raise NumericalTroubleError(f"first-order hold: matrix exponential failed: {exc}") from exc
    _finite_or_raise(e, "first-order hold matrix exponential")
    phi = e[:n, :n]
    gamma1 = e[:n, n:n + m]      # int_0^T e^{A(T-t)} B dt
    gamma2 = e[:n, n + m:]       # int_0^T e^{A(T-t)} B (t/T) dt
    # x+ = Phi x + (Gamma1 - Gamma2) u_k + Gamma2 u_{k+1}; with xi = x - Gamma2 u:
    bd = gamma1 - gamma2 + phi @ gamma2
    dd = r.d + r.c @ gamma2
    return phi, bd, r.c.copy(), dd


def _impulse_invariant(r: Realization, period: float) -> tuple[FloatArray, ...]:
    try:
        with np.errstate(over="ignore", invalid="ignore"):  # overflow is checked below
            phi = scipy.linalg.expm(r.a * period)
    except (ValueError, np.linalg.LinAlgError, OverflowError) as exc:  # pragma: no cover
        raise NumericalTroubleError(f"impulse-invariant: matrix exponential failed: {exc}") from exc
    _finite_or_raise(phi, "impulse-invariant matrix exponential")
    bd = period * (phi @ r.b)
    dd = r.d + period * (r.c @ r.b)
    return phi, bd, r.c.copy(), dd


def _siso_zeros(r: Realization, *, infinite_ratio: float) -> ComplexArray:
    """Finite zeros of a SISO realization: finite eigenvalues of the system pencil."""
    n = r.order
    top = np.hstack([r.a, r.b])
    bottom = np.hstack([r.c, r.d])
    big_a = np.vstack([top, bottom])
    big_e = np.zeros((n + 1, n + 1))
    big_e[:n, :n] = np.eye(n)
    try:
        alpha, beta = scipy.linalg.eigvals(big_a, big_e, homogeneous_eigvals=True)
    except (ValueError, np.linalg.LinAlgError) as exc:  # pragma: no cover
        raise NumericalTroubleError(f"matched pole-zero: zero computation failed: {exc}") from exc
    scale = max(1.0, float(np.linalg.norm(big_a, 2)))
    finite = np.abs(beta) * infinite_ratio * scale > np.abs(alpha)
    return np.asarray(alpha[finite] / beta[finite], dtype=complex)


def _real_poly(roots: ComplexArray) -> FloatArray:
    coeffs = np.poly(roots) if roots.size else np.array([1.0])
    coeffs = np.atleast_1d(coeffs)
    if np.iscomplexobj(coeffs):
        imag = float(np.max(np.abs(coeffs.imag)))
        if imag > 1e-8 * max(1.0, float(np.max(np.abs(coeffs.real)))):
            raise NumericalTroubleError(
                "matched pole-zero: mapped roots are not closed under conjugation "
                f"(imaginary coefficient part {imag:.3g})"
            )
        coeffs = coeffs.real
    return np.asarray(coeffs, dtype=float)


def _observer_companion(num: FloatArray, den: FloatArray) -> tuple[FloatArray, ...]:
    """Observer companion realization of num/den (den monic, deg num <= deg den)."""
    n = den.size - 1
    num = np.concatenate([np.zeros(n + 1 - num.size), num])
    d0 = num[0]
    rem = num[1:] - d0 * den[1:]
    a = np.zeros((n, n))
    a[:, 0] = -den[1:]
    if n > 1:
        a[:-1, 1:] = np.eye(n - 1)
    b = rem.reshape(n, 1)
    c = np.zeros((1, n))
    c[0, 0] = 1.0
    return a, b, c, np.array([[d0]])


def _matched_pole_zero(r: Realization, period: float, origin_rtol: float) -> tuple[FloatArray, ...]:
    if (r.n_inputs, r.n_outputs) != (1, 1):
        raise InvalidModelError(
            f"method='matched-pole-zero': the model has {r.n_inputs} input(s) and {r.n_outputs} "
            "output(s) but matched pole-zero mapping is defined per channel for SISO "
            "models only; discretize each channel separately or use another method",
            field="method",
        )
    n = r.order
    poles = r.poles()
    zeros = _siso_zeros(r, infinite_ratio=1e10)
    n_inf = n - zeros.size
    if n_inf < 0:  # pragma: no cover - pencil has at most n finite eigenvalues here
        raise NumericalTroubleError("matched pole-zero: more finite zeros than poles")
    scale = max(1.0, float(np.max(np.abs(poles))) if n else 1.0)
    pole_at_0 = np.abs(poles) <= origin_rtol * scale
    zero_at_0 = np.abs(zeros) <= origin_rtol * scale
    k_net = int(np.count_nonzero(zero_at_0)) - int(np.count_nonzero(pole_at_0))
    # Low-frequency asymptote G(s) ~ K0 s^k_net.
    if not np.any(pole_at_0) and not np.any(zero_at_0):
        try:
            k0 = float((r.d - r.c @ np.linalg.solve(r.a, r.b))[0, 0])
        except np.linalg.LinAlgError as exc:  # pragma: no cover
            raise NumericalTroubleError(f"matched pole-zero: DC gain failed: {exc}") from exc
    else:
        # Leading gain from the first nonzero Markov parameter (relative degree n_inf).
        if n_inf == 0:
            kc = float(r.d[0, 0])
        else:
            v = r.b
            for _ in range(n_inf - 1):
                v = r.a @ v
            kc = float((r.c @ v)[0, 0])
        nz = zeros[~zero_at_0]
        np_ = poles[~pole_at_0]
        k0c = kc * np.prod(-nz) / np.prod(-np_)
        k0 = float(np.real(k0c))
    zd = np.exp(zeros * period)
    zd[zero_at_0] = 1.0
    pd = np.exp(poles * period)
    pd[pole_at_0] = 1.0
    extra = max(n_inf - 1, 0)
    zd_all = np.concatenate([zd, -np.ones(extra)])
    # G_d(z) ~ Kd prod'(1 - zd)/prod'(1 - pd) (z - 1)^k_net  must equal  K0 ((z-1)/T)^k_net
    ratio = np.prod(1.0 - zd_all[np.concatenate([~zero_at_0, np.ones(extra, bool)])])
    ratio = ratio / np.prod(1.0 - pd[~pole_at_0])
    if abs(ratio) == 0.0:  # pragma: no cover - excluded by the origin classification
        raise NumericalTroubleError("matched pole-zero: gain matching point is a zero")
    kd = float(np.real(k0 * period ** (-k_net) / ratio))
    num = kd * _real_poly(zd_all)
    den = _real_poly(pd)
    return _observer_companion(num, den)


def discretize(
    r: Realization,
    period: float,
    *,
    method: DiscretizationMethod,
    prewarp_frequency: float | None = None,
    origin_rtol: float = 1e-9,
) -> Realization:
    """Discretize a continuous-time realization with sample period ``period``.

    Parameters
    ----------
    r : Realization
        Continuous-time model, ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    period : float
        Sample period ``T`` in seconds, > 0.
    method : {"zero-order-hold", "triangle-hold", "bilinear", "matched-pole-zero", "impulse-invariant"}
        See the module docstring for each method's formulas and conventions.
    prewarp_frequency : float or None
        Tustin only: frequency ``w`` in rad/s (``0 < w < pi/T``) at which the discrete
        and continuous frequency responses agree exactly.
    origin_rtol : float
        Matched only: a pole or zero with ``|s| <= origin_rtol * max(1, max|pole|)`` is
        treated as lying at the origin (an integrator / differentiator).

    Returns
    -------
    Realization
        Discrete-time model with ``sample_period == period``, same input and output
        counts; order ``n`` (the matched method returns a minimal-order companion
        realization of the mapped transfer function, built from polynomial
        coefficients -- fine for the low-order SISO models it is meant for, fragile
        beyond order ~10).

    Raises
    ------
    InvalidModelError
        ``period`` not a finite number > 0; ``r`` already discrete; unknown ``method``;
        ``prewarp_frequency`` given for a method other than Tustin or outside
        ``(0, pi/T)``; matched method on a MIMO model.
    NumericalTroubleError
        The matrix exponential overflows, ``I - alpha A`` is singular (Tustin), or the
        matched mapping cannot be carried out reliably.

    Examples
    --------
    >>> r = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    >>> d = discretize(r, 0.5, method="zero-order-hold")
    >>> round(float(d.a[0, 0]), 6), d.sample_period
    (0.606531, 0.5)
    """
    r = _require_realization(r, "model")
    method = discretization_method(method)  # raises, listing the accepted names
    period = _check_period(period)
    if r.is_discrete:
        raise InvalidModelError(
            f"model: is already discrete-time (sample period {r.sample_period:g} s) but a "
            "continuous-time model was expected",
            field="sample_period",
        )
    if prewarp_frequency is not None:
        if method != "bilinear":
            raise InvalidModelError(
                f"prewarp_frequency: given ({prewarp_frequency!r}) but prewarping only "
                f"applies to method='bilinear', not {method!r}",
                field="prewarp_frequency",
            )
        w = float(prewarp_frequency)
        nyquist = math.pi / period
        if not math.isfinite(w) or w <= 0.0 or w >= nyquist:
            raise InvalidModelError(
                f"prewarp_frequency: got {w!r} rad/s but a value in (0, pi/T) = "
                f"(0, {nyquist:g}) rad/s was expected",
                field="prewarp_frequency",
            )
    if r.order == 0:
        return Realization.from_arrays(r.a, r.b, r.c, r.d, period, name=r.name)
    if method == "zero-order-hold":
        phi, gamma = zero_order_hold_pair(r.a, r.b, period)
        mats: tuple[FloatArray, ...] = (phi, gamma, r.c, r.d)
    elif method == "triangle-hold":
        mats = _triangle_hold(r, period)
    elif method == "bilinear":
        mats = _bilinear(r, period, prewarp_frequency)
    elif method == "impulse-invariant":
        mats = _impulse_invariant(r, period)
    else:
        mats = _matched_pole_zero(r, period, origin_rtol)
    for mat in mats:
        _finite_or_raise(np.asarray(mat), f"{method} discretization")
    return Realization.from_arrays(*mats, sample_period=period, name=r.name)


# ------------------------------------------------------------------ claim check
@dataclass(frozen=True)
class MethodMatch:
    """How well one discretization method reproduces the discrete model.

    Attributes
    ----------
    method : str
    prewarp_frequency : float or None
    relative_peak_difference : float or None
        ``max_w ||G_claimed(e^{jwT}) - G_d(e^{jwT})|| / max_w max(||G_claimed||, ||G_d||)``
        (spectral norms); ``None`` when the method could not be applied.
    pole_difference : float or None
        Largest distance between optimally paired poles, relative to ``max(1, |z|)``;
        ``None`` when the orders differ or the method could not be applied.
    matches : bool
    note : str
    """

    method: str
    prewarp_frequency: float | None
    relative_peak_difference: float | None
    pole_difference: float | None
    matches: bool
    note: str = ""

    def as_dict(self) -> dict[str, Any]:
        return {
            "method": self.method,
            "prewarp_frequency": self.prewarp_frequency,
            "relative_peak_difference": self.relative_peak_difference,
            "pole_difference": self.pole_difference,
            "matches": self.matches,
            "note": self.note,
        }


@dataclass(frozen=True)
class DiscretizationClaimCheck:
    """Result of :func:`check_discretization_claim`.

    Attributes
    ----------
    method, prewarp_frequency : the claim checked.
    sample_period : float
    rtol, pole_rtol : float
        Tolerances used on the relative peak difference and on pole distances.
    relative_peak_difference : float
        Of the claimed method (see :class:`MethodMatch`).
    frequency_of_largest_difference : float
        rad/s, in ``(0, pi/T]``.
    pole_difference : float or None
    n_frequencies : int
        Number of grid points on the unit circle.
    outcome : {"holds", "fails"}
    alternatives : tuple of MethodMatch
        Filled only when the claim fails: every other method tried.
    matching_method : str or None
        The best alternative that matches within tolerance, if any.
    message : str
        One-sentence summary, e.g. "the matrices look like a bilinear discretization, not
        zero-order-hold".
    """

    method: str
    prewarp_frequency: float | None
    sample_period: float
    rtol: float
    pole_rtol: float
    relative_peak_difference: float
    frequency_of_largest_difference: float
    pole_difference: float | None
    n_frequencies: int
    outcome: Literal["holds", "fails"]
    alternatives: tuple[MethodMatch, ...] = field(default_factory=tuple)
    matching_method: str | None = None
    message: str = ""

    def as_dict(self) -> dict[str, Any]:
        return {
            "method": self.method,
            "prewarp_frequency": self.prewarp_frequency,
            "sample_period": self.sample_period,
            "rtol": self.rtol,
            "pole_rtol": self.pole_rtol,
            "relative_peak_difference": self.relative_peak_difference,
            "frequency_of_largest_difference": self.frequency_of_largest_difference,
            "pole_difference": self.pole_difference,
            "n_frequencies": self.n_frequencies,
            "outcome": self.outcome,
            "alternatives": [a.as_dict() for a in self.alternatives],
            "matching_method": self.matching_method,
            "message": self.message,
        }


def _unit_circle_grid(c: Realization, d: Realization, n_points: int) -> FloatArray:
    """Frequencies (rad/s) in (0, pi/T]: log grid plus pole frequencies of both."""
    period = float(d.sample_period)  # type: ignore[arg-type]
    nyq = math.pi / period
    mags = [np.abs(c.poles()), np.abs(np.log(np.maximum(np.abs(d.poles()), 1e-300))) / period]
    allm = np.concatenate([m[m > 0] for m in mags]) if any(m.size for m in mags) else np.zeros(0)
    lo = nyq * 1e-4
    if allm.size:
        lo = min(lo, 0.1 * float(allm.min()))
    grid = np.logspace(math.log10(lo), math.log10(nyq), n_points)
    extra_c = np.abs(c.poles().imag)
    extra_d = np.abs(np.angle(d.poles())) / period
    extra = np.concatenate([extra_c, extra_d])
    extra = extra[(extra > lo) & (extra <= nyq)]
    return np.unique(np.concatenate([grid, extra]))


def _compare_discrete(
    cand: Realization, d: Realization, omegas: FloatArray, rtol: float, pole_rtol: float
) -> tuple[float, float, float | None, bool]:
    period = float(d.sample_period)  # type: ignore[arg-type]
    z = np.exp(1j * omegas * period)
    rel, worst, _, _ = _relative_peak(transfer_values(cand, z), transfer_values(d, z))
    pole_diff = (
        _matched_pole_distance(cand.poles(), d.poles()) if cand.order == d.order else None
    )
    ok = rel <= rtol and (pole_diff is None or pole_diff <= pole_rtol)
    return rel, float(omegas[worst]), pole_diff, ok


def check_discretization_claim(
    continuous: Realization,
    discrete: Realization,
    *,
    method: DiscretizationMethod,
    prewarp_frequency: float | None = None,
    rtol: float,
    pole_rtol: float | None = None,
    n_frequencies: int = 400,
) -> DiscretizationClaimCheck:
    """Check the claim "``discrete`` is the ``method`` discretization of ``continuous``".

    The continuous model is discretized at the discrete model's period with the claimed
    method; the two discrete models are compared by their frequency responses on the
    unit circle (a log-spaced grid of ``n_frequencies`` points up to the Nyquist
    frequency plus every pole frequency of both) and, when the orders agree, by their
    optimally paired poles. When the claim fails, every other method (bilinear without
    prewarping, and matched-pole-zero only for SISO models) is tried and reported.

    Parameters
    ----------
    continuous : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``, continuous time.
    discrete : Realization
        ``A_d : (nd, nd)``, ... with ``p`` outputs, ``m`` inputs and a sample period.
    method, prewarp_frequency
        The claim; see :func:`discretize`.
    rtol : float
        Tolerance on the relative peak difference of the frequency responses.
    pole_rtol : float or None
        Tolerance on paired pole distances (relative to ``max(1, |z|)``). Default
        ``sqrt(rtol)``: poles of repeated or clustered modes are ill-conditioned and move
        like ``eps^(1/k)``, so the pole test is deliberately looser than the response test.
    n_frequencies : int
        Number of log-spaced grid points.

    Returns
    -------
    DiscretizationClaimCheck

    Raises
    ------
    InvalidModelError
        Wrong time domains, bad method, bad tolerance.
    IncompatibleModelsError
        Input or output counts differ.
    NumericalTroubleError
        The claimed discretization cannot be computed.
    """
    continuous = _require_realization(continuous, "continuous")
    discrete = _require_realization(discrete, "discrete")
    if continuous.is_discrete:
        raise InvalidModelError(
            "continuous: is discrete-time but a continuous-time model was expected",
            field="continuous",
        )
    if not discrete.is_discrete:
        raise InvalidModelError(
            "discrete: is continuous-time but a discrete-time model (with a sample "
            "period) was expected",
            field="discrete",
        )
    if (continuous.n_inputs, continuous.n_outputs) != (discrete.n_inputs, discrete.n_outputs):
        raise IncompatibleModelsError(
            f"discrete model has {discrete.n_inputs} input(s) and {discrete.n_outputs} "
            f"output(s) but the continuous model has {continuous.n_inputs} and "
            f"{continuous.n_outputs}"
        )
    rtol = _check_tolerance(rtol, "rtol")
    prtol = math.sqrt(rtol) if pole_rtol is None else _check_tolerance(pole_rtol, "pole_rtol")
    period = float(discrete.sample_period)  # type: ignore[arg-type]
    cand = discretize(continuous, period, method=method, prewarp_frequency=prewarp_frequency)
    omegas = _unit_circle_grid(continuous, discrete, n_frequencies)
    rel, w_worst, pole_diff, ok = _compare_discrete(cand, discrete, omegas, rtol, prtol)
    label = method if prewarp_frequency is None else f"{method} (prewarp {prewarp_frequency:g} rad/s)"
    if ok:
        return DiscretizationClaimCheck(
            method, prewarp_frequency, period, rtol, prtol, rel, w_worst, pole_diff,
            omegas.size, "holds", (), None,
            f"the discrete model is the {label} discretization within rtol={rtol:g} "
            f"(relative peak difference {rel:.3g})",
        )
    alternatives: list[MethodMatch] = []
    tries: list[tuple[str, float | None]] = [(m, None) for m in METHODS if m != method]
    if method == "bilinear" and prewarp_frequency is not None:
        tries.insert(0, ("bilinear", None))
    for alt, pw in tries:
        try:
            alt_r = discretize(continuous, period, method=alt, prewarp_frequency=pw)  # type: ignore[arg-type]
        except (InvalidModelError, NumericalTroubleError) as exc:
            alternatives.append(MethodMatch(alt, pw, None, None, False, f"not applicable: {exc}"))
            continue
        a_rel, _, a_pole, a_ok = _compare_discrete(alt_r, discrete, omegas, rtol, prtol)
        alternatives.append(MethodMatch(alt, pw, a_rel, a_pole, a_ok))
    matching = [a for a in alternatives if a.matches and a.relative_peak_difference is not None]
    best = min(matching, key=lambda a: a.relative_peak_difference or 0.0) if matching else None
    bilinear = next((m for m in METHODS if "tustin" in m or "bilinear" in m), None)
    if best is None and bilinear is not None:  # does the bilinear map with a prewarp match?
        best = _matching_prewarp(continuous, discrete, bilinear, period, omegas, rtol, prtol)
        if best is not None:
            alternatives.insert(0, best)
    why = f"relative peak difference {rel:.3g} > rtol={rtol:g}" if rel > rtol else (
        f"poles differ by {pole_diff:.3g} > pole_rtol={prtol:g}"
    )
    if best is not None and best.prewarp_frequency is not None:
        message = (
            f"the matrices match the {best.method} discretization with prewarp frequency "
            f"{best.prewarp_frequency:.6g} rad/s, not {label} ({why}; with that prewarp the "
            f"relative peak difference is {best.relative_peak_difference:.3g})"
        )
    elif best is not None:
        message = (
            f"the matrices look like a {best.method} discretization, not {label} ({why}; "
            f"{best.method} matches with relative peak difference "
            f"{best.relative_peak_difference:.3g})"
        )
    else:
        message = f"the discrete model is not the {label} discretization ({why}); no other method matches either"
    return DiscretizationClaimCheck(
        method, prewarp_frequency, period, rtol, prtol, rel, w_worst, pole_diff,
        omegas.size, "fails", tuple(alternatives), None if best is None else best.method,
        message,
    )


def _matching_prewarp(continuous: Realization, discrete: Realization, method: str, period: float,
                      omegas: FloatArray, rtol: float, prtol: float) -> MethodMatch | None:
    """The prewarp frequency in (0, Nyquist) under which the bilinear discretization of
    ``continuous`` matches ``discrete``, if one does (a bounded 1-D search on the relative
    peak difference: a log-spaced scan, then Brent's method around the best point)."""
    from scipy.optimize import minimize_scalar

    nyquist = math.pi / period

    def mismatch(log_w: float) -> float:
        try:
            cand = discretize(continuous, period, method=method,  # type: ignore[arg-type]
                              prewarp_frequency=float(math.exp(log_w)))
            return _compare_discrete(cand, discrete, omegas, rtol, prtol)[0]
        except (InvalidModelError, NumericalTroubleError):
            return math.inf

    scan = np.linspace(math.log(1e-4 * nyquist), math.log(0.98 * nyquist), 40)
    values = [mismatch(x) for x in scan]
    k = int(np.argmin(values))
    if not math.isfinite(values[k]):
        return None
    lo, hi = scan[max(k - 1, 0)], scan[min(k + 1, scan.size - 1)]
    res = minimize_scalar(mismatch, bounds=(lo, hi), method="bounded",
                          options={"xatol": 1e-10, "maxiter": 100})
    log_w = float(res.x) if res.fun <= values[k] else float(scan[k])
    w = math.exp(log_w)
    cand = discretize(continuous, period, method=method, prewarp_frequency=w)  # type: ignore[arg-type]
    rel, _, pole_diff, ok = _compare_discrete(cand, discrete, omegas, rtol, prtol)
    return MethodMatch(method, w, rel, pole_diff, ok) if ok else None


def _check_tolerance(value: Any, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InvalidModelError(f"{name}: got {value!r} but a number > 0 was expected", field=name) from None
    if not math.isfinite(v) or v <= 0.0:
        raise InvalidModelError(f"{name}: got {v!r} but a finite number > 0 was expected", field=name)
    return v


# ------------------------------------------------------------ period mismatch
@dataclass(frozen=True)
class SamplePeriodCheck:
    """Result of :func:`detect_sample_period_mismatch`.

    Attributes
    ----------
    ratio : float or None
        Effective period of the second model's matrices divided by the first model's
        labelled period, when a consistent ratio was found and confirmed; else ``None``.
    simple_ratio : str or None
        ``ratio`` as a fraction with denominator <= 16 when it equals one within ``rtol``
        (e.g. ``"2"`` or ``"1/10"``).
    labelled_ratio : float
        ``T2 / T1`` as labelled.
    implied_period : float or None
        ``ratio * T1``: the period at which the second model's matrices agree with the
        first model.
    pole_residual : float or None
        ``max |log z2 - ratio log z1|`` over paired poles, relative to ``max |log z|``.
    response_relative_difference : float or None
        Relative peak difference of the continuous frequency responses after undoing a
        zero-order hold of each model with the matrix logarithm.
    outcome : {"period_mismatch", "consistent", "unrelated", "undetermined"}
    note : str
    """

    ratio: float | None
    simple_ratio: str | None
    labelled_ratio: float
    implied_period: float | None
    pole_residual: float | None
    response_relative_difference: float | None
    rtol: float
    outcome: Literal["period_mismatch", "consistent", "unrelated", "undetermined"]
    note: str = ""

    def as_dict(self) -> dict[str, Any]:
        return {
            "ratio": self.ratio,
            "simple_ratio": self.simple_ratio,
            "labelled_ratio": self.labelled_ratio,
            "implied_period": self.implied_period,
            "pole_residual": self.pole_residual,
            "response_relative_difference": self.response_relative_difference,
            "rtol": self.rtol,
            "outcome": self.outcome,
            "note": self.note,
        }


def _undo_zero_order_hold(d: Realization, period: float) -> Realization:
    """Continuous model whose ZOH sampling at ``period`` is ``d`` (principal logarithm)."""
    n, m = d.order, d.n_inputs
    aug = np.eye(n + m)
    aug[:n, :n] = d.a
    aug[:n, n:] = d.b
    try:
        log_aug = scipy.linalg.logm(aug)
    except (ValueError, np.linalg.LinAlgError) as exc:  # pragma: no cover
        raise NumericalTroubleError(f"matrix logarithm failed: {exc}") from exc
    log_aug = np.asarray(log_aug)
    if np.iscomplexobj(log_aug):
        if float(np.max(np.abs(log_aug.imag))) > 1e-8 * max(1.0, float(np.max(np.abs(log_aug.real)))):
            raise NumericalTroubleError("matrix logarithm is not real")
        log_aug = log_aug.real
    _finite_or_raise(log_aug, "matrix logarithm")
    log_aug = log_aug / period
    return Realization.from_arrays(log_aug[:n, :n], log_aug[:n, n:], d.c, d.d, None, name=d.name)


def detect_sample_period_mismatch(
    d1: Realization,
    d2: Realization,
    *,
    rtol: float,
    pole_rtol: float | None = None,
    n_frequencies: int = 300,
) -> SamplePeriodCheck:
    """Find whether ``d2`` agrees with ``d1`` once its sample period is re-read.

    Poles of a sampled system satisfy ``z = exp(lambda T)``, so two samplings of one
    continuous system satisfy ``z2 = z1^(T2/T1)``. The candidate ratio is
    ``sum |log z2| / sum |log z1|`` (principal logarithms); poles are then paired
    optimally and the residual checked against ``pole_rtol``. The ratio is confirmed by
    undoing a zero-order hold of each model with the matrix logarithm of
    ``[[A_d, B_d], [0, I]]`` (divided by ``T1`` and by ``ratio * T1``) and comparing the
    continuous frequency responses (relative peak difference <= ``rtol``).

    Valid when both models are zero-order-hold samplings whose poles avoid the closed
    negative real axis and the origin, and whose sampling did not alias (every
    ``|Im lambda| T < pi``). For Tustin-sampled models the pole map is warped and no
    pure ratio exists.

    Parameters
    ----------
    d1, d2 : Realization
        Discrete-time models with equal input/output counts; ``A : (n, n)`` each.
    rtol : float
        Tolerance on the relative peak difference of the recovered continuous responses.
    pole_rtol : float or None
        Tolerance on the relative pole residual; default ``sqrt(rtol)`` (poles of clustered
        modes are ill-conditioned).
    n_frequencies : int
        Points of the log-spaced continuous frequency grid.

    Returns
    -------
    SamplePeriodCheck

    Raises
    ------
    InvalidModelError
        A model is continuous-time, or a tolerance is not a number > 0.
    IncompatibleModelsError
        Input or output counts differ.
    """
    d1 = _require_realization(d1, "d1")
    d2 = _require_realization(d2, "d2")
    for name, d in (("d1", d1), ("d2", d2)):
        if not d.is_discrete:
            raise InvalidModelError(
                f"{name}: is continuous-time but a discrete-time model was expected", field=name
            )
    if (d1.n_inputs, d1.n_outputs) != (d2.n_inputs, d2.n_outputs):
        raise IncompatibleModelsError(
            f"d2 has {d2.n_inputs} input(s) and {d2.n_outputs} output(s) but d1 has "
            f"{d1.n_inputs} and {d1.n_outputs}"
        )
    rtol = _check_tolerance(rtol, "rtol")
    prtol = math.sqrt(rtol) if pole_rtol is None else _check_tolerance(pole_rtol, "pole_rtol")
    t1 = float(d1.sample_period)  # type: ignore[arg-type]
    t2 = float(d2.sample_period)  # type: ignore[arg-type]
    labelled = t2 / t1

    def result(outcome: str, note: str, ratio: float | None = None, res: float | None = None,
               resp: float | None = None) -> SamplePeriodCheck:
        simple = None
        if ratio is not None:
            frac = Fraction(ratio).limit_denominator(16)
            if abs(float(frac) - ratio) <= rtol * ratio:
                simple = str(frac)
        return SamplePeriodCheck(
            ratio if outcome in ("period_mismatch", "consistent") else None, simple
            if outcome in ("period_mismatch", "consistent") else None, labelled,
            ratio * t1 if ratio is not None and outcome in ("period_mismatch", "consistent") else None,
            res, resp, rtol, outcome, note,  # type: ignore[arg-type]
        )

    if d1.order != d2.order:
        return result("undetermined", f"orders differ ({d1.order} vs {d2.order}); compare minimal realizations first")
    if d1.order == 0:
        return result("undetermined", "static gains have no dynamics, so no period can be read from them")
    z1, z2 = d1.poles(), d2.poles()
    for z in (z1, z2):
        on_neg_axis = (np.abs(z.imag) <= 1e-12 * np.maximum(1.0, np.abs(z))) & (z.real <= 0.0)
        if np.any(np.abs(z) <= 1e-12) or np.any(on_neg_axis):
            return result(
                "undetermined",
                "a pole lies at z = 0 or on the negative real axis: it has no real "
                "continuous-time logarithm, so no period ratio can be read",
            )
    l1, l2 = np.log(z1), np.log(z2)
    s1, s2 = float(np.sum(np.abs(l1))), float(np.sum(np.abs(l2)))
    if s1 == 0.0 or s2 == 0.0:
        return result("undetermined", "all poles at z = 1 (pure integrators): no time scale to compare")
    ratio = s2 / s1
    cost = np.abs(l2[:, None] - ratio * l1[None, :])
    rows, cols = linear_sum_assignment(cost)
    scale = max(float(np.max(np.abs(l1))) * ratio, float(np.max(np.abs(l2))))
    res = float(np.max(cost[rows, cols])) / scale
    if res > prtol:
        return result(
            "unrelated",
            f"poles do not map as z2 = z1^r for any single r (residual {res:.3g} > pole_rtol={prtol:g})",
            None, res,
        )
    try:
        c1 = _undo_zero_order_hold(d1, t1)
        c2 = _undo_zero_order_hold(d2, ratio * t1)
    except NumericalTroubleError as exc:
        return result("undetermined", f"could not undo the zero-order hold: {exc}", ratio, res)
    lam = np.abs(np.concatenate([c1.poles(), c2.poles()]))
    lam = lam[lam > 0]
    lo, hi = (0.01 * float(lam.min()), 100.0 * float(lam.max())) if lam.size else (0.1 / t1, 10.0 / t1)
    omegas = np.unique(np.concatenate([np.logspace(math.log10(lo), math.log10(hi), n_frequencies), lam]))
    resp, _, _, _ = _relative_peak(transfer_values(c1, 1j * omegas), transfer_values(c2, 1j * omegas))
    if resp > rtol:
        return result(
            "unrelated",
            f"poles map with ratio {ratio:.6g} but the responses differ (relative peak "
            f"difference {resp:.3g} > rtol={rtol:g})",
            ratio, res, resp,
        )
    if abs(ratio - labelled) <= rtol * max(ratio, labelled):
        return result(
            "consistent",
            f"both models sample the same continuous system at their labelled periods "
            f"(ratio {ratio:.6g})",
            ratio, res, resp,
        )
    return result(
        "period_mismatch",
        f"d2's matrices agree with d1 when read at period {ratio * t1:.6g} s "
        f"({ratio:.6g} x T1) but d2 is labelled {t2:g} s",
        ratio, res, resp,
    )
