"""Random LTI systems for property-based tests: specifications, builders, hypothesis strategies.

A random system is described by a small, JSON-friendly :class:`SystemSpec` (order, inputs,
outputs, time domain, stability, pole spread, special pole structures, hidden modes,
conditioning of the state coordinates, random seed) and built deterministically from it by
:func:`build_system`.  The hypothesis strategies (:func:`system_specs`, :func:`lti_systems`,
:func:`equivalent_pairs`, :func:`different_pairs`) draw the specification, so hypothesis
shrinks toward small simple systems: the order is drawn first from small integers, every
special feature shrinks to "off", the pole spread and the coordinate condition shrink to 0
decades, the seed to 0.  The stress campaign (:mod:`audit.workflows.stress`) draws the same
specifications from a seeded numpy generator instead, so it needs no hypothesis at run time;
hypothesis is imported lazily, only when a strategy is requested.

Construction
------------
The system is first written in real block-diagonal (modal) coordinates: real poles on the
diagonal, complex pairs as normal 2x2 blocks ``[[sigma, omega], [-omega, sigma]]``, repeated
poles as 2x2 Jordan blocks ``[[lambda, 1], [0, lambda]]``; ``B``, ``C`` (and ``D`` when
requested) standard normal.  Pole magnitudes are ``10**u`` with ``u`` uniform in
``[-spread/2 - 0.15, spread/2 + 0.15]`` (the 0.15 decades keep poles distinct at spread 0); discrete systems map ``z = exp(s h)`` with ``h = 1 / max|s|``
(so the sample period is ``h``).  Then the state coordinates are changed by
``T = U diag(sigma) V^T`` (random orthogonal ``U``, ``V``; singular values log-spaced from
1 to ``1 / coordinate_condition``).

Exactness guarantee (equivalent-by-construction pairs)
------------------------------------------------------
Every change of coordinates is computed in exact rational arithmetic (python-flint
``fmpq_mat``: the stored doubles of ``A``, ``B``, ``C`` and ``T`` are exact rationals,
``T^-1`` is exact) and each entry of ``(T A T^-1, T B, C T^-1)`` is rounded to double
ONCE (correct rounding of the exact rational).  So the second model of an
:func:`equivalent_pair` is, entry by entry, within a relative ``2**-53`` of a realization
that is exactly equivalent to the first model as stored.  What that rounding does to the
transfer function depends on the sensitivity of the second realization (roughly
``cond(T)`` times the eigenvalue condition of the modal form); the builder therefore also
measures the relative transfer difference at probe points (one just above each pole
frequency) in 128-bit ball arithmetic (python-flint ``acb_mat``) and records it as
``construction_error``; :func:`equivalent_pair` raises :class:`~audit.errors.NumericalTroubleError`
when it exceeds ``max_construction_error`` (default ``1e-7``, two decades below the
default audit tolerance ``1e-5``).  Keep ``transform_condition`` within the documented
range ``[1, 1e6]``.

Marginal systems are the exception: rounding moves a pole on the stability boundary by
about ``eps * cond(T)``, to either side, and near that pole the two transfer functions
differ by O(1) however small the rounding (the sup-norm over frequency is ill-posed
there).  The probe points therefore stay away from such poles, and an equivalent pair of
marginal systems is equivalent only away from its boundary poles.  The default strategy
knobs draw stable systems only.

Different-by-construction pairs
-------------------------------
:func:`different_pair` scales the whole transfer matrix: ``G2 = (1 + delta) G1`` (``C`` and
``D`` multiplied by ``1 + delta``, then a change of coordinates as above), with
``delta = amount / (1 - amount)`` enlarged by a relative margin of ``1e-6``.  Then
``||G1 - G2||_inf / max(||G1||_inf, ||G2||_inf) = delta / (1 + delta) >= amount`` exactly, in
every norm and at every frequency (closed form, no source needed).  A system whose transfer
function is zero (everything hidden, no feedthrough) cannot be made different this way; the
builder adds a feedthrough then.

Published methods: none beyond the exact-arithmetic similarity (python-flint, FLINT:
W. Hart, "Fast Library for Number Theory: An Introduction", ICMS 2010) and ball arithmetic
(F. Johansson, "Arb: efficient arbitrary-precision midpoint-radius interval arithmetic",
IEEE Trans. Computers 66, 2017) used to measure the construction error.

Examples
--------
>>> spec = SystemSpec(order=3, inputs=1, outputs=2, complex_pairs=1, seed=7)
>>> r = build_system(spec)
>>> r.order, r.n_inputs, r.n_outputs, r.is_discrete
(3, 1, 2, False)
>>> pair = equivalent_pair(spec, transform_condition=100.0, seed=1)
>>> pair.relation, pair.construction_error < 1e-12
('equivalent', True)
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import NDArray

from audit.errors import InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization

if TYPE_CHECKING:  # pragma: no cover
    from hypothesis.strategies import SearchStrategy

FloatArray = NDArray[np.float64]
Stability = Literal["stable", "unstable", "marginal"]
Hidden = Literal["none", "uncontrollable", "unobservable"]
STABILITIES: tuple[str, ...] = ("stable", "unstable", "marginal")
HIDDEN_KINDS: tuple[str, ...] = ("none", "uncontrollable", "unobservable")

#: Relative distance between clustered poles (common practice, no source: close enough that
#: eigenvalue solvers lose ~3 digits, far enough that the poles stay distinct).
CLUSTER_RTOL = 1e-3
#: A "near pole-zero cancellation" mode has its input row scaled by this factor, so its
#: residue is this small relative to the others (a zero this close to the pole).
NEAR_CANCELLATION_RESIDUE = 1e-6
#: Pole magnitudes are drawn from ``10**(+-(spread/2 + JITTER_DECADES))``, so that even a
#: zero spread gives distinct poles (and a minimal system).
JITTER_DECADES = 0.15
#: Largest ``coordinate_condition`` / ``transform_condition`` accepted.
MAX_CONDITION = 1e6
#: Largest order a spec may ask for (documents are limited much higher; kept small so that
#: exact rational similarity stays fast).
MAX_ORDER = 60
#: Default bound on the measured construction error of an equivalent pair.
DEFAULT_MAX_CONSTRUCTION_ERROR = 1e-7
#: Poles nearer the origin than this, relative to the largest pole frequency, count as
#: integrators when probe points are placed (common practice, no source).
ORIGIN_RTOL = 1e-6
#: Bits of the ball arithmetic used to measure construction errors.
PROBE_PRECISION_BITS = 128


# ============================================================================ spec
@dataclass(frozen=True)
class SystemSpec:
    """Everything that determines a random system (JSON-friendly, see :meth:`as_dict`).

    Attributes
    ----------
    order : int
        Number of states ``n`` (>= 0), including hidden modes.
    inputs, outputs : int
        ``m >= 1`` and ``p >= 1``.
    discrete : bool
        Discrete time (sample period ``1 / max|s|`` of the underlying continuous poles).
    stability : {"stable", "unstable", "marginal"}
        "unstable": the first mode is reflected into the right half plane (outside the unit
        circle); "marginal": the first mode is an integrator (``z = 1``), or an undamped pair
        when it is complex.
    spread_decades : float
        Pole magnitudes span ``10**(-spread/2 - 0.15) .. 10**(spread/2 + 0.15)`` (>= 0).
    complex_pairs : int
        Number of complex-conjugate pole pairs (2 states each).
    repeated : int
        Number of 2x2 Jordan blocks (a repeated, defective real pole; 2 states each).
    clustered : int
        Number of extra real poles placed ``CLUSTER_RTOL`` apart from another real pole.
    near_cancellation : bool
        One real mode gets residue ``NEAR_CANCELLATION_RESIDUE`` (a zero very near it).
    hidden : {"none", "uncontrollable", "unobservable"}
        One extra stable real mode that the input cannot reach / the output cannot see.
    coordinate_condition : float
        cond(T) of the final change of state coordinates, in ``[1, MAX_CONDITION]``.
    feedthrough : bool
        Random ``D`` (otherwise ``D = 0``).
    seed : int
        Seed of the numpy generator that draws the numbers (>= 0).

    Features that do not fit into ``order`` are reduced (see :meth:`fitted`): hidden modes
    need ``order >= 2``, a near cancellation two visible modes, then complex pairs,
    Jordan blocks and clustered poles take what is left, in that order.
    """

    order: int = 1
    inputs: int = 1
    outputs: int = 1
    discrete: bool = False
    stability: Stability = "stable"
    spread_decades: float = 0.0
    complex_pairs: int = 0
    repeated: int = 0
    clustered: int = 0
    near_cancellation: bool = False
    hidden: Hidden = "none"
    coordinate_condition: float = 1.0
    feedthrough: bool = False
    seed: int = 0

    def __post_init__(self) -> None:
        checks: list[tuple[str, Any, bool, str]] = [
            ("order", self.order, isinstance(self.order, int) and 0 <= self.order <= MAX_ORDER,
             f"an integer in [0, {MAX_ORDER}]"),
            ("inputs", self.inputs, isinstance(self.inputs, int) and self.inputs >= 1,
             "an integer >= 1"),
            ("outputs", self.outputs, isinstance(self.outputs, int) and self.outputs >= 1,
             "an integer >= 1"),
            ("stability", self.stability, self.stability in STABILITIES, f"one of {STABILITIES}"),
            ("hidden", self.hidden, self.hidden in HIDDEN_KINDS, f"one of {HIDDEN_KINDS}"),
            ("spread_decades", self.spread_decades,
             isinstance(self.spread_decades, (int, float)) and 0.0 <= self.spread_decades <= 14.0,
             "a number of decades in [0, 14]"),
            ("coordinate_condition", self.coordinate_condition,
             isinstance(self.coordinate_condition, (int, float))
             and 1.0 <= self.coordinate_condition <= MAX_CONDITION,
             f"a condition number in [1, {MAX_CONDITION:g}]"),
            ("seed", self.seed, isinstance(self.seed, int) and self.seed >= 0, "an integer >= 0"),
        ]
        for name in ("complex_pairs", "repeated", "clustered"):
            value = getattr(self, name)
            checks.append((name, value, isinstance(value, int) and value >= 0, "an integer >= 0"))
        for name, value, ok, expected in checks:
            if not ok:
                raise InvalidModelError(f"{name}: got {value!r} but {expected} was expected",
                                        field=name)

    def fitted(self) -> "SystemSpec":
        """The same spec with the special features reduced so that they fit ``order``."""
        n = self.order
        hidden = self.hidden if n >= 2 else "none"
        # a near cancellation needs another visible mode to be near-cancelled against
        near = self.near_cancellation and n - (1 if hidden != "none" else 0) >= 2
        room = n - (1 if hidden != "none" else 0)
        pairs = min(self.complex_pairs, room // 2)
        room -= 2 * pairs
        repeated = min(self.repeated, room // 2)
        room -= 2 * repeated
        # a cluster needs a real simple pole to sit next to
        clustered = min(self.clustered, max(room - 1, 0))
        return replace(self, hidden=hidden, complex_pairs=pairs, repeated=repeated,
                       clustered=clustered, near_cancellation=near)

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-friendly dictionary (round trip: ``SystemSpec(**d)``)."""
        d = asdict(self)
        d["spread_decades"] = float(self.spread_decades)
        d["coordinate_condition"] = float(self.coordinate_condition)
        return d


@dataclass(frozen=True, eq=False)
class SystemPair:
    """Two systems with a known relation.

    Attributes
    ----------
    first, second : Realization
        ``second`` is stored in doubles (see the module docstring for the guarantee).
    relation : {"equivalent", "different"}
    relative_difference : float
        0.0 for equivalent pairs; for different pairs the exact
        ``||G1 - G2|| / max(||G1||, ||G2||)`` of the construction (a lower bound up to one
        rounding of ``C`` and ``D``).
    transform_condition : float
        cond(T) (2-norm) of the change of coordinates applied to build ``second``.
    construction_error : float
        Measured relative transfer difference between ``second`` and the exact
        construction, at probe points, in 128-bit ball arithmetic (upper end of the ball).
    spec : SystemSpec
        The specification of ``first``.
    seed : int
        Seed of the second change of coordinates.
    """

    first: Realization
    second: Realization
    relation: Literal["equivalent", "different"]
    relative_difference: float
    transform_condition: float
    construction_error: float
    spec: SystemSpec
    seed: int

    def as_dict(self) -> dict[str, Any]:
        return {
            "first": self.first.as_dict(),
            "second": self.second.as_dict(),
            "relation": self.relation,
            "relative_difference": float(self.relative_difference),
            "transform_condition": float(self.transform_condition),
            "construction_error": float(self.construction_error),
            "spec": self.spec.as_dict(),
            "seed": int(self.seed),
        }


# ========================================================================= builder
def _modal_blocks(spec: SystemSpec, rng: np.random.Generator) -> tuple[FloatArray, list[int], float | None]:
    """Block-diagonal A (modal coordinates), indices of plain real modes, sample period."""
    n = spec.order - (1 if spec.hidden != "none" else 0)
    half = spec.spread_decades / 2.0

    def magnitude() -> float:
        # a fixed +-JITTER_DECADES keeps poles distinct even at spread 0
        return float(10.0 ** rng.uniform(-half - JITTER_DECADES, half + JITTER_DECADES))

    blocks: list[tuple[str, complex]] = []
    for _ in range(spec.complex_pairs):
        mag, angle = magnitude(), rng.uniform(0.2, 1.4)
        blocks.append(("pair", complex(-mag * math.cos(angle), mag * math.sin(angle))))
    for _ in range(spec.repeated):
        blocks.append(("jordan", complex(-magnitude(), 0.0)))
    n_real = n - 2 * spec.complex_pairs - 2 * spec.repeated
    n_plain = n_real - spec.clustered
    reals = [-magnitude() for _ in range(n_plain)]
    for k in range(spec.clustered):
        reals.append(reals[k % max(n_plain, 1)] * (1.0 + CLUSTER_RTOL * (1 + k // max(n_plain, 1))))
    for x in reals:
        blocks.append(("real", complex(x, 0.0)))
    # stability: the first simple (non-Jordan) block is reflected / put on the boundary;
    # a marginal defective pole (double integrator) is never made: it is ill-posed in
    # floating point (a rounding of eps splits it by sqrt(eps)).
    simple = [k for k, (kind, _) in enumerate(blocks) if kind != "jordan"]
    if blocks and spec.stability != "stable" and (simple or spec.stability == "unstable"):
        k = simple[0] if simple else 0
        kind, lam = blocks[k]
        if spec.stability == "unstable":
            blocks[k] = (kind, complex(-lam.real, lam.imag))
        else:
            blocks[k] = (kind, complex(0.0, lam.imag))
    mags = [abs(lam) for _, lam in blocks if abs(lam) > 0]
    period = (1.0 / max(mags)) if (spec.discrete and mags) else (1.0 if spec.discrete else None)
    a = np.zeros((n, n))
    plain: list[int] = []
    i = 0
    for kind, lam in blocks:
        if period is not None:
            lam = complex(np.exp(lam * period))
        if kind == "pair":
            a[i:i + 2, i:i + 2] = [[lam.real, lam.imag], [-lam.imag, lam.real]]
            i += 2
        elif kind == "jordan":
            a[i:i + 2, i:i + 2] = [[lam.real, 1.0], [0.0, lam.real]]
            i += 2
        else:
            a[i, i] = lam.real
            plain.append(i)
            i += 1
    return a, plain, period


def _exact(m: NDArray[Any]) -> Any:
    import flint

    rows, cols = m.shape
    return flint.fmpq_mat(rows, cols, [flint.fmpq(*float(x).as_integer_ratio()) for x in m.ravel()])


def _rounded(q: Any) -> FloatArray:
    rows, cols = q.nrows(), q.ncols()
    out = np.empty((rows, cols))
    for i in range(rows):
        for j in range(cols):
            e = q[i, j]
            out[i, j] = int(e.p) / int(e.q)  # Python int division: correctly rounded
    return out


def exact_similarity(r: Realization, t: NDArray[np.float64]) -> Realization:
    """``(T A T^-1, T B, C T^-1, D)`` computed exactly and rounded once to double.

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    t : (n, n) ndarray
        Nonsingular change of coordinates (new state ``z = T x``), taken exactly as stored.

    Returns
    -------
    Realization
        Every entry is the correctly rounded value of the exact rational result.

    Raises
    ------
    InvalidModelError
        ``t`` has the wrong shape or non-finite entries.
    NumericalTroubleError
        ``t`` is exactly singular.
    """
    t = np.asarray(t, dtype=float)
    n = r.order
    if t.shape != (n, n) or not np.all(np.isfinite(t)):
        raise InvalidModelError(f"t: has shape {t.shape} (or non-finite entries) but a finite "
                                f"({n}, {n}) matrix was expected", field="t")
    if n == 0:
        return r
    tq = _exact(t)
    try:
        ti = tq.inv()
    except ZeroDivisionError:
        raise NumericalTroubleError("t: the change of coordinates is exactly singular") from None
    a = _rounded(tq * _exact(r.a) * ti)
    b = _rounded(tq * _exact(r.b))
    c = _rounded(_exact(r.c) * ti)
    return r.with_matrices(a, b, c)


def random_coordinates(n: int, condition: float, rng: np.random.Generator) -> FloatArray:
    """``T = U diag(sigma) V^T`` with singular values log-spaced from 1 to 1/condition.

    Parameters
    ----------
    n : int
    condition : float
        Target 2-norm condition number, in ``[1, MAX_CONDITION]``.
    rng : numpy Generator

    Returns
    -------
    (n, n) ndarray

    Raises
    ------
    InvalidModelError
        ``condition`` out of range.
    """
    if not (1.0 <= condition <= MAX_CONDITION):
        raise InvalidModelError(f"condition: got {condition!r} but a value in "
                                f"[1, {MAX_CONDITION:g}] was expected", field="condition")
    if n == 0:
        return np.zeros((0, 0))
    u, _ = np.linalg.qr(rng.standard_normal((n, n)))
    v, _ = np.linalg.qr(rng.standard_normal((n, n)))
    sigma = np.logspace(0.0, -math.log10(condition), n) if n > 1 else np.ones(1)
    return (u * sigma) @ v.T


def build_system(spec: SystemSpec, *, name: str = "") -> Realization:
    """The realization described by ``spec`` (deterministic in ``spec``).

    Parameters
    ----------
    spec : SystemSpec
    name : str, keyword-only
        Name of the realization.

    Returns
    -------
    Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)`` with
        ``n = spec.order``, ``m = spec.inputs``, ``p = spec.outputs``.

    Raises
    ------
    InvalidModelError
        ``spec`` is not a :class:`SystemSpec`.
    """
    if not isinstance(spec, SystemSpec):
        raise InvalidModelError(f"spec: got {type(spec).__name__} but a SystemSpec was expected",
                                field="spec")
    spec = spec.fitted()
    rng = np.random.default_rng(spec.seed)
    a, plain, period = _modal_blocks(spec, rng)
    n, m, p = a.shape[0], spec.inputs, spec.outputs
    b = rng.standard_normal((n, m))
    c = rng.standard_normal((p, n))
    d = rng.standard_normal((p, m)) if spec.feedthrough else np.zeros((p, m))
    if spec.near_cancellation and plain:
        b[plain[-1], :] *= NEAR_CANCELLATION_RESIDUE
    if spec.hidden != "none":
        slow = -float(10.0 ** (-spec.spread_decades / 2.0))
        lam = float(np.exp(slow * period)) if period is not None else slow
        a = np.pad(a, ((0, 1), (0, 1)))
        a[-1, -1] = lam
        hidden_b = np.zeros((1, m)) if spec.hidden == "uncontrollable" else rng.standard_normal((1, m))
        hidden_c = np.zeros((p, 1)) if spec.hidden == "unobservable" else rng.standard_normal((p, 1))
        b = np.vstack([b, hidden_b])
        c = np.hstack([c, hidden_c])
    modal = Realization.from_arrays(a, b, c, d, period, name=name)
    if spec.coordinate_condition == 1.0 and spec.order > 0:
        t = np.linalg.qr(rng.standard_normal((spec.order, spec.order)))[0]
    else:
        t = random_coordinates(spec.order, float(spec.coordinate_condition), rng)
    return exact_similarity(modal, t)


# ------------------------------------------------------------ construction error
def _probe_points(r: Realization) -> list[complex]:
    """Points just above each pole frequency, and one low frequency.

    Poles closer to the origin (continuous) or to ``z = 1`` (discrete) than
    ``ORIGIN_RTOL`` times the largest pole frequency count as integrators and get no probe
    of their own (the transfer function there is dominated by the rounding of the pole).
    """
    poles = r.poles()
    if r.sample_period is None:
        freqs = np.abs(poles)
    else:
        nz = poles[np.abs(poles) > 0]
        freqs = np.abs(np.log(nz.astype(complex))) if nz.size else np.zeros(0)
    top = float(freqs.max(initial=0.0))
    kept = sorted({float(w) for w in freqs if w > ORIGIN_RTOL * top})[:12] or [1.0]
    low = 0.0137 * kept[0]
    if r.sample_period is None:
        return [complex(0.0, 1.013 * w) for w in kept] + [complex(0.0, low)]
    angles = [(1.013 * w) % math.pi + 1e-3 for w in kept] + [min(low, 0.5)]
    return [complex(np.exp(1j * w)) for w in angles]


def _acb_transfer(r: Realization, s: complex) -> Any:
    import flint

    n = r.order
    if n == 0:
        return flint.acb_mat(r.d.tolist())
    a = flint.acb_mat(r.a.tolist())
    eye = flint.acb_mat(n, n, [flint.acb(s) if i == j else flint.acb(0) for i in range(n)
                               for j in range(n)])
    x = (eye - a).solve(flint.acb_mat(r.b.tolist()))
    return flint.acb_mat(r.c.tolist()) * x + flint.acb_mat(r.d.tolist())


def _frobenius_upper(m: Any) -> float:
    total = 0.0
    for i in range(m.nrows()):
        for j in range(m.ncols()):
            total += float(m[i, j].abs_upper()) ** 2
    return math.sqrt(total)


def _frobenius_lower(m: Any) -> float:
    total = 0.0
    for i in range(m.nrows()):
        for j in range(m.ncols()):
            total += float(m[i, j].abs_lower()) ** 2
    return math.sqrt(total)


def construction_error(exact_first: Realization, second: Realization, *,
                       scale: float = 1.0) -> float:
    """Relative transfer difference ``max_k ||G2(s_k) - scale G1(s_k)||_F / max_k ||scale G1(s_k)||_F``.

    Evaluated in 128-bit ball arithmetic (python-flint ``acb_mat`` solves) at probe points
    just above each pole frequency (on the imaginary axis / unit circle) and at one low
    frequency; the upper end of each ball is used, so the value is an upper estimate at
    those points (not a bound over all frequencies).

    Parameters
    ----------
    exact_first, second : Realization
        Same input/output counts and time domain.
    scale : float, keyword-only
        ``second`` is expected to equal ``scale * G1``.

    Returns
    -------
    float
        0.0 when both transfer functions vanish at every probe point.

    Raises
    ------
    NumericalTroubleError
        A probe point is (numerically) a pole of one of the systems.
    """
    import flint

    old = flint.ctx.prec
    flint.ctx.prec = PROBE_PRECISION_BITS
    try:
        worst_diff, worst_ref = 0.0, 0.0
        for s in _probe_points(exact_first):
            try:
                g1 = _acb_transfer(exact_first, s) * flint.acb(scale)
                g2 = _acb_transfer(second, s)
            except ZeroDivisionError:
                raise NumericalTroubleError(f"probe point {s} is a pole of the system") from None
            worst_diff = max(worst_diff, _frobenius_upper(g2 - g1))
            worst_ref = max(worst_ref, _frobenius_lower(g1))
    finally:
        flint.ctx.prec = old
    if worst_ref <= 0.0:
        return 0.0 if worst_diff <= 0.0 else math.inf
    return worst_diff / worst_ref


# ============================================================================ pairs
def equivalent_pair(spec: SystemSpec, *, transform_condition: float = 1e2, seed: int = 0,
                    max_construction_error: float = DEFAULT_MAX_CONSTRUCTION_ERROR) -> SystemPair:
    """Two realizations of the same transfer function (second in new state coordinates).

    Parameters
    ----------
    spec : SystemSpec
        Specification of the first system.
    transform_condition : float, keyword-only
        cond(T) of the change of coordinates, in ``[1, MAX_CONDITION]``.
    seed : int, keyword-only
        Seed of the change of coordinates.
    max_construction_error : float, keyword-only
        Largest accepted measured construction error (see :func:`construction_error`).

    Returns
    -------
    SystemPair
        ``relation == "equivalent"``, ``relative_difference == 0``.

    Raises
    ------
    InvalidModelError
        Bad ``spec`` or ``transform_condition``.
    NumericalTroubleError
        The measured construction error exceeds ``max_construction_error``.
    """
    first = build_system(spec, name="first")
    rng = np.random.default_rng([int(seed), 0x5EC0])
    t = random_coordinates(first.order, float(transform_condition), rng)
    second = exact_similarity(first, t).with_name("second")
    err = construction_error(first, second) if first.order else 0.0
    if not err <= max_construction_error:
        raise NumericalTroubleError(
            f"equivalent pair: measured construction error {err:.2e} exceeds "
            f"max_construction_error={max_construction_error:g} (cond(T) = {transform_condition:g})")
    cond = float(np.linalg.cond(t)) if first.order else 1.0
    return SystemPair(first, second, "equivalent", 0.0, cond, err, spec, int(seed))


def different_pair(spec: SystemSpec, *, relative_amount: float = 1e-3, seed: int = 0,
                   transform_condition: float = 10.0) -> SystemPair:
    """Two systems whose transfer functions differ by a relative amount >= ``relative_amount``.

    ``G2 = (1 + delta) G1`` in new state coordinates, ``delta / (1 + delta)`` equal to
    ``relative_amount`` enlarged by a relative ``1e-6`` (see the module docstring).

    Parameters
    ----------
    spec : SystemSpec
    relative_amount : float, keyword-only
        In ``(0, 0.5]``.
    seed : int, keyword-only
        Seed of the change of coordinates.
    transform_condition : float, keyword-only
        cond(T) of that change, in ``[1, MAX_CONDITION]``.

    Returns
    -------
    SystemPair
        ``relation == "different"``, ``relative_difference = delta / (1 + delta)``.

    Raises
    ------
    InvalidModelError
        ``relative_amount`` outside ``(0, 0.5]`` or a bad ``spec``.
    """
    if not (isinstance(relative_amount, (int, float)) and 0.0 < relative_amount <= 0.5):
        raise InvalidModelError(f"relative_amount: got {relative_amount!r} but a number in "
                                "(0, 0.5] was expected", field="relative_amount")
    first = build_system(spec, name="first")
    if first.order == 0 and not np.any(first.d):
        # a zero transfer function cannot be scaled into a different one
        first = first.with_matrices(first.a, first.b, first.c, np.ones_like(first.d))
    target = float(relative_amount) * (1.0 + 1e-6)
    delta = target / (1.0 - target)
    rng = np.random.default_rng([int(seed), 0xD1FF])
    t = random_coordinates(first.order, float(transform_condition), rng)
    scaled = first.with_matrices(first.a, first.b, first.c * (1.0 + delta), first.d * (1.0 + delta))
    second = exact_similarity(scaled, t).with_name("second")
    err = construction_error(first, second, scale=1.0 + delta) if first.order else 0.0
    cond = float(np.linalg.cond(t)) if first.order else 1.0
    return SystemPair(first, second, "different", delta / (1.0 + delta), cond, err, spec, int(seed))


# ===================================================================== strategies
def _condition_strategy(st: Any, bounds: tuple[float, float]) -> Any:
    lo, hi = bounds
    if not (1.0 <= lo <= hi <= MAX_CONDITION):
        raise InvalidModelError(f"condition range: got {bounds!r} but 1 <= low <= high <= "
                                f"{MAX_CONDITION:g} was expected", field="coordinate_condition")
    if hi == lo:
        return st.just(float(lo))
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda x: float(10.0 ** x))


def system_specs(
    *,
    min_order: int = 0,
    max_order: int = 6,
    max_inputs: int = 2,
    max_outputs: int = 2,
    time_domain: Literal["continuous", "discrete", "both"] = "both",
    stabilities: tuple[str, ...] = ("stable",),
    max_spread_decades: float = 3.0,
    complex_pairs: bool = True,
    repeated: bool = False,
    clustered: bool = False,
    near_cancellation: bool = False,
    hidden: bool = False,
    coordinate_condition: tuple[float, float] = (1.0, 1e3),
    feedthrough: bool = True,
) -> "SearchStrategy[SystemSpec]":
    """Hypothesis strategy of :class:`SystemSpec` (shrinks toward small simple systems).

    Parameters (all keyword-only)
    -----------------------------
    min_order, max_order : int
        Range of the order, drawn first (shrinks to ``min_order``).
    max_inputs, max_outputs : int
        Inputs and outputs are drawn from ``1 .. max`` (shrink to 1).
    time_domain : {"continuous", "discrete", "both"}
        "both" shrinks to continuous.
    stabilities : tuple of {"stable", "unstable", "marginal"}
        Allowed stability kinds (shrinks to the first).
    max_spread_decades : float
        Pole spread drawn from ``[0, max]`` decades (shrinks to 0).
    complex_pairs, repeated, clustered, near_cancellation, hidden, feedthrough : bool
        Whether the feature may appear (each shrinks to absent).
    coordinate_condition : (float, float)
        Range of cond(T), drawn log-uniformly (shrinks to the low end).

    Returns
    -------
    hypothesis SearchStrategy of SystemSpec

    Raises
    ------
    InvalidModelError
        Inconsistent knobs (e.g. ``min_order > max_order``, an unknown stability).
    """
    from hypothesis import strategies as st

    if not (0 <= min_order <= max_order <= MAX_ORDER):
        raise InvalidModelError(f"order range: got min_order={min_order!r}, max_order={max_order!r} "
                                f"but 0 <= min_order <= max_order <= {MAX_ORDER} was expected",
                                field="max_order")
    if max_inputs < 1 or max_outputs < 1:
        raise InvalidModelError(f"max_inputs={max_inputs!r}, max_outputs={max_outputs!r}: both "
                                "must be >= 1", field="max_inputs")
    if not stabilities or any(s not in STABILITIES for s in stabilities):
        raise InvalidModelError(f"stabilities: got {stabilities!r} but a non-empty tuple from "
                                f"{STABILITIES} was expected", field="stabilities")
    if time_domain not in ("continuous", "discrete", "both"):
        raise InvalidModelError(f"time_domain: got {time_domain!r} but 'continuous', 'discrete' "
                                "or 'both' was expected", field="time_domain")
    cond = _condition_strategy(st, coordinate_condition)
    flag = (lambda allowed: st.booleans() if allowed else st.just(False))

    @st.composite
    def specs(draw: Any) -> SystemSpec:
        order = draw(st.integers(min_order, max_order), label="order")
        inputs = draw(st.integers(1, max_inputs), label="inputs")
        outputs = draw(st.integers(1, max_outputs), label="outputs")
        discrete = {"continuous": False, "discrete": True}.get(time_domain)
        if discrete is None:
            discrete = draw(st.booleans(), label="discrete")
        stability = draw(st.sampled_from(list(stabilities)), label="stability")
        spread = draw(st.floats(0.0, float(max_spread_decades)), label="spread_decades") \
            if max_spread_decades > 0 else 0.0
        pairs = draw(st.integers(0, order // 2), label="complex_pairs") if complex_pairs else 0
        rep = draw(st.integers(0, 1), label="repeated") if repeated else 0
        clu = draw(st.integers(0, 2), label="clustered") if clustered else 0
        near = draw(flag(near_cancellation), label="near_cancellation")
        hid = draw(st.sampled_from(list(HIDDEN_KINDS)), label="hidden") if hidden else "none"
        return SystemSpec(
            order=order, inputs=inputs, outputs=outputs, discrete=bool(discrete),
            stability=stability, spread_decades=float(spread), complex_pairs=pairs,
            repeated=rep, clustered=clu, near_cancellation=bool(near), hidden=hid,
            coordinate_condition=draw(cond, label="coordinate_condition"),
            feedthrough=draw(flag(feedthrough), label="feedthrough"),
            seed=draw(st.integers(0, 2**31 - 1), label="seed"),
        ).fitted()

    return specs()


def lti_systems(**knobs: Any) -> "SearchStrategy[Realization]":
    """Hypothesis strategy of random :class:`Realization` objects.

    Parameters
    ----------
    **knobs
        Keyword arguments of :func:`system_specs`.

    Returns
    -------
    hypothesis SearchStrategy of Realization

    Raises
    ------
    InvalidModelError
        Inconsistent knobs.
    """
    return system_specs(**knobs).map(build_system)


def equivalent_pairs(*, transform_condition: tuple[float, float] = (1.0, 1e3),
                     **knobs: Any) -> "SearchStrategy[SystemPair]":
    """Hypothesis strategy of equivalent-by-construction pairs (see :func:`equivalent_pair`).

    Pairs whose measured construction error exceeds the default bound are rejected
    (``hypothesis.reject``), so every pair drawn satisfies it.

    Parameters
    ----------
    transform_condition : (float, float), keyword-only
        Range of cond(T) of the second coordinates, drawn log-uniformly, within
        ``[1, MAX_CONDITION]`` (shrinks to the low end).
    **knobs
        Keyword arguments of :func:`system_specs`.

    Returns
    -------
    hypothesis SearchStrategy of SystemPair

    Raises
    ------
    InvalidModelError
        Inconsistent knobs.
    """
    from hypothesis import reject
    from hypothesis import strategies as st

    cond = _condition_strategy(st, transform_condition)

    @st.composite
    def pairs(draw: Any) -> SystemPair:
        spec = draw(system_specs(**knobs), label="spec")
        try:
            return equivalent_pair(spec, transform_condition=draw(cond, label="transform_condition"),
                                   seed=draw(st.integers(0, 2**31 - 1), label="pair_seed"))
        except NumericalTroubleError:
            reject()
            raise  # pragma: no cover - reject() raises

    return pairs()


def different_pairs(*, relative_amount: float | tuple[float, float] = (1e-3, 0.5),
                    transform_condition: tuple[float, float] = (1.0, 1e2),
                    **knobs: Any) -> "SearchStrategy[SystemPair]":
    """Hypothesis strategy of pairs that differ by at least a relative amount.

    Parameters
    ----------
    relative_amount : float or (float, float), keyword-only
        The relative difference ``||G1 - G2|| / max(||G1||, ||G2||)`` (or a range, drawn
        log-uniformly, shrinking to the high end: large differences are the simple case),
        within ``(0, 0.5]``.
    transform_condition : (float, float), keyword-only
        Range of cond(T) of the second coordinates.
    **knobs
        Keyword arguments of :func:`system_specs`.

    Returns
    -------
    hypothesis SearchStrategy of SystemPair

    Raises
    ------
    InvalidModelError
        Inconsistent knobs.
    """
    from hypothesis import strategies as st

    lo, hi = (relative_amount, relative_amount) if isinstance(relative_amount, (int, float)) \
        else relative_amount
    if not (0.0 < lo <= hi <= 0.5):
        raise InvalidModelError(f"relative_amount: got {relative_amount!r} but values in (0, 0.5] "
                                "were expected", field="relative_amount")
    amount = st.just(float(lo)) if lo == hi else \
        st.floats(0.0, math.log10(hi / lo)).map(lambda x: float(hi / 10.0 ** x))
    cond = _condition_strategy(st, transform_condition)

    @st.composite
    def pairs(draw: Any) -> SystemPair:
        spec = draw(system_specs(**knobs), label="spec")
        return different_pair(spec, relative_amount=draw(amount, label="relative_amount"),
                              transform_condition=draw(cond, label="transform_condition"),
                              seed=draw(st.integers(0, 2**31 - 1), label="pair_seed"))

    return pairs()


__all__ = [
    "CLUSTER_RTOL",
    "DEFAULT_MAX_CONSTRUCTION_ERROR",
    "MAX_CONDITION",
    "NEAR_CANCELLATION_RESIDUE",
    "SystemPair",
    "SystemSpec",
    "build_system",
    "construction_error",
    "different_pair",
    "different_pairs",
    "equivalent_pair",
    "equivalent_pairs",
    "exact_similarity",
    "lti_systems",
    "random_coordinates",
    "system_specs",
]
