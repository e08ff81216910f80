"""Shared generators and extended-precision checks for the lti-audit benchmarks.

Benchmark data only (invented systems, seeded). Nothing here is used by the package.

Label verification
------------------
A benchmark pair is stored in doubles, so its second model is exactly the system its
stored doubles describe -- not the system the construction intended.  Labels are
therefore computed from the stored doubles:

* transformed models are built in extended precision (python-flint, Arb; F. Johansson,
  "Arb: efficient arbitrary-precision midpoint-radius interval arithmetic", IEEE Trans.
  Computers 66 (2017) 1281-1292): ``T A T^-1``, ``T B``, ``C T^-1`` at 200 bits, rounded
  to doubles once;
* the difference ``G1 - G2`` of the STORED doubles is evaluated at 128 bits at a set of
  frequencies that includes every pole frequency of both models, DC, a log grid and the
  places where a dense double-precision evaluation puts the largest difference;
* at the deciding frequency the difference is re-evaluated as a rigorous complex-ball
  enclosure (Arb), and, for models of order <= ``MPMATH_MAX_ORDER``, cross-checked with
  mpmath at 40 significant digits (an independent arbitrary-precision library).

The true relative difference is ``max_k sigma_max(G1 - G2)(w_k) / max_k max(sigma_max
G1(w_k), sigma_max G2(w_k))`` over that frequency set (the same normalisation as the
audit's decisive evidence: relative to the larger peak gain of the two models).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
from numpy.typing import NDArray

from audit.core.realization import Realization

FloatArray = NDArray[np.float64]

CONSTRUCT_BITS = 200
"""Working precision (bits) for building transformed models before rounding once."""

VERIFY_BITS = 128
"""Working precision (bits, ~38 digits) of the label verification."""

MPMATH_DPS = 40
"""Decimal digits of the mpmath cross-check."""

MPMATH_MAX_ORDER = 40
"""Largest model order cross-checked with mpmath (its dense solve is pure Python)."""

EQUIVALENT_MAX = 1e-6
"""A pair is labelled equivalent when its verified relative difference is <= this
(``DEFAULT_RTOL / 10`` with the audit's default tolerance 1e-5)."""

DIFFERENT_MIN = 1e-4
"""A pair is labelled different when its verified relative difference is >= this."""

Label = Literal["equivalent", "different", "discarded"]


# ---------------------------------------------------------------- model builders
def random_poles(
    rng: np.random.Generator,
    n: int,
    *,
    spread_decades: float,
    centre: float = 1.0,
    complex_fraction: float = 0.6,
    damping: tuple[float, float] = (1e-3, 0.7),
) -> list[complex]:
    """``n`` stable continuous-time poles; magnitudes log-uniform over the spread.

    Complex poles come in conjugate pairs with damping ratio log-uniform in ``damping``.
    """
    poles: list[complex] = []
    half = spread_decades / 2.0
    while len(poles) < n:
        mag = centre * 10.0 ** rng.uniform(-half, half)
        if n - len(poles) >= 2 and rng.random() < complex_fraction:
            zeta = 10.0 ** rng.uniform(math.log10(damping[0]), math.log10(damping[1]))
            p = complex(-zeta * mag, mag * math.sqrt(1.0 - zeta * zeta))
            poles += [p, p.conjugate()]
        else:
            poles.append(complex(-mag, 0.0))
    return poles


def discrete_poles_near_circle(
    rng: np.random.Generator, n: int, *, period: float, near_fraction: float = 0.5
) -> list[complex]:
    """``n`` discrete-time poles inside the unit circle, some within 1e-5..1e-3 of it."""
    poles: list[complex] = []
    nyquist = math.pi / period
    while len(poles) < n:
        if n - len(poles) >= 2:
            angle = rng.uniform(0.002, 0.95) * math.pi
            if rng.random() < near_fraction:
                radius = 1.0 - 10.0 ** rng.uniform(-5, -3)
            else:
                radius = 10.0 ** rng.uniform(-0.5, -0.003)
            z = radius * complex(math.cos(angle), math.sin(angle))
            poles += [z, z.conjugate()]
        else:
            w = nyquist * 10.0 ** rng.uniform(-3, -0.5)
            poles.append(complex(math.exp(-w * period), 0.0))
    return poles


def block_diagonal_state_matrix(poles: list[complex]) -> FloatArray:
    """Real block-diagonal A: 1x1 blocks for real poles, [[re, im], [-im, re]] for pairs."""
    n = len(poles)
    a = np.zeros((n, n))
    i = 0
    while i < n:
        z = poles[i]
        if abs(z.imag) > 0 and i + 1 < n:
            a[i:i + 2, i:i + 2] = [[z.real, z.imag], [-z.imag, z.real]]
            i += 2
        else:
            a[i, i] = z.real
            i += 1
    return a


def reference_model(
    rng: np.random.Generator,
    poles: list[complex],
    *,
    inputs: int = 1,
    outputs: int = 1,
    sample_period: float | None = None,
    with_d: bool = True,
    name: str = "reference",
) -> Realization:
    """Block-diagonal realization with the given poles and random B, C (and D)."""
    n = len(poles)
    a = block_diagonal_state_matrix(poles)
    b = rng.standard_normal((n, inputs))
    c = rng.standard_normal((outputs, n))
    d = rng.standard_normal((outputs, inputs)) if with_d else np.zeros((outputs, inputs))
    return Realization.from_arrays(a, b, c, d, sample_period, name=name)


def conditioned_transform(rng: np.random.Generator, n: int, cond: float) -> FloatArray:
    """``T = U diag(s) V^T`` with random orthogonal U, V and ``s`` from 1 to ``1/cond``."""
    if n == 0:
        return np.zeros((0, 0))
    u, _ = np.linalg.qr(rng.standard_normal((n, n)))
    v, _ = np.linalg.qr(rng.standard_normal((n, n)))
    s = np.logspace(0.0, -math.log10(cond), n) if n > 1 else np.ones(1)
    rng.shuffle(s)
    return (u * s) @ v.T


def _arb_matrix(flint: Any, x: FloatArray) -> Any:
    rows, cols = x.shape
    return flint.arb_mat(rows, cols, [float(v) for v in x.ravel()])


def _to_numpy(mat: Any) -> FloatArray:
    rows, cols = mat.nrows(), mat.ncols()
    return np.array([float(e.mid()) for e in mat.entries()], dtype=float).reshape(rows, cols)


def transform_in_extended_precision(r: Realization, t: FloatArray, *, name: str) -> Realization:
    """``(T A T^-1, T B, C T^-1, D)`` computed at ``CONSTRUCT_BITS`` and rounded once.

    ``T`` is taken exactly as stored; the inverse is applied by a solve in Arb (no
    inverse is formed), so every stored entry is the correctly rounded image of the
    exact transformation up to ``cond(T) * 2^-200``.
    """
    import flint

    n = r.order
    if n == 0:
        return r.with_name(name)
    old = flint.ctx.prec
    flint.ctx.prec = CONSTRUCT_BITS
    try:
        tm = _arb_matrix(flint, t)
        tt = tm.transpose()
        ta = tm * _arb_matrix(flint, r.a)
        a_new = tt.solve(ta.transpose(), algorithm="approx").transpose()
        c_new = tt.solve(_arb_matrix(flint, r.c).transpose(), algorithm="approx").transpose()
        b_new = tm * _arb_matrix(flint, r.b)
        return Realization.from_arrays(
            _to_numpy(a_new), _to_numpy(b_new), _to_numpy(c_new), r.d, r.sample_period,
            name=name,
        )
    finally:
        flint.ctx.prec = old


def append_modes(
    r: Realization,
    a_extra: FloatArray,
    b_extra: FloatArray,
    c_extra: FloatArray,
    *,
    name: str,
) -> Realization:
    """Block-diagonal extension ``diag(A, A_x)``, ``[B; B_x]``, ``[C, C_x]`` (exact)."""
    n, k = r.order, a_extra.shape[0]
    a = np.zeros((n + k, n + k))
    a[:n, :n] = r.a
    a[n:, n:] = a_extra
    return Realization.from_arrays(
        a, np.vstack([r.b, b_extra]), np.hstack([r.c, c_extra]), r.d, r.sample_period,
        name=name,
    )


def round_to_digits(r: Realization, digits: int, *, name: str) -> Realization:
    """Every entry rounded to ``digits`` significant decimal digits (as if printed)."""
    def rnd(x: FloatArray) -> FloatArray:
        return np.array([float(f"{v:.{digits - 1}e}") for v in x.ravel()]).reshape(x.shape)

    return Realization.from_arrays(rnd(r.a), rnd(r.b), rnd(r.c), rnd(r.d), r.sample_period,
                                   name=name)


# --------------------------------------------------------- double-precision helpers
def transfer_values_double(r: Realization, points: NDArray[np.complex128]) -> NDArray[np.complex128]:
    """``C (lam I - A)^-1 B + D`` by dense LU per point (numpy); (k, p, m). A model
    stored as a transfer function or zero-pole-gain is evaluated from its stored data
    (numpy.polyval ratios, factor products)."""
    if r.stored is not None:
        return _stored_values_double(r, np.asarray(points, dtype=complex))
    n = r.order
    k = points.size
    if n == 0:
        return np.broadcast_to(r.d.astype(complex), (k,) + r.d.shape).copy()
    m = np.eye(n)[None, :, :] * points[:, None, None] - r.a[None, :, :]
    with np.errstate(all="ignore"):
        try:
            x = np.linalg.solve(m, np.broadcast_to(r.b.astype(complex), (k,) + r.b.shape))
        except np.linalg.LinAlgError:
            x = np.stack([_safe_solve(m[i], r.b) for i in range(k)])
        return np.einsum("pn,knm->kpm", r.c, x) + r.d[None, :, :]


def _safe_solve(m: NDArray[np.complex128], b: FloatArray) -> NDArray[np.complex128]:
    try:
        return np.linalg.solve(m, b.astype(complex))
    except np.linalg.LinAlgError:
        return np.full(b.shape, np.nan + 0j)


def sigma_max(g: NDArray[np.complex128]) -> FloatArray:
    """Largest singular value of each (p, m) slice of a (k, p, m) array."""
    if g.shape[1] == 1 or g.shape[2] == 1:
        return np.sqrt(np.sum(np.abs(g) ** 2, axis=(1, 2)))
    return np.linalg.norm(g, ord=2, axis=(1, 2))


def boundary_point(omega: FloatArray, sample_period: float | None) -> NDArray[np.complex128]:
    w = np.asarray(omega, dtype=float)
    return 1j * w if sample_period is None else np.exp(1j * w * sample_period)


def mode_frequencies(poles: NDArray[np.complex128], sample_period: float | None) -> FloatArray:
    """|lam| and |Im lam| (continuous) or the same of log(z)/T (discrete), > 0."""
    lam = np.asarray(poles, dtype=complex)
    if sample_period is not None:
        lam = lam[np.abs(lam) > 0]
        lam = np.log(lam) / sample_period
    w = np.concatenate([np.abs(lam), np.abs(lam.imag)])
    w = w[np.isfinite(w) & (w > 0)]
    if sample_period is not None:
        w = np.minimum(w, math.pi / sample_period)
    return w


def _dedupe(w: FloatArray, rel: float = 1e-7) -> FloatArray:
    w = np.unique(np.asarray(w, dtype=float))
    if w.size < 2:
        return w
    keep = np.ones(w.size, dtype=bool)
    keep[1:] = np.diff(w) > rel * np.maximum(w[1:], 1e-300)
    return w[keep]


# ------------------------------------------------- stored transfer functions / factors
# Benchmark pairs may be transfer-function or zero-pole-gain DOCUMENTS: their realization
# carries the stored data (``Realization.stored``). Labels are verified on the stored data,
# evaluated here by code independent of audit.core.stored_evaluation: numpy.polyval /
# products in double (only to choose where to verify), python-flint balls and mpmath for
# the verified numbers.
def _stored_channels(r: Realization) -> list[tuple[int, int, str, Any, Any, Any]]:
    st = r.stored
    out = []
    p, m = r.n_outputs, r.n_inputs
    for i in range(p):
        for j in range(m):
            if hasattr(st, "numerator"):
                out.append((i, j, "tf", np.asarray(st.numerator[i][j], dtype=float),
                            np.asarray(st.denominator[i][j], dtype=float), None))
            else:
                out.append((i, j, "factored", np.asarray(st.zeros[i][j], dtype=complex),
                            np.asarray(st.poles_[i][j], dtype=complex), float(st.gain[i, j])))
    return out


def stored_poles(r: Realization) -> NDArray[np.complex128]:
    """Poles of the stored data (roots of stored denominators, stored poles)."""
    if r.stored is None:
        return r.poles()
    out: list[complex] = []
    for _, _, kind, x, y, k in _stored_channels(r):
        if kind == "tf":
            with np.errstate(all="ignore"):
                out.extend(np.roots(y).tolist())
        elif k:
            out.extend(y.tolist())
    arr = np.array(out, dtype=complex)
    return arr[np.isfinite(arr)]


def _stored_values_double(r: Realization, points: NDArray[np.complex128]) -> NDArray[np.complex128]:
    g = np.zeros((points.size, r.n_outputs, r.n_inputs), dtype=complex)
    with np.errstate(all="ignore"):
        for i, j, kind, x, y, k in _stored_channels(r):
            if kind == "tf":
                g[:, i, j] = np.polyval(x, points) / np.polyval(y, points)
            elif k:
                v = np.full(points.shape, complex(k))
                for z in x:
                    v = v * (points - z)
                for q in y:
                    v = v / (points - q)
                g[:, i, j] = v
    return g


def _stored_ball(flint: Any, r: Realization, lam: Any) -> Any:
    rows = [[flint.acb(0)] * r.n_inputs for _ in range(r.n_outputs)]
    for i, j, kind, x, y, k in _stored_channels(r):
        if kind == "tf":
            pn, pd = flint.acb(0), flint.acb(0)
            for a in x:
                pn = pn * lam + float(a)
            for a in y:
                pd = pd * lam + float(a)
            if pd.contains(0):
                raise ZeroDivisionError("stored denominator vanishes")
            rows[i][j] = pn / pd
        elif k:
            v = flint.acb(k)
            for z in x:
                v = v * (lam - flint.acb(float(z.real), float(z.imag)))
            for q in y:
                step = lam - flint.acb(float(q.real), float(q.imag))
                if step.contains(0):
                    raise ZeroDivisionError("stored pole on the point")
                v = v / step
            rows[i][j] = v
    return flint.acb_mat(rows)


def _stored_mpmath(r: Realization, lam: Any) -> Any:
    import mpmath

    g = mpmath.matrix(r.n_outputs, r.n_inputs)
    for i, j, kind, x, y, k in _stored_channels(r):
        if kind == "tf":
            g[i, j] = (mpmath.polyval([mpmath.mpf(float(a)) for a in x], lam)
                       / mpmath.polyval([mpmath.mpf(float(a)) for a in y], lam))
        elif k:
            v = mpmath.mpc(k)
            for z in x:
                v *= lam - mpmath.mpc(float(z.real), float(z.imag))
            for q in y:
                v /= lam - mpmath.mpc(float(q.real), float(q.imag))
            g[i, j] = v
    return g


def verification_frequencies(r1: Realization, r2: Realization, *, top: int = 6) -> FloatArray:
    """Frequencies [rad/s] at which a label is verified (see the module docstring)."""
    period = r1.sample_period
    poles = np.concatenate([stored_poles(r1), stored_poles(r2)])
    wp = mode_frequencies(poles, period)
    if wp.size:
        lo, hi = float(wp.min()) * 1e-2, float(wp.max()) * 1e2
    else:
        lo, hi = 1e-2, 1e2
    if period is not None:
        hi = math.pi / period
        lo = min(lo, hi * 1e-4)
    grid = np.geomspace(lo, hi, 40)
    dense = np.concatenate([np.geomspace(lo, hi, 2000), wp, [0.0]])
    if period is not None:
        dense = np.append(dense, math.pi / period)
    dense = _dedupe(dense)
    pts = boundary_point(dense, period)
    g1 = transfer_values_double(r1, pts)
    g2 = transfer_values_double(r2, pts)
    diff = sigma_max(g1 - g2)
    diff = np.where(np.isfinite(diff), diff, -1.0)
    gain = np.maximum(sigma_max(g1), sigma_max(g2))
    gain = np.where(np.isfinite(gain), gain, -1.0)
    worst = dense[np.argsort(-diff)[:top]]
    loudest = dense[np.argsort(-gain)[:top]]
    extra = [0.0] + ([math.pi / period] if period is not None else [])
    return _dedupe(np.concatenate([grid, wp, worst, loudest, extra]))


# ------------------------------------------------------- extended-precision checks
def _point_ball(flint: Any, omega: float, sample_period: float | None) -> Any:
    if sample_period is None:
        return flint.acb(0, omega)
    return (flint.acb(0, 1) * flint.arb(omega) * flint.arb(sample_period)).exp()


class _BallModel:
    """A stored realization converted exactly to Arb matrices (doubles are exact)."""

    def __init__(self, flint: Any, r: Realization) -> None:
        self.flint = flint
        self.stored = r if r.stored is not None else None
        self.n = r.order
        self.neg_a = _arb_matrix(flint, -r.a) if self.n else None
        self.b = flint.acb_mat(_arb_matrix(flint, r.b)) if self.n else None
        self.c = flint.acb_mat(_arb_matrix(flint, r.c)) if self.n else None
        self.d = flint.acb_mat(_arb_matrix(flint, r.d))

    def at(self, lam: Any, *, rigorous: bool) -> Any:
        if self.stored is not None:
            return _stored_ball(self.flint, self.stored, lam)
        if self.n == 0:
            return self.d
        m = self.flint.acb_mat(self.neg_a)
        for i in range(self.n):
            m[i, i] = m[i, i] + lam
        x = m.solve(self.b, algorithm=None if rigorous else "approx")
        return self.c * x + self.d


def _acb_to_complex(mat: Any) -> NDArray[np.complex128]:
    rows, cols = mat.nrows(), mat.ncols()
    vals = [complex(float(z.real.mid()), float(z.imag.mid())) for z in mat.entries()]
    return np.array(vals, dtype=complex).reshape(rows, cols)


def _acb_radius(mat: Any) -> float:
    """Frobenius norm of the entry radii: bounds the spectral-norm uncertainty (Weyl)."""
    rad = [float(z.real.rad()) + float(z.imag.rad()) for z in mat.entries()]
    return float(np.linalg.norm(rad))


@dataclass(frozen=True)
class VerifiedDifference:
    """The verified relative difference of a stored pair (see the module docstring)."""

    relative_difference: float
    at_frequency: float
    scale: float
    frequencies: int
    rigorous_interval: tuple[float, float]
    mpmath_agreement: float | None
    seconds: float

    def as_dict(self) -> dict[str, Any]:
        return {
            "relative_difference": self.relative_difference,
            "at_frequency": self.at_frequency,
            "scale": self.scale,
            "frequencies": self.frequencies,
            "rigorous_interval": list(self.rigorous_interval),
            "mpmath_agreement": self.mpmath_agreement,
            "seconds": self.seconds,
        }


def mpmath_transfer(r: Realization, omega: float) -> NDArray[np.complex128]:
    """``G`` at one frequency by an mpmath LU solve at ``MPMATH_DPS`` digits."""
    import mpmath

    with mpmath.workdps(MPMATH_DPS):
        g = _mp_transfer_matrix(r, omega)
        return np.array([[complex(g[i, j]) for j in range(g.cols)] for i in range(g.rows)])


def mpmath_difference(r1: Realization, r2: Realization, omega: float) -> NDArray[np.complex128]:
    """``G1 - G2`` at one frequency, subtracted at 40 digits before rounding."""
    import mpmath

    with mpmath.workdps(MPMATH_DPS):
        vals = []
        for r in (r1, r2):
            vals.append(_mp_transfer_matrix(r, omega))
        diff = vals[0] - vals[1]
        return np.array([[complex(diff[i, j]) for j in range(diff.cols)] for i in range(diff.rows)])


def _mp_transfer_matrix(r: Realization, omega: float) -> Any:
    import mpmath

    if r.sample_period is None:
        lam = mpmath.mpc(0, omega)
    else:
        lam = mpmath.exp(mpmath.mpc(0, 1) * mpmath.mpf(omega) * mpmath.mpf(r.sample_period))
    if r.stored is not None:
        return _stored_mpmath(r, lam)
    d = mpmath.matrix(r.d.tolist())
    n = r.order
    if n == 0:
        return d
    m = mpmath.matrix(n, n)
    for i in range(n):
        for j in range(n):
            m[i, j] = -mpmath.mpf(float(r.a[i, j]))
        m[i, i] += lam
    x = mpmath.matrix(n, r.n_inputs)
    for j in range(r.n_inputs):  # mpmath's lu_solve takes one right-hand side
        col = mpmath.lu_solve(m, mpmath.matrix([float(v) for v in r.b[:, j]]))
        for i in range(n):
            x[i, j] = col[i]
    return mpmath.matrix(r.c.tolist()) * x + d


def verify_difference(r1: Realization, r2: Realization, *, mpmath_check: bool = True) -> VerifiedDifference:
    """Relative difference of the stored pair, evaluated in extended precision."""
    import flint

    start = time.perf_counter()
    freqs = verification_frequencies(r1, r2)
    period = r1.sample_period
    old = flint.ctx.prec
    flint.ctx.prec = VERIFY_BITS
    try:
        m1, m2 = _BallModel(flint, r1), _BallModel(flint, r2)
        diffs = np.zeros(freqs.size)
        gains = np.zeros(freqs.size)
        for k, w in enumerate(freqs):
            lam = _point_ball(flint, float(w), period)
            try:
                g1 = m1.at(lam, rigorous=False)
                g2 = m2.at(lam, rigorous=False)
            except ZeroDivisionError:
                diffs[k], gains[k] = np.nan, np.nan
                continue
            diffs[k] = float(np.linalg.norm(_acb_to_complex(g1 - g2), 2))
            gains[k] = max(float(np.linalg.norm(_acb_to_complex(g1), 2)),
                           float(np.linalg.norm(_acb_to_complex(g2), 2)))
        ok = np.isfinite(diffs) & np.isfinite(gains)
        if not np.any(ok):
            raise ArithmeticError("no frequency could be evaluated in extended precision")
        scale = float(gains[ok].max())
        k = int(np.argmax(np.where(ok, diffs, -1.0)))
        w = float(freqs[k])
        rel = float(diffs[k]) / scale if scale > 0 else 0.0
        # rigorous enclosure at the deciding frequency
        lam = _point_ball(flint, w, period)
        try:
            e = m1.at(lam, rigorous=True) - m2.at(lam, rigorous=True)
            mid = float(np.linalg.norm(_acb_to_complex(e), 2))
            rad = _acb_radius(e)
            interval = (max(0.0, mid - rad) / scale, (mid + rad) / scale)
        except ZeroDivisionError:
            interval = (0.0, math.inf)
    finally:
        flint.ctx.prec = old
    agreement = None
    if mpmath_check and max(r1.order, r2.order) <= MPMATH_MAX_ORDER:
        try:
            dm = mpmath_difference(r1, r2, w)
        except ZeroDivisionError:  # 40 digits not enough for this solve: no cross-check
            dm = None
        if dm is not None:
            ref = float(np.linalg.norm(dm, 2))
            # relative to the difference itself, but no finer than 1e-16 of the gain: a
            # difference at 1e-37 of the gain (an exact companion of stored coefficients)
            # is below what a 40-digit solve of an ill-conditioned companion resolves
            agreement = abs(ref - float(diffs[k])) / max(ref, 1e-16 * scale, 1e-300)
    return VerifiedDifference(
        relative_difference=rel,
        at_frequency=w,
        scale=scale,
        frequencies=int(freqs.size),
        rigorous_interval=interval,
        mpmath_agreement=agreement,
        seconds=time.perf_counter() - start,
    )


def label_from_difference(rel: float) -> Label:
    """equivalent (<= 1e-6), different (>= 1e-4), or discarded in between."""
    if rel <= EQUIVALENT_MAX:
        return "equivalent"
    if rel >= DIFFERENT_MIN:
        return "different"
    return "discarded"


# ------------------------------------------------------------------- pair suites
@dataclass(frozen=True)
class BenchmarkPair:
    """One labelled pair of the verdict benchmark."""

    family: str
    index: int
    seed: tuple[int, ...]
    intent: Literal["equivalent", "different"]
    first: Realization
    second: Realization
    description: str
    verified: VerifiedDifference | None = None
    label: Label | None = None
    extra: dict[str, Any] = field(default_factory=dict)
