"""Validation of the point and frequency sequences that evidence routines accept.

One checker for sequences (:func:`finite_sequence`) with the messages of each kind of
input, and one for a single number (:func:`finite_number`).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from audit.errors import InvalidModelError

__all__ = ["finite_sequence", "complex_points", "real_frequencies", "finite_number"]


def finite_sequence(values: ArrayLike, name: str, *, dtype: Any, unreadable: str,
                    expected: str) -> NDArray[Any]:
    """``values`` as a finite 1-D array of ``dtype`` (a scalar becomes one element).

    Raises
    ------
    InvalidModelError
        ``"<name>: <unreadable>"`` (``{exc}`` in it is replaced by the conversion error)
        when the values cannot be converted, ``"<name>: has shape ... but <expected> was
        expected"`` when they are not 1-D, and a NaN/infinity message otherwise.
    """
    try:
        arr = np.asarray(values, dtype=dtype)
    except (TypeError, ValueError) as exc:
        raise InvalidModelError(f"{name}: " + unreadable.format(exc=exc), field=name) from None
    arr = np.atleast_1d(arr)
    if arr.ndim != 1:
        raise InvalidModelError(
            f"{name}: has shape {arr.shape} but {expected} was expected", field=name
        )
    if not np.all(np.isfinite(arr)):
        raise InvalidModelError(f"{name}: contains NaN or infinity", field=name)
    return arr


def complex_points(points: ArrayLike, name: str) -> NDArray[np.complex128]:
    """Points ``s`` or ``z`` as a finite 1-D complex array (see :func:`finite_sequence`)."""
    return finite_sequence(points, name, dtype=complex,
                           unreadable="could not be read as complex numbers ({exc})",
                           expected="a 1-D sequence of points")


def real_frequencies(omegas: ArrayLike, name: str = "omegas") -> NDArray[np.float64]:
    """Frequencies [rad/s] as a finite 1-D real array (see :func:`finite_sequence`)."""
    return finite_sequence(omegas, name, dtype=float,
                           unreadable="could not be read as real frequencies in rad/s ({exc})",
                           expected="a 1-D sequence of frequencies (rad/s)")


def finite_number(value: object, name: str, *, zero_allowed: bool = False) -> float:
    """``value`` as a finite float that is positive (``>= 0`` when ``zero_allowed``).

    Raises
    ------
    InvalidModelError
        ``"<name>: got <value> but a positive finite number was expected"`` (or ``a
        finite number >= 0``) when it is not such a number.
    """
    expected = "a finite number >= 0" if zero_allowed else "a positive finite number"
    try:
        x = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        x = math.nan
    if not math.isfinite(x) or x < 0.0 or (x == 0.0 and not zero_allowed):
        raise InvalidModelError(
            f"{name}: got {value!r} but {expected} was expected", field=name
        )
    return x
