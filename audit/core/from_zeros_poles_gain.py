"""Zeros-poles-gain -> minimal state space.

Each SISO channel is a cascade (series connection) of real first- and second-order
sections, complex pole pairs in the normal rotation form ``[[sigma, omega], [-omega,
sigma]]``; polynomials of high degree are never expanded.  MIMO channels are stacked and
reduced by the orthogonal staircase (:func:`audit.core.conversion_common._minimal_part`).
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy.optimize import linear_sum_assignment

from audit.errors import InvalidModelError
from audit.core.conversion_common import (
    DEFAULT_CONJUGATE_RTOL, DEFAULT_RANK_RTOL, ComplexArray, FloatArray, _block_diagonal,
    _check_sample_period, _grid_shape, _minimal_part,
)
from audit.core.realization import Realization


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


def _common_layout(zeros: Any, poles: Any, gain: Any) -> tuple[int, int]:
    """Step 1: the (p, m) layout shared by zeros, poles and gain (all three checked)."""
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
    return p, m


def _channel_factors(
    zeros: Any, poles: Any, gain: Any, ch: str, conjugate_rtol: float
) -> tuple[FloatArray, ComplexArray, FloatArray, ComplexArray, float] | None:
    """Step 2, one channel ``ch`` ("[i][j]"): checked zeros, poles and gain, split into
    real values and conjugate pairs -- ``(zeros_real, zero_pairs, poles_real, pole_pairs,
    gain)`` as :func:`_siso_cascade` takes them, or None for a vanishing channel (gain 0)."""
    z = _complex_list(zeros, f"zeros_poles_gain.zeros{ch}")
    pl = _complex_list(poles, f"zeros_poles_gain.poles{ch}")
    if isinstance(gain, bool) or not isinstance(gain, numbers.Real):
        raise InvalidModelError(
            f"zeros_poles_gain.gain{ch}: got {gain!r} but expected a real number",
            field=f"zeros_poles_gain.gain{ch}",
        )
    k = float(gain)
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
        return None
    return zr, zp, pr, pp, k


def _stacked_channels(
    cascades: list[tuple[int, int, _Section]], p: int, m: int
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Step 3: the channel cascades side by side -- A block diagonal, the cascade of
    channel ``[i][j]`` driven by input j and read by output i."""
    a_blocks = [section[0] for _, _, section in cascades]
    n = sum(blk.shape[0] for blk in a_blocks)
    a = _block_diagonal(a_blocks, n, n)
    b = np.zeros((n, m))
    c = np.zeros((p, n))
    offset = 0
    for i, j, (blk, b_s, c_s, _) in cascades:
        size = blk.shape[0]
        b[offset:offset + size, j] = b_s[:, 0]
        c[i, offset:offset + size] = c_s[0, :]
        offset += size
    return a, b, c


def _stored_factors(zeros: Any, poles: Any, gain: Any, p: int, m: int,
                    period: float | None) -> Any:
    """Last step: the factors as stored, carried by the realization (`Realization.stored`)."""
    from audit.core.stored_evaluation import StoredZerosPolesGain

    return StoredZerosPolesGain(
        zeros=tuple(tuple(_complex_list(zeros[i][j], "zeros") for j in range(m)) for i in range(p)),
        poles_=tuple(tuple(_complex_list(poles[i][j], "poles") for j in range(m)) for i in range(p)),
        gain=np.array([[float(gain[i][j]) for j in range(m)] for i in range(p)]),
        sample_period=period,
    )


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
    p, m = _common_layout(zeros, poles, gain)
    cascades: list[tuple[int, int, _Section]] = []
    d = np.zeros((p, m))
    for i in range(p):
        for j in range(m):
            factors = _channel_factors(zeros[i][j], poles[i][j], gain[i][j], f"[{i}][{j}]",
                                       conjugate_rtol)
            if factors is None:
                continue  # vanishing channel: nothing to realize
            a_s, b_s, c_s, d_s = _siso_cascade(*factors)
            d[i, j] = d_s
            if a_s.shape[0]:
                cascades.append((i, j, (a_s, b_s, c_s, d_s)))
    a, b, c = _stacked_channels(cascades, p, m)
    a, b, c = _minimal_part(a, b, c, rank_rtol=rank_rtol)
    stored = _stored_factors(zeros, poles, gain, p, m, period)
    return Realization.from_arrays(a, b, c, d, period).with_stored(stored)


__all__ = [
    "realization_from_zeros_poles_gain",
]
