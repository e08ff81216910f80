"""Peak gain over a band of frequencies, certified by level crossings.

Method
------
The level-crossing test of S. Boyd, V. Balakrishnan and P. Kabamba ("A bisection method
for computing the H-infinity norm of a transfer matrix and related problems",
Mathematics of Control, Signals, and Systems 2 (1989) 207-219): for ``gamma`` that is not
a singular value of ``D``, ``gamma`` is a singular value of ``G(j omega)`` exactly when
``j omega`` is an eigenvalue of the Hamiltonian matrix ``H(gamma)`` (built by
:func:`audit.evidence.level_crossings.hamiltonian_matrix`). So the imaginary eigenvalues of ``H(gamma)`` are the
only frequencies where ``sigma_max(G) - gamma`` can change sign.

Restricted to a band ``[low, high]``: the band is cut at the crossings that fall inside
it; on each piece ``sigma_max(G) - gamma`` has one sign, so one evaluation at an interior
point (the midpoint) tells whether ``sigma_max(G)`` exceeds ``gamma`` anywhere on it. The
iteration is that of N. A. Bruinsma and M. Steinbuch ("A fast algorithm to compute the
H-infinity norm of a transfer function matrix", Systems & Control Letters 14 (1990)
287-293), on the band only: start from the largest value on a grid inside the band and
at its ends, test ``gamma = (1 + 2 rtol) * lower``, raise ``lower`` to the largest
midpoint value while some piece exceeds ``gamma``; when no piece does, ``gamma`` is an
upper bound of the peak over the band (up to the rounding error of the evaluations,
which is checked the same way as in :mod:`audit.evidence.peak_gain`).

Discrete time is mapped to continuous time by the bilinear (Cayley) transform exactly
as in :func:`audit.evidence.peak_gain.peak_gain`; crossings are mapped back to rad/s and every
evaluation is made on the discrete model itself, ``G(exp(j omega T))``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.linalg
from numpy.typing import ArrayLike, NDArray

from audit.errors import InvalidModelError, NumericalTroubleError
from audit.evidence.contour import frequency_to_point
from audit.evidence.frequency import TransferEvaluator
from audit.evidence.level_crossings import (
    bilinear_to_continuous,
    hamiltonian_matrix,
    imaginary_axis_frequencies,
    sigma_max,
)
from audit.core.realization import Realization

FloatArray = NDArray[np.float64]
_EPS = float(np.finfo(float).eps)

__all__ = ["BandPeak", "band_limited_peak", "check_band"]


@dataclass(frozen=True)
class BandPeak:
    """Peak of ``sigma_max(G)`` over a band.

    Attributes
    ----------
    value : float
        Largest value found (a lower bound of the peak over the band).
    frequency : float
        rad/s where it was found (``inf`` for the high-frequency limit).
    upper : float
        Certified upper bound over the band (``inf`` when not certified).
    certified : bool
    iterations : int
        Hamiltonian eigenvalue tests made.
    band : (float, float)
        The band searched, rad/s.
    method : str
    note : str
    """

    value: float
    frequency: float
    upper: float
    certified: bool
    iterations: int
    band: tuple[float, float]
    method: str
    note: str = ""

    def as_dict(self) -> dict[str, Any]:
        def num(x: float) -> float | str:
            return x if math.isfinite(x) else ("inf" if x > 0 else "nan" if math.isnan(x) else "-inf")

        return {"value": num(self.value), "frequency_rad_s": num(self.frequency),
                "upper": num(self.upper), "certified": self.certified,
                "iterations": self.iterations, "band_rad_s": [num(self.band[0]), num(self.band[1])],
                "method": self.method, "note": self.note}


def check_band(band: ArrayLike, *, sample_period: float | None = None, field: str = "band") -> tuple[float, float]:
    """Validate a band ``(low, high)`` in rad/s; ``high`` is clipped to Nyquist.

    Raises
    ------
    InvalidModelError
        Not two numbers, negative, NaN, or ``low >= high``; for a discrete model a band
        that starts at or above the Nyquist frequency.
    """
    try:
        lo, hi = (float(x) for x in band)  # type: ignore[union-attr]
    except (TypeError, ValueError):
        raise InvalidModelError(f"{field}: got {band!r} but two frequencies LOW HIGH in rad/s "
                                "were expected", field=field) from None
    if math.isnan(lo) or math.isnan(hi) or lo < 0 or not lo < hi or math.isinf(lo):
        raise InvalidModelError(f"{field}: got [{lo!r}, {hi!r}] but 0 <= LOW < HIGH (rad/s) was "
                                "expected", field=field)
    if sample_period is not None:
        nyquist = math.pi / sample_period
        if lo >= nyquist:
            raise InvalidModelError(
                f"{field}: starts at {lo:g} rad/s, at or above the Nyquist frequency "
                f"{nyquist:g} rad/s of the discrete models", field=field)
        hi = min(hi, nyquist)
    return lo, hi


class _Crossings:
    """Frequencies (rad/s) where some singular value of G equals gamma."""

    def __init__(self, r: Realization):
        self.period = r.sample_period
        self.flip = 1.0
        if r.sample_period is None:
            self.mats = (r.a, r.b, r.c, r.d)
            return
        # bilinear map z = flip (1 + s) / (1 - s), as in audit.evidence.peak_gain.peak_gain
        self.mats, self.flip, c_finite = bilinear_to_continuous(r, "bilinear transform failed")
        if not c_finite:
            raise NumericalTroubleError("bilinear transform failed: I + A is singular")

    def at(self, gamma: float, imaginary_rtol: float) -> FloatArray:
        a, b, c, d = self.mats
        ham = hamiltonian_matrix(a, b, c, d, gamma)
        eigs = scipy.linalg.eigvals(ham, check_finite=False, overwrite_a=True)
        if not np.all(np.isfinite(eigs)):
            raise NumericalTroubleError(f"the Hamiltonian at gamma={gamma:.6g} has non-finite eigenvalues")
        nu = imaginary_axis_frequencies(eigs, imaginary_rtol)
        if self.period is None:
            return nu
        theta = 2.0 * np.arctan(nu) + (math.pi if self.flip < 0 else 0.0)
        theta = np.abs(np.remainder(theta + math.pi, 2.0 * math.pi) - math.pi)
        return np.unique(theta / self.period)

    def at_or_nudged(self, gamma: float, imaginary_rtol: float) -> tuple[FloatArray, float]:
        """The crossings at ``gamma``, or at ``gamma (1 + 1e-9)`` when the test fails at
        ``gamma`` (it may be a singular value of ``D``, where the test does not apply).

        Returns ``(crossings, gamma used)``; raises :class:`_CrossingTestFailed` (with
        the first failure as its cause and the nudged gamma) when both fail."""
        try:
            return self.at(gamma, imaginary_rtol), gamma
        except _TEST_FAILURES as exc:
            try:
                gamma *= 1.0 + 1e-9
                return self.at(gamma, imaginary_rtol), gamma
            except _TEST_FAILURES:
                raise _CrossingTestFailed(gamma) from exc


_TEST_FAILURES = (NumericalTroubleError, np.linalg.LinAlgError, ValueError,
                  scipy.linalg.LinAlgError)


class _CrossingTestFailed(Exception):
    """Internal signal: the level-crossing test failed at ``gamma`` and its nudge."""

    def __init__(self, gamma: float) -> None:
        super().__init__(gamma)
        self.gamma = gamma


class _BandResponse:
    """``sigma_max(G)`` and its error estimate at frequencies of the band; ``omega = inf``
    is the high-frequency limit ``sigma_max(D)``."""

    def __init__(self, r: Realization) -> None:
        self.r = r
        self.evaluator = TransferEvaluator(r)
        self.sigma_d = float(np.linalg.norm(r.d, 2)) if r.d.size else 0.0

    def measure(self, omega: FloatArray, errors: bool = True) -> tuple[FloatArray, FloatArray]:
        finite = np.isfinite(omega)
        vals = np.full(omega.shape, self.sigma_d)
        errs = np.full(omega.shape, 4 * _EPS * self.sigma_d)
        if np.any(finite):
            g, e = self.evaluator.values_and_errors(frequency_to_point(omega[finite], self.r),
                                                    errors=errors)
            vals[finite] = sigma_max(g)
            errs[finite] = e
        return vals, errs


def _start_frequencies(lo: float, hi: float, grid: ArrayLike | None) -> FloatArray:
    """The band's ends and the grid points strictly inside the band."""
    start = [lo, hi]
    if grid is not None:
        w = np.asarray(grid, dtype=float).ravel()
        start += [float(x) for x in w[(w > lo) & (w < hi) & np.isfinite(w)]]
    return np.unique(np.array(start))


def _piece_test_points(cut: FloatArray, lo: float, hi: float) -> FloatArray:
    """The band cut at the crossings inside it: one interior point per piece, plus the
    band's ends.

    The crossings themselves are not needed (``sigma_max = gamma`` there at most); the
    band's ends raise the lower bound.  An unbounded last piece is represented by
    ``2 * last + 1``.
    """
    inside = cut[(cut > lo) & (cut < hi)]
    ends = np.unique(np.concatenate([[lo], inside, [hi]]))
    if math.isinf(hi):
        finite_ends = ends[np.isfinite(ends)]
        last = float(finite_ends[-1])
        mids = 0.5 * (ends[:-2] + ends[1:-1]) if ends.size > 2 else np.zeros(0)
        mids = np.append(mids, 2.0 * last + 1.0)  # a point of the last, unbounded piece
    else:
        mids = 0.5 * (ends[:-1] + ends[1:])
    return np.unique(np.concatenate([[lo, hi], mids]))


_METHOD = ("level crossings of the Hamiltonian intersected with the band "
           "(Boyd-Balakrishnan-Kabamba 1989; Bruinsma-Steinbuch 1990 iteration)")


def band_limited_peak(
    r: Realization,
    band: tuple[float, float],
    *,
    grid: ArrayLike | None = None,
    floor: float = 0.0,
    rtol: float = 1e-9,
    imaginary_rtol: float = 1e-6,
    max_iterations: int = 60,
) -> BandPeak:
    """``sup sigma_max(G)`` over ``omega`` in ``band``, with a certified upper bound.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``; no pole on the
        imaginary axis / unit circle (compare on a shifted contour first).
    band : (low, high)
        rad/s, ``0 <= low < high``; ``high`` may be ``inf`` in continuous time and is
        clipped to the Nyquist frequency in discrete time (see :func:`check_band`).
    grid : (k,) array_like or None, keyword-only
        Frequencies for the first lower bound (those outside the band are ignored).
    floor : float, keyword-only
        The first level tested is at least ``floor``: a peak below it is certified as
        "below ``floor``" without resolving it further (use the decision threshold's
        small fraction when only that matters).
    rtol : float, keyword-only
        Relative width of the bracket ``upper <= (1 + 2 rtol) value`` (above ``floor``).
    imaginary_rtol : float, keyword-only
        Eigenvalues with ``|Re| <= imaginary_rtol * |lam|`` count as crossings (loose on
        purpose: a spurious one only costs an evaluation).
    max_iterations : int, keyword-only

    Returns
    -------
    BandPeak

    Raises
    ------
    InvalidModelError
        Bad band.

    Examples
    --------
    >>> r = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    >>> p = band_limited_peak(r, (2.0, 5.0))   # 1 / |j w + 1| is largest at w = 2
    >>> round(p.value, 12), p.frequency, p.certified
    (0.4472135955, 2.0, True)
    """
    lo, hi = check_band(band, sample_period=r.sample_period)
    response = _BandResponse(r)
    # step 1: a lower bound from the band's ends and the grid inside it
    test = _start_frequencies(lo, hi, grid)
    vals, _ = response.measure(test, errors=False)  # a lower bound only (as in audit.evidence.peak_gain)
    ok = np.isfinite(vals)
    if not np.any(ok):
        return BandPeak(math.nan, math.nan, math.inf, False, 0, (lo, hi), "grid",
                        "the response could not be evaluated in the band")
    k = int(np.argmax(np.where(ok, vals, -np.inf)))
    lower, at = float(vals[k]), float(test[k])
    if r.order == 0:
        return BandPeak(lower, at, lower * (1 + 4 * _EPS), True, 0, (lo, hi), "static gain")
    try:
        crossings = _Crossings(r)
    except NumericalTroubleError as exc:
        return BandPeak(lower, at, math.inf, False, 0, (lo, hi), "grid only",
                        f"level crossings not available: {exc}")
    return _band_level_set_iteration(response, crossings, lower, at, (lo, hi), floor=floor,
                                     rtol=rtol, imaginary_rtol=imaginary_rtol,
                                     max_iterations=max_iterations)


def _band_level_set_iteration(response: _BandResponse, crossings: _Crossings, lower: float,
                              at: float, band: tuple[float, float], *, floor: float,
                              rtol: float, imaginary_rtol: float,
                              max_iterations: int) -> BandPeak:
    """Step 2: test ``gamma`` (at least ``floor``); the band is cut at the crossings and
    one point per piece raises ``lower`` until no piece reaches ``gamma`` (then ``gamma``
    is certified, widened when the error estimate straddles it)."""
    lo, hi = band
    gamma = max((1.0 + 2.0 * rtol) * lower, floor, float(np.finfo(float).tiny))
    iterations = 0
    note = ""
    while iterations < max_iterations:
        iterations += 1
        try:
            cut, gamma = crossings.at_or_nudged(gamma, imaginary_rtol)
        except _CrossingTestFailed as failed:
            return BandPeak(lower, at, math.inf, False, iterations, (lo, hi), "grid only",
                            f"level-crossing test failed at gamma={failed.gamma:.6g}: "
                            f"{failed.__cause__}")
        test = _piece_test_points(cut, lo, hi)
        vals, errs = response.measure(test)
        ok = np.isfinite(vals) & np.isfinite(errs)
        if not np.any(ok):
            return BandPeak(lower, at, math.inf, False, iterations, (lo, hi), "grid only",
                            "the response could not be evaluated at the band's test points")
        v = np.where(ok, vals, -np.inf)
        j = int(np.argmax(v))
        if v[j] > lower:
            lower, at = float(v[j]), float(test[j])
        if v[j] >= gamma:
            gamma = max((1.0 + 2.0 * rtol) * lower, floor)
            continue
        reach = np.where(ok, vals + errs, np.inf)
        k = int(np.argmax(reach))
        if reach[k] < gamma:
            return BandPeak(lower, at, gamma, True, iterations, (lo, hi), _METHOD, note)
        # ambiguous at this width: widen the bracket to cover the evaluation error
        note = (f"bracket widened to cover the evaluation error ({errs[k]:.3g} at "
                f"{test[k]:.6g} rad/s)")
        gamma = (1.0 + 2.0 * rtol) * float(reach[k])
    return BandPeak(lower, at, math.inf, False, iterations, (lo, hi), _METHOD,
                    f"no convergence within max_iterations={max_iterations}")
