"""Checks of discretization claims: is a discrete model the claimed discretization of a
continuous one, and was a discrete model's sample period read wrongly?

``check_discretization_claim`` re-discretizes a continuous model with the claimed method
(:func:`audit.dynamics.discretization.discretize`) and compares the frequency responses
on the unit circle up to the Nyquist frequency (plus the poles). ``detect_sample_period_mismatch``
finds the ratio by which one discrete model's sample period must be re-read to agree with
another's (poles map as ``z2 = z1^(T2/T1)``; confirmed after undoing a zero-order hold
with the matrix logarithm).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any, Literal

import numpy as np
import scipy.linalg
from scipy.optimize import linear_sum_assignment

from audit.dynamics.discretization import (
    ComplexArray, FloatArray, _finite_or_raise, _require_realization, discretize, transfer_values,
)
from audit.dynamics.discretization_methods import METHODS, DiscretizationMethod
from audit.errors import IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization


# ------------------------------------------------------------------ comparison helpers
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


def _check_tolerance(value: Any, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InvalidModelError(f"{name}: got {value!r} but a number > 0 was expected", field=name) from None
    if not math.isfinite(v) or v <= 0.0:
        raise InvalidModelError(f"{name}: got {v!r} but a finite number > 0 was expected", field=name)
    return v


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
    continuous, discrete = _checked_claim_models(continuous, discrete)
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
    alternatives, best = _alternative_methods(continuous, discrete, method, prewarp_frequency,
                                              period, omegas, rtol, prtol)
    why = f"relative peak difference {rel:.3g} > rtol={rtol:g}" if rel > rtol else (
        f"poles differ by {pole_diff:.3g} > pole_rtol={prtol:g}"
    )
    return DiscretizationClaimCheck(
        method, prewarp_frequency, period, rtol, prtol, rel, w_worst, pole_diff,
        omegas.size, "fails", tuple(alternatives), None if best is None else best.method,
        _failed_claim_message(label, why, best),
    )


def _checked_claim_models(continuous: Any, discrete: Any) -> tuple[Realization, Realization]:
    """Step 1 of a claim check: a continuous and a discrete model with the same inputs
    and outputs."""
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
    return continuous, discrete


def _alternative_methods(
    continuous: Realization, discrete: Realization, method: str, prewarp_frequency: float | None,
    period: float, omegas: FloatArray, rtol: float, prtol: float,
) -> tuple[list[MethodMatch], MethodMatch | None]:
    """Step 3, when the claim fails: every other method (and bilinear without the claimed
    prewarp), then -- when none matches -- the bilinear map with a prewarp found by search;
    returns all tried and the best that matches (None when none does)."""
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
    return alternatives, best


def _failed_claim_message(label: str, why: str, best: MethodMatch | None) -> str:
    """Step 4: one sentence -- which method (or prewarp) the matrices match instead, if any."""
    if best is not None and best.prewarp_frequency is not None:
        return (
            f"the matrices match the {best.method} discretization with prewarp frequency "
            f"{best.prewarp_frequency:.6g} rad/s, not {label} ({why}; with that prewarp the "
            f"relative peak difference is {best.relative_peak_difference:.3g})"
        )
    if best is not None:
        return (
            f"the matrices look like a {best.method} discretization, not {label} ({why}; "
            f"{best.method} matches with relative peak difference "
            f"{best.relative_peak_difference:.3g})"
        )
    return f"the discrete model is not the {label} discretization ({why}); no other method matches either"


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
    d1, d2 = _checked_discrete_pair(d1, d2)
    rtol = _check_tolerance(rtol, "rtol")
    prtol = math.sqrt(rtol) if pole_rtol is None else _check_tolerance(pole_rtol, "pole_rtol")
    t1 = float(d1.sample_period)  # type: ignore[arg-type]
    t2 = float(d2.sample_period)  # type: ignore[arg-type]
    labelled = t2 / t1

    result = functools.partial(_period_check, labelled, t1, rtol)
    obstacle = _why_no_period_can_be_read(d1, d2)
    if obstacle is not None:
        return result("undetermined", obstacle)
    l1, l2 = np.log(d1.poles()), np.log(d2.poles())
    s1, s2 = float(np.sum(np.abs(l1))), float(np.sum(np.abs(l2)))
    if s1 == 0.0 or s2 == 0.0:
        return result("undetermined", "all poles at z = 1 (pure integrators): no time scale to compare")
    ratio = s2 / s1
    res = _pole_map_residual(l1, l2, ratio)
    if res > prtol:
        return result(
            "unrelated",
            f"poles do not map as z2 = z1^r for any single r (residual {res:.3g} > pole_rtol={prtol:g})",
            None, res,
        )
    try:
        resp = _recovered_response_difference(d1, d2, t1, ratio, n_frequencies)
    except NumericalTroubleError as exc:
        return result("undetermined", f"could not undo the zero-order hold: {exc}", ratio, res)
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


def _checked_discrete_pair(d1: Any, d2: Any) -> tuple[Realization, Realization]:
    """Step 1 of the period check: two discrete-time models with the same inputs and outputs."""
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
    return d1, d2


def _why_no_period_can_be_read(d1: Realization, d2: Realization) -> str | None:
    """Step 2: why the two models' poles cannot give a period ratio (orders differ, no
    dynamics, or a pole at z = 0 or on the negative real axis, which has no real
    continuous-time logarithm); None when they can."""
    if d1.order != d2.order:
        return f"orders differ ({d1.order} vs {d2.order}); compare minimal realizations first"
    if d1.order == 0:
        return "static gains have no dynamics, so no period can be read from them"
    for z in (d1.poles(), d2.poles()):
        on_neg_axis = (np.abs(z.imag) <= 1e-12 * np.maximum(1.0, np.abs(z))) & (z.real <= 0.0)
        if np.any(np.abs(z) <= 1e-12) or np.any(on_neg_axis):
            return ("a pole lies at z = 0 or on the negative real axis: it has no real "
                    "continuous-time logarithm, so no period ratio can be read")
    return None


def _pole_map_residual(l1: ComplexArray, l2: ComplexArray, ratio: float) -> float:
    """Step 3: ``max |log z2 - ratio log z1|`` over optimally paired poles, relative to the
    largest ``|log z|``."""
    cost = np.abs(l2[:, None] - ratio * l1[None, :])
    rows, cols = linear_sum_assignment(cost)
    scale = max(float(np.max(np.abs(l1))) * ratio, float(np.max(np.abs(l2))))
    return float(np.max(cost[rows, cols])) / scale


def _recovered_response_difference(d1: Realization, d2: Realization, t1: float, ratio: float,
                                   n_frequencies: int) -> float:
    """Step 4: relative peak difference of the continuous frequency responses after undoing
    the zero-order hold of ``d1`` at ``T1`` and of ``d2`` at ``ratio * T1`` (a log grid
    around the recovered poles, plus their magnitudes)."""
    c1 = _undo_zero_order_hold(d1, t1)
    c2 = _undo_zero_order_hold(d2, ratio * t1)
    lam = np.abs(np.concatenate([c1.poles(), c2.poles()]))
    lam = lam[lam > 0]
    lo, hi = (0.01 * float(lam.min()), 100.0 * float(lam.max())) if lam.size else (0.1 / t1, 10.0 / t1)
    omegas = np.unique(np.concatenate([np.logspace(math.log10(lo), math.log10(hi), n_frequencies), lam]))
    resp, _, _, _ = _relative_peak(transfer_values(c1, 1j * omegas), transfer_values(c2, 1j * omegas))
    return resp


def _period_check(labelled: float, t1: float, rtol: float, outcome: str, note: str,
                  ratio: float | None = None, res: float | None = None,
                  resp: float | None = None) -> SamplePeriodCheck:
    """The result record: the ratio (with its simple fraction, denominator <= 16, when it
    is one within ``rtol``) and the implied period only for a consistent or mismatched
    period."""
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

__all__ = [
    "DiscretizationClaimCheck",
    "MethodMatch",
    "SamplePeriodCheck",
    "check_discretization_claim",
    "detect_sample_period_mismatch",
]
