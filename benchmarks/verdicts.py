"""Verdict accuracy: lti-audit against naive ways of checking claimed-equivalent models.

Usage::

    python benchmarks/verdicts.py [--quick] [--seed S] [--rtol R]

A labelled suite of pairs (see ``FAMILIES``) is generated from the seed; every label is
verified on the stored doubles in extended precision (``benchmarks/_cases.py``), pairs
whose verified relative difference lies between 1e-6 and 1e-4 are discarded (and
counted).  Each pair is then judged by

* ``lti-audit``      -- :func:`audit.verdict.compare.compare_pair` with default options;
* ``tf-coeffs``      -- transfer-function coefficients per input (``scipy.signal.ss2tf``),
  denominator made monic, relative 2-norm difference of numerator and denominator;
* ``fixed-grid``     -- sigma_max of ``G1 - G2`` on 200 log-spaced frequencies
  1e-3 .. 1e3 rad/s (dense LU per point), relative to the larger grid peak;
* ``markov-raw``     -- unscaled Markov parameters ``D, CB, CAB, ...`` (n1 + n2 + 1
  terms), each compared with a relative tolerance.

All use the same relative tolerance (default 1e-5, the audit's default).  A naive
method that raises or produces non-finite numbers is counted as ``inconclusive``.
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
from pathlib import Path
from typing import Any, Callable

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import _cases as cs  # noqa: E402
from audit.core.realization import Realization  # noqa: E402

Verdict = str  # "equivalent" | "different" | "inconclusive"


# ---------------------------------------------------------------- pair builders
def _peak_on_grid(r: Realization) -> float:
    w = np.concatenate([[0.0], np.geomspace(1e-5, 1e5, 1500),
                        cs.mode_frequencies(r.poles(), r.sample_period)])
    if r.sample_period is not None:
        w = w[w <= math.pi / r.sample_period]
    g = cs.transfer_values_double(r, cs.boundary_point(w, r.sample_period))
    s = cs.sigma_max(g)
    return float(np.max(s[np.isfinite(s)]))


def _base(rng: np.random.Generator, n: int, *, discrete: bool = False, inputs: int = 1,
          outputs: int = 1, spread: float = 6.0,
          damping: tuple[float, float] = (1e-3, 0.7)) -> Realization:
    if discrete:
        period = 0.01
        poles = cs.discrete_poles_near_circle(rng, n, period=period)
        return cs.reference_model(rng, poles, inputs=inputs, outputs=outputs, sample_period=period)
    poles = cs.random_poles(rng, n, spread_decades=spread, damping=damping)
    return cs.reference_model(rng, poles, inputs=inputs, outputs=outputs)


def _transformed(rng: np.random.Generator, r: Realization, cond: float) -> Realization:
    t = cs.conditioned_transform(rng, r.order, cond)
    return cs.transform_in_extended_precision(r, t, name="claimed")


def build_similarity(rng, n, cond, discrete=False, io=(1, 1), spread=6.0, damping=(1e-3, 0.7)):
    r1 = _base(rng, n, discrete=discrete, inputs=io[0], outputs=io[1], spread=spread,
               damping=damping)
    return r1, _transformed(rng, r1, cond), f"n={n} {io[1]}x{io[0]} cond(T)={cond:.0e}"


def build_rescaled(rng, n, cond, mix):
    """States rescaled (units changed) over a cond(T) range, reordered, optionally mixed.

    T = D (I + L) P: D diagonal spanning ``cond``, P a permutation, L a small strictly
    lower-triangular coupling when ``mix`` (cond of I + L stays near 1). This is the
    everyday refactor (new state units, new state order); rounding of such a transform is
    componentwise benign, so the stored pair stays equivalent even at cond(T) = 1e8.
    """
    r1 = _base(rng, n, spread=4.0, damping=(1e-2, 0.7))
    half = 0.5 * math.log10(cond)
    d = 10.0 ** rng.uniform(-half, half, n)
    d[0], d[-1] = 10.0 ** half, 10.0 ** -half
    t = np.diag(d)
    if mix:
        t = t @ (np.eye(n) + np.tril(0.1 * rng.standard_normal((n, n)), -1))
    t = t @ np.eye(n)[rng.permutation(n)]
    return r1, cs.transform_in_extended_precision(r1, t, name="claimed"), (
        f"n={n} states rescaled over cond(T)={cond:.0e}{' and mixed' if mix else ''}")


def build_hidden(rng, n, k, cond):
    r1 = _base(rng, n)
    # k hidden modes: alternately uncontrollable (B part zero) and unobservable (C part
    # zero); the first one unstable (a hidden unstable mode keeps G unchanged).
    poles = cs.random_poles(rng, k, spread_decades=4.0, complex_fraction=0.0)
    poles[0] = complex(abs(poles[0].real), 0.0)
    a_x = np.diag([p.real for p in poles])
    b_x = rng.standard_normal((k, r1.n_inputs))
    c_x = rng.standard_normal((r1.n_outputs, k))
    b_x[0::2, :] = 0.0
    c_x[:, 1::2] = 0.0
    ext = cs.append_modes(r1, a_x, b_x, c_x, name="extended")
    return r1, _transformed(rng, ext, cond), f"n={n}+{k} hidden cond(T)={cond:.0e}"


def build_near_cancellation(rng, n, residue_rel, cond, different=False):
    base = _base(rng, n)
    peak = _peak_on_grid(base)
    p = cs.random_poles(rng, 1, spread_decades=4.0, complex_fraction=0.0)[0].real
    # |r / (j w - p)| peaks at |r| / |p|: choose the residue for the intended size
    residue = residue_rel * peak * abs(p)
    b_x = np.full((1, base.n_inputs), math.sqrt(residue))
    c_x = np.full((base.n_outputs, 1), math.sqrt(residue))
    r1 = cs.append_modes(base, np.array([[p]]), b_x, c_x, name="reference")
    return r1, _transformed(rng, base, cond), (
        f"n={n}+1 mode with relative residue {residue_rel:.0e} cond(T)={cond:.0e}")


def build_printed(rng, n, digits, cond):
    # moderate model (3 decades, damping >= 0.05): 12 printed digits keep it within 1e-6
    r1 = _base(rng, n, spread=3.0, damping=(0.05, 0.7))
    r2 = cs.round_to_digits(_transformed(rng, r1, cond), digits, name="claimed")
    return r1, r2, f"n={n} cond(T)={cond:.0e} printed with {digits} digits"


def build_moved_pole(rng, n, delta, cond, discrete):
    r1 = _base(rng, n, discrete=discrete)
    a = r1.a.copy()
    i = int(rng.integers(0, n))
    if discrete:
        a[i, i] = a[i, i] * (1 - delta)  # radius shrinks (stays inside the circle)
        if i + 1 < n and a[i, i + 1] != 0:
            a[i + 1, i + 1] = a[i, i]
        elif i > 0 and a[i - 1, i] != 0:
            a[i - 1, i - 1] = a[i, i]
    else:
        a[i, i] = a[i, i] * (1 + delta)
        if i + 1 < n and a[i, i + 1] != 0:
            a[i + 1, i + 1] = a[i, i]
        elif i > 0 and a[i - 1, i] != 0:
            a[i - 1, i - 1] = a[i, i]
    moved = r1.with_matrices(a, r1.b, r1.c)
    return r1, _transformed(rng, moved, cond), (
        f"n={n} {'discrete ' if discrete else ''}real part of one pole x(1{'-' if discrete else '+'}{delta:.0e})")


def build_changed_gain(rng, n, delta, cond):
    r1 = _base(rng, n)
    changed = r1.with_matrices(r1.a, r1.b * (1 + delta), r1.c, r1.d * (1 + delta))
    return r1, _transformed(rng, changed, cond), f"n={n} gain x(1+{delta:.0e})"


def build_changed_zero(rng, n, delta, cond):
    r1 = _base(rng, n)
    c = r1.c.copy()
    c += delta * np.linalg.norm(c) * rng.standard_normal(c.shape) / math.sqrt(c.size)
    changed = r1.with_matrices(r1.a, r1.b, c)
    return r1, _transformed(rng, changed, cond), f"n={n} C perturbed by {delta:.0e} (zeros move)"


def build_changed_d(rng, n, delta, cond):
    r1 = _base(rng, n)
    d = r1.d.copy()
    d[0, 0] += delta * _peak_on_grid(r1)
    changed = r1.with_matrices(r1.a, r1.b, r1.c, d)
    return r1, _transformed(rng, changed, cond), f"n={n} D changed by {delta:.0e} of the peak"


def build_extra_mode(rng, n, residue_rel, cond):
    r1 = _base(rng, n)
    peak = _peak_on_grid(r1)
    p = cs.random_poles(rng, 1, spread_decades=4.0, complex_fraction=0.0)[0].real
    residue = residue_rel * peak * abs(p)
    ext = cs.append_modes(r1, np.array([[p]]), np.full((1, r1.n_inputs), math.sqrt(residue)),
                          np.full((r1.n_outputs, 1), math.sqrt(residue)), name="extended")
    return r1, _transformed(rng, ext, cond), f"n={n}+1 extra mode, relative residue {residue_rel:.0e}"


def build_mimo_changed(rng, n, delta, cond, io):
    r1 = _base(rng, n, inputs=io[0], outputs=io[1])
    b = r1.b.copy()
    j = int(rng.integers(0, io[0]))
    b[:, j] *= 1 + delta
    changed = r1.with_matrices(r1.a, b, r1.c)
    return r1, _transformed(rng, changed, cond), f"n={n} {io[1]}x{io[0]} input {j} gain x(1+{delta:.0e})"


# ------------------------------------------- transfer-function and zero-pole-gain documents
# Pairs of model DOCUMENTS (issue 10): each transfer function / zero-pole-gain model is
# realized by audit.core.from_transfer_function (as `lti-audit` loads it) and carries its stored data;
# labels are verified on the stored coefficients and factors (benchmarks/_cases.py).
MODELS = Path(__file__).resolve().parent / "models"


def _tf(num, den, period=None, name="transfer function"):  # type: ignore[no-untyped-def]
    from audit.core.from_transfer_function import realization_from_transfer_function

    return realization_from_transfer_function(num, den, period).with_name(name)


def _factored(z, p, k, period=None, name="zero-pole-gain"):  # type: ignore[no-untyped-def]
    from audit.core.from_zeros_poles_gain import realization_from_zeros_poles_gain

    return realization_from_zeros_poles_gain(z, p, k, period).with_name(name)


def _poles(rng: np.random.Generator, n: int, decades: float) -> np.ndarray:
    out: list[complex] = []
    while len(out) < n:
        mag = 10 ** rng.uniform(0, decades)
        if n - len(out) >= 2 and rng.random() < 0.6:
            zeta = rng.uniform(0.05, 0.8)
            p = complex(-zeta * mag, mag * math.sqrt(1 - zeta * zeta))
            out += [p, p.conjugate()]
        else:
            out.append(complex(-mag, 0.0))
    return np.array(out[:n])


def _siso_tf(rng, n, decades, period=None):  # type: ignore[no-untyped-def]
    p, z = _poles(rng, n, decades), _poles(rng, n - 1, decades)
    if period is not None:
        p, z = np.exp(p * period), np.exp(z * period)
    den = np.real(np.poly(p))
    num = np.real(np.poly(z)) * 10 ** rng.uniform(-1, 1)
    return num, den, p, z


def _observable_companion(num, den, period=None, name="observable companion"):  # type: ignore[no-untyped-def]
    """Observable companion form whose entries ARE the stored coefficients (den[0] = 1)."""
    n = len(den) - 1
    num = np.r_[np.zeros(len(den) - len(num)), num]
    a = np.zeros((n, n))
    a[:, 0] = -den[1:]
    a[:-1, 1:] = np.eye(n - 1)
    c = np.zeros((1, n))
    c[0, 0] = 1.0
    return Realization.from_arrays(a, (num[1:] - num[0] * den[1:]).reshape(-1, 1), c,
                                   [[num[0]]], period, name=name)


def _modal_high_precision(num, den, period=None, name="modal (300-bit)"):  # type: ignore[no-untyped-def]
    """Real modal realization from the stored coefficients: roots and residues in
    300-bit ball arithmetic (python-flint), rounded to doubles once."""
    import flint
    import scipy.linalg

    old = flint.ctx.prec
    flint.ctx.prec = 300
    try:
        dpoly = flint.acb_poly([flint.acb(float(x)) for x in den[::-1]])
        npad = np.r_[np.zeros(len(den) - len(num)), num]
        npoly = flint.acb_poly([flint.acb(float(x)) for x in npad[::-1]])
        dmain = npoly[len(den) - 1] / flint.acb(float(den[0]))
        rest = npoly - dpoly * dmain
        roots = dpoly.roots(tol=1e-60)
        deriv = dpoly.derivative()
        blocks, bs, cs = [], [], []
        for q in roots:
            pc = complex(float(q.real.mid()), float(q.imag.mid()))
            if pc.imag < 0 and not q.imag.contains(0):
                continue  # the upper member of each pair carries it
            rr = rest(q) / deriv(q)
            rc = complex(float(rr.real.mid()), float(rr.imag.mid()))
            if q.imag.contains(0):
                blocks.append(np.array([[pc.real]])); bs.append(1.0); cs.append(rc.real)
            else:
                blocks.append(np.array([[pc.real, pc.imag], [-pc.imag, pc.real]]))
                bs += [1.0, 0.0]; cs += [2 * rc.real, 2 * rc.imag]
        d = float(dmain.real.mid())
    finally:
        flint.ctx.prec = old
    return Realization.from_arrays(scipy.linalg.block_diag(*blocks), np.array(bs).reshape(-1, 1),
                                   np.array(cs).reshape(1, -1), [[d]], period, name=name)


def build_tf_companion(rng, n, decades):  # type: ignore[no-untyped-def]
    num, den, _, _ = _siso_tf(rng, n, decades)
    return _tf([[num]], [[den]]), _observable_companion(num, den), (
        f"order {n} transfer function (poles over {decades:g} decades) vs its observable companion")


def build_tf_modal(rng, n, decades, period):  # type: ignore[no-untyped-def]
    num, den, _, _ = _siso_tf(rng, n, decades, period)
    return _tf([[num]], [[den]], period), _modal_high_precision(num, den, period), (
        f"order {n}{' discrete' if period else ''} transfer function vs its 300-bit modal realization")


def build_tf_factors(rng, n, kind):  # type: ignore[no-untyped-def]
    if kind == "integers":
        p, z = -np.arange(1.0, n + 1), -np.arange(1.5, n, 1.0)
    elif kind == "clustered":
        p, z = -(1 + rng.random(n)), -(1 + rng.random(n - 1))
    else:
        p, z = _poles(rng, n, 2.0), _poles(rng, n - 1, 2.0)
    k = 10 ** rng.uniform(-1, 1)
    return (_factored([[z]], [[p]], [[k]]), _tf([[np.real(np.poly(z)) * k]], [[np.real(np.poly(p))]]),
            f"degree {n} zero-pole-gain ({kind} poles) vs its expanded coefficients")


def _state_space_source(rng, n, io, unstable, source):  # type: ignore[no-untyped-def]
    import json

    import scipy.linalg

    if source == "build48":
        d = json.load(open(MODELS / "build48.json"))["state_space"]
        return tuple(np.array(d[k], dtype=float) for k in "abcd")
    if source == "cdplayer":
        d = json.load(open(MODELS / "cdplayer120.json"))["state_space"]
        a, b, c = (np.array(d[k], dtype=float) for k in "abc")
        w, v = scipy.linalg.eig(a)
        keep = np.argsort(np.abs(w))[:n]
        # real modal truncation (slowest n modes; conjugate pairs stay together)
        t, _ = np.linalg.qr(np.column_stack([v[:, keep].real, v[:, keep].imag]))
        t = t[:, :n]
        a_r = t.T @ a @ t
        return a_r, t.T @ b, c @ t, np.zeros((c.shape[0], b.shape[1]))
    mags = np.geomspace(0.1, 100, n // 2)
    blocks = []
    for wm in mags:
        z = rng.uniform(0.05, 0.7)
        q = complex(-z * wm, wm * math.sqrt(1 - z * z))
        blocks.append(np.array([[q.real, q.imag], [-q.imag, q.real]]))
    if n % 2:
        blocks.append(np.array([[-1.0]]))
    a = scipy.linalg.block_diag(*blocks)
    for k in range(unstable):
        a[2 * k, 2 * k] *= -1
        a[2 * k + 1, 2 * k + 1] *= -1
    q_, _ = np.linalg.qr(rng.standard_normal((n, n)))
    a = q_ @ a @ q_.T
    p, m = io
    return a, rng.standard_normal((n, m)), rng.standard_normal((p, n)), np.zeros((p, m))


def build_ss_to_tf(rng, n, io, unstable, source, how):  # type: ignore[no-untyped-def]
    import scipy.signal

    a, b, c, d = _state_space_source(rng, n, io, unstable, source)
    p, m = c.shape[0], b.shape[1]
    if how == "scipy":
        nums = [[None] * m for _ in range(p)]
        dens = [[None] * m for _ in range(p)]
        for j in range(m):
            nm, dn = scipy.signal.ss2tf(a, b, c, d, input=j)
            for i in range(p):
                nums[i][j], dens[i][j] = np.asarray(nm[i]), np.asarray(dn)
    else:
        import control

        g = control.ss2tf(control.ss(a, b, c, d))
        nums = [[np.asarray(g.num[i][j], dtype=float) for j in range(m)] for i in range(p)]
        dens = [[np.asarray(g.den[i][j], dtype=float) for j in range(m)] for i in range(p)]
    ss = Realization.from_arrays(a, b, c, d, name="state space")
    name = source if source != "random" else f"random n={n} {p}x{m}{' unstable' if unstable else ''}"
    return ss, _tf(nums, dens), f"{name} vs its {how} ss2tf transfer function"


def build_tf_changed(rng, n, delta):  # type: ignore[no-untyped-def]
    num, den, _, _ = _siso_tf(rng, n, 2.0)
    changed = den.copy()
    k = int(rng.integers(1, n + 1))
    changed[k] *= 1 + delta
    return _tf([[num]], [[den]]), _observable_companion(num, changed), (
        f"order {n} transfer function vs companion with den[{k}] x(1+{delta:.0e})")


def build_factors_moved(rng, n, delta):  # type: ignore[no-untyped-def]
    p, z = _poles(rng, n, 2.0), _poles(rng, n - 1, 2.0)
    moved = p.copy()
    k = int(rng.integers(0, n))
    moved[k] *= 1 + delta
    if moved[k].imag != 0:  # keep the conjugate partner
        partner = int(np.argmin(np.abs(p - np.conj(p[k]))))
        moved[partner] = np.conj(moved[k])
    return _factored([[z]], [[moved]], [[1.0]]), _tf([[np.real(np.poly(z))]], [[np.real(np.poly(p))]]), (
        f"degree {n} zero-pole-gain with a pole x(1+{delta:.0e}) vs coefficients of the original")


def build_discrete_tf(rng, n, period):  # type: ignore[no-untyped-def]
    import scipy.signal

    poles = cs.discrete_poles_near_circle(rng, n, period=period)
    r = cs.reference_model(rng, poles, inputs=1, outputs=1, sample_period=period)
    nm, dn = scipy.signal.ss2tf(r.a, r.b, r.c, r.d)
    return r, _tf([[nm[0]]], [[dn]], period), (
        f"discrete n={n} (T={period:g} s, poles near z = 1) vs its scipy ss2tf transfer function")


def build_discrete_slow_tf(rng, n, period, slowest):  # type: ignore[no-untyped-def]
    """Slow continuous modes (from ``slowest`` rad/s up, over 3 decades) sampled at
    ``period``: poles crowd near z = 1, where polynomial coefficients lose the model."""
    import scipy.linalg
    import scipy.signal

    mags = np.geomspace(slowest, slowest * 1e3, n)
    blocks, k = [], 0
    while k < n:
        if k + 1 < n and rng.random() < 0.5:
            zeta = rng.uniform(0.05, 0.7)
            q = complex(-zeta * mags[k], mags[k] * math.sqrt(1 - zeta * zeta))
            z = np.exp(q * period)
            blocks.append(np.array([[z.real, z.imag], [-z.imag, z.real]]))
            k += 2
        else:
            blocks.append(np.array([[math.exp(-mags[k] * period)]]))
            k += 1
    a = scipy.linalg.block_diag(*blocks)
    b, c = rng.standard_normal((n, 1)), rng.standard_normal((1, n))
    r = Realization.from_arrays(a, b, c, [[0.0]], period)
    nm, dn = scipy.signal.ss2tf(r.a, r.b, r.c, r.d)
    return r, _tf([[nm[0]]], [[dn]], period), (
        f"discrete n={n} (T={period:g} s, slowest mode {slowest:g} rad/s) vs its scipy ss2tf "
        "transfer function")


def _log_uniform(rng: np.random.Generator, lo: float, hi: float) -> float:
    return float(10.0 ** rng.uniform(math.log10(lo), math.log10(hi)))


# family -> (intent, list of parameter tuples (quick), list (full), builder)
def _families(quick: bool, documents: bool = True) -> list[tuple[str, str, list[Any], Callable[..., Any]]]:
    def pick(q: list[Any], f: list[Any]) -> list[Any]:
        return q if quick else f

    return [
        ("similarity_stiff", "equivalent",
         pick([(6, 1e4)], [(10, 1e2), (10, 1e5), (10, 1e8), (30, 1e2), (30, 1e5), (60, 1e2),
                           (100, 1e2)]),
         lambda rng, n, c: build_similarity(rng, n, c)),
        ("similarity_ill_conditioned", "equivalent",
         pick([(4, 1e8)], [(6, 1e6), (6, 1e8), (12, 1e6), (12, 1e8), (20, 1e7), (20, 1e8)]),
         lambda rng, n, c: build_similarity(rng, n, c, spread=2.0, damping=(0.1, 0.7))),
        ("rescaled_states", "equivalent",
         pick([(6, 1e8, True)], [(10, 1e6, False), (10, 1e8, True), (30, 1e8, False),
                                 (30, 1e8, True), (60, 1e8, True), (100, 1e8, False)]),
         lambda rng, n, c, mix: build_rescaled(rng, n, c, mix)),
        ("hidden_modes", "equivalent",
         pick([(5, 2)], [(8, 2), (8, 4), (20, 3), (20, 6), (40, 4), (40, 6)]),
         lambda rng, n, k: build_hidden(rng, n, k, 1e3)),
        ("discrete_near_circle", "equivalent",
         pick([(6, 1e3)], [(6, 1e2), (6, 1e6), (16, 1e2), (16, 1e6), (40, 1e3), (40, 1e6)]),
         lambda rng, n, c: build_similarity(rng, n, c, discrete=True)),
        ("near_cancellation", "equivalent",
         pick([(5,)], [(6,), (6,), (20,), (20,), (50,), (50,)]),
         lambda rng, n: build_near_cancellation(rng, n, _log_uniform(rng, 1e-10, 1e-8), 1e3)),
        ("printed_digits", "equivalent",
         pick([(5,)], [(5,), (5,), (15,), (15,), (40,), (40,)]),
         lambda rng, n: build_printed(rng, n, 12, 1e3)),
        ("mimo", "equivalent",
         pick([(4, (2, 3))], [(8, (2, 3)), (8, (4, 4)), (24, (2, 3)), (24, (4, 4))]),
         lambda rng, n, io: build_similarity(rng, n, 1e3, io=io, spread=3.0, damping=(1e-2, 0.7))),
        ("moved_pole", "different",
         pick([(5, False), (4, True)], [(n, disc) for n in (6, 20, 50) for disc in (False, True)]),
         lambda rng, n, disc: build_moved_pole(rng, n, _log_uniform(rng, 1e-3, 3e-2), 1e4, disc)),
        ("changed_gain", "different",
         pick([(5,)], [(6,), (6,), (20,), (20,), (50,), (100,)]),
         lambda rng, n: build_changed_gain(rng, n, _log_uniform(rng, 1.5e-4, 3e-3), 1e4)),
        ("changed_zero", "different",
         pick([(5,)], [(6,), (6,), (20,), (20,), (50,), (50,)]),
         lambda rng, n: build_changed_zero(rng, n, _log_uniform(rng, 5e-4, 1e-2), 1e4)),
        ("changed_d", "different",
         pick([(5,)], [(6,), (6,), (20,), (20,), (50,), (50,)]),
         lambda rng, n: build_changed_d(rng, n, _log_uniform(rng, 2e-4, 5e-3), 1e4)),
        ("extra_mode", "different",
         pick([(5,)], [(6,), (6,), (20,), (20,), (50,), (50,)]),
         lambda rng, n: build_extra_mode(rng, n, _log_uniform(rng, 3e-4, 1e-2), 1e4)),
        ("mimo_changed", "different",
         pick([(4, (2, 2))], [(8, (2, 3)), (24, (4, 4))]),
         lambda rng, n, io: build_mimo_changed(rng, n, _log_uniform(rng, 3e-4, 3e-3), 1e5, io)),
    ] + ([] if not documents else [
        ("tf_vs_companion", "equivalent",
         pick([(8, 1.0)], [(8, 1.0), (12, 2.0), (16, 2.0), (20, 3.0), (25, 2.0), (25, 3.0)]),
         lambda rng, n, dec: build_tf_companion(rng, n, dec)),
        ("tf_vs_modal", "equivalent",
         pick([(10, 2.0, None)], [(10, 2.0, None), (20, 2.0, None), (30, 2.0, None),
                                  (40, 3.0, None), (55, 2.0, None), (10, 2.0, 1e-3),
                                  (20, 2.0, 1e-3)]),
         lambda rng, n, dec, per: build_tf_modal(rng, n, dec, per)),
        ("factors_vs_tf", "equivalent",
         pick([(20, "integers")], [(20, "integers"), (40, "integers"), (30, "spread"),
                                   (60, "clustered"), (100, "clustered")]),
         lambda rng, n, kind: build_tf_factors(rng, n, kind)),
        ("ss_to_tf", "equivalent",
         pick([(30, (3, 5), 0, "random", "scipy")],
              [(30, (5, 3), 0, "random", "scipy"), (30, (5, 3), 0, "random", "control"),
               (55, (2, 2), 2, "random", "scipy"), (55, (2, 2), 2, "random", "control"),
               (80, (1, 1), 0, "random", "scipy"), (120, (1, 1), 0, "random", "control"),
               (48, (1, 1), 0, "build48", "scipy"), (48, (1, 1), 0, "build48", "control"),
               (30, (2, 2), 0, "cdplayer", "scipy"), (30, (2, 2), 0, "cdplayer", "control")]),
         lambda rng, n, io, u, src, how: build_ss_to_tf(rng, n, io, u, src, how)),
        ("discrete_tf", "equivalent",
         pick([(6, 3e-3)], [(6, 3e-3), (9, 3e-3), (9, 1e-3), (16, 1e-2)]),
         lambda rng, n, per: build_discrete_tf(rng, n, per)),
        ("discrete_slow_tf", "equivalent",
         pick([(9, 3e-3, 0.3)], [(9, 3e-3, 0.02), (9, 3e-3, 1.0), (9, 1e-3, 2.0), (12, 1e-3, 5.0),
                                 (9, 3e-3, 5.0), (9, 3e-3, 10.0)]),
         lambda rng, n, per, slow: build_discrete_slow_tf(rng, n, per, slow)),
        ("tf_changed", "different",
         pick([(10,)], [(10,), (20,), (30,), (40,)]),
         lambda rng, n: build_tf_changed(rng, n, _log_uniform(rng, 1e-3, 1e-2))),
        ("factors_moved", "different",
         pick([(10,)], [(10,), (20,), (40,)]),
         lambda rng, n: build_factors_moved(rng, n, _log_uniform(rng, 1e-3, 1e-2))),
    ])


def build_suite(*, quick: bool, seed: int, only: list[str] | None = None) -> list[cs.BenchmarkPair]:
    """Construct and verify every pair (labels from the stored doubles); ``only`` keeps
    the families whose names start with one of the given prefixes."""
    out: list[cs.BenchmarkPair] = []
    for fam_index, (family, intent, params, builder) in enumerate(_families(quick)):
        if only and not any(family.startswith(o) for o in only):
            continue
        for i, prm in enumerate(params):
            pair_seed = (seed, fam_index, i)
            rng = np.random.default_rng(np.random.SeedSequence(list(pair_seed)))
            r1, r2, desc = builder(rng, *prm)
            r1, r2 = r1.with_name("reference"), r2.with_name("claimed")
            ver = cs.verify_difference(r1, r2)
            print(f"built {family}[{i}] n={r1.order}/{r2.order}: {ver.relative_difference:.2e} "
                  f"({ver.seconds:.1f} s)", file=sys.stderr, flush=True)
            out.append(cs.BenchmarkPair(
                family=family, index=i, seed=pair_seed, intent=intent,  # type: ignore[arg-type]
                first=r1, second=r2, description=desc, verified=ver,
                label=cs.label_from_difference(ver.relative_difference),
            ))
    return out


# ---------------------------------------------------------------- judges
def judge_audit(r1: Realization, r2: Realization, rtol: float) -> tuple[Verdict, Any]:
    from audit.errors import AuditError
    from audit.verdict.compare import Options, compare_pair

    try:
        pc = compare_pair(r1, r2, options=Options(rtol=rtol))
    except AuditError as exc:  # reported as a miss with the message
        return "inconclusive", f"{type(exc).__name__}: {exc}"
    return pc.verdict, pc


def judge_tf_coefficients(r1: Realization, r2: Realization, rtol: float) -> tuple[Verdict, Any]:
    import scipy.signal

    worst = 0.0
    try:
        with np.errstate(all="ignore"):
            for j in range(r1.n_inputs):
                tfs = []
                for r in (r1, r2):
                    if r.order == 0:
                        num, den = r.d[:, j:j + 1].astype(float), np.ones(1)
                    else:
                        num, den = scipy.signal.ss2tf(r.a, r.b, r.c, r.d, input=j)
                    num, den = np.atleast_2d(num) / den[0], den / den[0]
                    tfs.append((num, den))
                (n1, d1), (n2, d2) = tfs
                if not (np.all(np.isfinite(n1)) and np.all(np.isfinite(n2))
                        and np.all(np.isfinite(d1)) and np.all(np.isfinite(d2))):
                    return "inconclusive", "non-finite coefficients"
                if d1.size != d2.size or n1.shape != n2.shape:
                    return "different", "different polynomial degrees"
                for x, y in ((n1, n2), (d1, d2)):
                    scale = max(np.linalg.norm(x), np.linalg.norm(y))
                    if scale > 0:
                        worst = max(worst, float(np.linalg.norm(x - y)) / scale)
    except (ValueError, np.linalg.LinAlgError, FloatingPointError) as exc:
        return "inconclusive", str(exc)
    if not math.isfinite(worst):
        return "inconclusive", "non-finite"
    return ("equivalent" if worst <= rtol else "different"), worst


FIXED_GRID = np.geomspace(1e-3, 1e3, 200)


def judge_fixed_grid(r1: Realization, r2: Realization, rtol: float) -> tuple[Verdict, Any]:
    pts = cs.boundary_point(FIXED_GRID, r1.sample_period)
    g1 = cs.transfer_values_double(r1, pts)
    g2 = cs.transfer_values_double(r2, pts)
    with np.errstate(all="ignore"):
        diff = cs.sigma_max(g1 - g2)
        scale = max(float(cs.sigma_max(g1).max()), float(cs.sigma_max(g2).max()))
    if not (np.all(np.isfinite(diff)) and math.isfinite(scale)):
        return "inconclusive", "non-finite response"
    rel = float(diff.max()) / scale if scale > 0 else float(diff.max())
    return ("equivalent" if rel <= rtol else "different"), rel


def judge_markov_raw(r1: Realization, r2: Realization, rtol: float) -> tuple[Verdict, Any]:
    count = r1.order + r2.order + 1
    seqs = []
    with np.errstate(all="ignore"):
        for r in (r1, r2):
            terms = [r.d]
            x = r.b.copy()
            for _ in range(count - 1):
                terms.append(r.c @ x)
                x = r.a @ x
            seqs.append(terms)
        worst = 0.0
        for t1, t2 in zip(*seqs):
            if not (np.all(np.isfinite(t1)) and np.all(np.isfinite(t2))):
                return "inconclusive", "overflow"
            scale = max(float(np.linalg.norm(t1)), float(np.linalg.norm(t2)))
            if scale > 0:
                worst = max(worst, float(np.linalg.norm(t1 - t2)) / scale)
    return ("equivalent" if worst <= rtol else "different"), worst


JUDGES: dict[str, Callable[[Realization, Realization, float], tuple[Verdict, Any]]] = {
    "lti-audit": judge_audit,
    "tf-coeffs": judge_tf_coefficients,
    "fixed-grid": judge_fixed_grid,
    "markov-raw": judge_markov_raw,
}


# ---------------------------------------------------------------- evaluation
def evaluate(pairs: list[cs.BenchmarkPair], *, rtol: float) -> list[dict[str, Any]]:
    """Run every judge on every kept pair; one record per (pair, judge)."""
    records = []
    for pr in pairs:
        if pr.label == "discarded":
            continue
        for name, judge in JUDGES.items():
            start = time.perf_counter()
            verdict, info = judge(pr.first, pr.second, rtol)
            seconds = time.perf_counter() - start
            records.append({"pair": pr, "method": name, "verdict": verdict, "info": info,
                            "seconds": seconds})
            if name == "lti-audit":
                print(f"judged {pr.family}[{pr.index}]: {verdict} ({seconds:.1f} s)",
                      file=sys.stderr, flush=True)
    return records


def _row(records: list[dict[str, Any]]) -> dict[str, Any]:
    n = len(records)
    false_eq = sum(1 for r in records if r["pair"].label == "different" and r["verdict"] == "equivalent")
    false_diff = sum(1 for r in records if r["pair"].label == "equivalent" and r["verdict"] == "different")
    inconc = sum(1 for r in records if r["verdict"] == "inconclusive")
    med = statistics.median(r["seconds"] for r in records) if records else float("nan")
    return {"n": n, "false_equivalent": false_eq, "false_different": false_diff,
            "inconclusive": inconc, "median_seconds": med}


def _pct(k: int, n: int) -> str:
    return f"{k} ({100.0 * k / n:.0f}%)" if n else "0"


def summarise(pairs: list[cs.BenchmarkPair], records: list[dict[str, Any]]) -> dict[str, Any]:
    families = list(dict.fromkeys(p.family for p in pairs))
    table = []
    for fam in families + ["ALL"]:
        fam_pairs = [p for p in pairs if fam == "ALL" or p.family == fam]
        kept = [p for p in fam_pairs if p.label != "discarded"]
        for method in JUDGES:
            recs = [r for r in records if r["method"] == method and (fam == "ALL" or r["pair"].family == fam)]
            row = _row(recs)
            row.update({
                "family": fam, "method": method,
                "equivalent_pairs": sum(1 for p in kept if p.label == "equivalent"),
                "different_pairs": sum(1 for p in kept if p.label == "different"),
                "discarded": sum(1 for p in fam_pairs if p.label == "discarded"),
                "relabelled": sum(1 for p in kept if p.label != p.intent),
            })
            table.append(row)
    failures = [r for r in records if r["method"] == "lti-audit"
                and (r["verdict"] == "inconclusive" or r["verdict"] != r["pair"].label)]
    return {"table": table, "audit_failures": failures}


def render(pairs: list[cs.BenchmarkPair], summary: dict[str, Any], records: list[dict[str, Any]],
           *, seed: int, rtol: float, quick: bool) -> str:
    lines = []
    kept = [p for p in pairs if p.label != "discarded"]
    lines.append(f"# Verdict benchmark ({'quick' if quick else 'full'} suite, seed {seed}, rtol {rtol:g})")
    lines.append("")
    lines.append(
        f"{len(pairs)} pairs constructed, {len(kept)} kept "
        f"({sum(p.label == 'equivalent' for p in kept)} equivalent, "
        f"{sum(p.label == 'different' for p in kept)} different), "
        f"{len(pairs) - len(kept)} discarded (verified difference between "
        f"{cs.EQUIVALENT_MAX:g} and {cs.DIFFERENT_MIN:g}), "
        f"{sum(p.label != p.intent for p in kept)} labelled against the construction intent."
    )
    mp = [p.verified.mpmath_agreement for p in pairs if p.verified and p.verified.mpmath_agreement is not None]
    rig = sum(1 for p in pairs if p.verified and _rigorous_consistent(p))
    lines.append(
        f"Labels: {rig}/{len(pairs)} confirmed by a rigorous ball enclosure at the deciding "
        f"frequency; mpmath ({cs.MPMATH_DPS} digits) cross-check on {len(mp)} pairs, worst relative "
        f"disagreement {max(mp) if mp else float('nan'):.1e}; verification took "
        f"{sum(p.verified.seconds for p in pairs if p.verified):.1f} s."
    )
    lines.append("")
    lines.append("| family | eq/diff (disc.) | method | false equivalent | false different | inconclusive | median s/pair |")
    lines.append("|---|---|---|---|---|---|---|")
    for row in summary["table"]:
        n = row["n"]
        counts = f"{row['equivalent_pairs']}/{row['different_pairs']} ({row['discarded']})"
        lines.append(
            f"| {row['family']} | {counts} | {row['method']} | {_pct(row['false_equivalent'], n)} | "
            f"{_pct(row['false_different'], n)} | {_pct(row['inconclusive'], n)} | "
            f"{row['median_seconds']:.4f} |"
        )
    lines.append("")
    fails = summary["audit_failures"]
    if not fails:
        lines.append("lti-audit: no false verdicts and no inconclusive verdicts on this suite.")
    else:
        lines.append(f"lti-audit MISSES on {len(fails)} pair(s):")
        for r in fails:
            pr = r["pair"]
            pc = r["info"]
            dec = next((e for e in pc.evidence if e.decisive), None) if hasattr(pc, "evidence") else None
            lines.append(
                f"- {pr.family}[{pr.index}] seed={pr.seed} ({pr.description}): label {pr.label} "
                f"(verified {pr.verified.relative_difference:.3e} at {pr.verified.at_frequency:.4g} rad/s), "
                f"verdict {r['verdict']}"
            )
            if dec is not None:
                d = dict(dec.details)
                lines.append(f"    decisive value {dec.value:.3e} outcome {dec.outcome}: {dec.summary}")
                lines.append(f"    details: {d}")
            else:
                lines.append(f"    raised: {pc}")
    lines.append("")
    lines.append("Pairs (verified relative difference, label, intent; lti-audit verdict and seconds):")
    audit = {(r["pair"].family, r["pair"].index): r for r in records if r["method"] == "lti-audit"}
    for p in pairs:
        v = p.verified
        rec = audit.get((p.family, p.index))
        judged = f"; lti-audit {rec['verdict']} in {rec['seconds']:.1f} s" if rec else ""
        lines.append(f"  {p.family}[{p.index}] seed={p.seed} {p.description}: "
                     f"{v.relative_difference:.2e} -> {p.label} (intent {p.intent}){judged}")
    return "\n".join(lines)


def _rigorous_consistent(p: cs.BenchmarkPair) -> bool:
    lo, hi = p.verified.rigorous_interval
    if p.label == "equivalent":
        return hi <= cs.EQUIVALENT_MAX
    if p.label == "different":
        return lo >= cs.DIFFERENT_MIN
    return True


def document_of(r: Realization) -> dict[str, Any]:
    """The model document a benchmark model stands for (stored data as stored)."""
    doc: dict[str, Any] = {"lti_model": 1, "name": r.name, "sample_period": r.sample_period}
    st = r.stored
    if st is None:
        doc["state_space"] = {k: getattr(r, k).tolist() for k in "abcd"}
    elif hasattr(st, "numerator"):
        doc["transfer_function"] = {
            "numerator": [[np.asarray(c).tolist() for c in row] for row in st.numerator],
            "denominator": [[np.asarray(c).tolist() for c in row] for row in st.denominator]}
    else:
        def pairs(v: Any) -> list[list[float]]:
            return [[float(np.real(x)), float(np.imag(x))] for x in v]
        doc["zeros_poles_gain"] = {"zeros": [[pairs(c) for c in row] for row in st.zeros],
                                   "poles": [[pairs(c) for c in row] for row in st.poles_],
                                   "gain": st.gain.tolist()}
    return doc


def dump_documents(pairs: list[cs.BenchmarkPair], folder: str) -> None:
    """Write each kept pair as two model documents and its label (to judge them with
    another version of lti-audit, e.g. the one before a change)."""
    import json

    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    for p in pairs:
        if p.label == "discarded":
            continue
        stem = f"{p.family}-{p.index}"
        (out / f"{stem}-1.json").write_text(json.dumps(document_of(p.first)))
        (out / f"{stem}-2.json").write_text(json.dumps(document_of(p.second)))
        (out / f"{stem}.label").write_text(f"{p.label} {p.verified.relative_difference!r} {p.description}\n")


def run(*, quick: bool, seed: int, rtol: float, only: list[str] | None = None,
        dump: str | None = None) -> tuple[list[cs.BenchmarkPair], dict[str, Any], str]:
    pairs = build_suite(quick=quick, seed=seed, only=only)
    if dump:
        dump_documents(pairs, dump)
    records = evaluate(pairs, rtol=rtol)
    summary = summarise(pairs, records)
    return pairs, summary, render(pairs, summary, records, seed=seed, rtol=rtol, quick=quick)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="tiny suite (seconds)")
    parser.add_argument("--seed", type=int, default=20240601)
    parser.add_argument("--rtol", type=float, default=None,
                        help="relative tolerance (default: audit.evidence.record.DEFAULT_RTOL)")
    parser.add_argument("--families", default="",
                        help="comma-separated family-name prefixes to run (default: all)")
    parser.add_argument("--dump-documents", default=None, metavar="DIR",
                        help="also write every kept pair as model documents into DIR")
    args = parser.parse_args(argv)
    from audit.evidence.record import DEFAULT_RTOL

    rtol = DEFAULT_RTOL if args.rtol is None else args.rtol
    start = time.perf_counter()
    only = [f for f in args.families.split(",") if f] or None
    _, summary, text = run(quick=args.quick, seed=args.seed, rtol=rtol, only=only,
                           dump=args.dump_documents)
    print(text)
    print(f"\ntotal wall-clock {time.perf_counter() - start:.1f} s")
    return 0 if not summary["audit_failures"] else 1


if __name__ == "__main__":
    raise SystemExit(main())
