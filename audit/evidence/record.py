"""Evidence: one check each, each a small result with metric, tolerance and outcome.

The deciding evidence for transfer equivalence is the relative peak gain of the
difference system ``G1 - G2`` over all frequencies (an L-infinity norm certified by the
Hamiltonian / symplectic eigenvalue test of Bruinsma & Steinbuch, 1990), backed by a
pointwise rounding-error estimate and, when that straddles the tolerance, by a
re-evaluation in ball arithmetic (:mod:`audit.evidence.precision`). Every other piece of
evidence (minimal orders and hidden modes, Markov parameters, poles and zeros, static
gains, frequency grid, similarity transform) supports and explains the verdict.

Outcomes: ``pass`` (agrees within tolerance), ``fail`` (differs beyond tolerance),
``unclear`` (the numerical error of the evidence straddles the tolerance), ``info``
(reported, does not decide), ``skipped`` (not applicable, with the reason),
``not_computed`` (an explanatory computation failed; the reason is its summary and the
verdict stands on the decisive evidence).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any, Callable, Literal

import numpy as np
from numpy.typing import NDArray

from audit.core.realization import Realization

Outcome = Literal["pass", "fail", "unclear", "info", "skipped", "not_computed"]
EPS = float(np.finfo(float).eps)

DEFAULT_RTOL = 1e-5
"""Default relative tolerance on the peak gain of G1 - G2 (relative to the larger peak
gain of the two models). Chosen well above the rounding level of double-precision
evaluations of realizations reached through similarity transforms with cond(T) up to
about 1e8, and well below differences an engineer can see on a Bode plot."""



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
    outcome : {"pass", "fail", "unclear", "info", "skipped", "not_computed"}
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


__all__ = [
    "Evidence",
    "to_jsonable",
    "DEFAULT_RTOL",
    "skipped",
    "timed",
]


# ----------------------------------------------------------------------- builders
def stability_label(poles: NDArray[np.complexfloating], discrete: bool) -> str:
    """``"stable"``, ``"marginal"`` or ``"unstable"`` for a set of poles.

    One rule for the whole project: :func:`audit.structure.hidden_modes.mode_stability` per mode;
    the set is unstable if any mode is, else marginal if any mode is.
    """
    from audit.structure.hidden_modes import mode_stability

    labels = {mode_stability(complex(p), discrete=discrete) for p in np.asarray(poles).ravel()}
    if "unstable" in labels:
        return "unstable"
    return "marginal" if "marginal" in labels else "stable"


def is_unstable_mode(p: complex, discrete: bool) -> bool:
    """True for a mode on or beyond the stability boundary (marginal counts), by
    :func:`audit.structure.hidden_modes.mode_stability`."""
    from audit.structure.hidden_modes import mode_stability

    return mode_stability(complex(p), discrete=discrete) != "stable"


def minimal_order_evidence(label: str, r: Realization, *, tol: float | None = None) -> tuple[Evidence, Any]:
    """Minimal order and hidden modes of one model (orthogonal staircase)."""
    from audit.structure.minimal import minimal_realization
    from audit.structure.mode_coupling import mode_couplings

    start = time.perf_counter()
    mr = minimal_realization(r, tol=tol)
    couplings = mode_couplings(r, tol=tol, minimal=mr)  # hidden / nearly hidden, with levels
    flagged = [m.as_dict() for m in couplings.flagged]
    hidden = [(complex(*m["location"]), m["kind"]) for m in flagged if m["classification"] == "hidden"]
    unstable_hidden = [(complex(*m["location"]), m["kind"]) for m in flagged if m["unstable"]]
    if not hidden:
        summary = f"{label}: minimal (order {r.order})"
    else:
        summary = (
            f"{label}: order {r.order}, minimal order {mr.order}; "
            f"{len(hidden)} hidden mode(s)"
        )
    if unstable_hidden:
        where = ", ".join(f"{_fmt_complex(p)} ({how})" for p, how in unstable_hidden)
        summary += f", UNSTABLE hidden or nearly hidden mode(s) at {where}"
    clear = bool(mr.decisions_clear)
    if not clear:
        summary += "; some rank decisions had no clear singular-value gap"
    stored = getattr(r, "stored", None)
    if stored is not None:
        summary += f" (computed on the realization of the {stored.describe()}, a converted copy)"
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
            "hidden_modes": [m for m in flagged if m["classification"] == "hidden"],
            "nearly_hidden_modes": [m for m in flagged if m["classification"] == "nearly_hidden"],
            "mode_coupling_thresholds": couplings.as_dict()["thresholds"],
            "unstable_hidden_modes": len(unstable_hidden),
            "rank_decisions": decisions,
            "smallest_gap": worst_gap,
            "computed_from": "state-space matrices as stored" if stored is None else
            f"realization of the {stored.describe()} (converted copy)",
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
