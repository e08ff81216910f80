"""Invariant and transmission zeros of a realization.

The reduced regular pencil of A. Emami-Naeini and P. Van Dooren, "Computation of zeros
of linear multivariable systems", Automatica 18 (1982) 415-430, via slycot ``ab08nd``
(SLICOT AB08ND), then the generalized eigenvalues of that pencil
(``scipy.linalg.eigvals``). When slycot is unavailable or fails, square systems fall
back to our own route (``eig(A - B D^-1 C)`` when D is well conditioned, otherwise the
generalized eigenvalues of the Rosenbrock system pencil with infinite eigenvalues
discarded).
"""

from __future__ import annotations

import numpy as np
import scipy.linalg

from audit.errors import NumericalTroubleError
from audit.core.realization import Realization
from audit.structure.minimal import minimal_realization
from audit.structure.shared import _EPS, ComplexArray, _check_realization, _eigenvalues, _sorted_complex
from audit.structure.staircase import DOUBT_CEILING

# ----------------------------------------------------------------------------- zeros
def _zeros_slycot(r: Realization) -> ComplexArray:
    import slycot  # local import: optional at run time, fallback below

    n, m, p = r.order, r.n_inputs, r.n_outputs
    out = slycot.ab08nd(
        n, m, p,
        np.array(r.a, dtype=float), np.array(r.b, dtype=float),
        np.array(r.c, dtype=float), np.array(r.d, dtype=float),
        equil="N", tol=0.0,
    )
    nu = int(out[0])
    af, bf = out[8], out[9]
    if nu == 0:
        return np.zeros(0, dtype=complex)
    vals = scipy.linalg.eigvals(af[:nu, :nu], bf[:nu, :nu])
    return np.asarray(vals, dtype=complex)


def _zeros_own_square(r: Realization) -> ComplexArray:
    """Invariant zeros of a square system without slycot.

    With D well conditioned: ``eig(A - B D^-1 C)`` (a solve, no inverse). Otherwise the
    generalized eigenvalues of the Rosenbrock pencil ``[[A, B], [C, D]] - s diag(I, 0)``
    with the (numerically) infinite ones discarded.
    """
    n, m, p = r.order, r.n_inputs, r.n_outputs
    if m != p:
        raise NumericalTroubleError(
            f"invariant zeros: slycot ab08nd is unavailable and our own route needs a "
            f"square system, got {p} output(s) x {m} input(s)"
        )
    a, b, c, d = (np.asarray(x) for x in (r.a, r.b, r.c, r.d))
    if n == 0:
        return np.zeros(0, dtype=complex)
    if m and np.linalg.cond(d) < 1.0 / DOUBT_CEILING:
        return _eigenvalues(a - b @ np.linalg.solve(d, c))
    s_mat = np.block([[a, b], [c, d]])
    e_mat = np.zeros_like(s_mat)
    e_mat[:n, :n] = np.eye(n)
    alpha, beta = scipy.linalg.eig(s_mat, e_mat, right=False, homogeneous_eigvals=True)
    size = float(np.linalg.norm(s_mat))
    singular = (np.abs(alpha) <= 1e3 * _EPS * size * (n + m)) & (np.abs(beta) <= 1e3 * _EPS * (n + m))
    if np.any(singular):
        raise NumericalTroubleError(
            "invariant zeros: the system pencil is singular (normal rank deficient); "
            "its zeros are not defined by a regular pencil"
        )
    finite = np.abs(beta) > DOUBT_CEILING * np.abs(alpha) / max(size, 1.0)
    return np.asarray(alpha[finite] / beta[finite], dtype=complex)


def invariant_zeros(r: Realization) -> ComplexArray:
    """Finite invariant zeros of the system matrix of ``r`` as given (no reduction).

    For a non-minimal realization these include the decoupling zeros that are
    invariant zeros (see SLICOT AB08ND); use :func:`transmission_zeros` for the zeros
    of the transfer function.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.

    Returns
    -------
    (k,) complex ndarray
        Sorted by real part, then imaginary part.

    Raises
    ------
    InvalidModelError
        If ``r`` is not a Realization.
    NumericalTroubleError
        If slycot fails and our own route does not apply or fails.
    """
    r = _check_realization(r)
    if r.order == 0:
        return np.zeros(0, dtype=complex)
    try:
        vals = _zeros_slycot(r)
    except ImportError:
        vals = _zeros_own_square(r)
    except Exception as exc:  # slycot raises SlycotError, ValueError, ArithmeticError
        try:
            vals = _zeros_own_square(r)
        except NumericalTroubleError as inner:
            raise NumericalTroubleError(
                f"invariant zeros: slycot ab08nd failed ({exc}); {inner}"
            ) from exc
    vals = vals[np.isfinite(vals)]
    return _sorted_complex(vals)


def transmission_zeros(
    r: Realization, *, tol: float | None = None, balance: bool = True
) -> ComplexArray:
    """Finite transmission zeros: invariant zeros of the minimal realization.

    Works for MIMO and non-square systems (Emami-Naeini and Van Dooren 1982 reduced
    pencil via slycot ``ab08nd``).

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    tol : float, optional, keyword-only
        Relative rank tolerance of the minimal realization step.
    balance : bool, keyword-only
        State scaling in the minimal realization step (see
        :func:`minimal_realization`). Default True.

    Returns
    -------
    (k,) complex ndarray
        Sorted as by :func:`invariant_zeros`.

    Raises
    ------
    InvalidModelError
        If ``r`` is not a Realization or ``tol`` is not in (0, 1).
    NumericalTroubleError
        If the zero computation fails.

    Examples
    --------
    >>> r = Realization.from_arrays([[-1.0, 0.0], [0.0, -2.0]], [[1.0], [1.0]],
    ...                             [[1.0, 1.0]], [[0.0]])
    >>> [round(float(z.real), 10) for z in transmission_zeros(r)]   # (2s+3)/((s+1)(s+2))
    [-1.5]
    """
    return invariant_zeros(minimal_realization(r, tol=tol, balance=balance).realization)


__all__ = [
    "invariant_zeros",
    "transmission_zeros",
]
