"""State space -> zeros-poles-gain and transfer-function data (display and export).

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
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.linalg

from audit.errors import InvalidModelError, NumericalTroubleError
from audit.core.conversion_common import DEFAULT_RANK_RTOL, ComplexArray, FloatArray, _minimal_part
from audit.core.realization import Realization


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
    cells = [[_channel_zeros_poles_gain(r, i, j, rank_rtol=rank_rtol)
              for j in range(r.n_inputs)] for i in range(r.n_outputs)]
    zeros, poles, gains = _per_channel_lists(cells, 3)
    zeros = [[[complex(v) for v in z] for z in row] for row in zeros]
    poles = [[[complex(v) for v in pl] for pl in row] for row in poles]
    gains = [[float(k) for k in row] for row in gains]
    return ZerosPolesGainData(zeros, poles, gains, r.sample_period)


def _real_polynomial(roots: list[complex]) -> FloatArray:
    if not roots:
        return np.array([1.0])
    return np.asarray(np.real(np.poly(np.array(roots, dtype=complex))), dtype=float)


def _per_channel_lists(cells: list[list[tuple[Any, ...]]], width: int) -> tuple[list[list[Any]], ...]:
    """A [p][m] grid of per-channel tuples of ``width`` items as ``width`` [p][m] grids."""
    return tuple([[cell[k] for cell in row] for row in cells] for k in range(width))


def _channel_polynomials(z: list[complex], p: list[complex], k: float) -> tuple[list[float], list[float]]:
    """Numerator ``k prod(s - z)`` padded to the length of the monic denominator
    ``prod(s - p)``; a vanishing channel is ``[0.0] / [1.0]``."""
    den = _real_polynomial(p)
    num = k * _real_polynomial(z)
    padded = np.zeros(den.size)
    padded[den.size - num.size:] = num
    if k == 0.0:
        padded, den = np.zeros(1), np.ones(1)
    return [float(v) for v in padded], [float(v) for v in den]


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
    InvalidModelError, NumericalTroubleError
        As :func:`zeros_poles_gain_from_realization`, whose data this expands.

    Examples
    --------
    >>> r = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[0.0]])
    >>> transfer_function_from_realization(r).as_dict()["numerator"]
    [[[0.0, 3.0]]]
    """
    data = zeros_poles_gain_from_realization(r, rank_rtol=rank_rtol)
    cells = [[_channel_polynomials(z, p, k) for z, p, k in zip(zrow, prow, grow)]
             for zrow, prow, grow in zip(data.zeros, data.poles, data.gain)]
    numerators, denominators = _per_channel_lists(cells, 2)
    return TransferFunctionData(numerators, denominators, r.sample_period)


__all__ = [
    "TransferFunctionData",
    "ZerosPolesGainData",
    "transfer_function_from_realization",
    "zeros_poles_gain_from_realization",
]
