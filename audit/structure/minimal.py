"""Minimal realization by two orthogonal staircase reductions (Van Dooren 1981).

First the uncontrollable part is split off by the controllability staircase, then the
unobservable part of the controllable subsystem by the observability staircase (the
method of SLICOT TB01PD, but with SVD rank decisions that are recorded; see
:mod:`audit.structure.staircase` for the rank-decision rule and
:mod:`audit.structure.scaling` for the state scaling applied first).

The other structure modules: :mod:`audit.structure.kalman` (Kalman decomposition),
:mod:`audit.structure.hidden_modes` (hidden modes and their stability),
:mod:`audit.structure.mode_coupling` (hidden, nearly hidden and coupled modes),
:mod:`audit.structure.zeros` (invariant and transmission zeros).
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass
from typing import Any

from audit.core.realization import FloatArray, Realization
from audit.structure.scaling import _prepare
from audit.structure.shared import ComplexArray, _check_realization, _complex_list
from audit.structure.staircase import RankDecision, _minimal_parts, _relative_tolerance

# ------------------------------------------------------------ minimal realization
@dataclass(frozen=True)
class MinimalRealization:
    """A minimal realization and what was removed to get it.

    Attributes
    ----------
    realization : Realization
        Minimal; obtained from the (optionally state-scaled) realization by orthogonal
        transformations; same D, sample period and name. When nothing is removed it is
        the given realization itself, in its own coordinates.
    order : int
        Its order (the McMillan degree, as judged with ``tolerance``).
    original_order : int
    uncontrollable_modes : (n - n_c,) complex ndarray
        Eigenvalues of the removed uncontrollable block (this includes modes that are
        both uncontrollable and unobservable).
    unobservable_modes : (n_c - order,) complex ndarray
        Eigenvalues of the removed unobservable block of the controllable part.
    decisions : tuple of RankDecision
        Controllability decisions, then observability decisions (of the scaled model).
    decisions_clear : bool
        Every decision clear, and the order found without state scaling is the same.
    tolerance : float
        The relative rank tolerance used.
    discarded_norm : float
        Norm of everything set to zero, relative to ``max(||A||, ||B||, ||C||)``.
    state_scaling : (n,) ndarray
        The diagonal state scaling ``d`` applied first (all ones when none).
    unscaled_order : int
        The order found on the realization as given, without state scaling (equal to
        ``order`` when no scaling was applied). A difference means the rank decisions
        depend on the state coordinates: ``decisions_clear`` is then False.
    """

    realization: Realization
    order: int
    original_order: int
    uncontrollable_modes: ComplexArray
    unobservable_modes: ComplexArray
    decisions: tuple[RankDecision, ...]
    decisions_clear: bool
    tolerance: float
    discarded_norm: float
    state_scaling: FloatArray
    unscaled_order: int

    @property
    def is_minimal(self) -> bool:
        """Whether the original realization was already minimal."""
        return self.order == self.original_order

    def as_dict(self) -> dict[str, Any]:
        return {
            "realization": self.realization.as_dict(),
            "order": self.order,
            "original_order": self.original_order,
            "uncontrollable_modes": _complex_list(self.uncontrollable_modes),
            "unobservable_modes": _complex_list(self.unobservable_modes),
            "decisions": [d.as_dict() for d in self.decisions],
            "decisions_clear": self.decisions_clear,
            "tolerance": float(self.tolerance),
            "discarded_norm": float(self.discarded_norm),
            "state_scaling": [float(x) for x in self.state_scaling],
            "unscaled_order": self.unscaled_order,
        }



def minimal_realization(
    r: Realization, *, tol: float | None = None, balance: bool = True
) -> MinimalRealization:
    """Minimal realization by two orthogonal staircase reductions (Van Dooren 1981).

    First the uncontrollable part is split off by the controllability staircase, then
    the unobservable part of the controllable subsystem by the observability staircase
    (the method of SLICOT TB01PD, but with SVD rank decisions that are recorded).

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    tol : float, optional, keyword-only
        Relative rank tolerance in (0, 1), see the module docstring; all thresholds are
        relative to the norms of the (scaled) realization. Default
        ``max(1e-10, 1000 * n * eps)``.
    balance : bool, keyword-only
        Apply the exact power-of-2 diagonal state scaling of :func:`audit.structure.scaling.state_scaling`
        first (recorded in the result), and cross-check the order against the
        unscaled computation. Default True: a model whose states were rescaled by
        large factors (unit changes) is otherwise judged against a norm dominated
        by its largest entries.

    Returns
    -------
    MinimalRealization

    Raises
    ------
    InvalidModelError
        If ``r`` is not a Realization or ``tol`` is not in (0, 1).
    NumericalTroubleError
        If a singular value or eigenvalue decomposition fails.

    Examples
    --------
    >>> r = Realization.from_arrays([[-1.0, 0.0], [0.0, 0.5]], [[1.0], [0.0]],
    ...                             [[1.0, 1.0]], [[0.0]])
    >>> m = minimal_realization(r)
    >>> m.order, m.decisions_clear, [round(float(z.real), 12) for z in m.uncontrollable_modes]
    (1, True, [0.5])

    Runs with one BLAS thread: the staircase makes many small BLAS calls, where threads
    only add contention (4.7 s instead of 0.3 s at n = 200 on two cores).
    """
    from audit.core.threads import limited_blas_threads

    # Realizations are immutable: an audit asks for the same minimal realization several
    # times (evidence, transmission zeros, grid), so the result is kept per object.
    key = (tol, balance)
    try:
        cached = _MINIMAL_CACHE.get(r, {}).get(key)
    except TypeError:
        cached = None
    if cached is not None:
        return cached
    with limited_blas_threads():
        result = _minimal_realization(r, tol=tol, balance=balance)
    try:
        _MINIMAL_CACHE.setdefault(r, {})[key] = result
    except TypeError:
        pass
    return result


_MINIMAL_CACHE: "weakref.WeakKeyDictionary[Realization, dict[tuple[float | None, bool], MinimalRealization]]" = (
    weakref.WeakKeyDictionary())


def _minimal_realization(
    r: Realization, *, tol: float | None = None, balance: bool = True
) -> MinimalRealization:
    """Implementation of :func:`minimal_realization`."""
    r = _check_realization(r)
    rtol = _relative_tolerance(tol, r.order)
    work, d, scaled, used_tol = _prepare(r, balance, rtol)
    minimal, unc, uno, decisions, discarded = _minimal_parts(work, used_tol)
    unscaled_order = _minimal_parts(r, rtol)[0].order if scaled or used_tol != rtol else minimal.order
    if minimal.order == r.order:
        # nothing to remove: keep the user's coordinates exactly (any transformation,
        # even an orthogonal one, perturbs near-defective poles by ~sqrt(eps))
        minimal = r
    return MinimalRealization(
        realization=minimal,
        order=minimal.order,
        original_order=r.order,
        uncontrollable_modes=unc,
        unobservable_modes=uno,
        decisions=decisions,
        decisions_clear=bool(
            all(dec.clear for dec in decisions) and unscaled_order == minimal.order
            and used_tol == rtol
        ),
        tolerance=used_tol,
        discarded_norm=discarded,
        state_scaling=d,
        unscaled_order=unscaled_order,
    )


__all__ = [
    "MinimalRealization",
    "minimal_realization",
]
