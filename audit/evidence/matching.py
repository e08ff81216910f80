"""Optimal one-to-one matching of two point sets (poles, zeros) in the complex plane.

Method
------
The linear sum assignment problem (H. W. Kuhn, "The Hungarian method for the assignment
problem", *Naval Research Logistics Quarterly* 2, 1955), solved by
``scipy.optimize.linear_sum_assignment`` (D. F. Crouse, "On implementing 2D rectangular
assignment algorithms", *IEEE Trans. Aerospace and Electronic Systems* 52, 2016).

Cost.  Pole and zero locations span many decades (a stiff model has poles at ``-1e-3``
and ``-1e6``), so an absolute distance would let the fast points dominate.  The cost of
pairing ``p1`` with ``p2`` is the *relative* distance::

    |p1 - p2| / max(|p1|, |p2|, floor)

which is scale free (a 1 % move is a 1 % move at any frequency) and at most 2.  ``floor``
keeps points at or near the origin (integrators, differentiators) from producing huge
relative numbers: by default ``floor = 1e-8 * max |p|`` over both sets (about
``sqrt(eps)`` relative to the fastest point; common practice, no source), or 1 when every
point is zero.  The assignment minimizes the sum of these costs.  With unequal counts the
``min(k1, k2)`` best pairs are formed and the remaining points are listed as unmatched.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.optimize
from numpy.typing import ArrayLike, NDArray

from audit.errors import InvalidModelError, NumericalTroubleError
from audit.evidence.inputs import finite_number, finite_sequence

__all__ = ["PointMatching", "PointPair", "match_points", "relative_distance_matrix"]

# Default floor relative to the largest point magnitude (see module docstring).
DEFAULT_RELATIVE_FLOOR = 1e-8


def _pair(z: complex) -> list[float]:
    return [float(z.real), float(z.imag)]


@dataclass(frozen=True)
class PointPair:
    """One matched pair.

    Attributes
    ----------
    first_index, second_index : int
        Positions in the first and second point list.
    first, second : complex
        The two points.
    absolute_distance : float
        ``|first - second|``.
    relative_distance : float
        ``|first - second| / max(|first|, |second|, floor)``.
    """

    first_index: int
    second_index: int
    first: complex
    second: complex
    absolute_distance: float
    relative_distance: float

    def as_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary; complex numbers as ``[re, im]``."""
        return {
            "first_index": self.first_index,
            "second_index": self.second_index,
            "first": _pair(self.first),
            "second": _pair(self.second),
            "absolute_distance": float(self.absolute_distance),
            "relative_distance": float(self.relative_distance),
        }


@dataclass(frozen=True)
class PointMatching:
    """Result of :func:`match_points`.

    Attributes
    ----------
    pairs : tuple of PointPair
        Matched pairs, ordered by ``first_index``.
    unmatched_first, unmatched_second : tuple of int
        Indices of points in each list left without a partner (unequal counts).
    unmatched_first_points, unmatched_second_points : tuple of complex
        The unmatched points themselves.
    floor : float
        The floor used in the relative distance.
    total_cost : float
        Sum of the pairs' relative distances (the minimized objective).
    largest_move : PointPair or None
        The pair with the largest relative distance (``None`` when nothing was paired).
    """

    pairs: tuple[PointPair, ...]
    unmatched_first: tuple[int, ...]
    unmatched_second: tuple[int, ...]
    unmatched_first_points: tuple[complex, ...]
    unmatched_second_points: tuple[complex, ...]
    floor: float
    total_cost: float
    largest_move: PointPair | None

    def as_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary; complex numbers as ``[re, im]``."""
        return {
            "pairs": [p.as_dict() for p in self.pairs],
            "unmatched_first": list(self.unmatched_first),
            "unmatched_second": list(self.unmatched_second),
            "unmatched_first_points": [_pair(z) for z in self.unmatched_first_points],
            "unmatched_second_points": [_pair(z) for z in self.unmatched_second_points],
            "floor": float(self.floor),
            "total_cost": float(self.total_cost),
            "largest_move": None if self.largest_move is None else self.largest_move.as_dict(),
        }


def _as_points(points: ArrayLike, name: str) -> NDArray[np.complex128]:
    return finite_sequence(
        points, name, dtype=complex,
        unreadable="could not be read as complex numbers; a 1-D list of numbers was expected",
        expected="a 1-D list of points")


def relative_distance_matrix(
    points1: NDArray[np.complex128], points2: NDArray[np.complex128], floor: float
) -> NDArray[np.float64]:
    """``|p1_i - p2_j| / max(|p1_i|, |p2_j|, floor)`` as a ``(k1, k2)`` array.

    Parameters
    ----------
    points1 : (k1,) complex ndarray
    points2 : (k2,) complex ndarray
    floor : float
        Positive lower bound of the denominator.

    Returns
    -------
    (k1, k2) ndarray of float
    """
    diff = np.abs(points1[:, None] - points2[None, :])
    den = np.maximum(np.maximum(np.abs(points1)[:, None], np.abs(points2)[None, :]), floor)
    return diff / den


def match_points(
    points1: ArrayLike, points2: ArrayLike, *, floor: float | None = None
) -> PointMatching:
    """Pair two point sets so that the sum of relative distances is minimal.

    Parameters
    ----------
    points1 : (k1,) array_like of complex
    points2 : (k2,) array_like of complex
        Counts may differ; either may be empty.
    floor : float or None, keyword-only
        Lower bound of the relative-distance denominator; default
        ``1e-8 * max(|p|)`` over both sets (1 if all points are zero).

    Returns
    -------
    PointMatching

    Raises
    ------
    InvalidModelError
        If a point list is not 1-D, contains NaN/infinity, or ``floor`` is not positive.
    NumericalTroubleError
        If the assignment solver fails.

    Examples
    --------
    >>> m = match_points([-1.0, -10.0, -100.0], [-100.0, -1.0, -11.0])
    >>> [(p.first_index, p.second_index) for p in m.pairs]
    [(0, 1), (1, 2), (2, 0)]
    >>> round(m.largest_move.relative_distance, 6)
    0.090909
    """
    p1 = _as_points(points1, "points1")
    p2 = _as_points(points2, "points2")
    if floor is None:
        biggest = max(
            float(np.max(np.abs(p1), initial=0.0)), float(np.max(np.abs(p2), initial=0.0))
        )
        used_floor = DEFAULT_RELATIVE_FLOOR * biggest if biggest > 0.0 else 1.0
    else:
        used_floor = finite_number(floor, "floor")
    if p1.size == 0 or p2.size == 0:
        rows = cols = np.zeros(0, dtype=int)
        cost = np.zeros((p1.size, p2.size))
    else:
        cost = relative_distance_matrix(p1, p2, used_floor)
        try:
            rows, cols = scipy.optimize.linear_sum_assignment(cost)
        except ValueError as exc:  # pragma: no cover - cost is finite by construction
            raise NumericalTroubleError(f"point assignment failed: {exc}") from exc
    pairs = tuple(
        PointPair(
            first_index=int(i),
            second_index=int(j),
            first=complex(p1[i]),
            second=complex(p2[j]),
            absolute_distance=float(abs(p1[i] - p2[j])),
            relative_distance=float(cost[i, j]),
        )
        for i, j in sorted(zip(rows.tolist(), cols.tolist()))
    )
    un1 = tuple(sorted(set(range(p1.size)) - set(rows.tolist())))
    un2 = tuple(sorted(set(range(p2.size)) - set(cols.tolist())))
    largest = max(pairs, key=lambda q: q.relative_distance, default=None)
    return PointMatching(
        pairs=pairs,
        unmatched_first=un1,
        unmatched_second=un2,
        unmatched_first_points=tuple(complex(p1[i]) for i in un1),
        unmatched_second_points=tuple(complex(p2[j]) for j in un2),
        floor=used_floor,
        total_cost=float(sum(q.relative_distance for q in pairs)),
        largest_move=largest,
    )
