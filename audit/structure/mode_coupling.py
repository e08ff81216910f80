"""Classification of every mode of a realization as hidden, nearly hidden or coupled,
with its coupling levels (:mod:`audit.structure.coupling_levels`); "hidden" is the
staircase's decision (:func:`audit.structure.minimal.minimal_realization`)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from audit.core.realization import Realization
from audit.structure.coupling_levels import (
    NEARLY_HIDDEN_LEVEL, Classification, CouplingMethod, _mode_sides,
)
from audit.structure.hidden_modes import DEFAULT_MARGINAL_TOL, mode_stability
from audit.structure.minimal import MinimalRealization, minimal_realization
from audit.structure.scaling import _scaled
from audit.structure.shared import (
    HiddenKind, Stability, _UnstableWhenNotStable, _check_realization, _json_float,
)

@dataclass(frozen=True)
class ModeCoupling(_UnstableWhenNotStable):
    """How strongly one mode (an eigenvalue of A) is coupled to the inputs and outputs.

    Attributes
    ----------
    value : complex
        The eigenvalue (s-plane, or z-plane for discrete time).
    classification : {"hidden", "nearly_hidden", "coupled"}
        "hidden": removed by the staircase (it does not count in the minimal order);
        "nearly_hidden": kept, but ``joint <= NEARLY_HIDDEN_LEVEL``; "coupled" otherwise.
    kind : {"uncontrollable", "unobservable", "uncontrollable_and_unobservable"} or None
        The side(s) through which it is hidden or weakly coupled (None when coupled).
    stability : {"stable", "marginal", "unstable"}
    inputs, outputs : float
        Coupling to the inputs / outputs in the state coordinates as stored, relative
        to the model's size (see :func:`_mode_sides`; 0 = exactly decoupled, 1 = the
        largest possible).
    joint : float
        Product of input and output coupling in the analysis coordinates (after the
        state scaling the staircase used): a diagonal change of state coordinates
        moves one factor up and the other down, so the product is what decides.
    method : {"eigenvector", "pbh"}
    eigenvalue_condition : float
        ``1 / |w^H v|`` for unit eigenvectors (``inf`` for a defective eigenvalue).
    """

    value: complex
    classification: Classification
    kind: HiddenKind | None
    stability: Stability
    inputs: float
    outputs: float
    joint: float
    method: CouplingMethod
    eigenvalue_condition: float

    def as_dict(self) -> dict[str, Any]:
        return {
            "location": [float(self.value.real), float(self.value.imag)],
            "classification": self.classification,
            "kind": self.kind,
            "stability": self.stability,
            "unstable": self.is_unstable,
            "coupling": {"inputs": float(self.inputs), "outputs": float(self.outputs),
                         "joint": float(self.joint)},
            "method": self.method,
            "eigenvalue_condition": _json_float(float(self.eigenvalue_condition)),
        }


@dataclass(frozen=True)
class ModeCouplings:
    """Coupling and classification of every mode of a realization.

    Attributes
    ----------
    modes : tuple of ModeCoupling
        One per eigenvalue of A (sorted by real part, then imaginary part).
    minimal_order : int
        Number of modes that are not hidden (the staircase's minimal order).
    hidden_tolerance : float
        The staircase rank tolerance (relative).
    nearly_hidden_level : float
        Threshold on ``joint`` for "nearly_hidden".
    decisions_clear : bool
        Whether the staircase decisions behind "hidden" were clear.
    discrete : bool
    marginal_tol : float
    """

    modes: tuple[ModeCoupling, ...]
    minimal_order: int
    hidden_tolerance: float
    nearly_hidden_level: float
    decisions_clear: bool
    discrete: bool
    marginal_tol: float

    @property
    def flagged(self) -> tuple[ModeCoupling, ...]:
        """The hidden and nearly hidden modes."""
        return tuple(m for m in self.modes if m.classification != "coupled")

    def as_dict(self) -> dict[str, Any]:
        return {
            "modes": [m.as_dict() for m in self.flagged],
            "minimal_order": self.minimal_order,
            "thresholds": {"hidden": float(self.hidden_tolerance),
                           "nearly_hidden": float(self.nearly_hidden_level),
                           "marginal": float(self.marginal_tol)},
            "decisions_clear": self.decisions_clear,
        }


def _side_kind(inputs: float, outputs: float) -> HiddenKind:
    if inputs <= 0.1 * outputs:
        return "uncontrollable"
    if outputs <= 0.1 * inputs:
        return "unobservable"
    return "uncontrollable_and_unobservable"


def mode_couplings(
    r: Realization,
    *,
    tol: float | None = None,
    marginal_tol: float = DEFAULT_MARGINAL_TOL,
    minimal: MinimalRealization | None = None,
) -> ModeCouplings:
    """Classify every mode as hidden, nearly hidden or coupled, with its coupling levels.

    "Hidden" is the staircase's decision (:func:`minimal_realization`, so that the
    hidden modes and the minimal order always agree); the couplings are measured per
    mode (:class:`ModeCoupling`): eigenvector couplings for simple, well-conditioned
    eigenvalues, PBH singular values (Eising's distance, restricted to the eigenvalue)
    otherwise. The removed eigenvalues are assigned to the eigenvalues of A by an
    optimal assignment of their distances.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    tol : float, optional, keyword-only
        Staircase rank tolerance (see :func:`minimal_realization`).
    marginal_tol : float, keyword-only
        Width of the marginal band (see :func:`mode_stability`).
    minimal : MinimalRealization, optional, keyword-only
        A minimal realization of ``r`` already computed with the same ``tol``.

    Returns
    -------
    ModeCouplings

    Raises
    ------
    InvalidModelError
        If ``r`` is not a Realization or a tolerance is out of range.
    NumericalTroubleError
        If a decomposition fails.

    Examples
    --------
    >>> r = Realization.from_arrays([[-1.0, 0.0], [0.0, 0.5]], [[1.0], [1.0]],
    ...                             [[1.0, 1e-9]], [[0.0]])
    >>> m = mode_couplings(r).modes[1]
    >>> m.classification, m.kind, m.stability, f"{m.outputs:.1e}"
    ('nearly_hidden', 'unobservable', 'unstable', '1.0e-09')
    """
    from audit.core.threads import limited_blas_threads

    with limited_blas_threads():  # many small SVDs: threads only add contention
        return _mode_couplings(r, tol=tol, marginal_tol=marginal_tol, minimal=minimal)


def _mode_couplings(r: Realization, *, tol: float | None, marginal_tol: float,
                    minimal: MinimalRealization | None) -> ModeCouplings:
    """Implementation of :func:`mode_couplings`."""
    from scipy.optimize import linear_sum_assignment

    r = _check_realization(r)
    mode_stability(0.0, discrete=False, marginal_tol=marginal_tol)  # validates it
    mr = minimal if minimal is not None else minimal_realization(r, tol=tol)
    stored = _mode_sides(r)
    n = r.order
    if n and np.any(mr.state_scaling != 1.0):  # exact: powers of 2
        analysis = _mode_sides(_scaled(r, np.asarray(mr.state_scaling)))
        # same eigenvalues (a diagonal similarity); pair them by an optimal assignment
        cost = np.abs(stored.values[:, None] - analysis.values[None, :])
        _, perm = linear_sum_assignment(cost)
        joint = analysis.inputs[perm] * analysis.outputs[perm]
    else:
        joint = stored.inputs * stored.outputs
    removed = [(complex(z), "uncontrollable") for z in np.asarray(mr.uncontrollable_modes)] + [
        (complex(z), "unobservable") for z in np.asarray(mr.unobservable_modes)]
    hidden_kind: dict[int, str] = {}
    if removed and n:
        cost = np.abs(np.array([z for z, _ in removed])[:, None] - stored.values[None, :])
        rows, cols = linear_sum_assignment(cost)
        hidden_kind = {int(j): removed[int(i)][1] for i, j in zip(rows, cols)}
    inputs, outputs = stored.inputs.copy(), stored.outputs.copy()
    # inside a PBH cluster the levels are interchangeable: the smallest go to the
    # members the staircase removed
    for members in stored.clusters:
        if len(members) < 2:
            continue
        order = sorted(members, key=lambda j: (j not in hidden_kind, j))
        by_joint = sorted(members, key=lambda j: joint[j])
        pairs = [(inputs[j], outputs[j], joint[j]) for j in by_joint]
        for j, (i_, o_, p_) in zip(order, pairs):
            inputs[j], outputs[j], joint[j] = i_, o_, p_
    rtol = mr.tolerance
    modes: list[ModeCoupling] = []
    for j in range(n):
        value = complex(stored.values[j])
        kind: HiddenKind | None
        if j in hidden_kind:
            cls: Classification = "hidden"
            kind = "uncontrollable" if hidden_kind[j] == "uncontrollable" else "unobservable"
            if kind == "uncontrollable" and outputs[j] <= rtol:
                kind = "uncontrollable_and_unobservable"
        elif joint[j] <= NEARLY_HIDDEN_LEVEL:
            cls, kind = "nearly_hidden", _side_kind(float(inputs[j]), float(outputs[j]))
        else:
            cls, kind = "coupled", None
        modes.append(ModeCoupling(
            value=value, classification=cls, kind=kind,
            stability=mode_stability(value, discrete=r.is_discrete, marginal_tol=marginal_tol),
            inputs=float(inputs[j]), outputs=float(outputs[j]), joint=float(joint[j]),
            method=stored.methods[j], eigenvalue_condition=float(stored.conditions[j])))
    modes.sort(key=lambda m: (m.value.real, m.value.imag))
    return ModeCouplings(
        modes=tuple(modes),
        minimal_order=mr.order,
        hidden_tolerance=float(rtol),
        nearly_hidden_level=NEARLY_HIDDEN_LEVEL,
        decisions_clear=bool(mr.decisions_clear),
        discrete=r.is_discrete,
        marginal_tol=float(marginal_tol),
    )


__all__ = [
    "ModeCoupling",
    "ModeCouplings",
    "mode_couplings",
]
