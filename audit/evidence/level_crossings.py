"""The imaginary-axis eigenvalue (level-crossing) test shared by the peak-gain searches.

S. Boyd, V. Balakrishnan and P. Kabamba, "A bisection method for computing the
H-infinity norm of a transfer matrix and related problems", Mathematics of Control,
Signals, and Systems 2 (1989) 207-219: for ``gamma > sigma_max(D)`` (more generally,
``gamma`` not a singular value of ``D``) and ``A`` without imaginary-axis eigenvalues,
``gamma`` is a singular value of ``G(j omega)`` if and only if ``j omega`` is an
eigenvalue of the Hamiltonian matrix ``H(gamma)`` (:func:`hamiltonian_matrix`).

Held here: the largest singular value of a batch of responses, ``H(gamma)``, the
selection of its eigenvalues that lie on the imaginary axis (the crossing frequencies),
and the bilinear (Cayley) transform that brings a discrete-time model to continuous
time for the test.  Used by :mod:`audit.evidence.peak_gain` (the whole axis) and
:mod:`audit.evidence.band_peak` (a band).
"""

from __future__ import annotations

import math

import numpy as np
import scipy.linalg
from numpy.typing import NDArray

from audit.core.realization import Realization
from audit.errors import NumericalTroubleError

FloatArray = NDArray[np.float64]
_EPS = float(np.finfo(float).eps)

__all__ = [
    "sigma_max",
    "hamiltonian_matrix",
    "imaginary_axis_frequencies",
    "bilinear_to_continuous",
]


def sigma_max(g: NDArray[np.complex128]) -> FloatArray:
    """Largest singular value of each (p, m) slice of ``g : (k, p, m)``."""
    if g.shape[1] == 1 or g.shape[2] == 1:
        return np.sqrt(np.sum(np.abs(g) ** 2, axis=(1, 2)))
    return np.linalg.svd(g, compute_uv=False)[:, 0]


def hamiltonian_matrix(
    a: FloatArray, b: FloatArray, c: FloatArray, d: FloatArray, gamma: float
) -> FloatArray:
    """``H(gamma)`` of Boyd, Balakrishnan and Kabamba (1989); solves, no inverses::

        H(gamma) = [[ A - B R^-1 D^T C,        -gamma B R^-1 B^T          ],
                    [ gamma C^T S^-1 C,        -A^T + C^T D R^-1 B^T      ]]
        R = D^T D - gamma^2 I,   S = D D^T - gamma^2 I.
    """
    p, m = d.shape
    r = d.T @ d - gamma**2 * np.eye(m)
    s = d @ d.T - gamma**2 * np.eye(p)
    # R and S are symmetric negative definite for gamma > sigma_max(D).
    rhs = np.hstack([d.T @ c, b.T])
    sol = scipy.linalg.solve(r, rhs, assume_a="sym", check_finite=False)
    r_dc, r_bt = sol[:, : c.shape[1]], sol[:, c.shape[1] :]
    s_c = scipy.linalg.solve(s, c, assume_a="sym", check_finite=False)
    top = np.hstack([a - b @ r_dc, -gamma * (b @ r_bt)])
    bottom = np.hstack([gamma * (c.T @ s_c), -a.T + (c.T @ d) @ r_bt])
    return np.vstack([top, bottom])


def imaginary_axis_frequencies(eigs: NDArray[np.complex128], imaginary_rtol: float) -> FloatArray:
    """The frequencies ``|Im lam|`` (sorted, unique) of the eigenvalues taken as imaginary.

    ``lam`` counts when ``|Re lam| <= imaginary_rtol * max(|lam|, sqrt(eps) max|eigs|)``:
    loose on purpose, a spurious candidate only costs an evaluation.
    """
    floor = math.sqrt(_EPS) * float(np.max(np.abs(eigs), initial=0.0))
    near_axis = np.abs(eigs.real) <= imaginary_rtol * np.maximum(np.abs(eigs), floor)
    return np.unique(np.abs(eigs.imag[near_axis]))


def bilinear_to_continuous(
    r: Realization, failure: str
) -> tuple[tuple[FloatArray, FloatArray, FloatArray, FloatArray], float, bool]:
    """Continuous-time matrices of a discrete model by ``z = flip (1 + s) / (1 - s)``.

    The Cayley transform maps the unit circle onto the imaginary axis
    (``theta = 2 atan(nu)``) and keeps the peak value.  When a pole sits closer to
    ``z = -1`` than to ``z = +1`` the model is first rotated by ``z -> -z``
    (``flip = -1``: realization ``(-A, B, -C, D)``, frequencies shifted by ``pi``) so
    that ``I + A`` stays well conditioned.

    Returns ``((Ac, Bc, Cc, Dc), flip, c_finite)`` where ``c_finite`` says whether
    ``C (I + A)^-1`` came out finite (``Ac`` and ``(I + A)^-1 B`` are checked here).

    Raises
    ------
    NumericalTroubleError
        ``"<failure>: I + A is singular"`` when the factorization fails or gives
        non-finite values.
    """
    poles = r.poles()
    flip = 1.0
    if poles.size and np.min(np.abs(poles + 1.0)) < np.min(np.abs(poles - 1.0)):
        flip = -1.0
    a, b, c, d = flip * r.a, r.b, flip * r.c, r.d
    n = r.order
    try:
        lu = scipy.linalg.lu_factor(np.eye(n) + a, check_finite=False)
        ac = scipy.linalg.lu_solve(lu, a - np.eye(n), check_finite=False)
        inv_b = scipy.linalg.lu_solve(lu, b, check_finite=False)
        c_inv = scipy.linalg.lu_solve(lu, c.T, trans=1, check_finite=False).T
    except (np.linalg.LinAlgError, ValueError, scipy.linalg.LinAlgError) as exc:
        raise NumericalTroubleError(f"{failure}: I + A is singular ({exc})") from exc
    if not (np.all(np.isfinite(ac)) and np.all(np.isfinite(inv_b))):
        raise NumericalTroubleError(f"{failure}: I + A is singular")
    mats = (ac, math.sqrt(2.0) * inv_b, math.sqrt(2.0) * c_inv, d - c @ inv_b)
    return mats, flip, bool(np.all(np.isfinite(c_inv)))
