"""Accuracy of structured forms: lti-audit's producers next to scipy and python-control.

Usage::

    python benchmarks/forms.py [--quick] [--seed S]

Sources: stable SISO models of order 5, 10, 20, 40, 80 with poles spread over 1, 3 and
6 decades (block-diagonal reference put into dense coordinates by a cond(T)=1e2
transformation computed in extended precision and rounded once).  Each form is produced
from the stored source by

* lti-audit: ``audit.forms.catalogue.FORMS[name](source)`` (``refused`` when the producer raises
  NumericalTroubleError -- the intended behaviour for a form that cannot reproduce the
  model);
* scipy (companion route): ``scipy.signal.ss2tf`` then ``scipy.signal.tf2ss`` (controller
  form); its transpose ``(A^T, C^T, B^T, D)`` for the observable form;
* python-control: ``control.canonical_form(sys, 'reachable' | 'observable' | 'modal')``
  and ``control.balanced_reduction(sys, n)`` (full order, i.e. a balanced realization).

Metric: relative peak error ``max_k sigma(G_form - G_source)(w_k) / max_k
sigma(G_source)(w_k)`` over a 60-point log grid spanning the pole band (two decades
beyond) plus every pole frequency, both responses evaluated from the STORED matrices
at 256 bits with python-flint (so the number is the error of the form itself, not of a
double-precision evaluation).  A value marked ``~`` changed by more than 1e-3 when the
deciding frequency was re-evaluated at 512 bits (then only its order of magnitude is
meaningful).
"""

from __future__ import annotations

import argparse
import math
import sys
import time
import warnings
from pathlib import Path
from typing import Any, Callable

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import _cases as cs  # noqa: E402
from audit.core.realization import Realization  # noqa: E402

FORM_BITS = 256
FORM_NAMES = ("controllable_companion", "observable_companion", "modal", "jordan", "balanced")


def source_model(seed: tuple[int, ...], n: int, spread: float) -> Realization:
    rng = np.random.default_rng(np.random.SeedSequence(list(seed)))
    poles = cs.random_poles(rng, n, spread_decades=spread, damping=(1e-2, 0.7))
    r = cs.reference_model(rng, poles, name="source")
    return cs.transform_in_extended_precision(r, cs.conditioned_transform(rng, n, 1e2), name="source")


def _frequencies(r: Realization) -> np.ndarray:
    wp = cs.mode_frequencies(r.poles(), None)
    lo, hi = float(wp.min()) * 1e-2, float(wp.max()) * 1e2
    return cs._dedupe(np.concatenate([[0.0], np.geomspace(lo, hi, 60), wp]))


class _Reference:
    """Source responses at 256 bits, cached; forms evaluated against them."""

    def __init__(self, source: Realization) -> None:
        import flint

        self.flint = flint
        self.omega = _frequencies(source)
        self.source = source
        self.values = self._values(source, FORM_BITS)
        self.peak = max(float(np.linalg.norm(cs._acb_to_complex(v), 2)) for v in self.values)

    def _values(self, r: Realization, bits: int, omegas: np.ndarray | None = None) -> list[Any]:
        flint = self.flint
        old = flint.ctx.prec
        flint.ctx.prec = bits
        try:
            model = cs._BallModel(flint, r)
            w = self.omega if omegas is None else omegas
            return [model.at(flint.acb(0, float(x)), rigorous=False) for x in w]
        finally:
            flint.ctx.prec = old

    def relative_error(self, r: Realization) -> tuple[float, bool]:
        """(relative peak error, stable under a 512-bit re-evaluation)."""
        flint = self.flint
        old = flint.ctx.prec
        flint.ctx.prec = FORM_BITS
        try:
            vals = self._values(r, FORM_BITS)
            diffs = [float(np.linalg.norm(cs._acb_to_complex(a - b), 2))
                     for a, b in zip(vals, self.values)]
        finally:
            flint.ctx.prec = old
        k = int(np.argmax(diffs))
        w = self.omega[k:k + 1]
        hi_src = self._values(self.source, 2 * FORM_BITS, w)[0]
        hi_form = self._values(r, 2 * FORM_BITS, w)[0]
        flint.ctx.prec = 2 * FORM_BITS
        try:
            again = float(np.linalg.norm(cs._acb_to_complex(hi_form - hi_src), 2))
        finally:
            flint.ctx.prec = old
        stable = abs(again - diffs[k]) <= 1e-3 * max(again, diffs[k], 1e-300)
        return diffs[k] / self.peak, stable


# ------------------------------------------------------------------ producers
def _ours(name: str) -> Callable[[Realization], Realization]:
    def produce(r: Realization) -> Realization:
        from audit.forms.catalogue import FORMS

        return FORMS[name](r).realization

    return produce


def _scipy_controllable(r: Realization) -> Realization:
    import scipy.signal

    num, den = scipy.signal.ss2tf(r.a, r.b, r.c, r.d)
    a, b, c, d = scipy.signal.tf2ss(num, den)
    return Realization.from_arrays(a, b, c, d)


def _scipy_observable(r: Realization) -> Realization:
    x = _scipy_controllable(r)
    return Realization.from_arrays(x.a.T, x.c.T, x.b.T, x.d.T)


def _control(form: str) -> Callable[[Realization], Realization]:
    def produce(r: Realization) -> Realization:
        import control

        sys_ = control.StateSpace(r.a, r.b, r.c, r.d)
        if form == "balanced":
            out = control.balanced_reduction(sys_, r.order)
        else:
            out, _ = control.canonical_form(sys_, form)
        return Realization.from_arrays(out.A, out.B, out.C, out.D)

    return produce


ROUTES: dict[str, dict[str, Callable[[Realization], Realization] | None]] = {
    "controllable_companion": {"lti-audit": _ours("controllable_companion"),
                               "scipy": _scipy_controllable, "python-control": _control("reachable")},
    "observable_companion": {"lti-audit": _ours("observable_companion"),
                             "scipy": _scipy_observable, "python-control": _control("observable")},
    "modal": {"lti-audit": _ours("modal"), "scipy": None, "python-control": _control("modal")},
    "jordan": {"lti-audit": _ours("jordan"), "scipy": None, "python-control": None},
    "balanced": {"lti-audit": _ours("balanced"), "scipy": None, "python-control": _control("balanced")},
}


def _attempt(route: Callable[[Realization], Realization] | None, source: Realization,
             ref: _Reference, *, ours: bool) -> str:
    from audit.errors import InvalidModelError, NumericalTroubleError

    if route is None:
        return "-"
    try:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            produced = route(source)
    except NumericalTroubleError:
        return "refused" if ours else "error"
    except InvalidModelError as exc:  # non-finite entries from a foreign route
        return "overflow" if "NaN or infinity" in str(exc) else f"invalid ({exc})"[:40]
    except Exception as exc:  # noqa: BLE001 - a foreign library failing is a result
        return f"error ({type(exc).__name__})"
    try:
        rel, stable = ref.relative_error(produced)
    except ZeroDivisionError:
        return "singular"
    text = f"{'' if stable else '~'}{rel:.1e}"
    if produced.order != source.order:  # states removed (numerically non-minimal source)
        text += f" (order {produced.order})"
    return text


def run(*, quick: bool, seed: int) -> tuple[list[dict[str, Any]], str]:
    orders = (5,) if quick else (5, 10, 20, 40, 80)
    spreads = (1.0,) if quick else (1.0, 3.0, 6.0)
    forms = ("controllable_companion", "modal", "balanced") if quick else FORM_NAMES
    rows = []
    for n in orders:
        for spread in spreads:
            source = source_model((seed, n, int(spread)), n, spread)
            ref = _Reference(source)
            for form in forms:
                row: dict[str, Any] = {"order": n, "spread": spread, "form": form}
                for route_name, route in ROUTES[form].items():
                    start = time.perf_counter()
                    row[route_name] = _attempt(route, source, ref, ours=route_name == "lti-audit")
                    row[route_name + "_seconds"] = time.perf_counter() - start
                rows.append(row)
    lines = [f"# Form accuracy ({'quick' if quick else 'full'}, seed {seed})", "",
             "Relative peak error of the produced form's transfer function against the source "
             "(256-bit evaluation on a 60-point log grid plus every pole frequency).", "",
             "| n | decades | form | lti-audit | scipy (tf2ss route) | python-control |",
             "|---|---|---|---|---|---|"]
    for row in rows:
        lines.append(f"| {row['order']} | {row['spread']:g} | {row['form']} | {row['lti-audit']} | "
                     f"{row['scipy']} | {row['python-control']} |")
    return rows, "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="one tiny case (seconds)")
    parser.add_argument("--seed", type=int, default=7)
    args = parser.parse_args(argv)
    start = time.perf_counter()
    _, text = run(quick=args.quick, seed=args.seed)
    print(text)
    print(f"\ntotal wall-clock {time.perf_counter() - start:.1f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
