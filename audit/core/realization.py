"""The immutable numeric core: a state-space realization (A, B, C, D, sample period).

Every representation a user hands in (state space, transfer function, zeros-poles-gain)
is turned into a :class:`Realization` before any evidence is computed; numerics never
see documents, documents never do numerics.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from audit.errors import IncompatibleModelsError, InvalidModelError

FloatArray = NDArray[np.float64]

# Two sample periods are "the same" when they agree to this relative tolerance
# (common practice, no source: periods are written in decimal, 1e-3 vs 0.001).
SAMPLE_PERIOD_RTOL = 1e-9


def _frozen(x: ArrayLike, shape: tuple[int, int], name: str) -> FloatArray:
    arr = np.array(x, dtype=float, copy=True)
    if arr.size == 0:
        arr = np.zeros(shape)
    if arr.ndim != 2 or arr.shape != shape:
        raise InvalidModelError(
            f"{name}: has shape {arr.shape} but {shape} was expected", field=name
        )
    if not np.all(np.isfinite(arr)):
        raise InvalidModelError(f"{name}: contains NaN or infinity", field=name)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class Realization:
    """A state-space realization ``x' = A x + B u``, ``y = C x + D u``.

    Parameters
    ----------
    a : (n, n) array_like
    b : (n, m) array_like
    c : (p, n) array_like
    d : (p, m) array_like
    sample_period : float or None
        ``None`` for continuous time, seconds > 0 for discrete time.

    The arrays are copied and made read-only, so a realization never changes after it
    is built.

    Examples
    --------
    >>> r = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[0.0]])
    >>> r.order, r.n_inputs, r.n_outputs, r.is_discrete
    (1, 1, 1, False)
    """

    a: FloatArray
    b: FloatArray
    c: FloatArray
    d: FloatArray
    sample_period: float | None = None
    name: str = field(default="")
    stored: Any = field(default=None)
    """The representation the user stored, when it was not state space
    (:class:`audit.core.stored_evaluation.StoredTransferFunction` or
    :class:`~audit.core.stored_evaluation.StoredZerosPolesGain`); ``None`` for state space,
    whose matrices are stored as given. The decisive evidence evaluates it directly;
    the matrices are then a converted copy used for searches and explanations."""

    @classmethod
    def from_arrays(
        cls,
        a: ArrayLike,
        b: ArrayLike,
        c: ArrayLike,
        d: ArrayLike,
        sample_period: float | None = None,
        *,
        name: str = "",
    ) -> "Realization":
        """Build a realization, checking shapes and finiteness.

        Raises
        ------
        InvalidModelError
            If a shape is inconsistent or an entry is NaN or infinite.
        """
        d_arr = np.atleast_2d(np.array(d, dtype=float))
        a_arr = np.array(a, dtype=float)
        n = 0 if a_arr.size == 0 else (a_arr.shape[0] if a_arr.ndim >= 1 else 1)
        p, m = d_arr.shape
        return cls(
            a=_frozen(a_arr, (n, n), "A"),
            b=_frozen(b, (n, m), "B"),
            c=_frozen(c, (p, n), "C"),
            d=_frozen(d_arr, (p, m), "D"),
            sample_period=None if sample_period is None else float(sample_period),
            name=name,
        )

    @classmethod
    def from_object(cls, obj: Any, *, name: str | None = None) -> "Realization":
        """From a python-control or scipy.signal LTI object (see :mod:`audit.documents.interop`).

        Raises
        ------
        InvalidModelError
            An unsupported object or invalid data.
        """
        from audit.documents.interop import realization_from_object

        return realization_from_object(obj, name=name)

    def to_python_control(self) -> Any:
        """This realization as a ``control.StateSpace`` (see :mod:`audit.documents.interop`)."""
        from audit.documents.interop import realization_to_python_control

        return realization_to_python_control(self)

    def to_scipy(self) -> Any:
        """This realization as a ``scipy.signal.StateSpace`` (see :mod:`audit.documents.interop`)."""
        from audit.documents.interop import realization_to_scipy

        return realization_to_scipy(self)

    # ------------------------------------------------------------------ shape
    @property
    def order(self) -> int:
        """Number of states n."""
        return int(self.a.shape[0])

    @property
    def n_inputs(self) -> int:
        return int(self.b.shape[1]) if self.b.ndim == 2 else int(self.d.shape[1])

    @property
    def n_outputs(self) -> int:
        return int(self.d.shape[0])

    @property
    def is_discrete(self) -> bool:
        return self.sample_period is not None

    # --------------------------------------------------------------- helpers
    def with_matrices(
        self, a: ArrayLike, b: ArrayLike, c: ArrayLike, d: ArrayLike | None = None
    ) -> "Realization":
        """A new realization with the same sample period and name."""
        return Realization.from_arrays(
            a, b, c, self.d if d is None else d, self.sample_period, name=self.name
        )

    def with_name(self, name: str) -> "Realization":
        return Realization(self.a, self.b, self.c, self.d, self.sample_period, name, self.stored)

    def with_stored(self, stored: Any) -> "Realization":
        """The same matrices, carrying the stored representation they were built from."""
        return Realization(self.a, self.b, self.c, self.d, self.sample_period, self.name, stored)

    def poles(self) -> NDArray[np.complex128]:
        """Eigenvalues of A (all modes, including hidden ones)."""
        if self.order == 0:
            return np.zeros(0, dtype=complex)
        return np.linalg.eigvals(self.a)

    def as_dict(self) -> dict[str, Any]:
        return {
            "a": self.a.tolist(),
            "b": self.b.tolist(),
            "c": self.c.tolist(),
            "d": self.d.tolist(),
            "sample_period": self.sample_period,
        }

    def __repr__(self) -> str:  # pragma: no cover - cosmetic
        dom = "continuous" if self.sample_period is None else f"dt={self.sample_period:g}"
        return (
            f"Realization(order={self.order}, inputs={self.n_inputs}, "
            f"outputs={self.n_outputs}, {dom}, name={self.name!r})"
        )


def same_time_domain(r1: Realization, r2: Realization) -> bool:
    """True when both are continuous, or both discrete with the same period."""
    if r1.sample_period is None or r2.sample_period is None:
        return r1.sample_period is None and r2.sample_period is None
    return bool(
        abs(r1.sample_period - r2.sample_period)
        <= SAMPLE_PERIOD_RTOL * max(r1.sample_period, r2.sample_period)
    )


def check_comparable(r1: Realization, r2: Realization) -> None:
    """Raise :class:`IncompatibleModelsError` unless the two can be compared directly."""
    label1 = r1.name or "first model"
    label2 = r2.name or "second model"
    if (r1.n_inputs, r1.n_outputs) != (r2.n_inputs, r2.n_outputs):
        raise IncompatibleModelsError(
            f"{label2!s} has {r2.n_inputs} input(s) and {r2.n_outputs} output(s) but "
            f"{label1!s} has {r1.n_inputs} input(s) and {r1.n_outputs} output(s); "
            "claimed-equivalent models must have the same input and output counts"
        )
    if (r1.sample_period is None) != (r2.sample_period is None):
        cont, disc = (label1, label2) if r1.sample_period is None else (label2, label1)
        raise IncompatibleModelsError(
            f"{cont} is continuous-time but {disc} is discrete-time; mixing them needs "
            "a declared discretization method (--discretization zero-order-hold, triangle-hold, "
            "bilinear, matched-pole-zero or impulse-invariant)"
        )
    if not same_time_domain(r1, r2):
        raise IncompatibleModelsError(
            f"sample periods differ: {label1} has {r1.sample_period:g} s, "
            f"{label2} has {r2.sample_period:g} s"
        )


def difference_system(r1: Realization, r2: Realization) -> Realization:
    """The realization of G1 - G2 (order n1 + n2).

    ``A = diag(A1, A2)``, ``B = [B1; B2]``, ``C = [C1, -C2]``, ``D = D1 - D2``.
    """
    check_comparable(r1, r2)
    n1, n2 = r1.order, r2.order
    a = np.zeros((n1 + n2, n1 + n2))
    a[:n1, :n1] = r1.a
    a[n1:, n1:] = r2.a
    b = np.vstack([r1.b, r2.b]) if n1 + n2 else np.zeros((0, r1.n_inputs))
    c = np.hstack([r1.c, -r2.c]) if n1 + n2 else np.zeros((r1.n_outputs, 0))
    return Realization.from_arrays(
        a, b, c, r1.d - r2.d, r1.sample_period, name=f"({r1.name}) - ({r2.name})"
    )


def similarity_transformed(r: Realization, t: ArrayLike) -> Realization:
    """The realization in new coordinates ``z = T x``: (T A T^-1, T B, C T^-1, D).

    Uses linear solves, not an explicit inverse.
    """
    t_arr = np.asarray(t, dtype=float)
    # T A T^-1 = (T^-T (T A)^T)^T ; computed with solves on T^T.
    ta = t_arr @ r.a
    a_new = np.linalg.solve(t_arr.T, ta.T).T
    c_new = np.linalg.solve(t_arr.T, r.c.T).T
    return r.with_matrices(a_new, t_arr @ r.b, c_new)


def subsystem(r: Realization, outputs: list[int], inputs: list[int]) -> Realization:
    """The channels ``outputs x inputs`` of a realization (same states)."""
    return Realization.from_arrays(
        r.a, r.b[:, inputs], r.c[outputs, :], r.d[np.ix_(outputs, inputs)], r.sample_period,
        name=r.name,
    )
