"""Sparse benchmark models (invented scenario) and a reduced model for them.

Scenario: a long steel bar in a reheating line. An induction coil at the entry end
(x = 0) injects a heat flux u(t) [W/m^2]; the far end is insulated; the bar loses heat
to the furnace atmosphere along its length (linear loss coefficient). A thermocouple at
30 % of the length reads the temperature rise y(t). The heat equation
``T_t = alpha T_xx - beta T`` is discretized by central finite differences on n nodes
(cell-centred, flux boundary conditions), which gives a symmetric tridiagonal ``A``
(negative definite since ``beta > 0``), ``B = e_0 / (rho c h)`` and ``C = e_k``.

The reduced model is a one-sided (Galerkin) rational Krylov projection with real shifts
spread logarithmically over the spectrum (the bases of ``(s I - A)^-1 B`` and
``(s I - A)^-T C^T`` at each shift, orthonormalized together): with symmetric negative
definite ``A`` the projected ``Q^T A Q`` stays symmetric negative definite, hence stable,
and the reduced model interpolates the full one at each shift (common practice of
moment matching; e.g. A. C. Antoulas, "Approximation of Large-Scale Dynamical Systems",
SIAM 2005, ch. 11). Benchmark data only; nothing here is used by the package.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import splu

from audit.core.realization import Realization
from audit.documents.sparse import SparseRealization

BAR_LENGTH = 12.0  # m
DIFFUSIVITY = 1.2e-5  # m^2/s, steel
LOSS = 2.0e-4  # 1/s, lateral loss to the furnace atmosphere
HEAT_CAPACITY = 3.6e6  # J/(m^3 K), rho * c of steel
SENSOR_AT = 0.3  # fraction of the length


def reheating_bar(n: int, *, loss: float = LOSS, name: str = "reheating bar") -> SparseRealization:
    """The n-node finite-difference model of the reheating-line bar (1 input, 1 output)."""
    h = BAR_LENGTH / n
    k = DIFFUSIVITY / h**2
    main = np.full(n, -2.0 * k - loss)
    main[0] = main[-1] = -k - loss  # zero-flux ghost nodes (the input enters through B)
    off = np.full(n - 1, k)
    a = sp.diags([off, main, off], [-1, 0, 1], format="csr")
    b = np.zeros((n, 1))
    b[0, 0] = 1.0 / (HEAT_CAPACITY * h)
    c = np.zeros((1, n))
    c[0, int(SENSOR_AT * n)] = 1.0
    return SparseRealization(a, b, c, np.zeros((1, 1)), None, name)


def krylov_reduced(r: SparseRealization, shifts: int = 40, *, name: str = "reduced bar",
                   rank_tol: float = 1e-13) -> Realization:
    """Galerkin rational Krylov reduction at ``shifts`` real shifts over the spectrum."""
    a = r.a.tocsc()
    n = a.shape[0]
    from audit.documents.sparse import spectrum_extent

    low, high, _ = spectrum_extent(r)
    low /= 10.0
    eye = sp.identity(n, format="csc")
    cols = []
    for s in np.geomspace(low, high, shifts):
        lu = splu((s * eye - a).tocsc())
        cols.append(lu.solve(r.b))
        cols.append(lu.solve(np.ascontiguousarray(r.c.T)))
    basis = np.hstack(cols)
    basis /= np.linalg.norm(basis, axis=0)
    u, sv, _ = np.linalg.svd(basis, full_matrices=False)
    q = u[:, sv > rank_tol * sv[0]]
    ar = q.T @ (a @ q)
    ar = (ar + ar.T) / 2.0  # symmetric up to rounding; keep it exactly so
    return Realization.from_arrays(ar, q.T @ r.b, r.c @ q, r.d, None, name=name)


def as_document(r: SparseRealization) -> dict[str, Any]:
    """A ``sparse_state_space`` model document (triplets) of a sparse model."""
    def triplets(m: Any) -> dict[str, Any]:
        coo = sp.coo_matrix(m)
        return {"shape": list(coo.shape), "rows": coo.row.tolist(), "cols": coo.col.tolist(),
                "values": coo.data.astype(float).tolist()}

    return {"lti_model": 1, "name": r.name, "sample_period": r.sample_period,
            "sparse_state_space": {"a": triplets(r.a), "b": triplets(r.b),
                                   "c": triplets(r.c), "d": triplets(r.d)}}


SLAB_SIDE = 8.0  # m
SLAB_DIFFUSIVITY = 6.0e-7  # m^2/s, concrete
SLAB_LOSS = 1.0e-5  # 1/s, to the room air


def floor_slab(side: int, *, loss: float = SLAB_LOSS, name: str = "floor slab") -> SparseRealization:
    """A heated floor slab of a climate-chamber zone: 2-D heat equation on a side x side
    grid (five-point finite differences, insulated edges), heating mat under one corner
    quarter-patch (input, W/m^2), sensor at the centre (output). Symmetric A with
    side^2 states and about 5 side^2 entries."""
    h = SLAB_SIDE / side
    k = SLAB_DIFFUSIVITY / h**2
    main = np.full(side, -2.0 * k)
    main[0] = main[-1] = -k
    lap1 = sp.diags([np.full(side - 1, k), main, np.full(side - 1, k)], [-1, 0, 1])
    eye = sp.identity(side)
    a = (sp.kron(lap1, eye) + sp.kron(eye, lap1) - loss * sp.identity(side * side)).tocsr()
    patch = np.zeros((side, side))
    patch[: side // 4, : side // 4] = 1.0 / (2.2e6 * 0.1)  # rho c of concrete x 0.1 m depth
    b = patch.reshape(-1, 1)
    c = np.zeros((1, side * side))
    c[0, (side // 2) * side + side // 2] = 1.0
    return SparseRealization(a, b, c, np.zeros((1, 1)), None, name)
