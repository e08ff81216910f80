"""Certified peak gain: the L-infinity (H-infinity when stable) norm of a transfer matrix.

Method
------
The two-step algorithm of N. A. Bruinsma and M. Steinbuch, "A fast algorithm to
compute the H-infinity norm of a transfer function matrix", Systems & Control
Letters 14 (1990) 287-293, built on the imaginary-axis eigenvalue test of S. Boyd,
V. Balakrishnan and P. Kabamba, "A bisection method for computing the H-infinity
norm of a transfer matrix and related problems", Mathematics of Control, Signals,
and Systems 2 (1989) 207-219:

for ``gamma > sigma_max(D)`` and ``A`` without imaginary-axis eigenvalues, ``gamma``
is a singular value of ``G(j omega)`` if and only if ``j omega`` is an eigenvalue of
the Hamiltonian matrix::

    H(gamma) = [[ A - B R^-1 D^T C,        -gamma B R^-1 B^T          ],
                [ gamma C^T S^-1 C,        -A^T + C^T D R^-1 B^T      ]]
    R = D^T D - gamma^2 I,   S = D D^T - gamma^2 I.

Step 1: a lower bound ``gamma_lb`` from the response on an adaptive grid that
contains every pole frequency.  Step 2: test ``gamma = (1 + 2 rtol) gamma_lb``; the
imaginary eigenvalues ``j omega_i`` of ``H(gamma)`` bracket the intervals where
``sigma_max > gamma``; the response at the candidates and at the midpoints of
consecutive candidates (and at DC) raises ``gamma_lb``; repeat.  When every test
point stays below ``gamma`` (by more than its rounding-error estimate, see
:meth:`audit.evidence.frequency.TransferEvaluator.error_bound`), ``gamma`` is a certified
upper bound: ``lower <= ||G|| <= upper`` with ``upper / lower <= 1 + 2 rtol``
(up to the evaluation error).

In the code: step 1 is :func:`_grid_lower_bound` (on :func:`_initial_frequencies`),
step 2 :func:`_level_set_iteration` (candidates :func:`_crossing_candidates`, test points
:func:`_test_frequencies`, then certification); :func:`_continuous_time_peak` and
:func:`_discrete_time_peak` wrap them for the two time domains, and boundary poles end the
search early (:func:`_infinite_at_boundary_pole`, :func:`_grid_bound_beside_hidden_modes`).
The Hamiltonian, its axis eigenvalues and the bilinear transform live in
:mod:`audit.evidence.level_crossings` (shared with :mod:`audit.evidence.band_peak`).

Eigenvalues are taken as imaginary with a loose relative threshold
(``imaginary_rtol``): spurious candidates only cost evaluations, because a genuine
crossing always shows ``sigma_max >= gamma`` at some test point.

Discrete time is mapped to continuous time by the bilinear (Cayley) transform
``z = (1 + s) / (1 - s)``, which maps the unit circle onto the imaginary axis
(``theta = 2 atan(nu)``) and keeps the peak value; when a pole sits closer to
``z = -1`` than to ``z = +1`` the model is first rotated by ``z -> -z`` (realization
``(-A, B, -C, D)``, frequencies shifted by ``pi``) so that ``I + A`` stays well
conditioned.  A pole on the stability boundary (numerically) gives an infinite norm.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.linalg
from numpy.typing import ArrayLike, NDArray

from audit.core.threads import wide_blas_threads
from audit.errors import InvalidModelError, NumericalTroubleError
from audit.evidence.frequency import TransferEvaluator
from audit.evidence.frequency_grid import adaptive_frequency_grid
from audit.evidence.level_crossings import (
    bilinear_to_continuous,
    hamiltonian_matrix,
    imaginary_axis_frequencies,
    sigma_max,
)
from audit.core.realization import Realization

FloatArray = NDArray[np.float64]
_EPS = float(np.finfo(float).eps)

__all__ = ["PeakGain", "peak_gain", "peak_gain_reference_slycot"]


def _json_float(x: float) -> float | str:
    if math.isnan(x):
        return "nan"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return float(x)


@dataclass(frozen=True)
class PeakGain:
    """The peak gain ``sup_omega sigma_max(G(j omega))`` with a certified bracket.

    Attributes
    ----------
    value : float
        The best attained value (a computed ``sigma_max`` at ``frequency``), or
        ``inf`` when a pole lies on the stability boundary.
    frequency : float
        Where the peak is attained, in rad/s (``inf`` when the peak is the
        high-frequency limit ``sigma_max(D)`` in continuous time).
    lower, upper : float
        Bracket ``lower <= ||G|| <= upper``; ``lower`` is ``value`` minus its
        rounding-error estimate, ``upper`` the last ``gamma`` that passed the
        eigenvalue test.
    iterations : int
        Number of Hamiltonian eigenvalue tests.
    certified : bool
        False when the eigenvalue test was numerically ambiguous or could not be used
        (``note`` says why).
    method : str
        Which route produced the result.
    note : str
        Explanation when not certified, or remarks.
    """

    value: float
    frequency: float
    lower: float
    upper: float
    iterations: int
    certified: bool
    method: str
    note: str = ""

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-friendly dictionary; infinite values are the string ``"inf"``."""
        return {
            "value": _json_float(self.value),
            "frequency": _json_float(self.frequency),
            "lower": _json_float(self.lower),
            "upper": _json_float(self.upper),
            "iterations": int(self.iterations),
            "certified": bool(self.certified),
            "method": self.method,
            "note": self.note,
        }


# ----------------------------------------------------------------------- helpers
POLISH_MIN_ORDER = 30
"""From this order the grid maxima are polished before the first eigenvalue test."""


def _polish_peaks(evaluator: TransferEvaluator, omegas: FloatArray, values: FloatArray,
                  *, peaks: int = 3, rounds: int = 8, points: int = 17) -> tuple[float, float]:
    """Refine the largest local maxima of ``values`` on the grid by zooming in.

    Each of the ``peaks`` largest local maxima is bracketed by its grid neighbours and
    the bracket is shrunk ``rounds`` times around the best of ``points`` evaluations
    (all brackets in one batched evaluation per round).  A lower bound close to the
    peak lets the first eigenvalue test at ``(1 + 2 rtol)`` times it certify, where a
    coarse grid value needs several Hamiltonian tests (each an O(n^3) eigenvalue
    problem of twice the order); the search itself stays as certified as before
    (common practice, no source).
    """
    order = np.argsort(omegas)
    w, s = omegas[order], values[order]
    k = w.size
    if k < 3:
        return float("nan"), -math.inf
    local = [i for i in range(k) if np.isfinite(s[i]) and (i == 0 or s[i] >= s[i - 1])
             and (i == k - 1 or s[i] >= s[i + 1])]
    local = sorted(local, key=lambda i: -s[i])[:peaks]
    brackets = []
    for i in local:
        lo = w[i - 1] if i > 0 else w[i]
        hi = w[i + 1] if i < k - 1 else 2.0 * w[i] + 1.0
        brackets.append([float(lo), float(hi)])
    best_w, best_s = float("nan"), -math.inf
    for _ in range(rounds):
        grids = [np.linspace(lo, hi, points) for lo, hi in brackets]
        pts = np.concatenate(grids)
        g, _ = evaluator.values_and_errors(1j * pts, errors=False)
        sv = sigma_max(g).reshape(len(brackets), points)
        sv = np.where(np.isfinite(sv), sv, -np.inf)
        for b, (grid, row) in enumerate(zip(grids, sv)):
            j = int(np.argmax(row))
            if row[j] > best_s:
                best_s, best_w = float(row[j]), float(grid[j])
            brackets[b] = [float(grid[max(j - 1, 0)]), float(grid[min(j + 1, points - 1)])]
    return best_w, best_s


@dataclass(frozen=True)
class _CoreResult:
    lower_value: float
    omega: float  # in the (possibly transformed) continuous frequency
    upper: float
    iterations: int
    certified: bool
    note: str


# ------------------------------------------- the Bruinsma-Steinbuch steps (continuous)
def _grid_lower_bound(sys: Realization, evaluator: TransferEvaluator,
                      initial: FloatArray) -> tuple[float, float]:
    """Step 1: ``(gamma_lb, omega_lb)``, the largest ``sigma_max`` on the initial grid.

    Polished around the grid's largest maxima from :data:`POLISH_MIN_ORDER` on; the
    high-frequency limit ``sigma_max(D)`` (at ``omega = inf``) counts as a grid point.
    """
    d = sys.d
    sigma_d = float(np.linalg.norm(d, 2)) if d.size else 0.0
    g0, _ = evaluator.values_and_errors(1j * initial, errors=False)
    s0 = sigma_max(g0)
    s0 = np.where(np.isfinite(s0), s0, -np.inf)
    best = int(np.argmax(s0))
    gamma_lb, omega_lb = float(s0[best]), float(initial[best])
    if sys.order >= POLISH_MIN_ORDER:
        w_p, s_p = _polish_peaks(evaluator, np.asarray(initial, dtype=float), s0)
        if s_p > gamma_lb:
            gamma_lb, omega_lb = s_p, w_p
    if sigma_d >= gamma_lb:
        gamma_lb, omega_lb = sigma_d, math.inf
    return gamma_lb, omega_lb


def _proven_above(evaluator: TransferEvaluator, gamma_lb: float, omega_lb: float,
                  stop_above: float) -> _CoreResult | None:
    """Early exit: the lower bound minus its error estimate already exceeds ``stop_above``.

    Then the norm exceeds it, and no eigenvalue test is needed to say so.
    """
    if math.isfinite(omega_lb):
        _, err_lb = evaluator.values_and_errors(np.array([1j * omega_lb]))
        proven = gamma_lb - float(err_lb[0])
    else:
        proven = gamma_lb * (1 - 4 * _EPS)
    if proven > stop_above:
        return _CoreResult(gamma_lb, omega_lb, math.inf, 0, False,
                           f"stopped before the eigenvalue tests: a point already exceeds "
                           f"stop_above={stop_above:.6g} (lower bound {proven:.6g})")
    return None


def _crossing_candidates(sys: Realization, gamma: float,
                         imaginary_rtol: float) -> tuple[FloatArray | None, str]:
    """Step 2a: the imaginary eigenvalues ``j omega_i`` of ``H(gamma)``, as ``omega_i``.

    Returns ``(candidates, "")``, or ``(None, reason)`` when the eigenvalue test failed.
    """
    try:
        ham = hamiltonian_matrix(sys.a, sys.b, sys.c, sys.d, gamma)
        with wide_blas_threads(ham.shape[0]):
            eigs = scipy.linalg.eigvals(ham, check_finite=False, overwrite_a=True)
    except (np.linalg.LinAlgError, ValueError, scipy.linalg.LinAlgError) as exc:
        return None, f"Hamiltonian eigenvalue test failed at gamma={gamma:.6g}: {exc}"
    if not np.all(np.isfinite(eigs)):
        return None, f"Hamiltonian at gamma={gamma:.6g} has non-finite eigenvalues"
    return imaginary_axis_frequencies(eigs, imaginary_rtol), ""


def _test_frequencies(candidates: FloatArray) -> FloatArray:
    """Step 2b: DC, the candidates and the midpoints of consecutive candidates."""
    pts = np.concatenate([[0.0], candidates])
    mids = 0.5 * (pts[1:] + pts[:-1])
    return np.unique(np.concatenate([pts, mids]))


def _level_set_iteration(sys: Realization, evaluator: TransferEvaluator, gamma_lb: float,
                         omega_lb: float, *, rtol: float, imaginary_rtol: float,
                         max_iterations: int) -> _CoreResult:
    """Step 2: test ``gamma = (1 + 2 rtol) gamma_lb`` until no test point reaches it.

    A test point at or above ``gamma`` is a genuine crossing: ``gamma_lb`` rises (by at
    least ``2 rtol``) and the test repeats.  When every test point stays below ``gamma``
    by more than its rounding-error estimate, ``gamma`` is a certified upper bound; when
    the estimate straddles ``gamma``, the bracket is widened to cover it.
    """
    note = ""
    iterations = 0
    gamma = (1.0 + 2.0 * rtol) * gamma_lb
    while True:
        if iterations >= max_iterations:
            return _CoreResult(gamma_lb, omega_lb, math.inf, iterations, False,
                               f"no convergence within max_iterations={max_iterations}")
        if sys.order == 0:
            return _CoreResult(gamma_lb, omega_lb, gamma, iterations, True, note)
        iterations += 1
        cand, failure = _crossing_candidates(sys, gamma, imaginary_rtol)
        if cand is None:
            return _CoreResult(gamma_lb, omega_lb, math.inf, iterations, False, failure)
        if cand.size == 0:
            return _CoreResult(gamma_lb, omega_lb, gamma, iterations, True, note)
        test = _test_frequencies(cand)
        g, err = evaluator.values_and_errors(1j * test)
        sv = sigma_max(g)
        ok = np.isfinite(sv) & np.isfinite(err)
        if not np.any(ok):
            return _CoreResult(gamma_lb, omega_lb, math.inf, iterations, False,
                               "the response could not be evaluated at the candidate "
                               "frequencies")
        sv_ok = np.where(ok, sv, -np.inf)
        j = int(np.argmax(sv_ok))
        if sv_ok[j] > gamma_lb:
            gamma_lb, omega_lb = float(sv_ok[j]), float(test[j])
        if sv_ok[j] >= gamma:
            # a genuine crossing: the lower bound rose by at least 2 rtol
            gamma = (1.0 + 2.0 * rtol) * gamma_lb
            continue
        # Step 2c, certification. Every test point is below gamma: the candidates were
        # spurious or crossings of smaller singular values, so sigma_max < gamma
        # everywhere -- provided the evaluation errors cannot lift a test point to gamma.
        reach = np.where(ok, sv + err, np.inf)
        k = int(np.argmax(reach))
        if reach[k] < gamma:
            return _CoreResult(gamma_lb, omega_lb, gamma, iterations, True, note)
        if not math.isfinite(float(reach[k])):
            return _CoreResult(gamma_lb, omega_lb, math.inf, iterations, False,
                               "the error estimate of the response is not finite near the "
                               "peak")
        # Ambiguous at this width: widen the bracket so that it covers the
        # rounding-error estimate, and test again.
        note = (
            f"bracket widened beyond 1 + 2 rtol to cover the rounding-error estimate "
            f"of the response ({err[k]:.3g} at omega={test[k]:.6g})"
        )
        gamma = (1.0 + 2.0 * rtol) * float(reach[k])


def _continuous_peak(
    sys: Realization,
    initial: FloatArray,
    *,
    rtol: float,
    imaginary_rtol: float,
    max_iterations: int,
    stop_above: float | None = None,
) -> _CoreResult:
    """Bruinsma-Steinbuch iteration on a continuous-time system without axis poles."""
    evaluator = TransferEvaluator(sys)
    gamma_lb, omega_lb = _grid_lower_bound(sys, evaluator, initial)
    if stop_above is not None and gamma_lb > stop_above:
        early = _proven_above(evaluator, gamma_lb, omega_lb, stop_above)
        if early is not None:
            return early
    if not gamma_lb > 0:
        if sys.order == 0 or not np.any(sys.b) or not np.any(sys.c):
            return _CoreResult(0.0, 0.0, 0.0, 0, True, "the transfer matrix is zero")
        gamma_lb = float(np.finfo(float).tiny)
    return _level_set_iteration(sys, evaluator, gamma_lb, omega_lb, rtol=rtol,
                                imaginary_rtol=imaginary_rtol, max_iterations=max_iterations)


def _boundary_poles(
    r: Realization, boundary_rtol: float
) -> tuple[list[complex], list[complex]]:
    """Poles on the stability boundary, split into (visible, hidden) by PBH tests."""
    if r.order == 0:
        return [], []
    poles = r.poles()
    a_norm = float(np.linalg.norm(r.a))
    if r.sample_period is None:
        dist = np.abs(poles.real)
        thr = boundary_rtol * a_norm
    else:
        dist = np.abs(np.abs(poles) - 1.0)
        thr = boundary_rtol * max(1.0, a_norm)
    on = poles[dist <= thr]
    visible: list[complex] = []
    hidden: list[complex] = []
    n = r.order
    scale = max(a_norm, float(np.linalg.norm(r.b)), float(np.linalg.norm(r.c)), 1e-300)
    for lam in on:
        shifted = lam * np.eye(n) - r.a
        input_coupling = np.linalg.svd(np.hstack([shifted, r.b]), compute_uv=False)[-1]
        output_coupling = np.linalg.svd(np.vstack([shifted, r.c]), compute_uv=False)[-1]
        # Popov-Belevitch-Hautus test with a relative threshold (common practice).
        if min(input_coupling, output_coupling) <= 1e-8 * scale:
            hidden.append(complex(lam))
        else:
            visible.append(complex(lam))
    return visible, hidden


def _pole_frequency(lam: complex, period: float | None) -> float:
    if period is None:
        return abs(lam.imag)
    return abs(float(np.angle(lam))) / period


def _validate_options(rtol: float, imaginary_rtol: float, boundary_rtol: float,
                      max_iterations: int) -> None:
    if not (1e-15 <= rtol < 1):
        raise InvalidModelError(f"rtol={rtol!r}: expected 1e-15 <= rtol < 1", field="rtol")
    if not (0 < imaginary_rtol < 1):
        raise InvalidModelError(
            f"imaginary_rtol={imaginary_rtol!r}: expected 0 < imaginary_rtol < 1",
            field="imaginary_rtol",
        )
    if not (0 <= boundary_rtol < 1):
        raise InvalidModelError(
            f"boundary_rtol={boundary_rtol!r}: expected 0 <= boundary_rtol < 1",
            field="boundary_rtol",
        )
    if max_iterations < 1:
        raise InvalidModelError(
            f"max_iterations={max_iterations!r}: expected an integer >= 1",
            field="max_iterations",
        )


def peak_gain(
    r: Realization,
    *,
    rtol: float = 1e-10,
    grid: ArrayLike | None = None,
    imaginary_rtol: float = 1e-6,
    boundary_rtol: float = 1e-12,
    max_iterations: int = 60,
    stop_above: float | None = None,
) -> PeakGain:
    """The L-infinity norm ``sup_omega sigma_max(G)`` over the stability boundary.

    Continuous time: the imaginary axis; discrete time: the unit circle.  Equals the
    H-infinity norm when ``G`` is stable; unstable ``G`` without boundary poles have a
    finite L-infinity norm too.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    rtol : float, keyword-only
        Relative width of the certified bracket: ``upper <= (1 + 2 rtol) lower``
        (plus the evaluation error).  ``1e-15 <= rtol < 1``.
    grid : (k,) array_like or None, keyword-only
        Frequencies [rad/s] for the initial lower bound; the pole frequencies are
        always added.  ``None``: :func:`audit.evidence.frequency_grid.adaptive_frequency_grid` with
        5 points per decade and 3 refinement points per lightly damped mode.
    imaginary_rtol : float, keyword-only
        An eigenvalue ``lam`` of the Hamiltonian is a candidate axis crossing when
        ``|Re lam| <= imaginary_rtol * max(|lam|, sqrt(eps) max|eig(H)|)``.  Loose on
        purpose: a spurious candidate only costs an evaluation.
    boundary_rtol : float, keyword-only
        A pole is on the boundary when ``|Re lam| <= boundary_rtol ||A||_F``
        (continuous) or ``||lam| - 1| <= boundary_rtol max(1, ||A||_F)`` (discrete).
    max_iterations : int, keyword-only
        Cap on the number of eigenvalue tests.
    stop_above : float or None, keyword-only
        When a grid point (polished) already proves ``||G|| > stop_above`` (its value
        minus its rounding-error estimate exceeds it), return at once without any
        eigenvalue test: ``lower`` is that proven bound, ``upper`` is ``inf`` and
        ``certified`` is False (only the lower bound is established).  For callers that
        only need to know that the norm exceeds a tolerance (a clearly different pair):
        it saves the O(n^3) Hamiltonian tests.  ``None`` (default): always certify.

    Returns
    -------
    PeakGain

    Raises
    ------
    InvalidModelError
        If an option is out of range or ``grid`` is not a finite 1-D sequence.
    NumericalTroubleError
        If the bilinear transform (discrete time) meets a singular ``I +/- A``.

    Examples
    --------
    >>> from audit.core.realization import Realization
    >>> r = Realization.from_arrays([[-1.0]], [[1.0]], [[2.0]], [[0.0]])
    >>> result = peak_gain(r)
    >>> round(result.value, 12), result.certified
    (2.0, True)
    """
    _validate_options(rtol, imaginary_rtol, boundary_rtol, max_iterations)
    omegas = _initial_frequencies(r, grid)
    if r.order == 0:
        return _static_gain(r)
    visible, hidden = _boundary_poles(r, boundary_rtol)
    if visible:
        return _infinite_at_boundary_pole(r, visible[0], omegas)
    if hidden:
        return _grid_bound_beside_hidden_modes(r, hidden, omegas)
    options = dict(rtol=rtol, imaginary_rtol=imaginary_rtol, max_iterations=max_iterations,
                   stop_above=stop_above)
    if r.sample_period is None:
        return _continuous_time_peak(r, omegas, **options)
    return _discrete_time_peak(r, omegas, **options)


# ------------------------------------------------------------- the steps of peak_gain
def _initial_frequencies(r: Realization, grid: ArrayLike | None) -> FloatArray:
    """The frequencies [rad/s] of step 1: the given grid (or a light adaptive one) plus
    DC and every pole frequency, up to Nyquist in discrete time."""
    if grid is None:
        # a light grid: the eigenvalue iteration does the rest
        omegas = adaptive_frequency_grid([r], points_per_decade=5, refine_points=3)
    else:
        try:
            omegas = np.abs(np.atleast_1d(np.asarray(grid, dtype=float)))
        except (TypeError, ValueError):
            raise InvalidModelError(
                "grid: expected a 1-D sequence of frequencies in rad/s", field="grid"
            ) from None
        if omegas.ndim != 1 or not np.all(np.isfinite(omegas)):
            raise InvalidModelError(
                "grid: expected a finite 1-D sequence of frequencies in rad/s", field="grid"
            )
        poles_w = adaptive_frequency_grid([r], points_per_decade=1, refine_points=0)
        omegas = np.unique(np.concatenate([[0.0], omegas, poles_w]))
    if r.sample_period is not None:
        omegas = omegas[omegas <= math.pi / r.sample_period]
    return omegas


def _static_gain(r: Realization) -> PeakGain:
    """Order 0: the peak gain is ``sigma_max(D)``."""
    value = float(np.linalg.norm(r.d, 2)) if r.d.size else 0.0
    err = _EPS * value
    return PeakGain(value, 0.0, max(value - err, 0.0), value + err, 0, True,
                    "static gain (order 0): sigma_max(D)")


def _boundary_response(r: Realization, omegas: FloatArray) -> tuple[NDArray[np.complex128], FloatArray]:
    """The response (values and error estimates) at ``omegas`` on the stability boundary."""
    period = r.sample_period
    pts = 1j * omegas if period is None else np.exp(1j * omegas * period)
    return TransferEvaluator(r).values_and_errors(pts)


def _infinite_at_boundary_pole(r: Realization, lam: complex, omegas: FloatArray) -> PeakGain:
    """A controllable and observable pole on the boundary: the norm is infinite."""
    period = r.sample_period
    # a finite lower bound from the grid, avoiding the pole itself
    g, _ = _boundary_response(r, omegas)
    sv = sigma_max(g)
    sv = sv[np.isfinite(sv)]
    lower = float(np.max(sv)) if sv.size else 0.0
    a_scale = float(np.linalg.norm(r.a))
    dist = abs(lam.real) if period is None else abs(abs(lam) - 1.0)
    exact = dist <= 100 * _EPS * max(a_scale, 1.0 if period is not None else 0.0)
    where = "imaginary axis" if period is None else "unit circle"
    return PeakGain(
        math.inf, _pole_frequency(lam, period), math.inf if exact else lower,
        math.inf, 0, bool(exact), "boundary pole",
        f"pole {lam:.6g} is on the {where} (distance {dist:.3g}) and is controllable "
        "and observable: the norm is infinite"
        + ("" if exact else "; the pole is only numerically on the boundary"),
    )


def _grid_bound_beside_hidden_modes(r: Realization, hidden: list[complex],
                                    omegas: FloatArray) -> PeakGain:
    """Hidden modes on the boundary: the Hamiltonian test does not apply; a grid value
    (away from the hidden frequencies) is a lower bound only."""
    period = r.sample_period
    hidden_w = np.array([_pole_frequency(h, period) for h in hidden])
    keep = np.min(np.abs(omegas[:, None] - hidden_w[None, :]), axis=1) > 1e-6 * (
        1.0 + np.abs(omegas))
    g, err = _boundary_response(r, omegas[keep])
    sv = sigma_max(g)
    fin = np.isfinite(sv)
    j = int(np.argmax(np.where(fin, sv, -np.inf)))
    value = float(sv[j]) if np.any(fin) else 0.0
    return PeakGain(
        value, float(omegas[keep][j]) if np.any(fin) else 0.0, value - float(err[j]),
        math.inf, 0, False, "grid only (hidden boundary mode)",
        "uncontrollable or unobservable mode(s) on the stability boundary at "
        + ", ".join(f"{h:.6g}" for h in hidden)
        + ": the Hamiltonian test cannot be used; remove hidden modes first "
        "(minimal realization). The value is a grid lower bound only.",
    )


def _continuous_time_peak(r: Realization, omegas: FloatArray, **options: Any) -> PeakGain:
    """Steps 1-2 on the imaginary axis; the value is re-evaluated with its error estimate."""
    core = _continuous_peak(r, omegas, **options)
    omega = core.omega
    ev = TransferEvaluator(r)
    value, lower = core.lower_value, core.lower_value
    if math.isfinite(omega):
        g, err = ev.values_and_errors(np.array([1j * omega]))
        value = float(sigma_max(g)[0])
        lower = value - float(err[0])
    else:
        lower = value * (1 - 4 * _EPS)
    return PeakGain(value, omega, max(lower, 0.0), core.upper, core.iterations,
                    core.certified, "Hamiltonian (Bruinsma-Steinbuch 1990)", core.note)


def _discrete_time_peak(r: Realization, omegas: FloatArray, *, rtol: float,
                        **options: Any) -> PeakGain:
    """Steps 1-2 after the bilinear transform ``z = flip (1 + s) / (1 - s)``; the peak is
    mapped back to the unit circle and re-evaluated on the original model, whose value
    must agree with the transformed model's (else not certified)."""
    period = r.sample_period
    assert period is not None
    mats, flip, _ = bilinear_to_continuous(r, "bilinear transform of the discrete model failed")
    cont = Realization.from_arrays(*mats)
    theta = omegas * period - (math.pi if flip < 0 else 0.0)
    theta = theta[np.abs(theta) < math.pi * (1 - 1e-12)]
    nu = np.unique(np.abs(np.tan(theta / 2.0)))
    core = _continuous_peak(cont, nu, rtol=rtol, **options)
    theta_peak = 2.0 * math.atan(core.omega) if math.isfinite(core.omega) else math.pi
    if flip < 0:
        theta_peak += math.pi
    theta_peak = abs(math.remainder(theta_peak, 2.0 * math.pi))
    omega = theta_peak / period
    g, err = TransferEvaluator(r).values_and_errors(np.array([np.exp(1j * theta_peak)]))
    value = float(sigma_max(g)[0])
    lower = value - float(err[0])
    certified, note = core.certified, core.note
    if abs(value - core.lower_value) > 1e3 * rtol * max(value, core.lower_value):
        certified = False
        note = (note + "; " if note else "") + (
            f"the bilinear-transformed model gives {core.lower_value:.17g} but the "
            f"original model gives {value:.17g} at the peak (I + A ill-conditioned?)"
        )
    upper = max(core.upper, value)
    return PeakGain(value, omega, max(lower, 0.0), upper, core.iterations, certified,
                    "Hamiltonian after bilinear transform (Bruinsma-Steinbuch 1990)", note)


def peak_gain_reference_slycot(r: Realization, *, tol: float = 1e-10) -> PeakGain:
    """The peak gain computed by SLICOT AB13DD (through slycot), for cross-checks.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    tol : float, keyword-only
        Relative accuracy requested from AB13DD.

    Returns
    -------
    PeakGain
        ``lower`` and ``upper`` are AB13DD's own claim ``value * (1 -/+ tol)``;
        ``certified`` is False (no check of our own was made).

    Raises
    ------
    NumericalTroubleError
        If slycot is unavailable or AB13DD fails.
    """
    try:
        import slycot
    except ImportError as exc:  # pragma: no cover
        raise NumericalTroubleError(f"slycot is not available: {exc}") from exc
    n, m, p = r.order, r.n_inputs, r.n_outputs
    dico = "C" if r.sample_period is None else "D"
    if n == 0:
        value = float(np.linalg.norm(r.d, 2)) if r.d.size else 0.0
        return PeakGain(value, 0.0, value, value, 0, False, "SLICOT AB13DD (order 0)")
    try:
        gpeak, fpeak = slycot.ab13dd(dico, "I", "N", "D", n, m, p, np.array(r.a),
                                     np.eye(n), np.array(r.b), np.array(r.c),
                                     np.array(r.d), tol)
    except Exception as exc:  # slycot raises several types; translate them all
        raise NumericalTroubleError(f"SLICOT AB13DD failed: {exc}") from exc
    gpeak, fpeak = float(gpeak), float(fpeak)
    freq = fpeak if r.sample_period is None else fpeak / r.sample_period
    return PeakGain(gpeak, freq, gpeak * (1 - tol), gpeak * (1 + tol), 0, False,
                    "SLICOT AB13DD", "reference value; bracket is AB13DD's own claim")
