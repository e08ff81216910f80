"""State scaling for the rank decisions: exact power-of-2 balancing of the system
matrix, and the choice between two scalings (and slightly looser tolerances) that
rounding cannot steer.

Besides the plain power-of-2 balancing of :func:`state_scaling`, a second one that
ignores entries below the rank tolerance; when the two differ or a decision is unclear,
the number of modes whose joint coupling (which a diagonal scaling moves only through
the normalisation) is at rounding level decides which scaling -- and, failing both,
which slightly looser tolerance (at most 100 times, below ``DOUBT_CEILING``; the
decisions are then reported unclear) -- is used; see ``_prepare``.
"""

from __future__ import annotations

import math

import numpy as np

from audit.core.realization import FloatArray, Realization
from audit.structure.coupling_levels import _mode_sides
from audit.structure.shared import _check_realization
from audit.structure.staircase import DOUBT_CEILING, _minimal_parts

# ------------------------------------------------------------------ state scaling
#: maximal number of sweeps of the state-scaling iteration.
_SCALING_SWEEPS = 100


def state_scaling(r: Realization, *, floor: float = 0.0) -> FloatArray:
    """Diagonal state scaling (powers of 2) that balances the system matrix.

    Our own variant of the Parlett-Reinsch balancing iteration (B. N. Parlett and
    C. Reinsch, "Balancing a matrix for calculation of eigenvalues and eigenvectors",
    Numer. Math. 13 (1969) 293-304), applied as in SLICOT TB01ID to the compound
    matrix ``[[A, B], [C, 0]]`` with only the state indices scaled. Before balancing,
    B and C are (for this computation only) multiplied by scalars so that their norms
    equal ``||A||_F``: otherwise the units of the inputs and outputs would drive the
    state scaling.

    Returns ``d`` such that the scaled realization is ``(D^-1 A D, D^-1 B, C D, D)``
    with ``D = diag(d)``. Powers of 2 make the scaling exact in floating point.

    Entries at or below ``floor`` times the Frobenius norm of their own matrix
    (``|a_ij| <= floor ||A||``, ``|b_ij| <= floor ||B||``, ``|c_ij| <= floor ||C||``)
    do not steer the scaling: they are treated as zero while the scaling is computed.
    The staircase passes its rank tolerance here, so the scaling cannot amplify an
    entry that the staircase would judge to be zero -- a rounding-level ``3e-17`` in C,
    the only link of an unobservable state to the output, would otherwise be blown up
    by about ``7e7`` until it looks like a real coupling (issue 11). Genuine badly
    scaled coordinates (entries above the floor) are balanced as before.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``.
    floor : float, keyword-only
        Relative size at or below which an entry is ignored (default 0: none ignored).

    Returns
    -------
    (n,) ndarray of powers of 2

    Raises
    ------
    InvalidModelError
        If ``r`` is not a Realization.
    """
    r = _check_realization(r)
    n = r.order
    a = np.array(r.a, dtype=float, copy=True)
    b_raw = np.array(r.b, dtype=float, copy=True)
    c_raw = np.array(r.c, dtype=float, copy=True)
    nb = float(np.linalg.norm(b_raw))
    nc = float(np.linalg.norm(c_raw))
    na = float(np.linalg.norm(a))
    if floor > 0.0:
        a[np.abs(a) <= floor * na] = 0.0
        b_raw[np.abs(b_raw) <= floor * nb] = 0.0
        c_raw[np.abs(c_raw) <= floor * nc] = 0.0
    ref = na if na > 0.0 else max(nb, nc, 1.0)
    b = b_raw * (ref / nb) if nb > 0.0 else b_raw
    c = c_raw * (ref / nc) if nc > 0.0 else c_raw
    d = np.ones(n)
    for _ in range(_SCALING_SWEEPS):
        changed = False
        for i in range(n):
            diag_sq = a[i, i] ** 2
            col = math.sqrt(max(float(a[:, i] @ a[:, i]) - diag_sq, 0.0) + float(c[:, i] @ c[:, i]))
            row = math.sqrt(max(float(a[i, :] @ a[i, :]) - diag_sq, 0.0) + float(b[i, :] @ b[i, :]))
            if col == 0.0 or row == 0.0:
                continue
            e = round(0.5 * math.log2(row / col))
            if e == 0:
                continue
            f = 2.0**e
            # Accept only a clear improvement (factor 0.95 as in LAPACK xGEBAL).
            if (col * f) ** 2 + (row / f) ** 2 < 0.95 * (col**2 + row**2):
                a[:, i] *= f
                a[i, :] /= f
                c[:, i] *= f
                b[i, :] /= f
                d[i] *= f
                changed = True
        if not changed:
            break
    return d


def _scaled(r: Realization, d: FloatArray) -> Realization:
    a = np.asarray(r.a) / d[:, None] * d[None, :]
    return r.with_matrices(a, np.asarray(r.b) / d[:, None], np.asarray(r.c) * d[None, :])


#: looser rank tolerances (factors of the given one, kept below ``DOUBT_CEILING``) tried
#: when the staircase and the joint mode couplings disagree about how many modes are
#: hidden (see :func:`_prepare`).
LOOSER_TOLERANCE_FACTORS = (10.0, 100.0)


def _prepare(r: Realization, balance: bool,
             rtol: float) -> tuple[Realization, FloatArray, bool, float]:
    """(realization to work on, scaling d, whether d differs from all ones, tolerance).

    Two candidate scalings: the plain balancing ``d_all`` of :func:`state_scaling` and
    the one that ignores entries below the rank tolerance ``d_floor``; they differ only
    when some entry lies at rounding level. When they differ, or when the staircase after
    ``d_all`` makes an unclear decision, the number of modes whose *joint coupling* (the
    product of input and output coupling, measured after ``d_all``; a diagonal state
    scaling moves one factor up and the other down) is at most ``rtol`` is the arbiter:
    the first of (d_all, rtol), (d_floor, rtol), then both with the looser tolerances
    ``LOOSER_TOLERANCE_FACTORS * rtol``, whose staircase removes exactly that many modes
    is used. A tiny entry that is the only link of a mode (issue 11: ``C = [..., 3e-17]``)
    leaves the mode's joint coupling at rounding level; a state rescaled by a unit change
    of 1e9 keeps a joint coupling of order one. When none agrees, ``(d_all, rtol)`` is
    kept unless ``d_floor`` comes closer. A tolerance other than ``rtol`` makes the
    caller's decisions unclear.
    """
    if not balance or r.order == 0:
        return r, np.ones(r.order), False, rtol
    d_all = state_scaling(r)
    d_floor = state_scaling(r, floor=rtol)
    floors_differ = bool(np.any(d_all != d_floor))  # exact: powers of 2 set by us
    removed: dict[tuple[int, float], int] = {}

    def removed_by(which: int, t: float) -> int:
        if (which, t) not in removed:
            d = d_all if which == 0 else d_floor
            removed[(which, t)] = r.order - _minimal_parts(_scaled(r, d), t)[0].order
        return removed[(which, t)]

    choice: tuple[int, float] = (0, rtol)
    if floors_differ or not _clear_at(r, d_all, rtol):
        sides = _mode_sides(_scaled(r, d_all))
        weak = int(np.count_nonzero(sides.inputs * sides.outputs <= rtol))
        whiches = (0, 1) if floors_differ else (0,)
        tries = [(w, rtol) for w in whiches] + [
            (w, f * rtol) for f in LOOSER_TOLERANCE_FACTORS if f * rtol < DOUBT_CEILING
            for w in whiches]
        for w, t in tries:
            if removed_by(w, t) == weak:
                choice = (w, t)
                break
        else:
            if floors_differ and abs(removed_by(1, rtol) - weak) < abs(removed_by(0, rtol) - weak):
                choice = (1, rtol)
    d = d_all if choice[0] == 0 else d_floor
    nontrivial = bool(np.any(d != 1.0))  # exact: d holds powers of 2 set by us
    return (_scaled(r, d) if nontrivial else r), d, nontrivial, choice[1]


def _clear_at(r: Realization, d: FloatArray, rtol: float) -> bool:
    return all(dec.clear for dec in _minimal_parts(_scaled(r, d), rtol)[3])


__all__ = [
    "LOOSER_TOLERANCE_FACTORS",
    "state_scaling",
]
