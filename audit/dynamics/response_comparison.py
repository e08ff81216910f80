"""Comparison of two models' time responses (step, impulse and, given a state
transformation, initial-condition responses) on one common exact grid built from both
models' horizons (:func:`audit.dynamics.time_responses.response_horizon`)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from numpy.typing import ArrayLike

from audit.core.realization import Realization, check_comparable
from audit.dynamics.time_responses import (
    FloatArray, _check_model, impulse_response, initial_condition_response, response_horizon,
    step_response,
)
from audit.errors import InvalidModelError


# ------------------------------------------------------------------ comparison
@dataclass(frozen=True)
class ResponseDifference:
    """Largest difference between two responses of one kind.

    Attributes
    ----------
    kind : str
        "step", "impulse" or "initial_condition".
    relative_difference : float
        ``max |y1 - y2| / max(max |y1|, max |y2|)`` over times and channels (0 when both
        vanish).
    absolute_difference : float
    reference_peak : float
    time : float
        Seconds at which the largest difference occurs.
    output : int
    input : int or None
        Input channel (step/impulse) or index of the initial-state unit vector.
    """

    kind: str
    relative_difference: float
    absolute_difference: float
    reference_peak: float
    time: float
    output: int
    input: int | None

    def as_dict(self) -> dict[str, Any]:
        return {
            "kind": self.kind,
            "relative_difference": self.relative_difference,
            "absolute_difference": self.absolute_difference,
            "reference_peak": self.reference_peak,
            "time": self.time,
            "output": self.output,
            "input": self.input,
        }


@dataclass(frozen=True)
class TimeDomainComparison:
    """Result of :func:`compare_time_responses`.

    Attributes
    ----------
    horizon, time_step : float
        Seconds of the common grid; ``n_points`` its length.
    rtol : float
    differences : tuple of ResponseDifference
        Step, impulse, and (with a transform) initial-condition comparisons.
    relative_peak_difference : float
        Largest relative difference over ``differences``.
    time_of_largest_difference : float
    outcome : {"same", "different"}
    note : str
    """

    horizon: float
    time_step: float
    n_points: int
    rtol: float
    differences: tuple[ResponseDifference, ...]
    relative_peak_difference: float
    time_of_largest_difference: float
    outcome: Literal["same", "different"]
    note: str = ""

    def as_dict(self) -> dict[str, Any]:
        return {
            "horizon": self.horizon,
            "time_step": self.time_step,
            "n_points": self.n_points,
            "rtol": self.rtol,
            "differences": [d.as_dict() for d in self.differences],
            "relative_peak_difference": self.relative_peak_difference,
            "time_of_largest_difference": self.time_of_largest_difference,
            "outcome": self.outcome,
            "note": self.note,
        }


def _difference(kind: str, t: FloatArray, y1: FloatArray, y2: FloatArray) -> ResponseDifference:
    # y: (k, p, q)
    diff = np.abs(y1 - y2)
    peak = float(max(np.max(np.abs(y1)), np.max(np.abs(y2)))) if y1.size else 0.0
    if diff.size == 0:
        return ResponseDifference(kind, 0.0, 0.0, peak, float(t[0]), 0, None)
    flat = int(np.argmax(diff))
    kk, pp, qq = np.unravel_index(flat, diff.shape)
    absd = float(diff[kk, pp, qq])
    rel = 0.0 if absd == 0.0 else (absd / peak if peak > 0 else math.inf)
    return ResponseDifference(kind, rel, absd, peak, float(t[kk]), int(pp), int(qq))


def compare_time_responses(
    r1: Realization,
    r2: Realization,
    *,
    rtol: float,
    transform: ArrayLike | None = None,
    settle_fraction: float = 1e-3,
    max_points: int = 5000,
) -> TimeDomainComparison:
    """Compare step and impulse responses of two models on a common grid.

    The grid covers the longer of the two horizons of :func:`response_horizon` with the
    finer of the two steps (capped at ``max_points``). For each kind the metric is the
    largest absolute difference over times and channels divided by the larger peak of
    the two responses. With ``transform`` ``T`` (claimed ``x2 = T x1``) the free
    responses of ``r1`` from each unit vector ``e_i`` and of ``r2`` from ``T e_i`` are
    compared as well.

    Parameters
    ----------
    r1, r2 : Realization
        Same input/output counts and time domain; ``A1 : (n1, n1)``, ``A2 : (n2, n2)``.
    rtol : float
        Outcome "same" when every relative difference is ``<= rtol``.
    transform : (n2, n1) array_like or None
    settle_fraction, max_points
        Passed to :func:`response_horizon`.

    Returns
    -------
    TimeDomainComparison

    Raises
    ------
    IncompatibleModelsError
        Different input/output counts or time domains.
    InvalidModelError
        ``transform`` of the wrong shape or not finite; bad ``rtol``.
    NumericalTroubleError
        A response overflows.
    """
    r1, r2 = _check_model(r1), _check_model(r2)
    check_comparable(r1, r2)
    try:
        rtol_f = float(rtol)
    except (TypeError, ValueError):
        raise InvalidModelError(f"rtol: got {rtol!r} but a number > 0 was expected", field="rtol") from None
    if not math.isfinite(rtol_f) or rtol_f <= 0:
        raise InvalidModelError(f"rtol: got {rtol!r} but a finite number > 0 was expected", field="rtol")
    t_mat: FloatArray | None = None
    if transform is not None:
        t_mat = np.asarray(transform, dtype=float)
        if t_mat.shape != (r2.order, r1.order):
            raise InvalidModelError(
                f"transform: has shape {t_mat.shape} but ({r2.order}, {r1.order}) was "
                "expected (x2 = T x1, second model's states x first model's states)",
                field="transform",
            )
        if not np.all(np.isfinite(t_mat)):
            raise InvalidModelError("transform: contains NaN or infinity", field="transform")
    h1 = response_horizon(r1, settle_fraction=settle_fraction, max_points=max_points)
    h2 = response_horizon(r2, settle_fraction=settle_fraction, max_points=max_points)
    horizon = max(h1.horizon, h2.horizon)
    step = min(h1.time_step, h2.time_step)
    notes = [n for n in (h1.note, h2.note) if n]
    n_pts = int(math.ceil(horizon / step - 1e-9)) + 1
    if n_pts > max_points:
        if r1.is_discrete:
            n_pts = max_points
        else:
            n_pts = max_points
            step = horizon / (max_points - 1)
        notes.append(f"common grid capped at {max_points} points")
    times = np.arange(n_pts) * step
    diffs = [
        _difference("step", times, step_response(r1, times).outputs, step_response(r2, times).outputs),
        _difference("impulse", times, impulse_response(r1, times).outputs,
                    impulse_response(r2, times).outputs),
    ]
    if not r1.is_discrete:
        dd = float(np.max(np.abs(r1.d - r2.d))) if r1.d.size else 0.0
        if dd > 0:
            notes.append(f"impulse responses exclude D*delta(t); D differs by {dd:.3g} (seen in the step response)")
    if t_mat is not None and r1.order > 0:
        eye = np.eye(r1.order)
        y1 = np.stack([initial_condition_response(r1, eye[:, i], times).outputs
                       for i in range(r1.order)], axis=-1)
        y2 = np.stack([initial_condition_response(r2, t_mat @ eye[:, i], times).outputs
                       for i in range(r1.order)], axis=-1)
        diffs.append(_difference("initial_condition", times, y1, y2))
    worst = max(diffs, key=lambda d: d.relative_difference)
    outcome: Literal["same", "different"] = (
        "same" if all(d.relative_difference <= rtol_f for d in diffs) else "different"
    )
    return TimeDomainComparison(
        float(times[-1]), float(step), int(n_pts), rtol_f, tuple(diffs),
        worst.relative_difference, worst.time, outcome, "; ".join(notes),
    )
