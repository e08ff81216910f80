"""Input and output coupling of every eigenvalue of A, relative to the model's size.

For every eigenvalue of A, its coupling to the inputs and to the outputs, relative to
the model's size -- eigenvector couplings ``||w^H B|| / ||B||`` and ``||C v|| / ||C||``
(unit eigenvectors) for simple, well-conditioned eigenvalues, otherwise the quantitative
PBH test (V. M. Popov, V. Belevitch, M. L. J. Hautus): the smallest singular values of
``[A - lambda I, B]`` and ``[A - lambda I; C]`` relative to ``||[A, B]||`` /
``||[A; C]||``, which is R. Eising's distance to uncontrollability ("Between
controllable and uncontrollable", Systems & Control Letters 4 (1984)) restricted to that
eigenvalue. The classification built on these levels (:mod:`audit.structure.mode_coupling`):
a mode is *hidden* when the staircase removes it, *nearly hidden* when it is kept but
its joint coupling (input times output coupling) is at most ``NEARLY_HIDDEN_LEVEL``,
*coupled* otherwise.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.linalg

from audit.errors import NumericalTroubleError
from audit.core.realization import FloatArray, Realization
from audit.structure.shared import ComplexArray

#: joint coupling (input coupling times output coupling) at or below which a mode the
#: staircase kept is reported as *nearly hidden*. A mode coupled at 1e-6 of ||C|| on one
#: side and of order one on the other has a joint coupling of a few 1e-7 (common
#: practice for "weak" is 1e-3 per side; our choice, no source).
NEARLY_HIDDEN_LEVEL = 1e-5
#: eigenvalue condition number above which eigenvector couplings are not trusted and
#: the PBH singular values are used instead (1/sqrt(eps) would be the classic limit;
#: we switch earlier).
EIGENVECTOR_CONDITION_LIMIT = 1e8
#: eigenvalues closer than this (relative to ||A||_2) form one cluster, measured by PBH.
CLUSTER_RTOL = 1e-6
#: budget of the PBH fallback, in units of n^3 flops: at most max(2, PBH_BUDGET / n^3)
#: clusters or ill-conditioned eigenvalues get an SVD (12 at n = 200, 2 at n = 2000);
#: the others keep their eigenvector couplings (and their condition number says how far
#: to trust them).
PBH_BUDGET = 1e8

CouplingMethod = Literal["eigenvector", "pbh"]
Classification = Literal["hidden", "nearly_hidden", "coupled"]


@dataclass(frozen=True)
class _Sides:
    values: ComplexArray
    inputs: FloatArray
    outputs: FloatArray
    methods: tuple[CouplingMethod, ...]
    conditions: FloatArray
    clusters: tuple[tuple[int, ...], ...]


def _pbh_levels(a: FloatArray, g_hat: FloatArray, size: float, lam: complex, k: int, *,
                rows: bool) -> FloatArray:
    """The ``k`` smallest singular values of ``[A - lam I, G^]`` (``rows=False``) or of
    ``[A - lam I; G^]`` (``rows=True``), divided by ``size`` (the 2-norm of ``[A, G^]`` /
    ``[A; G^]``).

    ``G^`` is ``B`` (or ``C``) scaled to the spectral norm of A (so that the units of the
    inputs or outputs do not matter; see :func:`_pbh_operands`). This is the PBH test
    (V. M. Popov, V. Belevitch, M. L. J. Hautus) made quantitative: the smallest value is
    the distance, relative to the model's size, to a pair in which ``lam`` is exactly
    uncontrollable (unobservable) -- Eising's distance to uncontrollability
    (R. Eising, "Between controllable and uncontrollable", Systems & Control Letters 4
    (1984) 263-264) restricted to ``lam``.
    """
    n = a.shape[0]
    if g_hat.size == 0 or size == 0.0:
        return np.zeros(k)
    shifted = a - lam * np.eye(n)
    m = np.vstack([shifted, g_hat]) if rows else np.hstack([shifted, g_hat])
    sv = np.linalg.svd(m, compute_uv=False)  # n values, descending
    return np.sort(sv[:n])[:k] / size


def _pbh_operands(a: FloatArray, g: FloatArray, *, rows: bool) -> tuple[FloatArray, float]:
    """(``G`` scaled to ``||A||_2``, the 2-norm of ``[A, G^]`` or ``[A; G^]``)."""
    ng = float(np.linalg.norm(g, 2)) if g.size else 0.0
    if ng == 0.0:
        return np.zeros_like(g), 0.0
    na = float(np.linalg.norm(a, 2))
    g_hat = g * ((na if na > 0.0 else 1.0) / ng)
    both = np.vstack([a, g_hat]) if rows else np.hstack([a, g_hat])
    return g_hat, float(np.linalg.norm(both, 2))


def _mode_sides(r: Realization) -> _Sides:
    """Input and output coupling of every eigenvalue of A, in the given coordinates.

    A simple, well-conditioned eigenvalue with unit right / left eigenvectors ``v``,
    ``w``: inputs ``= ||w^H B||_2 / ||B||_2``, outputs ``= ||C v||_2 / ||C||_2`` (both in
    [0, 1]; their product times ``||B|| ||C|| / |w^H v|`` is the norm of the mode's
    residue ``C v w^H B / (w^H v)``, which no change of state coordinates alters).
    Clustered eigenvalues (within ``CLUSTER_RTOL ||A||``) and eigenvalues with a
    condition number above ``EIGENVECTOR_CONDITION_LIMIT`` use the PBH levels instead
    (:func:`_pbh_levels`), the ``k`` smallest singular values going to the ``k``
    members of a cluster.
    """
    a, b, c = (np.asarray(x, dtype=float) for x in (r.a, r.b, r.c))
    n = a.shape[0]
    if n == 0:
        z = np.zeros(0)
        return _Sides(np.zeros(0, dtype=complex), z, z, (), z, ())
    try:
        vals, vl, vr = scipy.linalg.eig(a, left=True, right=True)
    except (np.linalg.LinAlgError, ValueError) as exc:  # pragma: no cover - LAPACK failure
        raise NumericalTroubleError(f"eigenvalue computation failed: {exc}") from exc
    vals = np.asarray(vals, dtype=complex)
    vr = vr / np.maximum(np.linalg.norm(vr, axis=0), 1e-300)
    vl = vl / np.maximum(np.linalg.norm(vl, axis=0), 1e-300)
    denom = np.abs(np.sum(np.conj(vl) * vr, axis=0))
    conditions = np.where(denom > 0.0, 1.0 / np.maximum(denom, 1e-300), np.inf)
    nb = float(np.linalg.norm(b, 2)) if b.size else 0.0
    nc = float(np.linalg.norm(c, 2)) if c.size else 0.0
    inputs = np.zeros(n)
    outputs = np.zeros(n)
    if nb > 0.0:
        inputs = np.linalg.norm(np.conj(vl).T @ b, axis=1) / nb
    if nc > 0.0:
        outputs = np.linalg.norm(c @ vr, axis=0) / nc
    methods: list[CouplingMethod] = ["eigenvector"] * n
    na = max(float(np.linalg.norm(a, 2)), 1e-300)
    assigned = np.zeros(n, dtype=bool)
    clusters: list[tuple[int, ...]] = []
    budget = max(2, int(PBH_BUDGET / float(n) ** 3))
    pbh: tuple[tuple[FloatArray, float], tuple[FloatArray, float]] | None = None
    for i in range(n):
        if assigned[i]:
            continue
        members = tuple(int(j) for j in np.flatnonzero(
            (np.abs(vals - vals[i]) <= CLUSTER_RTOL * na) & ~assigned))
        assigned[list(members)] = True
        clusters.append(members)
        if (len(members) == 1 and conditions[i] <= EIGENVECTOR_CONDITION_LIMIT) or budget <= 0:
            continue
        budget -= 1
        if pbh is None:
            pbh = (_pbh_operands(a, b, rows=False), _pbh_operands(a, c, rows=True))
        centre = complex(np.mean(vals[list(members)]))
        k = len(members)
        ins = _pbh_levels(a, pbh[0][0], pbh[0][1], centre, k, rows=False)
        outs = _pbh_levels(a, pbh[1][0], pbh[1][1], centre, k, rows=True)
        for t, j in enumerate(members):
            inputs[j], outputs[j], methods[j] = float(ins[t]), float(outs[t]), "pbh"
    return _Sides(vals, np.minimum(inputs, 1.0), np.minimum(outputs, 1.0), tuple(methods),
                  conditions, tuple(clusters))


__all__ = [
    "CLUSTER_RTOL",
    "EIGENVECTOR_CONDITION_LIMIT",
    "NEARLY_HIDDEN_LEVEL",
    "PBH_BUDGET",
]
