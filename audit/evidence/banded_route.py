"""The banded stored-data route of the frequency response.

When the stored ``A`` is sparse and, after a reverse Cuthill-McKee permutation of the
states, banded with small bandwidth, each point is solved by Gaussian elimination with
partial pivoting on the band of the STORED ``lam I - A`` (see :class:`BandedStoredRoute`);
:class:`audit.evidence.frequency.TransferEvaluator` takes this route when it applies.
Also the memory budget shared by the evaluation routes (:data:`CHUNK_ENTRIES`).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

ComplexArray = NDArray[np.complex128]
FloatArray = NDArray[np.float64]

__all__ = ["BANDED_MIN_ORDER", "BANDED_COST_RATIO", "CHUNK_ENTRIES", "BandedStoredRoute"]

# Largest number of complex entries held at once by the vectorised elimination
# (chunks of points are processed in turn; 4e6 complex numbers = 64 MB).
CHUNK_ENTRIES = 4_000_000

BANDED_MIN_ORDER = 16
"""Below this order the Schur route is used whatever the structure."""
BANDED_COST_RATIO = 0.125
"""The banded route is taken when ``(l + 1)(l + u + 1) <= BANDED_COST_RATIO * n`` after a
reverse Cuthill-McKee reordering (its cost per point against the Schur route's)."""


class BandedStoredRoute:
    """Gaussian elimination with partial pivoting on the STORED banded ``lam I - A``.

    The states are reordered by reverse Cuthill-McKee (E. Cuthill and J. McKee,
    "Reducing the bandwidth of sparse symmetric matrices", Proc. 24th ACM National
    Conference, 1969; ``scipy.sparse.csgraph.reverse_cuthill_mckee``) -- a permutation,
    so the data stay exactly as stored -- and ``lam I - A`` is factored as a band
    matrix with lower bandwidth ``l`` and upper bandwidth ``u`` (partial pivoting
    widens the upper band to ``l + u``; LAPACK ``zgbsv`` at each point).  Cost
    O(n l (l + u)) per point instead of
    O(n^2), and the rounding errors are those of the stored entries row by row, so
    chain-like and banded models keep their digits where ``|G|`` is far below
    ``||C|| ||X||`` (e.g. 1e-178 on the published heat-diffusion model, where a dense
    orthogonal basis keeps none).
    """

    def __init__(self, band_rows: FloatArray, lower: int, upper: int, perm: NDArray[np.intp],
                 b: FloatArray, c: FloatArray) -> None:
        self.band_rows = band_rows  # (n, l+u+1): row i, columns i-l .. i+u
        self.lower, self.upper = lower, upper
        self.perm = perm
        self.b = b[perm]
        self.c = c[:, perm]

    @classmethod
    def detect(cls, a: FloatArray, b: FloatArray, c: FloatArray) -> "BandedStoredRoute | None":
        import scipy.sparse
        from scipy.sparse.csgraph import reverse_cuthill_mckee

        n = a.shape[0]
        pattern = scipy.sparse.csr_matrix((a != 0) | (a.T != 0))
        perm = np.asarray(reverse_cuthill_mckee(pattern, symmetric_mode=True), dtype=np.intp)
        ap = a[np.ix_(perm, perm)]
        rows, cols = np.nonzero(ap)
        lower = int(max(0, (rows - cols).max(initial=0)))
        upper = int(max(0, (cols - rows).max(initial=0)))
        if (lower + 1) * (lower + upper + 1) > BANDED_COST_RATIO * n:
            return None
        width = lower + upper + 1
        band = np.zeros((n, width))
        band[rows, cols - rows + lower] = ap[rows, cols]
        return cls(band, lower, upper, perm, b, c)

    def values(self, lam: ComplexArray, d: FloatArray) -> ComplexArray:
        from scipy.linalg.lapack import zgbsv

        n = self.band_rows.shape[0]
        l, u = self.lower, self.upper
        m, p = self.b.shape[1], self.c.shape[0]
        # LAPACK band storage with l extra rows for the fill of partial pivoting:
        # ab[l + u + i - j, j] = M[i, j]
        base = np.zeros((2 * l + u + 1, n), dtype=complex)
        for t in range(l + u + 1):  # band_rows[i, t] = A[i, i - l + t]
            off = t - l  # column j = i + off
            i0, i1 = max(0, -off), min(n, n - off)
            base[l + u - off, i0 + off:i1 + off] = -self.band_rows[i0:i1, t]
        diag_row = l + u
        b = self.b.astype(complex)
        k = lam.shape[0]
        out = np.empty((k, p, m), dtype=complex)
        per = max(1, CHUNK_ENTRIES // max(1, n * max(m, 1)))
        for start in range(0, k, per):
            stop = min(k, start + per)
            xs = np.empty((stop - start, n, m), dtype=complex)
            for idx in range(start, stop):
                ab = base.copy()
                ab[diag_row] += lam[idx]
                _, _, x, info = zgbsv(l, u, ab, b, overwrite_ab=1, overwrite_b=0)
                xs[idx - start] = x if info == 0 else np.nan
            # one product for the whole chunk instead of one small product per point
            out[start:stop] = np.matmul(self.c, xs) + d
        return out
