"""Evidence: one check each, each a small result with metric, tolerance and outcome.

The deciding evidence for transfer equivalence is the relative peak gain of the
difference system ``G1 - G2`` over all frequencies (an L-infinity norm certified by the
Hamiltonian / symplectic eigenvalue test of Bruinsma & Steinbuch, 1990), backed by a
pointwise rounding-error estimate and, when that straddles the tolerance, by a
re-evaluation in ball arithmetic (:mod:`audit.precision`). Every other piece of
evidence (minimal orders and hidden modes, Markov parameters, poles and zeros, static
gains, frequency grid, similarity transform) supports and explains the verdict.

Outcomes: ``pass`` (agrees within tolerance), ``fail`` (differs beyond tolerance),
``unclear`` (the numerical error of the evidence straddles the tolerance), ``info``
(reported, does not decide), ``skipped`` (not applicable, with the reason).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any, Callable, Literal

import numpy as np
from numpy.typing import NDArray

from .realization import Realization

Outcome = Literal["pass", "fail", "unclear", "info", "skipped"]
EPS = float(np.finfo(float).eps)

DEFAULT_RTOL = 1e-5
"""Default relative tolerance on the peak gain of G1 - G2 (relative to the larger peak
gain of the two models). Chosen well above the rounding level of double-precision
evaluations of realizations reached through similarity transforms with cond(T) up to
about 1e8, and well below differences an engineer can see on a Bode plot."""

BOUNDARY_RTOL = 1e-9
"""A pole is treated as on the stability boundary (imaginary axis / unit circle) when
its distance to it is below this fraction of its magnitude (or of 1)."""


def complex_pairs(values: NDArray[np.complexfloating] | list[complex]) -> list[list[float]]:
    return [[float(np.real(v)), float(np.imag(v))] for v in np.asarray(values).ravel()]


def to_jsonable(value: Any) -> Any:
    """Convert numpy scalars/arrays (and nested containers) to JSON-friendly values.

    Complex numbers become ``[re, im]``; non-finite floats become the strings ``"inf"``,
    ``"-inf"`` or ``"nan"`` so that reports stay valid JSON.
    """
    if isinstance(value, dict):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_jsonable(v) for v in value]
    if isinstance(value, np.ndarray):
        if np.iscomplexobj(value):
            return complex_pairs(value)
        return to_jsonable(value.tolist())
    if isinstance(value, (complex, np.complexfloating)):
        return [float(np.real(value)), float(np.imag(value))]
    if isinstance(value, (np.floating, float)):
        v = float(value)
        return v if np.isfinite(v) else ("inf" if v > 0 else "-inf" if v < 0 else "nan")
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.bool_,)):
        return bool(value)
    return value


@dataclass(frozen=True)
class Evidence:
    """One piece of evidence.

    Attributes
    ----------
    key : str
        Stable identifier, e.g. ``"difference_peak_gain"``.
    title : str
        Short human title.
    metric : str
        What was measured, in words.
    value : float or None
        The measured value of the metric (None when it has no single number).
    tolerance : float or None
        The tolerance the value was compared against.
    outcome : {"pass", "fail", "unclear", "info", "skipped"}
    decisive : bool
        True for the evidence that decides the verdict.
    precision : str
        Arithmetic used: ``"double"``, ``"ball arithmetic, 256 bits"``, ...
    seconds : float
        Wall-clock time spent computing it.
    summary : str
        One plain sentence.
    details : dict
        Further numbers (JSON-friendly).
    """

    key: str
    title: str
    metric: str
    value: float | None
    tolerance: float | None
    outcome: Outcome
    decisive: bool
    precision: str
    seconds: float
    summary: str
    details: dict[str, Any] = field(default_factory=dict)

    def as_dict(self) -> dict[str, Any]:
        return {
            "key": self.key,
            "title": self.title,
            "metric": self.metric,
            "value": to_jsonable(self.value),
            "tolerance": self.tolerance,
            "outcome": self.outcome,
            "decisive": self.decisive,
            "precision": self.precision,
            "seconds": round(self.seconds, 6),
            "summary": self.summary,
            "details": to_jsonable(self.details),
        }


def timed(fn: Callable[[], Evidence]) -> Evidence:
    """Run an evidence builder and stamp the wall-clock time on its result."""
    start = time.perf_counter()
    ev = fn()
    elapsed = time.perf_counter() - start
    return Evidence(**{**ev.__dict__, "seconds": elapsed})


def skipped(key: str, title: str, reason: str) -> Evidence:
    return Evidence(key, title, "-", None, None, "skipped", False, "-", 0.0, reason, {})


# --------------------------------------------------------------------------- contour
@dataclass(frozen=True)
class Contour:
    """Where transfer functions are compared.

    Normally the imaginary axis (continuous) or the unit circle (discrete). When either
    model has a pole on that boundary (an integrator, an undamped oscillator, a discrete
    accumulator), the L-infinity norm is infinite, so both models are compared on a
    shifted contour instead: ``s = σ + jω`` or ``|z| = ρ``. Two transfer functions agree
    on the shifted contour exactly when they agree everywhere (analytic continuation),
    so the verdict is unchanged; only the reported numbers refer to the shifted contour.
    """

    shifted: bool
    shift: float  # σ (continuous) or ρ (discrete); 0 / 1 when not shifted
    reason: str

    def apply(self, r: Realization) -> Realization:
        if not self.shifted or r.order == 0:
            return r
        if r.sample_period is None:
            return r.with_matrices(r.a - self.shift * np.eye(r.order), r.b, r.c)
        return r.with_matrices(r.a / self.shift, r.b / self.shift, r.c)

    def describe(self) -> str:
        if not self.shifted:
            return "imaginary axis" if self.shift == 0.0 else "unit circle"
        return self.reason


def _near_boundary(poles: NDArray[np.complexfloating], discrete: bool) -> bool:
    if poles.size == 0:
        return False
    if discrete:
        return bool(np.any(np.abs(np.abs(poles) - 1.0) <= BOUNDARY_RTOL * 1e3))
    scale = np.maximum(np.abs(poles), 1e-300)
    return bool(np.any(np.abs(poles.real) <= BOUNDARY_RTOL * np.maximum(scale, 1.0)))


def choose_contour(models: list[Realization]) -> Contour:
    """Pick the comparison contour for a set of comparable models (see :class:`Contour`)."""
    discrete = models[0].is_discrete
    poles = np.concatenate([m.poles() for m in models]) if models else np.zeros(0)
    if not _near_boundary(poles, discrete):
        return Contour(False, 1.0 if discrete else 0.0, "")
    if discrete:
        best, best_dist = 1.01, -1.0
        for rho in (1.001, 1.002, 1.005, 1.01, 1.02, 1.05):
            dist = float(np.min(np.abs(np.abs(poles) - rho))) if poles.size else 1.0
            if dist > best_dist * 1.5:
                best, best_dist = rho, dist
        return Contour(
            True,
            best,
            f"circle |z| = {best:g} (a pole lies on the unit circle, where the gain is "
            "unbounded)",
        )
    nonzero = np.abs(poles[np.abs(poles) > 0])
    ref = float(np.exp(np.mean(np.log(nonzero)))) if nonzero.size else 1.0
    best, best_dist = 1e-3 * ref, -1.0
    for mult in (1e-3, 2e-3, 5e-3, 1e-2, 2e-2, 5e-2, 0.1):
        sigma = mult * ref
        dist = float(np.min(np.abs(poles.real - sigma))) / sigma
        if dist > best_dist * 1.5:
            best, best_dist = sigma, dist
    return Contour(
        True,
        best,
        f"line Re(s) = {best:.3g} (a pole lies on the imaginary axis, where the gain is "
        "unbounded)",
    )


def frequency_to_point(omega: NDArray[np.float64], r: Realization) -> NDArray[np.complex128]:
    w = np.asarray(omega, dtype=float)
    if r.sample_period is None:
        return 1j * w
    return np.exp(1j * w * r.sample_period)


__all__ = [
    "Evidence",
    "to_jsonable",
    "Contour",
    "choose_contour",
    "DEFAULT_RTOL",
    "frequency_to_point",
    "skipped",
    "timed",
]


# ----------------------------------------------------------------------- builders
def stability_label(poles: NDArray[np.complexfloating], discrete: bool) -> str:
    """``"stable"``, ``"marginal"`` or ``"unstable"`` for a set of poles.

    One rule for the whole project: :func:`audit.structure.mode_stability` per mode;
    the set is unstable if any mode is, else marginal if any mode is.
    """
    from .structure import mode_stability

    labels = {mode_stability(complex(p), discrete=discrete) for p in np.asarray(poles).ravel()}
    if "unstable" in labels:
        return "unstable"
    return "marginal" if "marginal" in labels else "stable"


def is_unstable_mode(p: complex, discrete: bool) -> bool:
    """True for a mode on or beyond the stability boundary (marginal counts), by
    :func:`audit.structure.mode_stability`."""
    from .structure import mode_stability

    return mode_stability(complex(p), discrete=discrete) != "stable"


def minimal_order_evidence(label: str, r: Realization, *, tol: float | None = None) -> tuple[Evidence, Any]:
    """Minimal order and hidden modes of one model (orthogonal staircase)."""
    from .structure import minimal_realization

    start = time.perf_counter()
    mr = minimal_realization(r, tol=tol)
    discrete = r.is_discrete
    hidden = [
        (complex(p), "uncontrollable") for p in np.asarray(mr.uncontrollable_modes)
    ] + [(complex(p), "unobservable") for p in np.asarray(mr.unobservable_modes)]
    unstable_hidden = [(p, how) for p, how in hidden if is_unstable_mode(p, discrete)]
    if not hidden:
        summary = f"{label}: minimal (order {r.order})"
    else:
        summary = (
            f"{label}: order {r.order}, minimal order {mr.order}; "
            f"{len(hidden)} hidden mode(s)"
        )
        if unstable_hidden:
            where = ", ".join(f"{_fmt_complex(p)} ({how})" for p, how in unstable_hidden)
            summary += f", UNSTABLE hidden mode(s) at {where}"
    clear = bool(mr.decisions_clear)
    if not clear:
        summary += "; some rank decisions had no clear singular-value gap"
    decisions = [d.as_dict() for d in mr.decisions]
    worst_gap = min((float(d.gap) for d in mr.decisions), default=float("inf"))
    ev = Evidence(
        key=f"minimal_order:{label}",
        title=f"Minimal order and hidden modes of {label}",
        metric="order of the controllable and observable part (orthogonal staircase)",
        value=float(mr.order),
        tolerance=float(mr.tolerance) if mr.tolerance is not None else None,
        outcome="info" if clear else "unclear",
        decisive=False,
        precision="double",
        seconds=time.perf_counter() - start,
        summary=summary,
        details={
            "order": r.order,
            "minimal_order": mr.order,
            "hidden_modes": [
                {"location": [p.real, p.imag], "kind": how, "unstable": is_unstable_mode(p, discrete)}
                for p, how in hidden
            ],
            "unstable_hidden_modes": len(unstable_hidden),
            "rank_decisions": decisions,
            "smallest_gap": worst_gap,
        },
    )
    return ev, mr


def _fmt_complex(p: complex) -> str:
    re_ = p.real + 0.0  # + 0.0 turns -0.0 into 0.0: no "-0" in reports
    if abs(p.imag) <= 1e-12 * max(abs(p), 1e-300):
        return f"{re_:.6g}"
    sign = "+" if p.imag >= 0 else "-"
    return f"{re_:.6g}{sign}{abs(p.imag):.6g}j"


def fmt_complex(p: complex) -> str:
    """Short human formatting of a complex number (real numbers without ``+0j``)."""
    return _fmt_complex(complex(p))
