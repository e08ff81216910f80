"""Small helpers shared by the structure modules: JSON-friendly numbers, sorted
eigenvalues, the argument check of a realization, and the literal types of the results."""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
import scipy.linalg
from numpy.typing import NDArray

from audit.errors import InvalidModelError, NumericalTroubleError
from audit.core.realization import FloatArray, Realization

ComplexArray = NDArray[np.complex128]

_EPS = float(np.finfo(float).eps)

StaircaseKind = Literal["controllability", "observability"]
HiddenKind = Literal["uncontrollable", "unobservable", "uncontrollable_and_unobservable"]
Stability = Literal["stable", "marginal", "unstable"]


def _complex_list(values: ComplexArray) -> list[list[float]]:
    return [[float(z.real), float(z.imag)] for z in np.asarray(values, dtype=complex)]


def _float_or_none(x: float | None) -> float | None:
    return None if x is None else float(x)


def _json_float(x: float) -> float | str:
    """Plain float, or the strings "inf"/"nan" (JSON has no infinities)."""
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if math.isnan(x):
        return "nan"
    return float(x)


def _eigenvalues(a: FloatArray) -> ComplexArray:
    if a.shape[0] == 0:
        return np.zeros(0, dtype=complex)
    try:
        vals = scipy.linalg.eigvals(a)
    except (np.linalg.LinAlgError, ValueError) as exc:  # pragma: no cover - LAPACK failure
        raise NumericalTroubleError(f"eigenvalue computation failed: {exc}") from exc
    return np.asarray(_sorted_complex(vals), dtype=complex)


def _sorted_complex(values: ComplexArray) -> ComplexArray:
    vals = np.asarray(values, dtype=complex)
    order = np.lexsort((vals.imag, vals.real))
    return vals[order]


def _check_realization(r: object) -> Realization:
    if not isinstance(r, Realization):
        raise InvalidModelError(
            f"r: expected an audit.core.realization.Realization, got {type(r).__name__}",
            field="r",
        )
    return r


class _UnstableWhenNotStable:
    """Base of the per-mode records (hidden modes, mode couplings): one rule for
    ``is_unstable`` from their ``stability`` field."""

    stability: Stability

    @property
    def is_unstable(self) -> bool:
        """True for unstable *and* marginal modes (a hidden integrator is a finding)."""
        return self.stability != "stable"
