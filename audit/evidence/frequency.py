"""Frequency response of a state-space realization: evaluation routes and error estimates.

Method
------
The evaluation follows A. J. Laub, "Efficient multivariable frequency response
computations", IEEE Transactions on Automatic Control 26(2) (1981) 407-408, and
A. J. Laub, "Efficient calculation of frequency response matrices from state space
models", ACM Transactions on Mathematical Software 12(1) (1986) 26-33: the state
matrix is reduced ONCE to upper Hessenberg form by an orthogonal similarity
(``A = Q H Q^T``, ``B~ = Q^T B``, ``C~ = C Q``), after which every point costs O(n^2)
instead of O(n^3): ``G(lam) = C~ (lam I - H)^-1 B~ + D`` is obtained by Gaussian
elimination with partial pivoting on the Hessenberg matrix ``lam I - H`` (one
subdiagonal, so the pivot is chosen between two candidate rows).  Before the
reduction ``A`` is balanced by an exact diagonal scaling with powers of two
(``scipy.linalg.matrix_balance``, as TB05AD's ``BALEIG`` option does).  The elimination is
vectorised over the points: the Python loop runs over the n columns, numpy works on
arrays of shape ``(k_points, ...)``.

Routes and accuracy (relative to the local value ``|G(lam)|``)
-------------------------------------------------------------
Values come from one of two routes, chosen per model:

* **banded stored data**: when the stored ``A`` is sparse and, after a reverse
  Cuthill-McKee permutation of the states (exact), banded with small bandwidth
  (chains, finite-element and network models, block-diagonal modal forms), each point
  is solved by Gaussian elimination with partial pivoting on the band of the STORED
  ``lam I - A`` (LAPACK ``zgbsv``): O(n bw^2) per point, and the rounding errors are
  those of the stored entries row by row.  On the published heat-diffusion model
  (200 states, ``|G|`` down to 1e-178 on the adaptive grid) this keeps 13-14 digits
  where a dense orthogonal basis keeps none.
* **Schur**: otherwise ``A`` is reduced to complex Schur form ``T = W^H A W`` once
  (via Hessenberg), and the triangular solves for all points run as level-3 BLAS;
  where a per-point estimate shows that digits were lost to cancellation (``|G|``
  far below ``||C|| ||X||``) and ``A`` is sparse, the point is refined against the
  stored matrix or re-solved by sparse LU (see :meth:`TransferEvaluator._refine`).

Measured by ``benchmarks/speed.py`` against python-flint balls on the stored data:
at least as accurate as python-control's TB05AD route on the published models, and
within a factor ~1.5 of it on dense random models (both limited by the model's own
conditioning there).

Error estimate
--------------
:meth:`TransferEvaluator.error_bound` gives a cheap first-order estimate of the
absolute rounding error of each evaluated ``G`` (Frobenius norm, hence also spectral),
built from the standard backward-error results for Householder reduction and
Gaussian elimination (N. J. Higham, *Accuracy and Stability of Numerical
Algorithms*, 2nd ed., SIAM 2002, chapters 9 and 19).  With ``M = lam I - H``,
``X = M^-1 B~``, ``Y = C~ M^-1`` (obtained by a second Hessenberg solve on the
reversed transpose ``J H^T J``, which is again upper Hessenberg) and ``rho`` the
growth factor of the elimination::

    err(lam) ~ eps * ( 2 n rho ||M||_F ||Y||_F ||X||_F
                       + 2 n ||C~||_2 ||X||_F + ||G(lam)||_F )

The first term is ``||Y E X||`` for a backward error ``||E|| <= 2 n rho eps ||M||``
that covers both the elimination and the Hessenberg reduction.  It is an estimate
(first order, with modest constants), meant to be pessimistic and cheap, not a
rigorous bound; it costs a second solve, so :meth:`TransferEvaluator.at` does not
compute it.

The frequency grid is built in :mod:`audit.evidence.frequency_grid`.
"""

from __future__ import annotations

import math
import weakref
from collections.abc import Iterable

import numpy as np
import scipy.linalg
from numpy.typing import ArrayLike, NDArray

from audit.errors import NumericalTroubleError
from audit.core.realization import Realization
from audit.evidence.banded_route import (
    BANDED_MIN_ORDER,
    CHUNK_ENTRIES,
    BandedStoredRoute,
)
from audit.evidence.inputs import complex_points, real_frequencies

ComplexArray = NDArray[np.complex128]
FloatArray = NDArray[np.float64]

_EPS = float(np.finfo(float).eps)

__all__ = [
    "TransferEvaluator",
    "frequency_response",
    "boundary_points",
]


def boundary_points(r: Realization, omegas: ArrayLike) -> ComplexArray:
    """Map frequencies [rad/s] to points on the stability boundary.

    Parameters
    ----------
    r : Realization
        Only its sample period is used.
    omegas : (k,) array_like
        Real frequencies in rad/s.

    Returns
    -------
    (k,) complex ndarray
        ``s = j omega`` (continuous time) or ``z = exp(j omega T)`` (discrete time).

    Raises
    ------
    InvalidModelError
        If ``omegas`` is not a finite 1-D real sequence.
    """
    w = real_frequencies(omegas)
    if r.sample_period is None:
        return 1j * w
    return np.exp(1j * w * r.sample_period)


_SCHUR_BLOCK = 32
"""Rows per block in the blocked triangular back substitution."""

REFINE_ABOVE = 1e-12
"""Points whose estimated relative error exceeds this are refined (see
:meth:`TransferEvaluator._refine`)."""
REFINE_MAX_SWEEPS = 6
"""Cap on refinement sweeps (two or three suffice where refinement helps at all)."""
DIRECT_ABOVE = 1e10
"""Cancellation ratio beyond which refinement by a normwise solver cannot recover the
digits (its floor is about ``eps^2 ||X||``); a direct pivoted solve is used instead."""
SPARSE_DENSITY = 0.25
"""A stored ``A`` with at most this fraction of nonzeros counts as sparse here."""


_EVALUATOR_CACHE: "weakref.WeakKeyDictionary[Realization, TransferEvaluator]" = weakref.WeakKeyDictionary()


class TransferEvaluator:
    """Evaluate ``G(lam) = C (lam I - A)^-1 B + D`` at many complex points.

    ``A`` is reduced once to upper Hessenberg form by an orthogonal similarity
    (``scipy.linalg.hessenberg``); each point then costs O(n^2 (m + 1)).

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    refine : bool, keyword-only
        True (default): take the banded stored-data route when it applies and refine
        points where the Schur route lost digits (module docstring).  False: the plain
        Schur route (for comparisons).

    Raises
    ------
    NumericalTroubleError
        If the Hessenberg reduction fails.

    Examples
    --------
    >>> from audit.core.realization import Realization
    >>> r = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[0.0]])
    >>> g = TransferEvaluator(r).at([0.0, 2.0j])
    >>> g.shape
    (2, 1, 1)
    >>> complex(g[0, 0, 0])
    (1.5+0j)
    """

    def __init__(self, r: Realization, *, refine: bool = True) -> None:
        # The reductions depend only on the (immutable) realization: an audit builds
        # evaluators of the same model many times, so the first one's work is reused.
        try:
            first = _EVALUATOR_CACHE.get(r)
        except TypeError:
            first = None
        if first is not None:
            self.__dict__.update(first.__dict__)
            self.refine = bool(refine)
            self._first = first
            return
        self._first = None
        self.realization = r
        self.refine = bool(refine)
        n = r.order
        self._n = n
        if n:
            try:
                # Diagonal balancing by powers of two (exact, no rounding) first, as
                # in SLICOT TB05AD: it shrinks ||A|| for badly scaled models, which
                # improves both the accuracy and the error estimate.
                a_bal, (scale, _) = scipy.linalg.matrix_balance(
                    r.a, permute=False, separate=True
                )
                h, q = scipy.linalg.hessenberg(a_bal, calc_q=True)
            except (ValueError, np.linalg.LinAlgError) as exc:  # pragma: no cover
                raise NumericalTroubleError(f"Hessenberg reduction of A failed: {exc}") from exc
            self._h: FloatArray = np.triu(h, -1)
            self._q: FloatArray = q
            # the stored data, exactly rescaled by powers of two: the coordinates in
            # which values are refined (see _refine)
            self._a_bal: FloatArray = np.ascontiguousarray(a_bal)
            self._b_bal: FloatArray = r.b / scale[:, None]
            self._c_bal: FloatArray = r.c * scale[None, :]
            self._b: FloatArray = q.T @ self._b_bal
            self._c: FloatArray = self._c_bal @ q
            self._sparse_a = bool(np.count_nonzero(a_bal) <= SPARSE_DENSITY * n * n)
        else:
            self._sparse_a = False
            self._h = np.zeros((0, 0))
            self._b = np.zeros((0, r.n_inputs))
            self._c = np.zeros((r.n_outputs, 0))
        self._band: BandedStoredRoute | None = None
        if n >= BANDED_MIN_ORDER and self._sparse_a:
            self._band = BandedStoredRoute.detect(self._a_bal, self._b_bal, self._c_bal)
        self._h_norm = float(np.linalg.norm(self._h)) if n else 0.0
        self._c_norm2 = float(np.linalg.norm(self._c, 2)) if n and r.n_outputs else 0.0
        self._h_maxabs = float(np.max(np.abs(self._h))) if n else 0.0
        # J H^T J (J the reversal) is again upper Hessenberg: the transposed
        # systems M^T y = c needed by the error estimate reuse the same solver.
        self._h_rev_t: FloatArray = np.ascontiguousarray(self._h.T[::-1, ::-1])
        self._c_rev_t: FloatArray = np.ascontiguousarray(self._c.T[::-1, :])
        # Values are computed from the complex Schur form T = Z^H H Z of the same
        # Hessenberg matrix (a further unitary similarity, so backward stable): T is
        # shared by every point, so the back substitution of (lam I - T) X = B^ runs
        # as one BLAS matrix-vector product per row across ALL points at once, where
        # the Hessenberg elimination needs per-point pivots and elementwise work.
        self._schur_ready = False
        #: number of points refined and refinement sweeps in the last call of :meth:`at`
        self.last_refined_points = 0
        self.last_refinement_sweeps = 0
        try:
            _EVALUATOR_CACHE[r] = self
        except TypeError:
            pass

    def _prepare_schur(self) -> None:
        if self._schur_ready:
            return
        first = self._first
        if first is not None and first._schur_ready:
            for name in ("_t", "_t_diag", "_bs", "_cs", "_w", "_wh", "_t_norm", "_cs_norm",
                         "_bs_norm"):
                setattr(self, name, getattr(first, name))
            self._schur_ready = True
            return
        try:
            # real Schur form then its complex equivalent: about twice as fast as a
            # complex QR iteration, with the same backward stability
            from audit.core.threads import wide_blas_threads

            with wide_blas_threads(self._n):
                t_real, z_real = scipy.linalg.schur(self._h, output="real")
                t, z = scipy.linalg.rsf2csf(t_real, z_real)
        except (ValueError, np.linalg.LinAlgError) as exc:  # pragma: no cover
            raise NumericalTroubleError(f"Schur reduction of A failed: {exc}") from exc
        self._t: ComplexArray = np.ascontiguousarray(np.triu(t))
        self._t_diag: ComplexArray = np.diag(self._t).copy()
        self._bs: ComplexArray = z.conj().T @ self._b
        self._cs: ComplexArray = self._c @ z
        # W = Q Z maps Schur coordinates straight to the (balanced) stored coordinates
        self._w: ComplexArray = self._q @ z
        self._wh: ComplexArray = np.ascontiguousarray(self._w.conj().T)
        self._t_norm = float(np.linalg.norm(self._t))
        self._cs_norm = float(np.linalg.norm(self._cs))
        self._bs_norm = float(np.linalg.norm(self._bs))
        self._schur_ready = True
        if first is not None and not first._schur_ready:
            for name in ("_t", "_t_diag", "_bs", "_cs", "_w", "_wh", "_t_norm", "_cs_norm",
                         "_bs_norm", "_schur_ready"):
                setattr(first, name, getattr(self, name))

    def _triangular_solve(self, rhs: ComplexArray, lam_cols: ComplexArray, *,
                          reversed_transpose: bool = False) -> ComplexArray:
        """Solve ``(lam_cols[c] I - T) x[:, c] = rhs[:, c]`` for every column ``c``.

        Blocked back substitution on the shared triangular factor: the coupling to
        rows already solved is one matrix-matrix product per block of rows (level-3
        BLAS), the rows of a block are one matrix-vector product each.
        """
        n = self._n
        if reversed_transpose:
            # J T^T J (J the reversal) is upper triangular with the reversed diagonal
            if not hasattr(self, "_t_rev_t"):
                self._t_rev_t = np.ascontiguousarray(self._t.T[::-1, ::-1])
                self._t_rev_diag = self._t_diag[::-1].copy()
            t, diag = self._t_rev_t, self._t_rev_diag
        else:
            t, diag = self._t, self._t_diag
        x = np.empty_like(rhs)
        j1 = n
        while j1 > 0:
            j0 = max(0, j1 - _SCHUR_BLOCK)
            block = rhs[j0:j1]
            if j1 < n:
                block = block + t[j0:j1, j1:] @ x[j1:]
            for j in range(j1 - 1, j0 - 1, -1):
                row = block[j - j0]
                if j + 1 < j1:
                    row = row + t[j, j + 1:j1] @ x[j + 1:j1]
                x[j] = row / (lam_cols - diag[j])
            j1 = j0
        return x

    def _schur_values(self, lam: ComplexArray, *, refine: bool | None = None) -> ComplexArray:
        """G at every point by back substitution on the shared triangular factor."""
        self._prepare_schur()
        r = self.realization
        n, m, p = self._n, r.n_inputs, r.n_outputs
        k = lam.shape[0]
        refine = self.refine if refine is None else refine
        out = np.empty((k, p, m), dtype=complex)
        per = max(1, CHUNK_ENTRIES // max(1, n * max(m, 1)))
        self.last_refined_points = 0
        self.last_refinement_sweeps = 0
        with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
            for start in range(0, k, per):
                sl = slice(start, min(k, start + per))
                kk = sl.stop - sl.start
                lam_cols = np.repeat(lam[sl], m)
                rhs = np.ascontiguousarray(
                    np.broadcast_to(self._bs[:, None, :], (n, kk, m)).reshape(n, kk * m))
                x = self._triangular_solve(rhs, lam_cols)
                g = (self._cs @ x).reshape(p, kk, m).transpose(1, 0, 2) + r.d
                if refine and m:
                    self._refine(lam[sl], x, g)
                out[sl] = g
        return out

    def _refine(self, lam: ComplexArray, x: ComplexArray, g: ComplexArray) -> None:
        """Recover the digits the Schur route lost, on the stored data.

        The Schur route is normwise backward stable, so a point can lose digits
        relative to its own value ``|G|`` where ``G`` is much smaller than
        ``||C|| ||X||`` (a cancellation ratio ``rho``; e.g. the fast roll-off of a long
        chain of states, where ``|G|`` can be 1e-170 of the terms summed in dense
        coordinates), and where ``lam I - A`` is ill conditioned.  Only a SPARSE
        stored ``A`` can give those digits back (its residual is accurate row by row;
        a dense one is no more accurate than the Schur route), so dense models are
        left as they are.  Per point, ``rho`` and
        ``est = eps (||T|| + |lam|) (||X|| / ||B||) rho`` are cheap; where
        ``eps rho > REFINE_ABOVE`` or ``est > 10 REFINE_ABOVE``:

        * ``rho <= DIRECT_ABOVE``: the solution is moved to the (balanced) stored
          coordinates ``x = W x_s`` (``W = Q Z`` unitary) and refined with residuals
          of the STORED matrix ``B - (lam I - A) x`` and corrections from the Schur
          solver until the correction of ``G`` is below a few ulps of ``|G|``
          (fixed-precision iterative refinement: N. J. Higham, *Accuracy and
          Stability of Numerical Algorithms*, 2nd ed., SIAM 2002, chapter 12; a
          normwise solver brings the error down to about ``eps^2 ||X||``);
        * beyond (``eps^2 rho`` not small): a direct solve with partial pivoting by
          sparse LU of the stored ``lam I - A`` (``scipy.sparse.linalg.splu``).
        """
        n = self._n
        kk, p, m = g.shape
        xs = x.reshape(n, kk, m)
        x_norm = np.sqrt(np.sum(np.abs(xs) ** 2, axis=(0, 2)))
        g_norm = np.sqrt(np.sum(np.abs(g) ** 2, axis=(1, 2)))
        rho = self._cs_norm * x_norm / np.where(g_norm > 0, g_norm, 1e-300)
        est = _EPS * (self._t_norm + np.abs(lam)) * (x_norm / max(self._bs_norm, 1e-300)) * rho
        if not self._sparse_a:
            # a dense stored A gives no more accurate residual than the Schur route
            # itself: its error is the model's own conditioning
            return
        need = (_EPS * rho > REFINE_ABOVE) | (est > 10 * REFINE_ABOVE)
        need &= np.isfinite(rho) & np.isfinite(est)
        # sparse stored A: a sparse LU per point is cheap and row-wise accurate
        direct = np.nonzero(need & (rho > DIRECT_ABOVE))[0]
        flagged = np.nonzero(need & (rho <= DIRECT_ABOVE))[0]
        self.last_refined_points += int(direct.size + flagged.size)
        d = self.realization.d
        if direct.size:
            g[direct] = self._direct_values(lam[direct])
        if flagged.size == 0:
            return
        lam_f = lam[flagged]
        lam_cols = np.repeat(lam_f, m)
        xo = self._w @ np.ascontiguousarray(xs[:, flagged, :]).reshape(n, flagged.size * m)
        b_cols = np.tile(self._b_bal, (1, flagged.size))
        active = np.arange(flagged.size)
        prev = np.full(flagged.size, np.inf)
        gf = g[flagged]
        for sweep in range(REFINE_MAX_SWEEPS):
            cols = (active[:, None] * m + np.arange(m)[None, :]).ravel()
            xa = np.ascontiguousarray(xo[:, cols])
            ax = (self._a_bal @ xa.view(np.float64).reshape(n, -1)).view(np.complex128)
            res = b_cols[:, cols] - (lam_cols[cols] * xa - ax)
            dx = self._w @ self._triangular_solve(self._wh @ res, lam_cols[cols])
            xo[:, cols] = xa + dx
            self.last_refinement_sweeps = max(self.last_refinement_sweeps, sweep + 1)
            dg = (self._c_bal @ dx).reshape(p, active.size, m).transpose(1, 0, 2)
            corr = np.sqrt(np.sum(np.abs(dg) ** 2, axis=(1, 2)))
            gnew = (self._c_bal @ xo[:, cols]).reshape(p, active.size, m).transpose(1, 0, 2) + d
            gf[active] = gnew
            gn = np.sqrt(np.sum(np.abs(gnew) ** 2, axis=(1, 2)))
            # continue where the correction is still above a few ulps of |G| and
            # still shrinking (stagnation: the floor of a normwise solver)
            going = (corr > 4 * _EPS * gn) & (corr < 0.5 * prev[active]) & np.isfinite(corr)
            prev[active] = corr
            active = active[going]
            if active.size == 0:
                break
        g[flagged] = gf

    def _direct_values(self, lam: ComplexArray) -> ComplexArray:
        """G by a direct pivoted solve per point (see :meth:`_refine`)."""
        r = self.realization
        d = r.d
        if self._sparse_a:
            import scipy.sparse
            import scipy.sparse.linalg

            a = scipy.sparse.csc_matrix(self._a_bal)
            eye = scipy.sparse.identity(self._n, dtype=complex, format="csc")
            out = np.empty((lam.size, r.n_outputs, r.n_inputs), dtype=complex)
            for i, v in enumerate(lam):
                try:
                    lu = scipy.sparse.linalg.splu((v * eye - a).tocsc())
                    out[i] = self._c_bal @ lu.solve(self._b_bal.astype(complex)) + d
                except RuntimeError:  # exactly singular: numerically a pole
                    out[i] = np.nan
            return out
        out = np.empty((lam.size, r.n_outputs, r.n_inputs), dtype=complex)
        for sl in self._chunks(lam.size):
            x, _ = self._solve(self._h, self._b, lam[sl])
            out[sl] = np.einsum("pn,knm->kpm", self._c, x) + d
        return out

    # ------------------------------------------------------------------ core
    def _solve(
        self, h: FloatArray, rhs_cols: FloatArray, lam: ComplexArray
    ) -> tuple[ComplexArray, FloatArray]:
        """Solve ``(lam_k I - h) X_k = rhs_cols`` for every point ``lam_k``.

        ``h : (n, n)`` is upper Hessenberg, ``rhs_cols : (n, q)``.  Gaussian
        elimination with partial pivoting between the two candidate rows of each
        column, vectorised over the points.  Returns ``X`` of shape (k, n, q) and
        the growth factor (k,) ``max |U| / max |lam I - h|``.  Non-finite entries
        mark points where the matrix is singular in floating point.
        """
        n = self._n
        k = lam.shape[0]
        m1 = rhs_cols.shape[1]
        u_rows: list[ComplexArray] = []
        y_rows: list[ComplexArray] = []
        max_u = np.zeros(k)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            # working row: row 0 of M = lam I - H
            w = np.broadcast_to(-h[0, :], (k, n)).astype(complex)
            w[:, 0] += lam
            yw = np.broadcast_to(rhs_cols[0, :], (k, m1)).astype(complex)
            for j in range(n - 1):
                # next original row j+1 of M, columns j..n-1
                r = np.broadcast_to(-h[j + 1, j:], (k, n - j)).astype(complex)
                r[:, 1] += lam
                yr = np.broadcast_to(rhs_cols[j + 1, :], (k, m1))
                swap = np.abs(r[:, 0]) > np.abs(w[:, 0])
                piv = np.where(swap[:, None], r, w)
                oth = np.where(swap[:, None], w, r)
                ypiv = np.where(swap[:, None], yr, yw)
                yoth = np.where(swap[:, None], yw, yr)
                mult = oth[:, 0] / piv[:, 0]
                w = oth[:, 1:] - mult[:, None] * piv[:, 1:]
                yw = yoth - mult[:, None] * ypiv
                u_rows.append(piv)
                y_rows.append(ypiv)
                np.maximum(max_u, np.max(np.abs(piv), axis=1), out=max_u)
            u_rows.append(w)
            y_rows.append(yw)
            np.maximum(max_u, np.abs(w[:, 0]), out=max_u)
            # back substitution
            x = np.empty((k, n, m1), dtype=complex)
            x[:, n - 1, :] = y_rows[n - 1] / u_rows[n - 1][:, :1]
            for j in range(n - 2, -1, -1):
                uj = u_rows[j]
                acc = np.einsum("ki,kim->km", uj[:, 1:], x[:, j + 1 :, :])
                x[:, j, :] = (y_rows[j] - acc) / uj[:, :1]
        max_m = np.abs(lam) + self._h_maxabs
        growth = np.where(max_m > 0, max_u / np.where(max_m > 0, max_m, 1.0), 1.0)
        return x, np.maximum(growth, 1.0)

    def _chunks(self, k: int) -> Iterable[slice]:
        per = max(1, CHUNK_ENTRIES // max(1, self._n * self._n))
        for start in range(0, k, per):
            yield slice(start, min(k, start + per))

    def _evaluate(
        self, lam: ComplexArray, *, with_errors: bool
    ) -> tuple[ComplexArray, FloatArray]:
        """Values (k, p, m) and error estimates (k,); non-finite values allowed."""
        r = self.realization
        k = lam.shape[0]
        p, m = r.n_outputs, r.n_inputs
        d = r.d.astype(complex)
        g = np.empty((k, p, m), dtype=complex)
        err = np.full(k, np.nan)
        if self._n == 0:
            g[...] = d
            err[:] = _EPS * float(np.linalg.norm(r.d))
            return g, err
        n = self._n
        for sl in self._chunks(k):
            x, growth = self._solve(self._h, self._b, lam[sl])
            with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
                gk = np.einsum("pn,knm->kpm", self._c, x) + d
                g[sl] = gk
                if not with_errors:
                    continue
                # Y^T = M^-T C~^T through the reversed (upper Hessenberg) transpose.
                z, growth_t = self._solve(self._h_rev_t, self._c_rev_t, lam[sl])
                y_norm = np.linalg.norm(z.reshape(z.shape[0], -1), axis=1)
                x_norm = np.linalg.norm(x.reshape(x.shape[0], -1), axis=1)
                m_norm = np.abs(lam[sl]) * math.sqrt(n) + self._h_norm
                g_norm = np.linalg.norm(gk.reshape(gk.shape[0], -1), axis=1)
                # first order: dG = C~ M^-1 E X with ||E|| <= 2 n rho eps ||M||
                # (elimination and Hessenberg reduction), plus the rounding of
                # C~ X and of the final sum.
                err[sl] = _EPS * (
                    2 * n * np.maximum(growth, growth_t) * m_norm * y_norm * x_norm
                    + 2 * n * self._c_norm2 * x_norm
                    + g_norm
                )
        return g, err

    # ---------------------------------------------------------------- public
    def at(self, points: ArrayLike) -> ComplexArray:
        """The transfer matrix at complex points.

        Parameters
        ----------
        points : (k,) array_like of complex
            Values of ``s`` (continuous time) or ``z`` (discrete time).

        Returns
        -------
        (k, p, m) complex ndarray

        Raises
        ------
        InvalidModelError
            If ``points`` is not a finite 1-D sequence.
        NumericalTroubleError
            If a point is (numerically) an eigenvalue of ``A``, so that
            ``lam I - A`` is singular in floating point.
        """
        lam = complex_points(points, "points")
        if self._n == 0:
            g, _ = self._evaluate(lam, with_errors=False)
        elif self._band is not None and self.refine:
            g = self._band.values(lam, self.realization.d)
        else:
            g = self._schur_values(lam)
        bad = ~np.all(np.isfinite(g.reshape(g.shape[0], -1)), axis=1)
        if np.any(bad):
            where = ", ".join(f"{complex(v):.6g}" for v in lam[bad][:5])
            raise NumericalTroubleError(
                f"points: lam I - A is singular in floating point at {where} "
                "(the point is numerically a pole of the model)"
            )
        return g

    def _schur_error_estimates(self, lam: ComplexArray, g: ComplexArray) -> FloatArray:
        """First-order rounding-error estimate of the Schur route (module docstring).

        The same formula as :meth:`error_bound` with ``X = M^-1 B^`` and
        ``Y = C^ M^-1`` from triangular solves on the Schur factor (growth factor 1:
        back substitution does not pivot), so it costs two triangular sweeps instead
        of two Hessenberg eliminations.  For the banded and refined routes it is a
        pessimistic estimate (their errors are those of the stored data, smaller).
        """
        self._prepare_schur()
        r = self.realization
        n, m, p = self._n, r.n_inputs, r.n_outputs
        k = lam.shape[0]
        err = np.empty(k)
        per = max(1, CHUNK_ENTRIES // max(1, n * max(m, p, 1)))
        rhs_y_base = np.ascontiguousarray(self._cs.T[::-1, :])  # (n, p)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
            for start in range(0, k, per):
                sl = slice(start, min(k, start + per))
                kk = sl.stop - sl.start
                x = self._triangular_solve(
                    np.ascontiguousarray(np.broadcast_to(self._bs[:, None, :], (n, kk, m)).reshape(n, kk * m)),
                    np.repeat(lam[sl], m))
                z = self._triangular_solve(
                    np.ascontiguousarray(np.broadcast_to(rhs_y_base[:, None, :], (n, kk, p)).reshape(n, kk * p)),
                    np.repeat(lam[sl], p), reversed_transpose=True)
                x_norm = np.sqrt(np.sum(np.abs(x.reshape(n, kk, m)) ** 2, axis=(0, 2)))
                y_norm = np.sqrt(np.sum(np.abs(z.reshape(n, kk, p)) ** 2, axis=(0, 2)))
                m_norm = np.abs(lam[sl]) * math.sqrt(n) + self._t_norm
                g_norm = np.sqrt(np.sum(np.abs(g[sl]) ** 2, axis=(1, 2)))
                err[sl] = _EPS * (2 * n * m_norm * y_norm * x_norm
                                  + 2 * n * self._c_norm2 * x_norm + g_norm)
        return err

    def error_bound(self, points: ArrayLike) -> FloatArray:
        """Per-point estimate of the absolute rounding error of :meth:`at`.

        A first-order, deliberately pessimistic estimate (see the module docstring):
        ``eps * (2 n rho ||M|| ||C~ M^-1|| ||M^-1 B~|| + 2 n ||C~|| ||M^-1 B~|| + ||G||)``
        with ``M = lam I - H``.  It estimates the norm (Frobenius, hence also
        spectral) of the error matrix of ``G(lam)``; it costs about twice
        :meth:`at`.

        Parameters
        ----------
        points : (k,) array_like of complex

        Returns
        -------
        (k,) float ndarray
            ``inf`` where the point is numerically a pole.

        Raises
        ------
        InvalidModelError
            If ``points`` is not a finite 1-D sequence.
        """
        lam = complex_points(points, "points")
        _, err = self._evaluate(lam, with_errors=True)
        return np.where(np.isfinite(err), err, np.inf)

    def values_and_errors(
        self, points: ArrayLike, *, errors: bool = True
    ) -> tuple[ComplexArray, FloatArray]:
        """Both :meth:`at` and :meth:`error_bound` in one pass, without raising at poles.

        Parameters
        ----------
        points : (k,) array_like of complex
        errors : bool, keyword-only
            False skips the error estimate (half the cost); the returned errors are
            then NaN where the value is finite.

        Returns
        -------
        values : (k, p, m) complex ndarray
            Non-finite where the point is numerically a pole.
        errors : (k,) float ndarray
            ``inf`` where the point is numerically a pole.

        Raises
        ------
        InvalidModelError
            If ``points`` is not a finite 1-D sequence.
        """
        lam = complex_points(points, "points")
        if self._n == 0:
            g, err = self._evaluate(lam, with_errors=errors)
        else:
            g = (self._band.values(lam, self.realization.d)
                 if self._band is not None and self.refine else self._schur_values(lam))
            err = self._schur_error_estimates(lam, g) if errors else np.full(lam.shape[0], np.nan)
        finite = np.all(np.isfinite(g.reshape(g.shape[0], -1)), axis=1)
        if errors:
            finite &= np.isfinite(err)
        err = np.where(finite, err, np.inf)
        return g, err


def frequency_response(r: Realization, omegas: ArrayLike) -> ComplexArray:
    """The frequency response ``G(j omega)`` or ``G(exp(j omega T))``.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    omegas : (k,) array_like
        Frequencies in rad/s.

    Returns
    -------
    (k, p, m) complex ndarray

    Raises
    ------
    InvalidModelError
        If ``omegas`` is not a finite 1-D real sequence.
    NumericalTroubleError
        If a frequency hits a pole on the stability boundary.

    Examples
    --------
    >>> from audit.core.realization import Realization
    >>> r = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    >>> round(float(abs(frequency_response(r, [1.0])[0, 0, 0])) ** 2, 12)
    0.5
    """
    from audit.core.threads import limited_blas_threads

    with limited_blas_threads():  # see audit.core.threads: threads only add contention here
        return TransferEvaluator(r).at(boundary_points(r, omegas))
