"""Hidden (uncontrollable and/or unobservable) modes of a realization, located by the
Kalman decomposition, and the one rule for a mode's stability (:func:`mode_stability`)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from audit.errors import InvalidModelError
from audit.core.realization import Realization
from audit.structure.kalman import kalman_decomposition
from audit.structure.shared import HiddenKind, Stability, _UnstableWhenNotStable
from audit.structure.staircase import RankDecision

#: default relative band around the stability boundary for hidden modes.
DEFAULT_MARGINAL_TOL = 1e-6


@dataclass(frozen=True)
class HiddenMode(_UnstableWhenNotStable):
    """One hidden (uncontrollable and/or unobservable) mode.

    Attributes
    ----------
    value : complex
        The eigenvalue (s-plane for continuous time, z-plane for discrete time).
    kind : {"uncontrollable", "unobservable", "uncontrollable_and_unobservable"}
    stability : {"stable", "marginal", "unstable"}
    """

    value: complex
    kind: HiddenKind
    stability: Stability

    def as_dict(self) -> dict[str, Any]:
        return {
            "value": [float(self.value.real), float(self.value.imag)],
            "kind": self.kind,
            "stability": self.stability,
            "is_unstable": self.is_unstable,
        }


@dataclass(frozen=True)
class HiddenModes:
    """All hidden modes of a realization.

    Attributes
    ----------
    modes : tuple of HiddenMode
    any_unstable : bool
        Whether a hidden mode is unstable or marginal -- a key finding.
    discrete : bool
    marginal_tol : float
    decisions_clear : bool
        Whether the rank decisions behind the split were all clear.
    decisions : tuple of RankDecision
    """

    modes: tuple[HiddenMode, ...]
    any_unstable: bool
    discrete: bool
    marginal_tol: float
    decisions_clear: bool
    decisions: tuple[RankDecision, ...]

    def as_dict(self) -> dict[str, Any]:
        return {
            "modes": [m.as_dict() for m in self.modes],
            "any_unstable": self.any_unstable,
            "discrete": self.discrete,
            "marginal_tol": float(self.marginal_tol),
            "decisions_clear": self.decisions_clear,
            "decisions": [d.as_dict() for d in self.decisions],
        }


def mode_stability(value: complex, *, discrete: bool, marginal_tol: float = DEFAULT_MARGINAL_TOL) -> Stability:
    """Classify one mode against the stability boundary.

    Continuous time: with ``h = marginal_tol * max(1, |value|)``, "unstable" when
    ``Re(value) > h``, "marginal" when ``|Re(value)| <= h``, otherwise "stable".
    Discrete time: "unstable" when ``|value| > 1 + marginal_tol``, "marginal" when
    ``||value| - 1| <= marginal_tol``, otherwise "stable".

    Parameters
    ----------
    value : complex
    discrete : bool, keyword-only
    marginal_tol : float, keyword-only
        Relative width of the marginal band (default 1e-6; wide enough to catch a
        hidden double integrator, whose computed eigenvalues move by about sqrt(eps)).

    Returns
    -------
    {"stable", "marginal", "unstable"}

    Raises
    ------
    InvalidModelError
        If ``marginal_tol`` is negative or not finite.
    """
    if not math.isfinite(marginal_tol) or marginal_tol < 0:
        raise InvalidModelError(
            f"marginal_tol: expected a finite number >= 0, got {marginal_tol!r}",
            field="marginal_tol",
        )
    z = complex(value)
    if discrete:
        radius = abs(z)
        if radius > 1.0 + marginal_tol:
            return "unstable"
        return "marginal" if abs(radius - 1.0) <= marginal_tol else "stable"
    band = marginal_tol * max(1.0, abs(z))
    if z.real > band:
        return "unstable"
    return "marginal" if abs(z.real) <= band else "stable"


def hidden_modes(
    r: Realization,
    *,
    tol: float | None = None,
    marginal_tol: float = DEFAULT_MARGINAL_TOL,
    balance: bool = True,
) -> HiddenModes:
    """The hidden modes of a realization, classified and located.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    tol : float, optional, keyword-only
        Relative rank tolerance (see :func:`kalman_decomposition`).
    marginal_tol : float, keyword-only
        Width of the marginal band around the stability boundary
        (see :func:`mode_stability`).
    balance : bool, keyword-only
        State scaling first (see :func:`kalman_decomposition`). Default True.

    Returns
    -------
    HiddenModes

    Raises
    ------
    InvalidModelError
        If ``r`` is not a Realization or a tolerance is out of range.
    NumericalTroubleError
        If a decomposition fails.

    Examples
    --------
    >>> r = Realization.from_arrays([[-1.0, 0.0], [0.0, 0.5]], [[1.0], [0.0]],
    ...                             [[1.0, 1.0]], [[0.0]])
    >>> h = hidden_modes(r)
    >>> h.any_unstable, h.modes[0].kind, round(h.modes[0].value.real, 12)
    (True, 'uncontrollable', 0.5)
    """
    mode_stability(0.0, discrete=False, marginal_tol=marginal_tol)  # validates it
    kd = kalman_decomposition(r, tol=tol, balance=balance)
    discrete = r.is_discrete
    kinds: tuple[tuple[str, HiddenKind], ...] = (
        ("uo", "uncontrollable"),
        ("cu", "unobservable"),
        ("uu", "uncontrollable_and_unobservable"),
    )
    modes: list[HiddenMode] = []
    for key, kind in kinds:
        for z in kd.eigenvalues[key]:
            zc = complex(z)
            modes.append(
                HiddenMode(
                    value=zc,
                    kind=kind,
                    stability=mode_stability(zc, discrete=discrete, marginal_tol=marginal_tol),
                )
            )
    return HiddenModes(
        modes=tuple(modes),
        any_unstable=any(m.is_unstable for m in modes),
        discrete=discrete,
        marginal_tol=float(marginal_tol),
        decisions_clear=kd.decisions_clear,
        decisions=kd.decisions,
    )


__all__ = [
    "DEFAULT_MARGINAL_TOL",
    "HiddenMode",
    "HiddenModes",
    "hidden_modes",
    "mode_stability",
]
