"""Continuous-to-discrete conversion of realizations (the producers of discrete models).

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

The checks of discretization claims (is a discrete model the claimed discretization of a
continuous one; was its sample period read wrongly) are in
:mod:`audit.dynamics.discretization_checks`.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import scipy.linalg
from numpy.typing import NDArray

from audit.dynamics.discretization_methods import DiscretizationMethod, discretization_method
from audit.errors import InvalidModelError, NumericalTroubleError
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


def _checked_exponential(mat: FloatArray, failure: str, what: str) -> FloatArray:
    """``e^mat``; a scipy failure becomes ``NumericalTroubleError(failure + ": " + reason)``
    and an overflow the :func:`_finite_or_raise` error naming ``what``."""
    try:
        with np.errstate(over="ignore", invalid="ignore"):  # overflow is checked below
            e = scipy.linalg.expm(mat)
    except (ValueError, np.linalg.LinAlgError, OverflowError) as exc:  # pragma: no cover
        raise NumericalTroubleError(f"{failure}: {exc}") from exc
    _finite_or_raise(e, what)
    return e


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
    e = _checked_exponential(aug, "matrix exponential of [[A, B], [0, 0]]*h failed",
                             "matrix exponential of [[A, B], [0, 0]]*h")
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
    e = _checked_exponential(big, "first-order hold: matrix exponential failed",
                             "first-order hold matrix exponential")
    phi = e[:n, :n]
    gamma1 = e[:n, n:n + m]      # int_0^T e^{A(T-t)} B dt
    gamma2 = e[:n, n + m:]       # int_0^T e^{A(T-t)} B (t/T) dt
    # x+ = Phi x + (Gamma1 - Gamma2) u_k + Gamma2 u_{k+1}; with xi = x - Gamma2 u:
    bd = gamma1 - gamma2 + phi @ gamma2
    dd = r.d + r.c @ gamma2
    return phi, bd, r.c.copy(), dd


def _impulse_invariant(r: Realization, period: float) -> tuple[FloatArray, ...]:
    phi = _checked_exponential(r.a * period, "impulse-invariant: matrix exponential failed",
                               "impulse-invariant matrix exponential")
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


__all__ = [
    "discretize",
    "transfer_values",
    "zero_order_hold_pair",
]
