"""Evaluate a model from its STORED representation, with an error bound.

A transfer-function document is its polynomial coefficients, a zero-pole-gain document
its factors; a realization built from them is a converted copy with its own rounding.
This module keeps the stored data next to the realization
(:attr:`audit.core.realization.Realization.stored`) and evaluates it directly:

* transfer functions by Horner's rule in a power-of-two scaled variable ``t = λ / w0``
  (exact scaling), in ``t`` when ``|t| <= 1`` and on the reversed polynomial in ``1/t``
  otherwise, so high degrees neither overflow nor lose the bound; the rounding error is
  bounded by the a-priori bound for Horner's rule, ``|p̂ - p| <= γ_{2n} p̃(|t|)``
  (N. J. Higham, "Accuracy and Stability of Numerical Algorithms", 2nd ed., SIAM 2002,
  section 5.1, eq. (5.3)), with ``γ`` widened for complex arithmetic (complex
  multiplication costs ``√2 γ_2``, Higham section 3.6);
* zero-pole-gain factors as ``k Π (λ - z_i) / Π (λ - p_i)``, zeros and poles interleaved so
  that the running product neither overflows nor underflows, relative error bounded by
  ``(2 (n_z + n_p) + 2) · 4u``.

The same data are evaluated in complex ball arithmetic (python-flint ``acb``) by
:func:`stored_transfer_ball`: every stored double is an exact binary rational, so the
ball contains the transfer function of the stored model, not of a converted copy.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]
ComplexArray = NDArray[np.complex128]

UNIT_ROUNDOFF = float(np.finfo(float).eps) / 2

IMPROPER_ROUNDING_RTOL = 1e-8
"""Excess leading numerator coefficients (beyond the denominator degree) are treated as
rounding residue of a conversion when each, in the balanced frequency variable, is at most
this fraction of the channel's largest numerator coefficient (common practice, no source:
state-space-to-transfer-function routines leave residues near 1e-16 relative there)."""


def _pow2(x: float) -> float:
    """The power of two nearest to ``x`` (> 0) in the log scale."""
    if not (x > 0 and math.isfinite(x)):
        return 1.0
    e = int(round(math.log2(x)))
    return math.ldexp(1.0, max(min(e, 900), -900))


def balancing_frequency(den: FloatArray) -> float:
    """A power-of-two frequency ``w0`` that balances a polynomial's coefficients.

    ``w0`` is the geometric mean of the root magnitudes, ``|a_n / a_0|^(1/n)`` (product of
    roots), rounded to a power of two so that scaling the variable is exact. Zero roots are
    skipped (the trailing zero coefficients).
    """
    a = np.asarray(den, dtype=float)
    nz = np.flatnonzero(a)
    if nz.size < 2:
        return 1.0
    first, last = int(nz[0]), int(nz[-1])
    deg = last - first
    if deg <= 0:
        return 1.0
    ratio = abs(a[last]) / abs(a[first])
    return _pow2(math.exp(math.log(ratio) / deg))


def scaled_coefficients(coeffs: FloatArray, w0: float) -> FloatArray:
    """Coefficients of ``p(w0 t)`` in descending powers of t (exact for w0 a power of 2,
    barring under/overflow)."""
    c = np.asarray(coeffs, dtype=float)
    n = c.size - 1
    powers = np.array([math.ldexp(1.0, 0) * w0 ** (n - k) for k in range(n + 1)]) if n >= 0 else np.ones(0)
    with np.errstate(over="ignore", under="ignore"):
        return c * powers


# ------------------------------------------------------------------ stored forms
def _values_with_bound(points: ComplexArray, shape: tuple[int, int],
                       channel: Any) -> tuple[ComplexArray, FloatArray]:
    """Values ``(k, p, m)`` of a stored representation at ``points`` and a bound on the
    absolute error of σ_max per point, from ``channel(i, j, pts)`` = (values, error
    bounds) of channel ``[i][j]``."""
    pts = np.asarray(points, dtype=complex).ravel()
    p, m = shape
    values = np.zeros((pts.size, p, m), dtype=complex)
    errors = np.zeros((pts.size, p, m))
    for i in range(p):
        for j in range(m):
            values[:, i, j], errors[:, i, j] = channel(i, j, pts)
    # σ_max is 1-Lipschitz in the Frobenius norm: bound the error matrix by it
    return values, np.sqrt(np.sum(errors**2, axis=(1, 2)))


def _ball_matrix(flint: Any, shape: tuple[int, int], entry: Any) -> Any:
    """The ``p x m`` ball matrix (python-flint ``acb_mat``) of ``entry(i, j)``."""
    p, m = shape
    return flint.acb_mat(p, m, [entry(i, j) for i in range(p) for j in range(m)])


@dataclass(frozen=True, eq=False)
class StoredTransferFunction:
    """Transfer-function coefficients exactly as stored (descending powers).

    ``numerator[i][j]`` and ``denominator[i][j]`` are 1-d float arrays of channel
    (output i, input j); written leading zeros of a numerator are removed (they are zero
    as written), nothing else is touched.
    """

    numerator: tuple[tuple[FloatArray, ...], ...]
    denominator: tuple[tuple[FloatArray, ...], ...]
    sample_period: float | None = None
    rounding_improper: tuple[dict[str, Any], ...] = ()

    kind = "transfer function coefficients"

    @property
    def shape(self) -> tuple[int, int]:
        return len(self.numerator), len(self.numerator[0])

    def channels(self):  # type: ignore[no-untyped-def]
        p, m = self.shape
        for i in range(p):
            for j in range(m):
                yield i, j, self.numerator[i][j], self.denominator[i][j]

    def poles(self) -> ComplexArray:
        """Roots of every distinct stored denominator (as stored; double precision)."""
        seen: list[FloatArray] = []
        out: list[complex] = []
        for _, _, _, den in self.channels():
            if any(d.size == den.size and np.array_equal(d, den) for d in seen):
                continue
            seen.append(den)
            out.extend(_roots_scaled(den))
        return np.array(out, dtype=complex)

    def evaluate(self, points: ComplexArray) -> tuple[ComplexArray, FloatArray]:
        """Values ``(k, p, m)`` and a bound on the absolute error of σ_max per point."""
        return _values_with_bound(points, self.shape, lambda i, j, pts: rational_with_bound(
            self.numerator[i][j], self.denominator[i][j], pts))

    def ball_at(self, flint: Any, lam: Any) -> Any:
        def entry(i: int, j: int) -> Any:
            num = _ball_poly(flint, self.numerator[i][j], lam)
            den = _ball_poly(flint, self.denominator[i][j], lam)
            if den.contains(0):
                raise ZeroDivisionError("the stored denominator vanishes within the ball")
            return num / den

        return _ball_matrix(flint, self.shape, entry)

    def describe(self) -> str:
        return "transfer-function coefficients as stored"


@dataclass(frozen=True, eq=False)
class StoredZerosPolesGain:
    """Zeros, poles and gains exactly as stored (complex, per channel)."""

    zeros: tuple[tuple[ComplexArray, ...], ...]
    poles_: tuple[tuple[ComplexArray, ...], ...]
    gain: FloatArray
    sample_period: float | None = None

    kind = "zero-pole-gain factors"

    @property
    def shape(self) -> tuple[int, int]:
        return int(self.gain.shape[0]), int(self.gain.shape[1])

    def poles(self) -> ComplexArray:
        p, m = self.shape
        out = [v for i in range(p) for j in range(m) if self.gain[i, j] != 0.0
               for v in self.poles_[i][j]]
        return np.array(out, dtype=complex)

    def evaluate(self, points: ComplexArray) -> tuple[ComplexArray, FloatArray]:
        return _values_with_bound(points, self.shape, lambda i, j, pts: factored_with_bound(
            self.zeros[i][j], self.poles_[i][j], float(self.gain[i, j]), pts))

    def ball_at(self, flint: Any, lam: Any) -> Any:
        def entry(i: int, j: int) -> Any:
            g = flint.acb(float(self.gain[i, j]))
            if self.gain[i, j] != 0.0:
                for z in self.zeros[i][j]:
                    g = g * (lam - flint.acb(float(z.real), float(z.imag)))
                for q in self.poles_[i][j]:
                    step = lam - flint.acb(float(q.real), float(q.imag))
                    if step.contains(0):
                        raise ZeroDivisionError("a stored pole lies within the ball")
                    g = g / step
            return g

        return _ball_matrix(flint, self.shape, entry)

    def describe(self) -> str:
        return "zero-pole-gain factors as stored"


Stored = StoredTransferFunction | StoredZerosPolesGain


# ------------------------------------------------------------ double evaluation
def _horner_with_bound(coeffs: FloatArray, t: ComplexArray) -> tuple[ComplexArray, FloatArray]:
    """p(t) by Horner for every t (|t| <= 1 is the caller's job), with Higham's a-priori
    bound ``γ p̃(|t|)`` (complex arithmetic: γ_{4n+2} covers the √2 γ_2 per step)."""
    c = np.asarray(coeffs, dtype=float)
    y = np.full(t.shape, c[0], dtype=complex)
    mag = np.abs(t)
    yt = np.full(t.shape, abs(c[0]))
    for a in c[1:]:
        y = y * t + a
        yt = yt * mag + abs(a)
    n = c.size - 1
    k = 4 * n + 2
    gamma = k * UNIT_ROUNDOFF / (1 - k * UNIT_ROUNDOFF)
    return y, gamma * yt


def _poly_scaled(coeffs: FloatArray, t: ComplexArray, reverse: NDArray[np.bool_]) -> tuple[ComplexArray, FloatArray, ComplexArray]:
    """p(t) written as ``mult * q``: for |t| > 1, ``p(t) = t^n rev(1/t)``; returns
    (q, bound on |q - q̂|, t-power exponent carrier) with the power returned separately so
    the caller can combine numerator and denominator powers without overflow."""
    c = np.asarray(coeffs, dtype=float)
    q = np.zeros(t.shape, dtype=complex)
    err = np.zeros(t.shape)
    if np.any(~reverse):
        q[~reverse], err[~reverse] = _horner_with_bound(c, t[~reverse])
    if np.any(reverse):
        q[reverse], err[reverse] = _horner_with_bound(c[::-1], 1.0 / t[reverse])
    return q, err, t


def rational_with_bound(num: FloatArray, den: FloatArray, points: ComplexArray) -> tuple[ComplexArray, FloatArray]:
    """``num(λ) / den(λ)`` at each point with a bound on the absolute error.

    The variable is scaled by the power of two :func:`balancing_frequency` of the
    denominator (exact), Horner runs in ``t`` or in ``1/t`` (reversed coefficients), and the
    error bound combines the two polynomial bounds: ``|ΔG| <= (|Δn| + |G| |Δd|) / (|d| -
    |Δd|) + 4u|G|``. Where ``|Δd| >= |d|`` (numerically a pole) the bound is infinite.
    """
    lam = np.asarray(points, dtype=complex)
    num = np.asarray(num, dtype=float)
    den = np.asarray(den, dtype=float)
    if not np.any(num != 0.0):
        return np.zeros(lam.shape, dtype=complex), np.zeros(lam.shape)
    w0 = balancing_frequency(den)
    ns, ds = scaled_coefficients(num, w0), scaled_coefficients(den, w0)
    t = lam / w0  # exact (power of two)
    reverse = np.abs(t) > 1.0
    nn, nd = num.size - 1, den.size - 1
    with np.errstate(all="ignore"):
        qn, en, _ = _poly_scaled(ns, t, reverse)
        qd, ed, _ = _poly_scaled(ds, t, reverse)
        g = qn / qd
        # reversed: num(λ)/den(λ) = t^(nn - nd) revn(1/t) / revd(1/t)
        if np.any(reverse) and nn != nd:
            g[reverse] = g[reverse] * t[reverse] ** (nn - nd)
            fac = np.abs(t[reverse]) ** (nn - nd)
        else:
            fac = 1.0
        absd = np.abs(qd)
        err = (en + np.abs(qn / qd) * ed) / (absd - ed)
        if np.any(reverse):
            err[reverse] = err[reverse] * fac
        err = err + 4 * UNIT_ROUNDOFF * np.abs(g) * (1 + abs(nn - nd))
        err = np.where((absd > ed) & np.isfinite(err), err, np.inf)
    g = np.where(np.isfinite(g), g, 0.0)
    return g, err


def factored_with_bound(zeros: ComplexArray, poles: ComplexArray, gain: float,
                        points: ComplexArray) -> tuple[ComplexArray, FloatArray]:
    """``gain Π(λ - z) / Π(λ - p)`` with zeros and poles interleaved, and an error bound
    ``(2 (n_z + n_p) + 2) 4u |G|`` (each subtraction, product and quotient contributes at
    most ``√2 γ_2 + u`` relative, Higham sections 3.1 and 3.6)."""
    lam = np.asarray(points, dtype=complex)
    if gain == 0.0:
        return np.zeros(lam.shape, dtype=complex), np.zeros(lam.shape)
    zs, ps = list(np.asarray(zeros, dtype=complex)), list(np.asarray(poles, dtype=complex))
    g = np.full(lam.shape, complex(gain))
    with np.errstate(all="ignore"):
        for k in range(max(len(zs), len(ps))):
            if k < len(zs):
                g = g * (lam - zs[k])
            if k < len(ps):
                g = g / (lam - ps[k])
    ops = 2 * (len(zs) + len(ps)) + 2
    err = ops * 4 * UNIT_ROUNDOFF * np.abs(g)
    bad = ~np.isfinite(g)
    err = np.where(bad, np.inf, err)
    g = np.where(bad, 0.0, g)
    return g, err


def _roots_scaled(den: FloatArray) -> list[complex]:
    """Roots of a polynomial via the companion matrix of the balanced variable."""
    a = np.asarray(den, dtype=float)
    nz = np.flatnonzero(a)
    if nz.size == 0 or a.size <= 1:
        return []
    a = a[nz[0]:]
    w0 = balancing_frequency(a)
    with np.errstate(all="ignore"):
        r = np.roots(scaled_coefficients(a, w0)) * w0
    return [complex(v) for v in r]


# ------------------------------------------------------------------ balls
def _ball_poly(flint: Any, coeffs: FloatArray, lam: Any) -> Any:
    y = flint.acb(0)
    for a in np.asarray(coeffs, dtype=float):
        y = y * lam + flint.acb(float(a))
    return y


def stored_transfer_ball(flint: Any, stored: Stored, lam: Any) -> Any:
    """G(λ) of the stored data as a ball matrix (python-flint ``acb_mat``)."""
    return stored.ball_at(flint, lam)


# ------------------------------------------------ rounding-level improper parts
def improper_excess(num: FloatArray, den: FloatArray) -> tuple[int, float]:
    """Number of numerator coefficients beyond the denominator degree and their largest
    size relative to the channel's largest numerator coefficient, both measured in the
    variable balanced by the denominator (:func:`balancing_frequency`)."""
    num = np.asarray(num, dtype=float)
    den = np.asarray(den, dtype=float)
    # written leading zeros are zero as written
    nz = np.flatnonzero(num)
    if nz.size == 0:
        return 0, 0.0
    num = num[nz[0]:]
    excess = num.size - den.size
    if excess <= 0:
        return 0, 0.0
    w0 = balancing_frequency(den)
    scaled = np.abs(scaled_coefficients(num, w0))
    # compare with the denominator's balanced size, too: a numerator that is rounding
    # residue everywhere is judged against the channel's scale
    ref = float(scaled.max())
    rel = float(scaled[:excess].max()) / ref if ref > 0 else 0.0
    rest = float(scaled[excess:].max()) if scaled.size > excess else 0.0
    if rest > 0:
        rel = float(scaled[:excess].max()) / rest
    return excess, rel


def improper_effect(stored: StoredTransferFunction, i: int, j: int, points: ComplexArray) -> float:
    """Largest ``|excess(λ) / den(λ)|`` over ``points`` for channel (i, j): the part of the
    stored numerator beyond the denominator degree, evaluated on the stored denominator."""
    num = np.asarray(stored.numerator[i][j], dtype=float)
    den = np.asarray(stored.denominator[i][j], dtype=float)
    excess, _ = improper_excess(num, den)
    if excess <= 0:
        return 0.0
    nz = np.flatnonzero(num)
    num = num[nz[0]:]
    part = num.copy()
    part[excess:] = 0.0
    vals, bound = rational_with_bound(part, den, np.asarray(points, dtype=complex))
    ok = np.isfinite(bound)
    return float(np.max(np.abs(vals[ok]) + bound[ok], initial=0.0))


def is_rounding_improper(num: FloatArray, den: FloatArray, rtol: float = IMPROPER_ROUNDING_RTOL) -> bool:
    excess, rel = improper_excess(num, den)
    return excess > 0 and rel <= rtol
