"""The comparison contour: where two transfer functions are compared.

Normally the stability boundary itself (imaginary axis or unit circle); when a model has
a pole ON that boundary as stored (within rounding), a slightly shifted contour instead
(:class:`Contour`, :func:`choose_contour`). Also the map from frequencies to points on
the boundary (:func:`frequency_to_point`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from audit.core.realization import Realization
from audit.evidence.record import fmt_complex

__all__ = [
    "Contour",
    "BOUNDARY_PREFILTER",
    "ROUNDING_SAFETY",
    "SHIFT_STEPS",
    "boundary_poles_as_stored",
    "choose_contour",
    "frequency_to_point",
]


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


BOUNDARY_PREFILTER = 1e-5
"""Computed poles farther than this (relative) from the stability boundary are not
examined further; closer ones are tested against the stored data (see
:func:`boundary_poles_as_stored`)."""

ROUNDING_SAFETY = 16.0
"""Safety factor on the rounding bounds used to decide that a pole is on the boundary
within rounding."""


def _projection(p: complex, discrete: bool) -> complex:
    if discrete:
        return p / abs(p) if abs(p) > 0 else complex(1.0)
    return complex(0.0, p.imag)


def _boundary_distance(p: complex, discrete: bool) -> float:
    if discrete:
        return abs(abs(p) - 1.0)
    return abs(p.real) / max(abs(p), 1.0)


def _on_boundary_within_rounding(r: Realization, lam: complex) -> bool:
    """True when the STORED model has a pole at the boundary point ``lam`` within rounding.

    State space: ``σ_min(λI - A) <= 4 u max(||A||_F, |λ|)``: rounding every entry of A
    (|E| <= u|A|, so ||E||_2 <= u ||A||_F) can make λ an eigenvalue (the normwise
    backward error of λ as an eigenvalue is σ_min(λI - A), Higham 2nd ed., section 7.2
    applied to λI - A). A stored exact integrator, also one seen through rounded
    coordinates, passes; an ill-conditioned but clearly damped pole (|Re p| = 3.6e-6 next
    to ||A|| = 1e6) does not. Transfer function: a stored denominator vanishes at λ within
    the rounding bound of Horner's rule (Higham, section 5.1). Zero-pole-gain: a stored
    pole is within a few units of rounding of λ.
    """
    from audit.core.stored_evaluation import (UNIT_ROUNDOFF, StoredTransferFunction,
                                    StoredZerosPolesGain, _horner_with_bound)

    stored = r.stored
    if stored is None:
        n = r.order
        if n == 0:
            return False
        m = lam * np.eye(n) - r.a
        smin = float(np.linalg.svd(m, compute_uv=False)[-1])
        return smin <= 4.0 * UNIT_ROUNDOFF * max(float(np.linalg.norm(r.a)), abs(lam))
    if isinstance(stored, StoredZerosPolesGain):
        for q in stored.poles():
            if abs(q - lam) <= ROUNDING_SAFETY * UNIT_ROUNDOFF * max(abs(q), 1.0):
                return True
        return False
    if isinstance(stored, StoredTransferFunction):
        for _, _, _, den in stored.channels():
            val, bound = _horner_with_bound(np.asarray(den, dtype=float), np.array([complex(lam)]))
            if abs(val[0]) <= ROUNDING_SAFETY * float(bound[0]):
                return True
        return False
    return False


def boundary_poles_as_stored(models: list[Realization]) -> list[complex]:
    """Boundary points (imaginary axis / unit circle) where a model, as stored, has a
    pole within rounding. A pole merely close to the boundary (|z| = 1 - 2.4e-7, say)
    is not on it: its model is compared on the boundary itself."""
    out: list[complex] = []
    for r in models:
        discrete = r.is_discrete
        candidates = r.stored.poles() if r.stored is not None else r.poles()
        for p in np.asarray(candidates, dtype=complex).ravel():
            if not np.isfinite(p) or _boundary_distance(complex(p), discrete) > BOUNDARY_PREFILTER:
                continue
            lam = _projection(complex(p), discrete)
            if any(abs(lam - q) <= 1e-9 * max(abs(q), 1.0) for q in out):
                continue
            if any(_on_boundary_within_rounding(m, lam) for m in models):
                out.append(lam)
    return out


SHIFT_STEPS = (1e-4, 2e-4, 5e-4, 1e-3, 2e-3, 5e-3, 1e-2, 2e-2, 5e-2, 0.1)
"""Candidate contour shifts, smallest first: relative to the geometric mean pole
magnitude (continuous, σ) or as ρ - 1 (discrete). The least one that keeps every other
pole at least the shift itself away from the contour is used."""


def choose_contour(models: list[Realization]) -> Contour:
    """Pick the comparison contour for a set of comparable models (see :class:`Contour`).

    The contour is shifted only when a model has a pole ON the stability boundary as
    stored (within rounding, :func:`boundary_poles_as_stored`), and then by the least
    amount of :data:`SHIFT_STEPS` that keeps every pole at least that far from the shifted
    contour.
    """
    discrete = models[0].is_discrete
    on_boundary = boundary_poles_as_stored(models) if models else []
    if not on_boundary:
        return Contour(False, 1.0 if discrete else 0.0, "")
    poles = np.concatenate([m.poles() for m in models]) if models else np.zeros(0)
    where = ", ".join(fmt_complex(p) for p in on_boundary[:4])
    if discrete:
        best = 1.0 + SHIFT_STEPS[-1]
        for step in SHIFT_STEPS:
            rho = 1.0 + step
            if poles.size == 0 or float(np.min(np.abs(np.abs(poles) - rho))) >= step / 2:
                best = rho
                break
        return Contour(
            True,
            best,
            f"circle |z| = {best:g} (a pole lies on the unit circle as stored, at {where}, "
            "where the gain is unbounded)",
        )
    nonzero = np.abs(poles[np.abs(poles) > 0])
    ref = float(np.exp(np.mean(np.log(nonzero)))) if nonzero.size else 1.0
    best = SHIFT_STEPS[-1] * ref
    for step in SHIFT_STEPS:
        sigma = step * ref
        if poles.size == 0 or float(np.min(np.abs(poles.real - sigma))) >= sigma / 2:
            best = sigma
            break
    return Contour(
        True,
        best,
        f"line Re(s) = {best:.3g} (a pole lies on the imaginary axis as stored, at {where}, "
        "where the gain is unbounded)",
    )


def frequency_to_point(omega: NDArray[np.float64], r: Realization) -> NDArray[np.complex128]:
    w = np.asarray(omega, dtype=float)
    if r.sample_period is None:
        return 1j * w
    return np.exp(1j * w * r.sample_period)
