"""Verdict: combine the evidence for a pair of models and explain it.

``equivalent``
    the decisive evidence (relative peak gain of ``G1 - G2`` over all frequencies,
    with its numerical error) lies within the tolerance;
``different``
    it lies beyond the tolerance by more than its numerical error;
``inconclusive``
    the estimated numerical error straddles the tolerance, even after re-evaluation
    in extended precision within the time budget.

Sets of more than two models are compared pairwise against the first.
"""

from __future__ import annotations

import itertools
import math
import time
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from audit.errors import AuditError, NumericalTroubleError
from audit.evidence.contour import Contour, choose_contour, frequency_to_point
from audit.evidence.record import (
    DEFAULT_RTOL,
    EPS,
    Evidence,
    fmt_complex,
    is_unstable_mode,
    minimal_order_evidence,
    skipped,
)
from audit.core.realization import Realization, check_comparable, difference_system

Verdict = Literal["equivalent", "different", "inconclusive"]

ESCALATION_SECONDS = 20.0
"""Time budget for the extended-precision re-evaluation of one pair (documented in the
README; the report says when it was used and whether it completed)."""

SIMILARITY_MAX_ORDER = 200
"""Above this order the state-coordinate similarity evidence is skipped (cost O(n^3)
with large constants); it explains but never decides the verdict."""


DIFFERENCE_ORDER_LIMIT = 120
"""Above this order of G1 - G2 the (explanatory) staircase of the difference system is
skipped: its cost grows like n^3 with many SVD stages (0.3 s at order 200, 3.5 s at
order 400), and it only explains the verdict."""


@dataclass(frozen=True)
class Options:
    """Tolerances and budgets of an audit (all documented, all overridable).

    Attributes
    ----------
    rtol : float
        Relative tolerance on the peak gain of ``G1 - G2``, relative to the larger peak
        gain of the two models over all frequencies.
    atol : float
        Absolute tolerance on the same difference, in the models' gain units (output
        units per input unit); 0: none. A difference is within tolerance when it is
        within the larger of ``rtol x reference peak gain`` and ``atol``.
    band : (low, high) or None
        Band of interest in rad/s: only the peak of the difference inside it decides;
        the peak over all frequencies is still reported.
    channel_rtol : tuple of (output, input, rtol)
        Per-channel relative tolerances (0-based indices; see
        :func:`audit.evidence.tolerances.resolve_channel_tolerances`). When given, the decision
        is made channel by channel on ``|G1[i, j] - G2[i, j]|``; channels not listed
        keep ``rtol``.
    escalate, escalation_seconds, rank_tol
        Extended-precision re-evaluation and its budget; staircase rank tolerance.
    """

    rtol: float = DEFAULT_RTOL
    escalate: bool = True
    escalation_seconds: float = ESCALATION_SECONDS
    rank_tol: float | None = None
    atol: float = 0.0
    band: tuple[float, float] | None = None
    channel_rtol: tuple[tuple[int, int, float], ...] = ()

    def __post_init__(self) -> None:
        from audit.errors import InvalidModelError

        if not (math.isfinite(self.atol) and self.atol >= 0.0):
            raise InvalidModelError(f"atol: got {self.atol!r} but a finite number >= 0 was expected",
                                    field="atol")
        for entry in self.channel_rtol:
            i, j, v = entry
            if int(i) < 0 or int(j) < 0 or not (0.0 < float(v) < 1.0):
                raise InvalidModelError(f"channel_rtol: got {entry!r} but (output >= 0, input >= 0, "
                                        "0 < rtol < 1) was expected", field="channel_rtol")

    @property
    def states_more_than_rtol(self) -> bool:
        """True when an absolute tolerance, a band or channel tolerances are stated."""
        return self.atol > 0.0 or self.band is not None or bool(self.channel_rtol)

    def stated(self) -> dict[str, Any]:
        """The tolerances as stated, for reports."""
        return {"rtol": self.rtol, "atol": self.atol,
                "band_rad_s": None if self.band is None else [float(x) for x in self.band],
                "channel_rtol": [{"output": i, "input": j, "rtol": v} for i, j, v in self.channel_rtol]}


@dataclass(frozen=True)
class PairComparison:
    """The verdict for one pair (reference, other) with its evidence and diagnosis."""

    reference: str
    other: str
    verdict: Verdict
    explanation: str
    evidence: tuple[Evidence, ...]
    diagnosis: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    seconds: float = 0.0

    def as_dict(self) -> dict[str, Any]:
        from audit.evidence.record import to_jsonable

        return {
            "reference": self.reference,
            "other": self.other,
            "verdict": self.verdict,
            "explanation": self.explanation,
            "evidence": [e.as_dict() for e in self.evidence],
            "diagnosis": to_jsonable(self.diagnosis),
            "warnings": list(self.warnings),
            "seconds": round(self.seconds, 6),
        }


# ---------------------------------------------------------------------- grid data
@dataclass
class _Shared:
    """Computations shared by several pieces of evidence for one pair."""

    r1: Realization
    r2: Realization
    contour: Contour
    s1: Realization  # on the comparison contour
    s2: Realization
    grid: NDArray[np.float64]
    g1: NDArray[np.complex128]  # (k, p, m)
    g2: NDArray[np.complex128]
    err1: NDArray[np.float64]  # (k,) absolute error estimates
    err2: NDArray[np.float64]
    peak1: Any
    peak2: Any
    scale: float
    min1: Any
    min2: Any
    transform: Any = None  # T between the two realizations, when recovered
    # absolute construction error of each realization against its stored data (sup over
    # the grid; 0 for state space, whose matrices are the stored data)
    construction1: float = 0.0
    construction2: float = 0.0


def _sigma_max(g: NDArray[np.complex128]) -> NDArray[np.float64]:
    if g.shape[1] == 1 or g.shape[2] == 1:
        return np.sqrt(np.sum(np.abs(g) ** 2, axis=(1, 2)))
    return np.linalg.norm(g, ord=2, axis=(1, 2))


def _shared(r1: Realization, r2: Realization, min1: Any, min2: Any) -> _Shared:
    from audit.evidence.frequency import TransferEvaluator
    from audit.evidence.frequency_grid import adaptive_frequency_grid
    from audit.evidence.peak_gain import peak_gain
    from audit.structure.zeros import transmission_zeros

    contour = choose_contour([r1, r2])
    s1, s2 = contour.apply(r1), contour.apply(r2)
    extra: list[float] = []
    for mr in (min1, min2):
        try:
            z = transmission_zeros(mr.realization)
        except NumericalTroubleError:
            z = np.zeros(0)
        extra.extend(_pole_frequencies(np.asarray(z), r1.sample_period))
    for r in (r1, r2):  # the poles of the stored data, too (a converted copy may miss some)
        if r.stored is not None:
            extra.extend(_pole_frequencies(_finite(r.stored.poles()), r1.sample_period))
    grid = adaptive_frequency_grid([s1, s2, r1, r2], extra=tuple(extra))
    g1, err1, c1 = _evaluate_stored(r1, s1, contour, grid)
    g2, err2, c2 = _evaluate_stored(r2, s2, contour, grid)
    peak1 = peak_gain(s1)
    peak2 = peak_gain(s2)
    grid_peak = float(max(_sigma_max(g1).max(initial=0.0), _sigma_max(g2).max(initial=0.0)))
    scale = max(_peak_as_stored(r1, s1, contour, peak1), _peak_as_stored(r2, s2, contour, peak2),
                grid_peak)
    return _Shared(r1, r2, contour, s1, s2, grid, g1, g2, err1, err2, peak1, peak2, scale, min1, min2,
                   construction1=c1, construction2=c2)


def _finite(points: NDArray[np.complexfloating]) -> NDArray[np.complex128]:
    pts = np.asarray(points, dtype=complex)
    return pts[np.isfinite(pts)]


def contour_points(contour: Contour, omega: NDArray[np.float64], sample_period: float | None
                   ) -> NDArray[np.complex128]:
    """The points λ of the (possibly shifted) comparison contour at frequencies ω:
    ``σ + jω`` in continuous time, ``ρ exp(jωT)`` in discrete time."""
    w = np.asarray(omega, dtype=float)
    if sample_period is None:
        return (contour.shift if contour.shifted else 0.0) + 1j * w
    z = np.exp(1j * w * sample_period)
    return z * contour.shift if contour.shifted else z


def _evaluate_stored(r: Realization, s: Realization, contour: Contour, omega: NDArray[np.float64]
                     ) -> tuple[NDArray[np.complex128], NDArray[np.float64], float]:
    """G on the contour from the STORED representation, with its error, and the measured
    construction error of the realization (0 for state space).

    State space: the matrices are the stored data; evaluated by
    :func:`evaluate_with_error_estimate`. Transfer function / zero-pole-gain: the stored
    coefficients or factors, with a rounding-error bound
    (:mod:`audit.core.stored_evaluation`); the realization is evaluated as well and the largest
    discrepancy is its construction error (reported, and carried into the decisive
    error estimate where the realization located the peak).
    """
    pts = frequency_to_point(omega, s)
    realized, err = evaluate_with_error_estimate(s, pts)
    if r.stored is None:
        return realized, err, 0.0
    values, bound = r.stored.evaluate(contour_points(contour, omega, r.sample_period))
    ok = np.isfinite(bound) & np.isfinite(err)
    gap = _sigma_max(realized - values)
    construction = float(np.max(gap[ok] - bound[ok] - err[ok], initial=0.0))
    return values, bound, max(construction, 0.0)


def _peak_as_stored(r: Realization, s: Realization, contour: Contour, peak: Any) -> float:
    """The peak gain located on the realization, re-measured from the stored data."""
    value = _gain_or_zero(peak.value)
    if r.stored is None:
        return value
    f = float(getattr(peak, "frequency", np.nan))
    if not np.isfinite(f) or f < 0:  # the high-frequency limit: the feedthrough
        return float(np.linalg.norm(r.d, 2)) if r.d.size else 0.0
    vals, bound = r.stored.evaluate(contour_points(contour, np.array([f]), r.sample_period))
    return float(_sigma_max(vals)[0]) if np.isfinite(bound[0]) else 0.0


ESTIMATE_SAFETY = 10.0
"""Safety factor on the a-posteriori rounding-error estimate (see
:func:`evaluate_with_error_estimate`)."""


def evaluate_with_error_estimate(
    r: Realization, points: NDArray[np.complex128]
) -> tuple[NDArray[np.complex128], NDArray[np.float64]]:
    """Evaluate G at ``points`` with an a-posteriori estimate of the rounding error.

    G is evaluated twice, by two routes whose rounding errors are independent: the
    Hessenberg reduction of ``A`` (``C (λI - A)^-1 B``) and of the dual system
    ``A^T`` (``(B^T (λI - A^T)^-1 C^T)^T``). Their discrepancy, times
    :data:`ESTIMATE_SAFETY`, plus a few ulps of ``|G|``, estimates the error of either.
    This is an estimate, not a bound: the verdict never relies on it alone near the
    tolerance, because a straddling estimate triggers the extended-precision
    re-evaluation. (The first-order worst-case bound of
    :meth:`audit.evidence.frequency.TransferEvaluator.error_bound` is rigorous to first order
    but often many orders of magnitude pessimistic; the report quotes it at the
    deciding frequencies only.)

    Returns
    -------
    values : (k, p, m) complex
    estimate : (k,) float
        Estimated absolute error of σ_max(values) per point.
    """
    from audit.evidence.frequency import TransferEvaluator

    primal = TransferEvaluator(r)
    values = primal.at(points)
    dual_model = Realization.from_arrays(r.a.T, r.c.T, r.b.T, r.d.T, r.sample_period)
    dual = TransferEvaluator(dual_model).at(points).transpose(0, 2, 1)
    discrepancy = _sigma_max(values - dual)
    estimate = ESTIMATE_SAFETY * discrepancy + 8 * EPS * _sigma_max(values)
    return values, estimate


UNDERFLOW_GAIN = 1e-290
"""Peak gains below this are the underflow floor of the norm computation, i.e. zero
(an identically zero transfer matrix realized with hidden modes)."""


def _gain_or_zero(value: Any) -> float:
    v = float(value)
    return 0.0 if v <= UNDERFLOW_GAIN else v


def _as_point_errors(bound: Any) -> NDArray[np.float64]:
    arr = np.asarray(bound, dtype=float)
    if arr.ndim == 1:
        return arr
    return arr.reshape(arr.shape[0], -1).max(axis=1)


def _pole_frequencies(points: NDArray[np.complexfloating], sample_period: float | None) -> list[float]:
    pts = np.asarray(points, dtype=complex)
    pts = pts[np.isfinite(pts)]
    if sample_period is None:
        w = np.abs(pts)
    else:
        nz = pts[np.abs(pts) > 0]
        w = np.abs(np.log(nz)) / sample_period
        w = np.minimum(w, np.pi / sample_period)
    return [float(x) for x in w if x > 0 and np.isfinite(x)]


# ----------------------------------------------------------------- decisive check
def _difference_peak(sh: _Shared, opts: Options) -> Evidence:
    from audit.evidence.peak_gain import peak_gain

    start = time.perf_counter()
    rtol = opts.rtol
    e = difference_system(sh.s1, sh.s2)
    peak_e = peak_gain(e)
    # The Hamiltonian search LOCATES the peak of G1 - G2; its value is then measured
    # like every grid point, from G1 and G2 separately with an error estimate, so that no
    # decisive number comes without one (the norm routine's own evaluation of the
    # order n1 + n2 difference system can be far less accurate near cancelling modes).
    freqs = np.asarray(sh.grid, dtype=float)
    diffs = _sigma_max(sh.g1 - sh.g2)
    errs = sh.err1 + sh.err2
    pf = float(peak_e.frequency)
    stored = sh.r1.stored is not None or sh.r2.stored is not None
    extra = [pf] if np.isfinite(pf) and pf >= 0.0 else []
    if stored:
        # the search ran on converted copies: also refine around the largest local maxima
        # of the difference of the STORED models on the grid
        extra += _refinement_frequencies(freqs, diffs)
    if extra:
        try:
            ex = np.array(extra)
            g1p, e1p, _ = _evaluate_stored(sh.r1, sh.s1, sh.contour, ex)
            g2p, e2p, _ = _evaluate_stored(sh.r2, sh.s2, sh.contour, ex)
            freqs = np.append(freqs, ex)
            diffs = np.append(diffs, _sigma_max(g1p - g2p))
            errs = np.append(errs, e1p + e2p)
        except NumericalTroubleError:
            pass  # the located point is numerically a pole; the grid still stands
    elif not np.isfinite(pf) and not sh.r1.is_discrete:
        # peak at the high-frequency limit: the difference of the feedthroughs
        hf = float(np.linalg.norm(sh.r1.d - sh.r2.d, 2)) if sh.r1.d.size else 0.0
        freqs = np.append(freqs, np.inf)
        diffs = np.append(diffs, hf)
        errs = np.append(errs, 4 * EPS * max(float(np.linalg.norm(sh.r1.d, 2)), float(np.linalg.norm(sh.r2.d, 2)), 0.0))
    scale = sh.scale
    worst_idx = int(np.argmax(diffs)) if diffs.size else 0
    value_abs = float(diffs[worst_idx]) if diffs.size else 0.0
    peak_freq = float(freqs[worst_idx]) if diffs.size else 0.0
    err_abs = float(errs.max(initial=0.0))
    details: dict[str, Any] = {
        "contour": sh.contour.describe(),
        "peak_frequency_rad_s": peak_freq,
        "difference_peak_gain": value_abs,
        "reference_peak_gain": scale,
        "peak_gain_of_each_model": [float(sh.peak1.value), float(sh.peak2.value)],
        "peak_search": {
            "method": getattr(peak_e, "method", ""),
            "certified": bool(getattr(peak_e, "certified", False)),
            "lower": float(getattr(peak_e, "lower", np.nan)),
            "upper": float(getattr(peak_e, "upper", np.nan)),
            "note": getattr(peak_e, "note", ""),
            "value_from_search": _gain_or_zero(peak_e.value),
            "frequency_from_search": pf,
        },
        "grid_points": int(sh.grid.size),
        "points_evaluated": int(freqs.size),
        "evaluated_from": [_source(sh.r1), _source(sh.r2)],
        "construction_error_of_realizations": [sh.construction1, sh.construction2],
        "estimated_rounding_error": err_abs,
        "error_estimate_method": _error_method(sh),
        "first_order_error_bound_at_peak": _first_order_bound(sh, peak_freq),
    }
    if scale <= 0.0:
        rel = 0.0 if value_abs <= 0.0 else float("inf")
        rel_err = 0.0 if err_abs <= 0.0 else float("inf")
    else:
        rel, rel_err = value_abs / scale, err_abs / scale
    # The peak was located on realizations; where one is a converted copy, its measured
    # construction error c bounds how far the located peak can be from the peak of the
    # stored models (sup|D_stored| <= sup|D_realized| + c1 + c2 <= D_stored(ω*) + 2(c1 + c2)).
    # It may only keep a difference from being declared absent, never create one.
    construction = sh.construction1 + sh.construction2
    rel_search = 0.0 if construction <= 0.0 else (
        2.0 * construction / scale if scale > 0 else float("inf"))
    details["relative_rounding_error"] = rel_err
    details["relative_search_allowance"] = rel_search
    precision = "double"
    if rel + rel_err + rel_search <= rtol:
        outcome = "pass"
        summary = (
            f"the difference G1 - G2 stays below {rel:.2e} of the peak gain at every "
            f"frequency (tolerance {rtol:.1e})"
        ) if scale > 0 else "both transfer matrices are identically zero"
    elif rel - rel_err > rtol:
        outcome = "fail"
        summary = (
            f"the difference G1 - G2 reaches {rel:.3g} of the peak gain at "
            f"{peak_freq:.4g} rad/s (tolerance {rtol:.1e})"
        )
    else:
        outcome = "unclear"
        summary = (
            f"the double-precision estimate {rel:.2e} has an estimated rounding error of "
            f"{rel_err:.1e}, which straddles the tolerance {rtol:.1e}"
        )
    if outcome == "unclear" and opts.escalate:
        outcome, summary, precision, esc = _escalate(sh, opts, freqs, diffs, errs, peak_freq, scale,
                                                     rel_search)
        details["extended_precision"] = esc
        if "relative_difference" in esc:
            rel = float(esc["relative_difference"])
    return Evidence(
        key="difference_peak_gain",
        title="Peak gain of the difference G1 - G2",
        metric="sup over frequency of sigma_max(G1 - G2), relative to the larger peak gain "
        "of the two models",
        value=rel,
        tolerance=rtol,
        outcome=outcome,  # type: ignore[arg-type]
        decisive=True,
        precision=precision,
        seconds=time.perf_counter() - start,
        summary=summary,
        details=details,
    )


def _source(r: Realization) -> str:
    return "state-space matrices as stored" if r.stored is None else r.stored.describe()


def _error_method(sh: _Shared) -> str:
    parts = []
    if sh.r1.stored is None or sh.r2.stored is None:
        parts.append("state space: discrepancy of primal and dual Hessenberg evaluations "
                     f"x {ESTIMATE_SAFETY:g}")
    if sh.r1.stored is not None or sh.r2.stored is not None:
        parts.append("transfer function / zero-pole-gain: a-priori rounding bound of Horner's "
                     "rule or of the factor product on the stored data (Higham, Accuracy and "
                     "Stability of Numerical Algorithms, 2nd ed., section 5.1); the peak search "
                     "on the realization is backed by its measured construction error")
    return "; ".join(parts)


REFINE_MAXIMA = 4
"""Local maxima of the stored difference on the grid that are refined (each by
:data:`REFINE_POINTS` points between its neighbours) when a model is evaluated from stored
coefficients or factors."""
REFINE_POINTS = 16


def _refinement_frequencies(freqs: NDArray[np.float64], diffs: NDArray[np.float64]) -> list[float]:
    order = np.argsort(freqs)
    f, d = freqs[order], diffs[order]
    finite = np.isfinite(f) & np.isfinite(d)
    f, d = f[finite], d[finite]
    if f.size < 3:
        return []
    is_max = np.r_[d[0] >= d[1], (d[1:-1] >= d[:-2]) & (d[1:-1] >= d[2:]), d[-1] >= d[-2]]
    idx = np.flatnonzero(is_max)
    idx = idx[np.argsort(-d[idx])][:REFINE_MAXIMA]
    out: list[float] = []
    for k in idx:
        lo, hi = f[max(k - 1, 0)], f[min(k + 1, f.size - 1)]
        if lo > 0 and hi > lo:
            out.extend(np.geomspace(lo, hi, REFINE_POINTS + 2)[1:-1].tolist())
        elif hi > lo:
            out.extend(np.linspace(lo, hi, REFINE_POINTS + 2)[1:-1].tolist())
    return out


# ------------------------------------------------- tolerances a team can state
def _channel_system(r: Realization, i: int | None, j: int | None) -> Realization:
    """The (i, j) channel of ``r`` (the whole model when i is None)."""
    if i is None or j is None:
        return r
    return Realization.from_arrays(r.a, r.b[:, [j]], r.c[[i], :], r.d[[i]][:, [j]], r.sample_period,
                                   name=r.name)


def _decide_with_stated_tolerances(sh: _Shared, opts: Options) -> Evidence:
    """The decisive evidence under an absolute tolerance, a band and channel tolerances.

    Rule (stated in the report): the peak over the band of interest (all frequencies
    when none) of ``sigma_max(G1 - G2)`` -- of ``|G1[i, j] - G2[i, j]|`` for each channel
    when channel tolerances are stated -- must be within the larger of
    ``rtol x reference peak gain`` (the channel's own rtol when stated) and ``atol``.
    The in-band peak is located by level crossings intersected with the band
    (:func:`audit.evidence.band_peak.band_limited_peak`), then measured like every grid point,
    from G1 and G2 separately with a rounding-error estimate, and re-evaluated in ball
    arithmetic where that estimate straddles the allowance.
    """
    from dataclasses import replace

    from audit.evidence.band_peak import check_band

    start = time.perf_counter()
    scale = sh.scale
    period = sh.r1.sample_period
    band = check_band(opts.band, sample_period=period) if opts.band is not None else None
    if band is None and not opts.channel_rtol:
        # absolute tolerance only: the whole-axis rule with the allowance as a relative one
        allowed = max(opts.rtol * scale, opts.atol)
        eff = allowed / scale if scale > 0 else float("inf")
        ev = _difference_peak(sh, replace(opts, rtol=eff))
        rule = _rule_text(opts, scale, allowed)
        details = {**ev.details, "stated_tolerances": opts.stated(), "rule": rule,
                   "allowed_difference": allowed}
        return Evidence(**{**ev.__dict__, "tolerance": eff, "details": details,
                           "summary": f"{ev.summary}; {rule}",
                           "seconds": time.perf_counter() - start})
    whole = _difference_peak(sh, replace(opts, escalate=False))  # reported, decides nothing
    if opts.channel_rtol:
        own = {(i, j): v for i, j, v in opts.channel_rtol}
        p, m = sh.r1.n_outputs, sh.r1.n_inputs
        outside = [(i, j) for i, j in own if i >= p or j >= m]
        if outside:
            from audit.errors import InvalidModelError

            raise InvalidModelError(f"channel_rtol: channel(s) {outside} do not exist; the models "
                                    f"have {p} output(s) and {m} input(s), numbered from 0",
                                    field="channel_rtol")
        targets: list[tuple[int | None, int | None, float]] = [
            (i, j, own.get((i, j), opts.rtol)) for i in range(p) for j in range(m)]
    else:
        targets = [(None, None, opts.rtol)]
    lo, hi = band if band is not None else (0.0, math.pi / period if period else math.inf)
    # one extended-precision budget for the pair, shared by the targets in turn
    results = []
    budget_end = time.perf_counter() + opts.escalation_seconds
    for i, j, rt in targets:
        left = max(0.0, budget_end - time.perf_counter())
        results.append(_decide_target(sh, replace(opts, escalation_seconds=left,
                                                  escalate=opts.escalate and left > 0),
                                      i, j, rt, (lo, hi)))
    worst = max(results, key=lambda t: t["used_fraction"])
    outcomes = {t["outcome"] for t in results}
    outcome = "fail" if "fail" in outcomes else "unclear" if "unclear" in outcomes else "pass"
    if outcome == "fail":
        worst = max((t for t in results if t["outcome"] == "fail"), key=lambda t: t["used_fraction"])
    elif outcome == "unclear":
        worst = max((t for t in results if t["outcome"] == "unclear"), key=lambda t: t["used_fraction"])
    where = (f"in the band {lo:.4g} to {hi:.4g} rad/s" if band is not None else "at every frequency")
    what = "the difference G1 - G2" if not opts.channel_rtol else f"channel {worst['channel']} of G1 - G2"
    rel = worst["difference"] / scale if scale > 0 else 0.0
    allowed_rel = worst["allowed"] / scale if scale > 0 else float("inf")
    if outcome == "pass":
        summary = (f"{where}, {what} stays below {rel:.2e} of the peak gain (allowed "
                   f"{allowed_rel:.1e})" if not opts.channel_rtol else
                   f"{where}, every one of {len(results)} channels stays within its allowance; the "
                   f"closest is {worst['channel']} at {rel:.2e} of the peak gain (allowed {allowed_rel:.1e})")
    elif outcome == "fail":
        summary = (f"{where}, {what} reaches {rel:.3g} of the peak gain at "
                   f"{worst['frequency']:.4g} rad/s (allowed {allowed_rel:.1e})")
    else:
        summary = f"{where}, {what}: {worst['reason']}"
    if band is not None:
        w_rel = whole.value if whole.value is not None else float("nan")
        w_freq = whole.details.get("peak_frequency_rad_s", float("nan"))
        inside = lo <= float(w_freq) <= hi
        summary += (f"; over all frequencies the difference reaches {w_rel:.3g} of the peak gain at "
                    f"{float(w_freq):.4g} rad/s" + ("" if inside else " (outside the band: reported, "
                                                        "does not decide)"))
    rule = _rule_text(opts, scale, None)
    precision = "double"
    if any(t["precision"].startswith("ball") for t in results):
        precision = next(t["precision"] for t in results if t["precision"].startswith("ball"))
    details: dict[str, Any] = {
        "contour": sh.contour.describe(),
        "stated_tolerances": opts.stated(),
        "rule": rule,
        "reference_peak_gain": scale,
        "band_rad_s": [lo, hi],
        "decided": "channel by channel" if opts.channel_rtol else "on sigma_max of the difference matrix",
        "band_peak_method": "level crossings of the Hamiltonian (Boyd-Balakrishnan-Kabamba 1989) "
        "intersected with the band, Bruinsma-Steinbuch iteration on the pieces; the located peak "
        "and the in-band grid points measured from G1 and G2 separately with the primal/dual "
        "rounding-error estimate",
        "targets": results,
        "whole_axis": {"relative_difference": whole.value, "peak_frequency_rad_s":
                       whole.details.get("peak_frequency_rad_s"), "outcome_at_rtol": whole.outcome,
                       "decides": band is None and not opts.channel_rtol},
        "peak_frequency_rad_s": worst["frequency"],
        "estimated_rounding_error": max(t["estimated_rounding_error"] for t in results),
    }
    return Evidence(
        key="difference_peak_gain",
        title="Peak gain of the difference G1 - G2" + (" in the band of interest" if band else "")
        + (", channel by channel" if opts.channel_rtol else ""),
        metric=("sup over the band of interest of " if band else "sup over frequency of ")
        + ("|G1[i, j] - G2[i, j]| per channel" if opts.channel_rtol else "sigma_max(G1 - G2)")
        + ", relative to the larger peak gain of the two models",
        value=rel,
        tolerance=allowed_rel,
        outcome=outcome,  # type: ignore[arg-type]
        decisive=True,
        precision=precision,
        seconds=time.perf_counter() - start,
        summary=summary,
        details=details,
    )


def _rule_text(opts: Options, scale: float, allowed: float | None) -> str:
    parts = [f"allowed difference = the larger of rtol x reference peak gain "
             f"({opts.rtol:.1e} x {scale:.6g}) and atol ({opts.atol:.6g})"]
    if allowed is not None:
        parts[0] += f" = {allowed:.6g}"
    if opts.channel_rtol:
        parts.append("decided channel by channel, with "
                     + ", ".join(f"rtol {v:.1e} for output {i} <- input {j}" for i, j, v in opts.channel_rtol))
    if opts.band is not None:
        parts.append(f"only the band {opts.band[0]:.6g} to {opts.band[1]:.6g} rad/s decides")
    return "; ".join(parts)


def _decide_target(sh: _Shared, opts: Options, i: int | None, j: int | None, rtol_t: float,
                   band: tuple[float, float]) -> dict[str, Any]:
    """Decide one target (the whole matrix, or channel (i, j)) over the band."""
    from dataclasses import replace

    from audit.evidence.band_peak import band_limited_peak

    lo, hi = band
    scale = sh.scale
    allowed = max(rtol_t * scale, opts.atol)
    s1, s2 = _channel_system(sh.s1, i, j), _channel_system(sh.s2, i, j)
    grid = np.asarray(sh.grid, dtype=float)
    inside = (grid >= lo) & (grid <= hi)
    if i is None:
        diffs = _sigma_max(sh.g1 - sh.g2)[inside]
    else:
        diffs = np.abs(sh.g1[:, i, j] - sh.g2[:, i, j])[inside]
    errs = (sh.err1 + sh.err2)[inside]  # bounds the error of every entry as well
    freqs = grid[inside]
    e = difference_system(s1, s2)
    bp = band_limited_peak(e, (lo, hi), grid=freqs, floor=0.01 * allowed)
    extra = [f for f in {lo, hi, bp.frequency} if np.isfinite(f) and not np.any(freqs == f)]
    if extra:
        pts = frequency_to_point(np.array(extra), s1)
        try:
            g1p, e1p = evaluate_with_error_estimate(s1, pts)
            g2p, e2p = evaluate_with_error_estimate(s2, pts)
            freqs = np.append(freqs, extra)
            diffs = np.append(diffs, _sigma_max(g1p - g2p))
            errs = np.append(errs, e1p + e2p)
        except NumericalTroubleError:
            pass  # a test point is numerically a pole; the grid still stands
    if not np.isfinite(hi) or any(not np.isfinite(f) for f in [bp.frequency]):
        hf = float(np.linalg.norm(s1.d - s2.d, 2)) if s1.d.size else 0.0
        freqs = np.append(freqs, np.inf)
        diffs = np.append(diffs, hf)
        errs = np.append(errs, 4 * EPS * max(float(np.linalg.norm(s1.d, 2)) if s1.d.size else 0.0,
                                             float(np.linalg.norm(s2.d, 2)) if s2.d.size else 0.0))
    k = int(np.argmax(diffs)) if diffs.size else 0
    value = float(diffs[k]) if diffs.size else 0.0
    freq = float(freqs[k]) if diffs.size else lo
    err = float(errs.max(initial=0.0))
    reason = ""
    if value - err > allowed:
        outcome = "fail"
    elif value + err <= allowed and bp.certified:
        outcome = "pass"
    else:
        outcome = "unclear"
        reason = (f"the in-band peak search could not be certified ({bp.note})" if not bp.certified
                  else f"the estimate {value:.3g} has an estimated rounding error of {err:.1e}, "
                  f"which straddles the allowance {allowed:.3g}")
    precision = "double"
    esc: dict[str, Any] | None = None
    if outcome == "unclear" and bp.certified and opts.escalate and scale > 0:
        sh_t = replace(sh, r1=_channel_system(sh.r1, i, j), r2=_channel_system(sh.r2, i, j))
        outcome, reason, precision, esc = _escalate(sh_t, replace(opts, rtol=allowed / scale), freqs,
                                                    diffs, errs, freq, scale)
        if "relative_difference" in esc:
            value = float(esc["relative_difference"]) * scale
    label = "whole matrix" if i is None else f"output {i} <- input {j}"
    out: dict[str, Any] = {
        "channel": label, "output": i, "input": j, "rtol": rtol_t, "allowed": allowed,
        "difference": value, "frequency": freq, "estimated_rounding_error": err,
        "used_fraction": value / allowed if allowed > 0 else (0.0 if value == 0 else float("inf")),
        "outcome": outcome, "reason": reason, "precision": precision,
        "band_peak": bp.as_dict(), "grid_points_in_band": int(np.count_nonzero(inside)),
        # the search's own bracket (with its pessimistic first-order error bound) already
        # proves the allowance when this is true; otherwise the located peak and the grid
        # points measured with the primal/dual estimate decide, as over all frequencies
        "search_bound_within_allowance": bool(bp.certified and bp.upper <= allowed),
    }
    if esc is not None:
        out["extended_precision"] = esc
    return out


def _first_order_bound(sh: _Shared, omega: float) -> float | None:
    """First-order worst-case rounding bound of G1 - G2 at one frequency (reported)."""
    from audit.evidence.frequency import TransferEvaluator

    if not np.isfinite(omega):
        return None
    pts = frequency_to_point(np.array([omega]), sh.s1)
    try:
        return float(sum(_as_point_errors(TransferEvaluator(s).error_bound(pts))[0] for s in (sh.s1, sh.s2)))
    except NumericalTroubleError:
        return None


def _escalate(
    sh: _Shared,
    opts: Options,
    grid: NDArray[np.float64],
    diffs: NDArray[np.float64],
    errs: NDArray[np.float64],
    peak_freq: float,
    scale: float,
    rel_search: float = 0.0,
) -> tuple[str, str, str, dict[str, Any]]:
    """Re-evaluate the straddling frequencies in ball arithmetic (see audit.evidence.precision).

    Each model is evaluated from what was stored (matrices, coefficients or factors);
    ``rel_search`` is the allowance for a peak search that ran on a converted copy (see
    :func:`_difference_peak`) and is added before a pass."""
    from audit.evidence.precision import DEFAULT_BITS, enclose_difference

    rtol = opts.rtol
    straddling = np.nonzero((diffs + errs) > rtol * scale)[0]
    order = straddling[np.argsort(-(diffs[straddling] + errs[straddling]))]
    freqs = [f for f in [peak_freq] + [float(grid[i]) for i in order] if np.isfinite(f)]
    shift = sh.contour.shift if sh.contour.shifted else None
    try:
        enclosures, complete = enclose_difference(
            sh.r1, sh.r2, np.array(freqs), max_seconds=opts.escalation_seconds,
            contour_shift=shift,
            # one frequency with a proven difference above the tolerance settles it
            stop=lambda e: e.difference_low > rtol * max(scale * (1 + 1e-6), e.reference_gain_high),
        )
    except NumericalTroubleError as exc:
        return "unclear", f"extended precision failed: {exc}", "double", {"error": str(exc)}
    precision = f"ball arithmetic, {DEFAULT_BITS} bits (python-flint) at {len(enclosures)} frequencies"
    if not enclosures:
        return "unclear", "extended precision ran out of time before any frequency", "double", {
            "evaluated": 0, "needed": len(freqs)}
    scale_hi = max(scale * (1 + 1e-6), max(e.reference_gain_high for e in enclosures))
    scale_lo = max(min(scale, max(e.reference_gain_low for e in enclosures)), 1e-300)
    rel_lo = np.array([e.difference_low for e in enclosures]) / scale_hi
    rel_hi = np.array([e.difference_high for e in enclosures]) / scale_lo
    info: dict[str, Any] = {
        "evaluated": len(enclosures),
        "needed": len(freqs),
        "complete": complete,
        "bits": DEFAULT_BITS,
        "largest_relative_difference_enclosure": [float(rel_lo.max()), float(rel_hi.max())],
    }
    worst = int(np.argmax(rel_lo))
    if rel_lo[worst] > rtol:
        info["relative_difference"] = float(rel_lo[worst])
        return (
            "fail",
            f"re-evaluated in extended precision: the difference is at least "
            f"{rel_lo[worst]:.3g} of the peak gain at {enclosures[worst].frequency:.4g} rad/s "
            f"(tolerance {rtol:.1e})",
            precision,
            info,
        )
    if complete and float(rel_hi.max()) + rel_search <= rtol:
        info["relative_difference"] = float(rel_hi.max())
        return (
            "pass",
            f"re-evaluated in extended precision at the {len(enclosures)} frequencies where "
            f"double precision could not decide: the difference stays below "
            f"{rel_hi.max():.2e} of the peak gain (tolerance {rtol:.1e})",
            precision,
            info,
        )
    why = (
        "the time budget ran out" if not complete else
        "the extended-precision enclosure itself straddles the tolerance"
    )
    if complete and float(rel_hi.max()) <= rtol < float(rel_hi.max()) + rel_search:
        why = (f"the stored models agree to {rel_hi.max():.1e} at the evaluated frequencies, but "
               f"the peak search ran on a converted copy with construction error "
               f"{rel_search / 2:.1e} of the peak gain")
    return (
        "unclear",
        f"even in extended precision the evidence cannot settle the tolerance {rtol:.1e}: {why}",
        precision,
        info,
    )


# --------------------------------------------------------------- supporting checks
def _frequency_grid(sh: _Shared, opts: Options) -> tuple[Evidence, dict[str, Any]]:
    from audit.reports.trade_units import differences_in_trade_units

    start = time.perf_counter()
    p, m = sh.g1.shape[1], sh.g1.shape[2]
    scale = sh.scale if sh.scale > 0 else 1.0
    diff = np.abs(sh.g1 - sh.g2)  # (k, p, m)
    errs = (sh.err1 + sh.err2)[:, None, None]
    # a channel "differs" by the same allowance the decision uses (stated tolerances)
    own_rtol = {(i, j): v for i, j, v in opts.channel_rtol}
    in_band = np.ones(sh.grid.shape, dtype=bool)
    if opts.band is not None:
        in_band = (sh.grid >= opts.band[0]) & (sh.grid <= opts.band[1])
    channels = []
    for i in range(p):
        for j in range(m):
            d = diff[:, i, j]
            k = int(np.argmax(d)) if d.size else 0
            own = float(max(np.abs(sh.g1[:, i, j]).max(initial=0), np.abs(sh.g2[:, i, j]).max(initial=0)))
            rel = float(d[k]) / scale if d.size else 0.0
            allowed = max(own_rtol.get((i, j), opts.rtol) * scale, opts.atol)
            beyond = (d - errs[:, 0, 0]) > allowed
            differs = bool(np.any(beyond & in_band))
            entry = {
                "output": i,
                "input": j,
                "relative_difference": rel,
                "relative_to_channel_peak": float(d[k]) / own if own > 0 else 0.0,
                "at_frequency_rad_s": float(sh.grid[k]) if d.size else 0.0,
                "differs": differs,
            }
            if opts.band is not None:
                entry["differs_outside_band"] = bool(np.any(beyond & ~in_band))
            channels.append(entry)
    total = _sigma_max(sh.g1 - sh.g2)
    band = _band(sh.grid, total)
    trade = differences_in_trade_units(sh.grid, sh.g1, sh.g2, scale=sh.scale)
    differing = [c for c in channels if c["differs"]]
    worst = max(channels, key=lambda c: c["relative_difference"]) if channels else None
    summary = (
        f"{len(differing)} of {p * m} channel(s) differ on {sh.grid.size} frequencies"
        if differing
        else f"all {p * m} channel(s) agree on {sh.grid.size} frequencies"
    )
    if band and differing:
        summary += f"; largest discrepancy between {band[0]:.4g} and {band[1]:.4g} rad/s"
    if opts.band is not None:
        outside = [c for c in channels if c.get("differs_outside_band")]
        summary += (f" (inside the band of interest {opts.band[0]:.4g} to {opts.band[1]:.4g} rad/s"
                    + (f"; {len(outside)} channel(s) differ outside it, which does not decide)"
                       if outside else ")"))
    ev = Evidence(
        key="frequency_grid",
        title="Frequency response on the adaptive grid",
        metric="per-channel |G1 - G2| on a grid covering every pole and zero frequency, "
        "DC and the high-frequency limit (Nyquist in discrete time)",
        value=float(worst["relative_difference"]) if worst else 0.0,
        tolerance=opts.rtol,
        outcome="fail" if differing else "pass",
        decisive=False,
        precision="double",
        seconds=time.perf_counter() - start,
        summary=summary,
        details={"contour": sh.contour.describe(), "channels": channels, "band_rad_s": band,
                 "grid_range_rad_s": [float(sh.grid.min(initial=0)), float(sh.grid.max(initial=0))],
                 "trade_units": trade},
    )
    return ev, {"channels": channels, "band": band, "trade_units": trade}


def _band(grid: NDArray[np.float64], values: NDArray[np.float64]) -> list[float] | None:
    if values.size == 0 or float(values.max()) <= 0:
        return None
    k = int(np.argmax(values))
    half = 0.5 * float(values[k])
    lo = k
    while lo > 0 and values[lo - 1] >= half:
        lo -= 1
    hi = k
    while hi < values.size - 1 and values[hi + 1] >= half:
        hi += 1
    return [float(grid[lo]), float(grid[hi])]


def _markov(sh: _Shared, opts: Options) -> Evidence:
    from audit.evidence.markov import compare_markov_parameters

    start = time.perf_counter()
    cmp_ = compare_markov_parameters(sh.r1, sh.r2, rtol=opts.rtol)
    outcome = {"same": "pass", "different": "fail", "unresolved": "unclear"}[cmp_.outcome]
    if cmp_.first_differing_index is None:
        summary = f"the first {cmp_.count} scaled Markov parameters agree"
        if cmp_.outcome == "unresolved":
            summary = (
                f"the scaled Markov parameters agree up to their rounding error, which "
                f"exceeds the tolerance for some terms (poorly conditioned sequence)"
            )
    else:
        k = int(cmp_.first_differing_index)
        summary = (
            f"the first differing Markov parameter is term {k} "
            f"({'D' if k == 0 else 'C A^' + str(k - 1) + ' B'})"
        )
    details = cmp_.as_dict()
    converted = [r.stored.describe() for r in (sh.r1, sh.r2) if r.stored is not None]
    if converted:
        details["computed_from"] = [
            "state-space matrices as stored" if r.stored is None else
            f"a realization of the {r.stored.describe()} (converted copy; construction error "
            f"{c:.1e} absolute, measured on the grid)"
            for r, c in ((sh.r1, sh.construction1), (sh.r2, sh.construction2))]
        summary += "; computed on realizations (converted copies) of the stored data"
        if outcome != "pass":
            # a converted copy's Markov parameters explain, they do not contradict the
            # decisive evidence, which is evaluated on the stored data
            outcome = "info"
            summary += ", so it does not weigh against the decisive evidence"
    return Evidence(
        key="markov_parameters",
        title="Scaled Markov parameters",
        metric="term-by-term relative difference of D, CB, CAB, ... on a frequency-scaled copy",
        value=float(np.max(cmp_.relative_differences)) if len(cmp_.relative_differences) else 0.0,
        tolerance=opts.rtol,
        outcome=outcome,  # type: ignore[arg-type]
        decisive=False,
        precision="double",
        seconds=time.perf_counter() - start,
        summary=summary,
        details=details,
    )


def _points_evidence(key: str, title: str, what: str, p1: NDArray[np.complexfloating],
                     p2: NDArray[np.complexfloating],
                     models: tuple[Realization, Realization] | None = None) -> Evidence:
    from audit.evidence.matching import match_points

    start = time.perf_counter()
    sources = ["minimal part of the state-space matrices as stored"] * 2
    if models is not None:
        for k, r in enumerate(models):
            if r.stored is None:
                continue
            sources[k] = f"minimal realization of the {r.stored.describe()} (converted copy)"
            if key == "poles":  # poles of the stored data themselves
                stored_poles = _finite(r.stored.poles())
                if k == 0:
                    p1 = stored_poles
                else:
                    p2 = stored_poles
                sources[k] = (f"roots of the {r.stored.describe()} (double precision; each "
                              "distinct stored denominator once)")
    mt = match_points(np.asarray(p1), np.asarray(p2))
    d = mt.as_dict()
    largest = getattr(mt, "largest_move", None)
    unmatched = len(d.get("unmatched_first", []) or []) + len(d.get("unmatched_second", []) or [])
    if len(p1) == 0 and len(p2) == 0:
        summary = f"neither model has {what}"
        value = 0.0
    elif largest is None:
        summary = f"{what}: nothing to match"
        value = 0.0
    else:
        (a, b), dist = _largest(largest)
        value = dist
        summary = (
            f"{len(p1)} vs {len(p2)} {what}; largest relative move {dist:.2e} "
            f"({fmt_complex(a)} -> {fmt_complex(b)})"
        )
    if unmatched:
        summary += f"; {unmatched} unmatched"
    return Evidence(
        key=key,
        title=title,
        metric=f"optimal assignment between the {what} of the minimal parts; relative move",
        value=value,
        tolerance=None,
        outcome="info",
        decisive=False,
        precision="double",
        seconds=time.perf_counter() - start,
        summary=summary,
        details={**d, "computed_from": sources},
    )


def _largest(largest: Any) -> tuple[tuple[complex, complex], float]:
    """Normalise the matching module's `largest_move` to ((a, b), relative distance)."""
    if isinstance(largest, dict):
        return (complex(largest["first"]), complex(largest["second"])), float(largest["relative_distance"])
    if hasattr(largest, "first"):
        return (complex(largest.first), complex(largest.second)), float(largest.relative_distance)
    (a, b), dist = largest
    return (complex(a), complex(b)), float(dist)


def _static_gains(sh: _Shared, opts: Options) -> Evidence:
    from audit.evidence.frequency import TransferEvaluator

    start = time.perf_counter()
    r1, r2 = sh.r1, sh.r2
    discrete = r1.is_discrete
    scale = sh.scale if sh.scale > 0 else 1.0
    results: dict[str, Any] = {}
    worst = 0.0
    failing: list[str] = []
    points = {"dc": 1.0 + 0j if discrete else 0j}
    if discrete:
        points["high_frequency"] = -1.0 + 0j
    for name, lam in points.items():
        vals = []
        for r in (r1, r2):
            if r.stored is not None:  # from the stored coefficients / factors
                v, bound = r.stored.evaluate(np.array([lam]))
                vals.append(None if not np.isfinite(bound[0]) else v[0].real)
            elif r.order and np.min(np.abs(np.linalg.eigvals(r.a) - lam)) <= 1e-12 * max(1.0, np.linalg.norm(r.a, 1)):
                vals.append(None)
            else:
                vals.append(TransferEvaluator(r).at(np.array([lam]))[0].real if r.order else r.d.copy())
        if vals[0] is None or vals[1] is None:
            results[name] = {"first": None if vals[0] is None else vals[0].tolist(),
                             "second": None if vals[1] is None else vals[1].tolist(),
                             "note": "infinite: a pole lies at this point"}
            if (vals[0] is None) != (vals[1] is None):
                failing.append(name)
            continue
        diff = float(np.abs(vals[0] - vals[1]).max(initial=0)) / scale
        worst = max(worst, diff)
        if diff > opts.rtol:
            failing.append(name)
        results[name] = {"first": vals[0].tolist(), "second": vals[1].tolist(), "relative_difference": diff}
    results["computed_from"] = [_source(r1), _source(r2)]
    if not discrete:
        diff = float(np.abs(r1.d - r2.d).max(initial=0)) / scale
        worst = max(worst, diff)
        if diff > opts.rtol:
            failing.append("high_frequency")
        results["high_frequency"] = {"first": r1.d.tolist(), "second": r2.d.tolist(), "relative_difference": diff}
    summary = static_gain_summary(results, failing)
    return Evidence(
        key="static_gains",
        title="DC gain and high-frequency gain",
        metric="|G1 - G2| at DC (s = 0 or z = 1) and at the high-frequency limit (D, or z = -1), "
        "relative to the peak gain",
        value=worst,
        tolerance=opts.rtol,
        outcome="fail" if failing else "pass",
        decisive=False,
        precision="double",
        seconds=time.perf_counter() - start,
        summary=summary,
        details=results,
    )


def static_gain_summary(results: dict[str, Any], failing: list[str]) -> str:
    """One sentence on the DC and high-frequency gains, with both values when they differ."""
    from audit.reports.trade_units import describe_static_gain

    parts = [describe_static_gain(name, results.get(name, {}), name in failing)
             for name in ("dc", "high_frequency") if name in results]
    return "; ".join(parts)


def _similarity(sh: _Shared, opts: Options) -> Evidence:
    from audit.evidence.similarity import similarity_transform_between

    m1, m2 = sh.min1, sh.min2
    if m1.order != m2.order:
        return skipped("similarity", "State-coordinate similarity",
                       f"minimal orders differ ({m1.order} vs {m2.order}); no similarity transform exists")
    if m1.order == 0:
        return skipped("similarity", "State-coordinate similarity", "both models are pure gains")
    if m1.order > SIMILARITY_MAX_ORDER:
        return skipped("similarity", "State-coordinate similarity",
                       f"order {m1.order} above the limit {SIMILARITY_MAX_ORDER} for this explanatory check")
    start = time.perf_counter()
    both_minimal = m1.order == sh.r1.order and m2.order == sh.r2.order
    a = sh.r1 if both_minimal else m1.realization
    b = sh.r2 if both_minimal else m2.realization
    res = similarity_transform_between(a, b)
    where = "the two realizations" if both_minimal else "the minimal parts"
    if res.found:
        summary = (
            f"{where} are related by a change of state coordinates with cond(T) = "
            f"{res.condition_number:.2e}"
        )
    else:
        summary = f"no change of state coordinates relates {where} (residual {max(res.residual_a, res.residual_b, res.residual_c):.1e})"
    sh.transform = res.transform if (res.found and both_minimal) else None
    return Evidence(
        key="similarity",
        title="State-coordinate similarity",
        metric="T with A2 = T A1 T^-1, B2 = T B1, C2 = C1 T^-1: relative residuals and cond(T)",
        value=float(res.condition_number),
        tolerance=None,
        outcome="info",
        decisive=False,
        precision="double",
        seconds=time.perf_counter() - start,
        summary=summary,
        details={**res.as_dict(), "between": where},
    )


TIME_DOMAIN_MAX_ORDER = 400
"""Above this order (either model) the explanatory time-domain check is skipped."""
TIME_DOMAIN_POINTS = 1000
"""Samples of the common time grid (exact zero-order-hold marching between them)."""
TIME_DOMAIN_INITIAL_MAX_ORDER = 20
"""Initial-condition responses through the recovered T are compared up to this order."""


def _time_domain(sh: _Shared, opts: Options, sim: Evidence) -> Evidence:
    """Step and impulse responses (and initial-condition responses through T)."""
    from audit.dynamics.response_comparison import compare_time_responses

    if max(sh.r1.order, sh.r2.order) > TIME_DOMAIN_MAX_ORDER:
        return skipped("time_responses", "Time responses",
                       f"order above {TIME_DOMAIN_MAX_ORDER}; the frequency-domain evidence decides")
    start = time.perf_counter()
    # initial-condition responses (one per unit initial state) only for small models
    transform = sh.transform if sh.r1.order <= TIME_DOMAIN_INITIAL_MAX_ORDER else None
    # a failure here (overflow of an unstable model...) becomes "not computed" in _isolated
    cmp_ = compare_time_responses(sh.r1, sh.r2, rtol=opts.rtol, transform=transform,
                                  max_points=TIME_DOMAIN_POINTS)
    same = cmp_.outcome == "same"
    kinds = ", ".join(d.kind for d in cmp_.differences)
    summary = (
        f"{kinds} responses over {cmp_.horizon:.4g} s agree within {cmp_.relative_peak_difference:.2e} "
        "of their peaks" if same else
        f"{kinds} responses differ by {cmp_.relative_peak_difference:.3g} of their peaks "
        f"(largest at t = {cmp_.time_of_largest_difference:.4g} s)"
    )
    if transform is not None:
        summary += "; initial states mapped through the recovered T"
    return Evidence(
        key="time_responses",
        title="Time responses (exact for piecewise-constant inputs)",
        metric="largest |y1 - y2| relative to the larger response peak, step and impulse "
        "(and initial-condition responses with x2(0) = T x1(0))",
        value=float(cmp_.relative_peak_difference),
        tolerance=opts.rtol,
        outcome="pass" if same else "fail",
        decisive=False,
        precision="double",
        seconds=time.perf_counter() - start,
        summary=summary,
        details=cmp_.as_dict(),
    )


def _difference_minimal_order(sh: _Shared, opts: Options) -> Evidence:
    from audit.structure.minimal import minimal_realization

    e = difference_system(sh.r1, sh.r2)
    if e.order > DIFFERENCE_ORDER_LIMIT:
        return skipped("difference_minimal_order", "Minimal order of the difference system",
                       f"order {e.order} of G1 - G2 is above {DIFFERENCE_ORDER_LIMIT}; this check "
                       "only explains the verdict (the peak gain decides it) and is skipped to "
                       "keep large audits fast")
    start = time.perf_counter()
    mr = minimal_realization(e, tol=opts.rank_tol)
    d_small = float(np.abs(e.d).max(initial=0)) <= opts.rtol * max(sh.scale, 1e-300)
    vanishes = mr.order == 0 and d_small
    summary = (
        f"the minimal part of G1 - G2 (order {e.order}) vanishes"
        if vanishes
        else f"the minimal part of G1 - G2 has order {mr.order} of {e.order}"
    )
    if not mr.decisions_clear:
        summary += " (some rank decisions had no clear gap)"
    return Evidence(
        key="difference_minimal_order",
        title="Minimal order of the difference system",
        metric="order of the controllable and observable part of G1 - G2 (orthogonal staircase)",
        value=float(mr.order),
        tolerance=float(mr.tolerance) if mr.tolerance is not None else None,
        outcome="info" if mr.decisions_clear else "unclear",
        decisive=False,
        precision="double",
        seconds=time.perf_counter() - start,
        summary=summary,
        details={"order": e.order, "minimal_order": mr.order,
                 "rank_decisions": [d.as_dict() for d in mr.decisions]},
    )


# ------------------------------------------------------------------- diagnosis
def _diagnose(sh: _Shared, opts: Options, grid_info: dict[str, Any], markov: Evidence,
              poles: Evidence, zeros: Evidence) -> dict[str, Any]:
    diag: dict[str, Any] = {}
    diag["differing_channels"] = [
        {"output": c["output"], "input": c["input"], "relative_difference": c["relative_difference"]}
        for c in grid_info["channels"] if c["differs"]
    ]
    diag["band_of_largest_discrepancy_rad_s"] = grid_info["band"]
    if diag["differing_channels"]:
        from audit.reports.trade_units import describe_channel_difference

        sentence = describe_channel_difference(grid_info.get("trade_units"))
        if sentence:  # the worst channel in dB and degrees, for every diagnosis reader
            diag["in_db_and_degrees"] = {"sentence": sentence}
    if markov.outcome != "skipped":
        diag["first_differing_markov_parameter"] = markov.details.get("first_differing_index")
    perm = _permutation(sh, opts)
    if perm is not None:
        diag["permutation"] = perm
    scale = _channel_scale(sh, opts)
    if scale is not None:
        diag["constant_scale"] = scale
    reversed_ = _reciprocal_poles(sh)
    if reversed_ is not None:
        diag["reversed_coefficients"] = reversed_
    for ev, key in ((poles, "moved_poles"), (zeros, "moved_zeros")):
        moves = _moves(ev.details, opts)
        if moves:
            diag[key] = moves
    return diag


RECIPROCAL_POLES_RTOL = 1e-6
"""Poles of the second model within this relative distance of the reciprocals of the
reference's poles get the "coefficients in ascending order?" hint."""


def _reciprocal_poles(sh: _Shared) -> dict[str, Any] | None:
    """A hint when the second model's poles are the reciprocals of the reference's, the
    mark of polynomial coefficients written in ascending instead of descending powers
    (the roots of a reversed polynomial are the reciprocals of the original's)."""
    from audit.evidence.matching import match_points

    p1 = sh.min1.realization.poles()
    p2 = sh.min2.realization.poles()
    if p1.size == 0 or p1.size != p2.size or np.any(p1 == 0):
        return None
    recip = match_points(1.0 / p1, p2)
    direct = match_points(p1, p2)
    worst_recip = max((float(pr.relative_distance) for pr in recip.pairs), default=np.inf)
    worst_direct = max((float(pr.relative_distance) for pr in direct.pairs), default=0.0)
    if worst_recip > RECIPROCAL_POLES_RTOL or worst_direct <= 1e3 * RECIPROCAL_POLES_RTOL:
        return None
    return {"largest_relative_distance": worst_recip,
            "sentence": "the poles of the second model are the reciprocals of the reference's "
                        f"(within {worst_recip:.1e}): were its transfer-function coefficients "
                        "written in ascending instead of descending powers of s or z"}


def _moves(details: dict[str, Any], opts: Options) -> list[dict[str, Any]]:
    pairs = details.get("pairs") or []
    out = []
    for pr in pairs:
        rel = float(pr.get("relative_distance", 0.0))
        if rel > max(opts.rtol, 1e-9):
            out.append(pr)
    out.sort(key=lambda pr: -float(pr.get("relative_distance", 0.0)))
    return out[:5]


def _rel_grid_diff(a: NDArray[np.complex128], b: NDArray[np.complex128], scale: float) -> float:
    return float(_sigma_max(a - b).max(initial=0.0)) / scale if scale > 0 else 0.0


def _permutation(sh: _Shared, opts: Options) -> dict[str, Any] | None:
    p, m = sh.g1.shape[1], sh.g1.shape[2]
    if p * m == 1:
        return None
    import math

    if math.factorial(p) * math.factorial(m) > 40320:
        return None
    tol = max(opts.rtol, 1e-9) * 10
    best = None
    for po in itertools.permutations(range(p)):
        for pi in itertools.permutations(range(m)):
            if po == tuple(range(p)) and pi == tuple(range(m)):
                continue
            g1p = sh.g1[:, list(po), :][:, :, list(pi)]
            rel = _rel_grid_diff(g1p, sh.g2, sh.scale)
            if rel <= tol and (best is None or rel < best[2]):
                best = (po, pi, rel)
    if best is None:
        return None
    po, pi, rel = best
    return {
        "output_order": list(po),
        "input_order": list(pi),
        "relative_difference_after": rel,
        "sentence": (
            "the second model equals the first with "
            + ", ".join(
                s for s in (
                    f"outputs reordered as {list(po)}" if list(po) != list(range(p)) else "",
                    f"inputs reordered as {list(pi)}" if list(pi) != list(range(m)) else "",
                ) if s
            )
        ),
    }


def _channel_scale(sh: _Shared, opts: Options) -> dict[str, Any] | None:
    """Detect a constant real factor per channel (a unit change)."""
    p, m = sh.g1.shape[1], sh.g1.shape[2]
    factors = np.full((p, m), np.nan)
    tol = max(opts.rtol, 1e-9) * 10
    for i in range(p):
        for j in range(m):
            a, b = sh.g1[:, i, j], sh.g2[:, i, j]
            mag = np.abs(a)
            if mag.max(initial=0) <= 0:
                if np.abs(b).max(initial=0) <= tol * max(sh.scale, 1e-300):
                    continue
                return None
            use = mag > 1e-6 * mag.max()
            ratio = b[use] / a[use]
            k = complex(np.median(ratio.real), np.median(ratio.imag))
            if abs(k.imag) > tol * abs(k) or k.real == 0:
                return None
            if np.max(np.abs(b - k.real * a)) > tol * max(np.abs(b).max(), 1e-300):
                return None
            factors[i, j] = k.real
    finite = factors[np.isfinite(factors)]
    if finite.size == 0 or np.all(np.abs(finite - 1.0) <= tol):
        return None
    out: dict[str, Any] = {"channel_factors": [[None if not np.isfinite(v) else float(v) for v in row] for row in factors]}
    rows = [np.unique(np.round(factors[i][np.isfinite(factors[i])], 12)) for i in range(p)]
    cols = [np.unique(np.round(factors[:, j][np.isfinite(factors[:, j])], 12)) for j in range(m)]
    if all(len(r) <= 1 for r in rows) and p > 0:
        scaled = {i: float(r[0]) for i, r in enumerate(rows) if len(r) and abs(r[0] - 1) > tol}
        out["per_output"] = scaled
        out["sentence"] = "constant factor on " + ", ".join(
            f"output {i} (x{v:.6g})" for i, v in scaled.items()) + ": consistent with a unit change"
    elif all(len(c) <= 1 for c in cols) and m > 0:
        scaled = {j: float(c[0]) for j, c in enumerate(cols) if len(c) and abs(c[0] - 1) > tol}
        out["per_input"] = scaled
        out["sentence"] = "constant factor on " + ", ".join(
            f"input {j} (x{v:.6g})" for j, v in scaled.items()) + ": consistent with a unit change"
    else:
        out["sentence"] = "each differing channel is a constant multiple of the reference channel"
    return out


# --------------------------------------------------------------------- compare
def compare_pair(
    r1: Realization, r2: Realization, *, options: Options | None = None
) -> PairComparison:
    """Audit one pair of models claimed to be equivalent.

    Parameters
    ----------
    r1, r2 : Realization, or a python-control / scipy.signal LTI system
        The reference and the model under audit (foreign objects are converted by
        :func:`audit.documents.interop.realization_from_object`).
    options : Options, keyword-only
        Tolerances and budgets.

    Returns
    -------
    PairComparison

    Raises
    ------
    IncompatibleModelsError
        Different input/output counts, or mixed / different time domains.
    """
    from audit.core.threads import limited_blas_threads
    from audit.documents.interop import realization_from_object

    # python-control / scipy.signal systems are accepted too (audit.documents.interop)
    r1, r2 = realization_from_object(r1), realization_from_object(r2)
    with limited_blas_threads():
        return _compare_pair(r1, r2, options or Options())


def _compare_pair(r1: Realization, r2: Realization, opts: Options) -> PairComparison:
    start = time.perf_counter()
    check_comparable(r1, r2)
    label1 = r1.name or "first model"
    label2 = r2.name or "second model"
    if label1 == label2:
        label1, label2 = label1 + " (1)", label2 + " (2)"
    # Each explanatory piece is computed in isolation (see _isolated): when one raises,
    # it says "not computed" with the reason and the verdict stands on the decisive one.
    minimal: dict[int, Any] = {}

    def minimal_part(slot: int, label: str, r: Realization) -> Evidence:
        ev, minimal[slot] = minimal_order_evidence(label, r, tol=opts.rank_tol)
        return ev

    ev_min1 = _isolated(f"minimal_order:{label1}", f"Minimal order and hidden modes of {label1}",
                        lambda: minimal_part(1, label1, r1))
    ev_min2 = _isolated(f"minimal_order:{label2}", f"Minimal order and hidden modes of {label2}",
                        lambda: minimal_part(2, label2, r2))
    min1, min2 = minimal.get(1), minimal.get(2)
    try:
        sh = _shared(r1, r2, min1 or _Unreduced(r1), min2 or _Unreduced(r2))
    except Exception as exc:  # noqa: BLE001 - the verdict is inconclusive, never a crash
        if isinstance(exc, AuditError) and not isinstance(exc, NumericalTroubleError):
            raise
        return _undecided_pair(r1, r2, label1, label2, ev_min1, ev_min2, exc, opts, start)
    try:
        decisive = (_decide_with_stated_tolerances(sh, opts) if opts.states_more_than_rtol
                    else _difference_peak(sh, opts))
    except Exception as exc:  # noqa: BLE001 - the verdict is inconclusive, never a crash
        if isinstance(exc, AuditError) and not isinstance(exc, NumericalTroubleError):
            raise
        decisive = _decisive_not_computed(exc)
    grid_info: dict[str, Any] = {"channels": [], "band": None}

    def grid_evidence() -> Evidence:
        ev, info = _frequency_grid(sh, opts)
        grid_info.update(info)
        return ev

    grid_ev = _isolated("frequency_grid", "Frequency response on the adaptive grid", grid_evidence)
    markov = _isolated("markov_parameters", "Scaled Markov parameters", lambda: _markov(sh, opts))
    from audit.structure.zeros import transmission_zeros

    def needs_minimal(fn: Any) -> Any:
        if min1 is None or min2 is None:
            raise NumericalTroubleError("the minimal realization of a model could not be computed "
                                        "(see its minimal-order evidence)")
        return fn()

    poles = _isolated("poles", "Poles (minimal parts)", lambda: needs_minimal(
        lambda: _points_evidence("poles", "Poles (minimal parts)", "poles",
                                 min1.realization.poles(), min2.realization.poles(), models=(r1, r2))))
    zeros = _isolated("zeros", "Transmission zeros", lambda: needs_minimal(
        lambda: _points_evidence("zeros", "Transmission zeros", "transmission zeros",
                                 transmission_zeros(min1.realization), transmission_zeros(min2.realization),
                                 models=(r1, r2))))
    gains = _isolated("static_gains", "DC gain and high-frequency gain", lambda: _static_gains(sh, opts))
    diff_order = _isolated("difference_minimal_order", "Minimal order of the difference system",
                           lambda: _difference_minimal_order(sh, opts))
    sim = _isolated("similarity", "State-coordinate similarity",
                    lambda: needs_minimal(lambda: _similarity(sh, opts)))
    td = _isolated("time_responses", "Time responses", lambda: _time_domain(sh, opts, sim))
    evidence = [decisive, ev_min1, ev_min2, diff_order, grid_ev, markov, gains, poles, zeros, sim, td]
    verdict: Verdict = {"pass": "equivalent", "fail": "different"}.get(decisive.outcome, "inconclusive")  # type: ignore[assignment]
    warnings = _warnings(sh, ev_min1, ev_min2, label1, label2)
    warnings += _not_computed_warnings(evidence)
    if opts.states_more_than_rtol:
        warnings.append("only the decisive evidence and the frequency grid apply the stated "
                        "atol / band / channel tolerances; the other supporting evidence compares "
                        f"at rtol {opts.rtol:.1e} over all frequencies and channels")
    diagnosis: dict[str, Any] = {}
    if verdict == "different":
        try:
            diagnosis = _diagnose(sh, opts, grid_info, markov, poles, zeros)
        except Exception as exc:  # noqa: BLE001 - the diagnosis explains, it never decides
            diagnosis = {"not_computed": _reason(exc)}
    explanation = _explain(verdict, decisive, diagnosis, warnings, label1, label2, opts)
    return PairComparison(
        reference=label1,
        other=label2,
        verdict=verdict,
        explanation=explanation,
        evidence=tuple(evidence),
        diagnosis=diagnosis,
        warnings=tuple(warnings),
        seconds=time.perf_counter() - start,
    )


# ------------------------------------------------------- evidence in isolation
NOT_COMPUTED = "not_computed"
"""Outcome of a piece of evidence whose computation raised; its summary gives the reason."""

@dataclass(frozen=True)
class _Unreduced:
    """Stand-in for a minimal realization that could not be computed: the model itself
    (its transmission zeros then include hidden modes, which only adds grid points)."""

    realization: Realization

    @property
    def order(self) -> int:
        return self.realization.order


def _reason(exc: BaseException) -> str:
    """``"TypeName: message"``, with the innermost frame of our own code for a bug."""
    import traceback

    text = str(exc) if isinstance(exc, AuditError) else f"{type(exc).__name__}: {exc}"
    if not isinstance(exc, AuditError):
        frames = [f for f in traceback.extract_tb(exc.__traceback__) if "/audit/" in f.filename.replace("\\", "/")]
        if frames:
            f = frames[-1]
            text += f" (in {f.name}, {f.filename.rsplit('/audit/', 1)[-1]}:{f.lineno})"
    return text


def _isolated(key: str, title: str, build: Any) -> Evidence:
    """Run one explanatory evidence builder; when it raises, say so instead of crashing.

    The returned item has outcome ``not_computed``, the reason as its summary, the time
    spent in ``seconds``, and ``precision`` "-": the verdict never depends on it.
    """
    start = time.perf_counter()
    try:
        return build()
    except Exception as exc:  # noqa: BLE001 - supporting evidence never takes the verdict down
        reason = _reason(exc)
        return Evidence(key=key, title=title, metric="-", value=None, tolerance=None,
                        outcome=NOT_COMPUTED, decisive=False, precision="-",  # type: ignore[arg-type]
                        seconds=time.perf_counter() - start,
                        summary=f"not computed: {reason}", details={"error": reason})


def _not_computed_warnings(evidence: list[Evidence]) -> list[str]:
    missing = [e for e in evidence if e.outcome == NOT_COMPUTED and not e.decisive]
    if not missing:
        return []
    return [f"{len(missing)} supporting piece(s) of evidence could not be computed ("
            + ", ".join(e.key for e in missing) + "); the verdict rests on the decisive evidence"]


def _decisive_not_computed(exc: BaseException) -> Evidence:
    reason = _reason(exc)
    return Evidence(
        key="difference_peak_gain", title="Peak gain of the difference G1 - G2",
        metric="sup over frequency of sigma_max(G1 - G2), relative to the larger peak gain "
        "of the two models",
        value=None, tolerance=None, outcome="unclear", decisive=True, precision="-", seconds=0.0,
        summary=f"the decisive evidence could not be computed ({reason})",
        details={"error": reason})


def _undecided_pair(r1: Realization, r2: Realization, label1: str, label2: str, ev_min1: Evidence,
                    ev_min2: Evidence, exc: BaseException, opts: Options, start: float) -> PairComparison:
    """The frequency responses shared by the evidence could not be computed: inconclusive."""
    decisive = _decisive_not_computed(exc)
    reason = "the frequency responses it needs could not be computed"
    others = [
        Evidence(key=k, title=t, metric="-", value=None, tolerance=None, outcome=NOT_COMPUTED,  # type: ignore[arg-type]
                 decisive=False, precision="-", seconds=0.0, summary=f"not computed: {reason}",
                 details={"error": reason})
        for k, t in (("difference_minimal_order", "Minimal order of the difference system"),
                     ("frequency_grid", "Frequency response on the adaptive grid"),
                     ("markov_parameters", "Scaled Markov parameters"),
                     ("static_gains", "DC gain and high-frequency gain"),
                     ("poles", "Poles (minimal parts)"), ("zeros", "Transmission zeros"),
                     ("similarity", "State-coordinate similarity"), ("time_responses", "Time responses"))
    ]
    evidence = [decisive, ev_min1, ev_min2, *others]
    return PairComparison(
        reference=label1, other=label2, verdict="inconclusive",
        explanation=(f"Cannot tell whether {label2} and {label1} are equivalent at tolerance "
                     f"{opts.rtol:.1e}: {decisive.summary}."),
        evidence=tuple(evidence), diagnosis={}, warnings=tuple(_not_computed_warnings(evidence)),
        seconds=time.perf_counter() - start)


def _warnings(sh: _Shared, ev1: Evidence, ev2: Evidence, label1: str, label2: str) -> list[str]:
    out: list[str] = []
    for ev, label in ((ev1, label1), (ev2, label2)):
        hidden = ev.details.get("hidden_modes", [])
        unstable = [h for h in hidden if h["unstable"]]
        if unstable:
            where = ", ".join(fmt_complex(complex(*h["location"])) + f" ({h['kind']})" for h in unstable)
            out.append(
                f"UNSTABLE HIDDEN MODE in {label} at {where}: the transfer functions may agree "
                "but internal stability does not"
            )
        elif hidden:
            where = ", ".join(fmt_complex(complex(*h["location"])) for h in hidden[:6])
            more = "" if len(hidden) <= 6 else f" and {len(hidden) - 6} more"
            out.append(f"{label} carries {len(hidden)} stable hidden mode(s) at {where}{more}")
        if ev.outcome == "unclear":
            out.append(f"{label}: a rank decision of the staircase had no clear singular-value gap "
                       f"(smallest gap {ev.details.get('smallest_gap', float('nan')):.2g}); "
                       "its hidden-mode count is uncertain")
    if sh.contour.shifted:
        out.append(f"compared on the {sh.contour.describe()}")
    for r, label in ((sh.r1, label1), (sh.r2, label2)):
        out.extend(_rounding_improper_warnings(sh, r, label))
    return out


def _rounding_improper_warnings(sh: _Shared, r: Realization, label: str) -> list[str]:
    """Name each channel whose excess leading numerator coefficients are rounding residue,
    with their size and their largest effect over the frequencies where it was decided."""
    from audit.core.stored_evaluation import improper_effect

    found = getattr(r.stored, "rounding_improper", ())
    if not found:
        return []
    top = float(np.max(sh.grid, initial=0.0))
    pts = contour_points(sh.contour, sh.grid, r.sample_period)
    out = []
    for item in found:
        i, j = item["channel"]
        effect = improper_effect(r.stored, i, j, pts) / sh.scale if sh.scale > 0 else float("inf")
        out.append(
            f"{label}: channel [{i}][{j}] has numerator degree {item['numerator_degree']} > "
            f"denominator degree {item['denominator_degree']}; the excess leading coefficient(s) "
            f"{', '.join(f'{v:.3g}' for v in item['coefficients'])} are {item['relative_size']:.1e} "
            "of the channel's coefficients (balanced variable), rounding residue: audited as "
            f"stored up to {top:.4g} rad/s, where their effect is at most {effect:.1e} of the "
            "peak gain; above that they grow without bound")
    return out


def _explain(verdict: Verdict, decisive: Evidence, diagnosis: dict[str, Any], warnings: list[str],
             label1: str, label2: str, opts: Options) -> str:
    extended = "extended precision" if decisive.precision.startswith("ball") else "double precision"
    if verdict == "equivalent":
        text = (f"{label2} has the same transfer function as {label1}: {decisive.summary} "
                f"(decided in {extended}).")
        if any(w.startswith("UNSTABLE HIDDEN") for w in warnings):
            text += " But an unstable hidden mode is present: internal stability differs."
        return text
    if verdict == "different":
        parts = [f"{label2} does not have the same transfer function as {label1}: {decisive.summary} "
                 f"(decided in {extended})."]
        if "permutation" in diagnosis:
            parts.append(diagnosis["permutation"]["sentence"].capitalize() + ".")
        elif "reversed_coefficients" in diagnosis:
            parts.append(diagnosis["reversed_coefficients"]["sentence"].capitalize() + "?")
        elif "constant_scale" in diagnosis:
            parts.append(diagnosis["constant_scale"]["sentence"].capitalize() + ".")
        elif diagnosis.get("moved_poles"):
            mv = diagnosis["moved_poles"][0]
            parts.append(f"Largest pole move: {fmt_complex(complex(*mv['first']))} -> "
                         f"{fmt_complex(complex(*mv['second']))}.")
        return " ".join(parts)
    return (f"Cannot tell whether {label2} and {label1} are equivalent at tolerance {opts.rtol:.1e}: "
            f"{decisive.summary}.")


def compare_models(models: list[Realization], *, options: Options | None = None) -> list[PairComparison]:
    """Compare every model against the first (pairwise), returning one result per pair."""
    if len(models) < 2:
        raise ValueError("compare needs at least two models")
    return [compare_pair(models[0], other, options=options) for other in models[1:]]


def overall_verdict(pairs: list[PairComparison]) -> Verdict:
    """``different`` if any pair differs, else ``inconclusive`` if any is, else ``equivalent``."""
    verdicts = {p.verdict for p in pairs}
    if "different" in verdicts:
        return "different"
    if "inconclusive" in verdicts:
        return "inconclusive"
    return "equivalent"


# ------------------------------------------------------ mixed and re-sampled pairs
def compare_discretized(
    r1: Realization,
    r2: Realization,
    *,
    method: str,
    prewarp_frequency: float | None = None,
    options: Options | None = None,
) -> PairComparison:
    """Audit a continuous and a discrete model under a declared discretization method.

    The continuous one is discretized at the discrete one's period with ``method``
    (:func:`audit.dynamics.discretization.discretize`) and the two discrete models are audited
    with :func:`compare_pair`. The claim check of
    :func:`audit.dynamics.discretization_checks.check_discretization_claim` is added as evidence; when
    the claim fails it names the method that does match, if any.

    Raises
    ------
    IncompatibleModelsError
        If both models are continuous or both discrete, or input/output counts differ.
    InvalidModelError
        If the method is unknown or does not apply (matched pole-zero on MIMO models).
    """
    from audit.dynamics.discretization import discretize
    from audit.dynamics.discretization_checks import check_discretization_claim
    from audit.errors import IncompatibleModelsError

    opts = options or Options()
    if r1.is_discrete == r2.is_discrete:
        raise IncompatibleModelsError(
            "--discretization relates a continuous-time model to a discrete-time one, but "
            f"{r1.name or 'the first model'} and {r2.name or 'the second model'} are both "
            + ("discrete-time" if r1.is_discrete else "continuous-time"))
    cont, disc = (r1, r2) if not r1.is_discrete else (r2, r1)
    assert disc.sample_period is not None
    period = disc.sample_period
    sampled = discretize(cont, period, method=method, prewarp_frequency=prewarp_frequency)  # type: ignore[arg-type]
    sampled = sampled.with_name(f"{cont.name or 'continuous model'} ({method}, T = {period:g} s)")
    first, second = (sampled, disc) if cont is r1 else (disc, sampled)
    pair = compare_pair(first, second, options=opts)
    claim_title = (f"Claim: {disc.name or 'discrete model'} is the {method} discretization of "
                   f"{cont.name or 'continuous model'}")
    found: dict[str, Any] = {}

    def claim_evidence() -> Evidence:
        start = time.perf_counter()
        claim = check_discretization_claim(cont, disc, method=method, prewarp_frequency=prewarp_frequency,  # type: ignore[arg-type]
                                           rtol=opts.rtol)
        found["claim"] = claim
        return Evidence(
            key="discretization_claim",
            title=claim_title,
            metric="relative peak difference of the frequency responses up to Nyquist, and poles",
            value=float(claim.relative_peak_difference),
            tolerance=opts.rtol,
            outcome="pass" if claim.outcome == "holds" else "fail",
            decisive=False,
            precision="double",
            seconds=time.perf_counter() - start,
            summary=claim.message,
            details=claim.as_dict(),
        )

    # the claim check explains; when it raises, it says so and the verdict stands
    ev = _isolated("discretization_claim", claim_title, claim_evidence)
    claim = found.get("claim")
    holds = claim is None or claim.outcome == "holds"
    diagnosis = dict(pair.diagnosis)
    explanation = pair.explanation
    if claim is not None and not holds:
        diagnosis["discretization"] = {"claimed": method, "matching_method": claim.matching_method,
                                       "message": claim.message}
        if claim.matching_method:
            explanation += f" The matrices match a {claim.matching_method} discretization, not {method}."
    return PairComparison(
        reference=pair.reference, other=pair.other, verdict=pair.verdict, explanation=explanation,
        evidence=pair.evidence + (ev,), diagnosis=diagnosis,
        warnings=pair.warnings + (f"continuous model discretized with {method} at T = {period:g} s "
                                  "before the audit",),
        seconds=pair.seconds + ev.seconds,
    )


def compare_sample_periods(r1: Realization, r2: Realization, *, options: Options | None = None) -> PairComparison:
    """Two discrete models labelled with different sample periods.

    They cannot be the same discrete-time system, so the verdict is ``different``; the
    evidence says whether they agree once one period is re-read (the same continuous
    dynamics sampled at the other period, or a mislabelled period), using
    :func:`audit.dynamics.discretization_checks.detect_sample_period_mismatch`.
    """
    from audit.dynamics.discretization_checks import detect_sample_period_mismatch

    opts = options or Options()
    start = time.perf_counter()
    check_io = r1.n_inputs == r2.n_inputs and r1.n_outputs == r2.n_outputs
    if not check_io:
        check_comparable(r1, r2)  # raises the input/output message
    label1, label2 = r1.name or "first model", r2.name or "second model"
    assert r1.sample_period is not None and r2.sample_period is not None
    head = (f"{label2} is sampled at T = {r2.sample_period:g} s but {label1} at "
            f"T = {r1.sample_period:g} s")
    try:
        chk = detect_sample_period_mismatch(r1, r2, rtol=opts.rtol)
    except Exception as exc:  # noqa: BLE001 - the labelled periods differ: that decides
        reason = _reason(exc)
        summary = f"{head}; the period ratio under which they would agree was not computed ({reason})"
        ev = Evidence(
            key="sample_period", title="Sample periods", metric="labelled periods and the period "
            "ratio under which the poles and responses agree", value=None, tolerance=opts.rtol,
            outcome="fail", decisive=True, precision="double", seconds=time.perf_counter() - start,
            summary=summary, details={"error": reason})
        return PairComparison(
            reference=label1, other=label2, verdict="different",
            explanation=f"{label2} is not the same discrete-time system as {label1}: {summary}.",
            evidence=(ev,), diagnosis={"sample_period": {"error": reason}},
            warnings=("the period-ratio explanation could not be computed",), seconds=ev.seconds)
    if chk.outcome == "period_mismatch":
        summary = (f"{head}; they describe the same continuous dynamics if the effective period "
                   f"ratio is {chk.simple_ratio or format(chk.ratio, '.6g')} "
                   f"(implied period {chk.implied_period:g} s): a mislabelled or re-sampled model")
    elif chk.outcome == "consistent":
        summary = f"{head}; both are consistent samplings of the same continuous dynamics"
    else:
        summary = f"{head}; no period ratio makes them agree ({chk.note})"
    ev = Evidence(
        key="sample_period", title="Sample periods", metric="labelled periods and the period ratio "
        "under which the poles and responses agree", value=chk.ratio, tolerance=opts.rtol,
        outcome="fail", decisive=True, precision="double", seconds=time.perf_counter() - start,
        summary=summary, details=chk.as_dict())
    return PairComparison(
        reference=label1, other=label2, verdict="different",
        explanation=f"{label2} is not the same discrete-time system as {label1}: {summary}.",
        evidence=(ev,), diagnosis={"sample_period": chk.as_dict()}, warnings=(),
        seconds=ev.seconds)
