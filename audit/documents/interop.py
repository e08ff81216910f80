"""Conversions between :class:`audit.core.realization.Realization` and the ecosystem's objects.

A team's existing tests hold python-control systems (``control.StateSpace``,
``control.TransferFunction``) or scipy.signal LTI objects (``scipy.signal.StateSpace``,
``TransferFunction``, ``ZerosPolesGain`` and their discrete-time ``dlti`` forms). This
module turns them into realizations, so that ``assert_same_system(plant, refactored)``
and :func:`audit.compare_pair` work on the objects the team already has, and turns a
realization back into either library's state-space object.

The stored data of the foreign object is kept as given: state-space matrices are copied
unchanged; transfer functions and zeros-poles-gain lists are realized with lti-audit's own
conversions (:mod:`audit.core.from_transfer_function`, :mod:`audit.core.from_zeros_poles_gain`), exactly as a model document with the same
coefficients would be, never through the other library's conversion routines.

Time domain: python-control's ``dt = 0`` is continuous time and ``dt > 0`` a sample
period; ``dt = None`` (unspecified) is read as continuous time, as python-control itself
does when it combines systems; ``dt = True`` (discrete, period unspecified) is rejected,
since lti-audit needs the period. scipy.signal's ``dt`` is ``None`` for continuous time.

Neither python-control nor scipy is imported until an object is converted (the objects
are recognised by their class's module), so importing lti-audit stays fast.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np

from audit.errors import InvalidModelError
from audit.core.realization import Realization

__all__ = [
    "is_foreign_system",
    "realization_from_object",
    "realization_to_python_control",
    "realization_to_scipy",
]

_AUTO_NAME = re.compile(r"^sys\[\d+\]$")  # python-control's generated names


def _library(obj: Any) -> str | None:
    for cls in type(obj).__mro__:
        module = getattr(cls, "__module__", "") or ""
        if module == "control" or module.startswith("control."):
            return "python-control"
        if module.startswith("scipy.signal"):
            return "scipy.signal"
    return None


def is_foreign_system(obj: Any) -> bool:
    """True for a python-control or scipy.signal LTI system object.

    Examples
    --------
    >>> is_foreign_system([[1.0]])
    False
    """
    return _library(obj) is not None


def _period_from_control(dt: Any, where: str) -> float | None:
    if dt is None or (not isinstance(dt, bool) and float(dt) == 0.0):
        return None
    if isinstance(dt, bool):
        if dt:
            raise InvalidModelError(
                f"{where}: dt=True (discrete time with an unspecified sample period); "
                "lti-audit needs the sample period in seconds, e.g. control.ss(A, B, C, D, 0.01)",
                field="dt")
        return None
    period = float(dt)
    if not (period > 0.0 and np.isfinite(period)):
        raise InvalidModelError(f"{where}: dt={dt!r}; expected 0 (continuous) or a sample "
                                "period in seconds > 0", field="dt")
    return period


def _period_from_scipy(dt: Any, where: str) -> float | None:
    if dt is None:
        return None
    period = float(dt)
    if not (period > 0.0 and np.isfinite(period)):
        raise InvalidModelError(f"{where}: dt={dt!r}; expected None (continuous) or a "
                                "sample period in seconds > 0", field="dt")
    return period


def _name(obj: Any, name: str | None) -> str:
    if name is not None:
        return name
    own = getattr(obj, "name", None)
    if isinstance(own, str) and own and not _AUTO_NAME.match(own):
        return own
    return ""


def _coefficients(poly: Any) -> list[float]:
    return [float(c) for c in np.atleast_1d(np.asarray(poly, dtype=float)).ravel()]


def realization_from_object(obj: Any, *, name: str | None = None) -> Realization:
    """A realization of a python-control or scipy.signal LTI object (or a Realization).

    Parameters
    ----------
    obj : Realization, control.StateSpace, control.TransferFunction, or a scipy.signal
        ``StateSpace`` / ``TransferFunction`` / ``ZerosPolesGain`` (continuous or discrete)
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)`` for state space;
        transfer functions indexed ``[output][input]`` in descending powers.
    name : str, optional, keyword-only
        Name of the realization; default: the object's own name (python-control's
        generated ``sys[k]`` names are dropped), else ``""``.

    Returns
    -------
    Realization

    Raises
    ------
    InvalidModelError
        An unsupported type, a discrete system without a sample period, or data that a
        model document with the same numbers would fail on (NaN, improper channel, ...).

    Examples
    --------
    >>> import scipy.signal
    >>> r = realization_from_object(scipy.signal.TransferFunction([2.0], [1.0, 3.0]))
    >>> r.order, r.is_discrete
    (1, False)
    """
    from audit.core.from_transfer_function import realization_from_transfer_function
    from audit.core.from_zeros_poles_gain import realization_from_zeros_poles_gain

    if isinstance(obj, Realization):
        return obj if name is None else obj.with_name(name)
    library = _library(obj)
    kind = type(obj).__name__
    where = f"{library or type(obj).__module__}.{kind}"
    label = _name(obj, name)
    if library == "python-control":
        period = _period_from_control(getattr(obj, "dt", 0), where)
        if hasattr(obj, "A") and hasattr(obj, "B"):
            return Realization.from_arrays(np.asarray(obj.A), np.asarray(obj.B), np.asarray(obj.C),
                                           np.asarray(obj.D), period, name=label)
        if hasattr(obj, "num") and hasattr(obj, "den"):
            num = [[_coefficients(c) for c in row] for row in obj.num]
            den = [[_coefficients(c) for c in row] for row in obj.den]
            return realization_from_transfer_function(num, den, period).with_name(label)
    elif library == "scipy.signal":
        period = _period_from_scipy(getattr(obj, "dt", None), where)
        if kind.startswith("StateSpace"):
            return Realization.from_arrays(obj.A, obj.B, obj.C, obj.D, period, name=label)
        if kind.startswith("TransferFunction"):
            num = np.atleast_2d(np.asarray(obj.num, dtype=float))  # (outputs, k): SIMO allowed
            den = _coefficients(obj.den)
            return realization_from_transfer_function(
                [[_coefficients(row)] for row in num], [[den] for _ in num], period).with_name(label)
        if kind.startswith("ZerosPolesGain"):
            def pairs(values: Any) -> list[list[float]]:
                return [[float(np.real(v)), float(np.imag(v))] for v in np.atleast_1d(values)]
            return realization_from_zeros_poles_gain(
                [[pairs(obj.zeros)]], [[pairs(obj.poles)]], [[float(np.real(obj.gain))]],
                period).with_name(label)
    raise InvalidModelError(
        f"got a {where} object; expected a Realization, a python-control StateSpace or "
        "TransferFunction, or a scipy.signal StateSpace, TransferFunction or ZerosPolesGain",
        field="model")


def realization_to_python_control(r: Realization) -> Any:
    """The realization as a ``control.StateSpace`` (``dt = 0`` for continuous time).

    Raises
    ------
    InvalidModelError
        python-control is not installed.
    """
    try:
        import control
    except ImportError:  # pragma: no cover - control is a dependency
        raise InvalidModelError("python-control is not installed (pip install control)") from None
    dt = 0 if r.sample_period is None else r.sample_period
    kwargs = {"name": r.name} if r.name else {}
    return control.ss(np.array(r.a), np.array(r.b), np.array(r.c), np.array(r.d), dt, **kwargs)


def realization_to_scipy(r: Realization) -> Any:
    """The realization as a ``scipy.signal.StateSpace`` (``dt`` given in discrete time).

    Raises
    ------
    None
    """
    import scipy.signal

    mats = (np.array(r.a), np.array(r.b), np.array(r.c), np.array(r.d))
    if r.sample_period is None:
        return scipy.signal.StateSpace(*mats)
    return scipy.signal.StateSpace(*mats, dt=r.sample_period)
