"""Smoke tests of the benchmark scripts (benchmarks/*.py) at their --quick sizes.

They check that each benchmark runs and prints its table, that lti-audit gives no false
verdict on the quick verdict suite, and that the label verifier of the benchmarks
agrees with closed forms and with an independent mpmath evaluation.
"""

from __future__ import annotations

import importlib.util
import math
import sys
from pathlib import Path
from types import ModuleType

import numpy as np
import pytest

from audit.core.realization import Realization

BENCH = Path(__file__).resolve().parent.parent / "benchmarks"


def _load(name: str) -> ModuleType:
    if str(BENCH) not in sys.path:
        sys.path.insert(0, str(BENCH))
    spec = importlib.util.spec_from_file_location(f"lti_benchmarks_{name}", BENCH / f"{name}.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses resolve annotations through sys.modules
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def cases() -> ModuleType:
    return _load("_cases")


# ----------------------------------------------------------- the label verifier
def test_verifier_matches_closed_form_gain_change(cases: ModuleType) -> None:
    # G1 = 1/(s+1), G2 = (1+delta)/(s+1): |G1 - G2| / max|G| = delta / (1 + delta)
    # at every frequency (closed form, common practice, no source).
    delta = 3e-4
    r1 = Realization.from_arrays([[-1.0]], [[1.0]], [[1.0]], [[0.0]])
    r2 = Realization.from_arrays([[-1.0]], [[1.0 + delta]], [[1.0]], [[0.0]])
    ver = cases.verify_difference(r1, r2)
    assert math.isclose(ver.relative_difference, delta / (1 + delta), rel_tol=1e-9)
    lo, hi = ver.rigorous_interval
    assert lo <= delta / (1 + delta) * (1 + 1e-12) and hi >= delta / (1 + delta) * (1 - 1e-12)
    assert cases.label_from_difference(ver.relative_difference) == "different"


def test_verifier_detects_tiny_discrete_difference(cases: ModuleType) -> None:
    # G(z) = 1/(z - a) with a = 0.9 vs a = 0.9 + 1e-12: |G1 - G2| peaks at z = 1 with
    # value 1e-12 / ((0.1)(0.1 - 1e-12)) and |G| peaks at 1/0.1 = 10 (closed form,
    # common practice, no source).
    eps_a = 1e-12
    r1 = Realization.from_arrays([[0.9]], [[1.0]], [[1.0]], [[0.0]], 0.1)
    r2 = Realization.from_arrays([[0.9 + eps_a]], [[1.0]], [[1.0]], [[0.0]], 0.1)
    a2 = float(r2.a[0, 0])  # the stored double
    expected = (a2 - 0.9) / (0.1 * (1 - a2)) / (1 / (1 - a2))
    ver = cases.verify_difference(r1, r2)
    assert math.isclose(ver.relative_difference, expected, rel_tol=1e-6)
    assert cases.label_from_difference(ver.relative_difference) == "equivalent"


def test_verifier_agrees_with_mpmath_on_random_pair(cases: ModuleType) -> None:
    rng = np.random.default_rng(5)
    r1 = cases.reference_model(rng, cases.random_poles(rng, 6, spread_decades=3.0), inputs=2, outputs=2)
    t = cases.conditioned_transform(rng, 6, 1e3)
    r2 = cases.transform_in_extended_precision(r1, t, name="claimed")
    ver = cases.verify_difference(r1, r2)
    # independent: mpmath at 40 digits at the deciding frequency
    dm = cases.mpmath_difference(r1, r2, ver.at_frequency)
    assert math.isclose(float(np.linalg.norm(dm, 2)) / ver.scale, ver.relative_difference,
                        rel_tol=1e-10, abs_tol=1e-30)
    g_mp = cases.mpmath_transfer(r1, 1.5)
    g_np = cases.transfer_values_double(r1, np.array([1.5j]))[0]  # independent: numpy LU
    np.testing.assert_allclose(g_np, g_mp, rtol=1e-10, atol=0)


def test_exact_transform_by_powers_of_two_is_exact(cases: ModuleType) -> None:
    # T = diag(2, 1/4): T A T^-1 scales entries by powers of two, exactly
    # (closed form, common practice, no source).
    r = Realization.from_arrays([[-1.1, 0.3], [0.7, -2.9]], [[1.3], [-0.2]], [[0.5, 1.7]], [[0.1]])
    t = np.diag([2.0, 0.25])
    out = cases.transform_in_extended_precision(r, t, name="x")
    np.testing.assert_allclose(out.a, [[-1.1, 0.3 * 8], [0.7 / 8, -2.9]], rtol=0, atol=0)
    np.testing.assert_allclose(out.b, [[2.6], [-0.05]], rtol=0, atol=0)
    np.testing.assert_allclose(out.c, [[0.25, 1.7 * 4]], rtol=0, atol=0)


# ----------------------------------------------------------- the benchmarks
def test_verdicts_quick_suite_has_no_false_verdicts() -> None:
    verdicts = _load("verdicts")
    from audit.evidence.record import DEFAULT_RTOL

    pairs, summary, text = verdicts.run(quick=True, seed=20240601, rtol=DEFAULT_RTOL)
    assert "| ALL |" in text and "lti-audit" in text
    kept = [p for p in pairs if p.label != "discarded"]
    assert any(p.label == "equivalent" for p in kept) and any(p.label == "different" for p in kept)
    overall = next(r for r in summary["table"] if r["family"] == "ALL" and r["method"] == "lti-audit")
    assert overall["n"] == len(kept)
    assert overall["false_equivalent"] == 0
    assert overall["false_different"] == 0
    assert overall["inconclusive"] == 0
    # the mpmath cross-check of the labels (independent library) agrees with python-flint
    agreements = [p.verified.mpmath_agreement for p in pairs if p.verified.mpmath_agreement is not None]
    assert agreements and max(agreements) <= 1e-10


def test_speed_quick_prints_tables(capsys: pytest.CaptureFixture[str]) -> None:
    speed = _load("speed")
    assert speed.main(["--quick"]) == 0
    out = capsys.readouterr().out
    for heading in ("(a) compare_pair", "(b) frequency response", "(c) time", "(d) start-up",
                    "(e) size ladder", "(f) published models"):
        assert heading in out
    assert "| audit.evidence.frequency.frequency_response |" in out
    # the quick ladder: an 8-state pair equivalent by an exact change of coordinates and
    # one with a pole moved by 1e-3 (construction), and the published 48-state model
    assert "| 1x1 | 8 | equivalent |" in out and out.count("| equivalent |") >= 1
    assert "| 1x1 | 8 | different |" in out
    assert "| build48 | 48 | 1x1 | " in out and "/ equivalent |" in out and "/ different |" in out
    # the quick sparse ladder (g): exact refactor and reduced model on the grid, moved loss
    assert "(g) sparse ladder" in out
    sparse_rows = [line.split() for line in out.splitlines()
                   if line.startswith(("bar ", "slab "))]
    verdicts = {(row[0], row[3]): row[8] for row in sparse_rows}  # model, kind -> verdict
    assert verdicts[("bar", "refactored")] == "equivalent"  # exact by construction
    assert verdicts[("bar", "moved")] == "different"  # loss moved by 1e-3
    assert verdicts[("slab", "moved")] == "different"


def test_speed_frequency_race_accuracy() -> None:
    speed = _load("speed")
    b = speed.frequency_response_race(12, 50, 1, 5)
    # independent: python-flint at 128 bits; a 12-state model with cond(T)=1e3 keeps
    # both double-precision evaluations well within 1e-7 (common practice, no source)
    assert b["ours_max_rel_error"] <= 1e-7
    assert b["control_max_rel_error"] <= 1e-7


def test_forms_quick_prints_table() -> None:
    forms = _load("forms")
    rows, text = forms.run(quick=True, seed=7)
    assert "| n | decades | form |" in text
    modal = next(r for r in rows if r["form"] == "modal")
    # independent: 256-bit python-flint evaluation of source and form (the benchmark's metric)
    assert float(modal["lti-audit"].lstrip("~")) <= 1e-8
    assert float(modal["python-control"].lstrip("~")) <= 1e-8
