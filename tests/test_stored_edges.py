"""Issue 10, deliverables 5 and 6: the comparison contour and rounding-level improper
parts, judged on the stored data (ground truth: python-flint ball evaluation of the
stored doubles, tests/test_stored_references.py:truth)."""

from __future__ import annotations

import numpy as np
import pytest

from audit.errors import InvalidModelError
from audit.evidence.contour import choose_contour
from audit.documents.loading import realization_from_document

from .test_stored_references import ss_doc, tf_doc, truth, verdict_of, factored_doc

PERIOD = 1e-5


def _slow_mode_model(radius_gap: float, name: str):  # type: ignore[no-untyped-def]
    # a slow mode at z = 1 - radius_gap with unit DC gain, plus a mode at z = 0.5
    # (a model sampled at 10 us with a pole at |z| = 1 - 2.4e-7, as in issue 10)
    p = 1.0 - radius_gap
    a = np.diag([p, 0.5])
    b = np.array([[radius_gap], [0.25]])
    c = np.array([[1.0, 1.0]])
    return ss_doc(a, b, c, [[0.0]], PERIOD, name)


def test_pole_close_to_the_unit_circle_is_compared_on_the_circle_itself() -> None:
    d1 = _slow_mode_model(2.4e-7, "sampled drive")
    d2 = _slow_mode_model(2.64e-7, "slow pole moved")  # 1 - |z| larger by 10 %
    r1, r2 = realization_from_document(d1), realization_from_document(d2)
    contour = choose_contour([r1, r2])
    assert not contour.shifted  # |z| = 1 - 2.4e-7 is not ON the circle as stored
    freqs = np.r_[0.0, np.geomspace(1e-3, np.pi / PERIOD, 200)]
    rel = truth(d1, d2, PERIOD, freqs)  # python-flint, 300 bits, stored doubles
    assert rel > 0.01
    got, pc = verdict_of(d1, d2)
    assert got == "different"
    # the reported relative peak difference is the one on the unit circle (within 5 %;
    # on |z| = 1.05 it would be about 1e-6 of it)
    assert pc.evidence[0].value == pytest.approx(rel, rel=0.05)


def test_accumulator_on_the_circle_as_stored_shifts_by_the_least_step() -> None:
    # 1/(z - 1) + 0.5/(z - 0.2): an accumulator exactly on the circle as stored
    num = np.polyadd(np.poly([0.2]), 0.5 * np.poly([1.0]))
    den = np.poly([1.0, 0.2])
    tf = tf_doc([[num]], [[den]], 0.01, "accumulator (coefficients)")
    ss = ss_doc(np.diag([1.0, 0.2]), [[1.0], [0.5]], [[1.0, 1.0]], [[0.0]], 0.01, "accumulator (states)")
    contour = choose_contour([realization_from_document(tf), realization_from_document(ss)])
    assert contour.shifted and contour.shift == pytest.approx(1.0001)  # least step of SHIFT_STEPS
    got, pc = verdict_of(tf, ss)
    assert got == "equivalent", pc.evidence[0].summary
    assert any("compared on the circle |z| = 1.0001" in w for w in pc.warnings)


def test_integrator_transfer_function_against_zero_pole_gain() -> None:
    # 10 / (s (s + 3)) as coefficients and as factors: exactly the same system
    tf = tf_doc([[[10.0]]], [[[1.0, 3.0, 0.0]]], None, "integrating axis (coefficients)")
    factored = factored_doc([[[]]], [[[0.0, -3.0]]], [[10.0]], None, "integrating axis (factors)")
    got, pc = verdict_of(tf, factored)
    assert got == "equivalent", pc.evidence[0].summary
    # and with the gain changed by 1e-3: different (both stored exactly)
    factored2 = factored_doc([[[]]], [[[0.0, -3.0]]], [[10.01]], None, "changed")
    assert verdict_of(tf, factored2)[0] == "different"


def test_rounding_level_improper_numerator_is_audited_with_a_named_warning() -> None:
    # a conversion of a model without feedthrough left 3e-17 in front (issue 10)
    converted = tf_doc([[[3e-17, 0.0, 0.0, 1.0, 2.0]]], [[[1.0, 4.0, 5.0, 2.0]]], None, "converted")
    # the same transfer function (s + 2) / (s^3 + 4 s^2 + 5 s + 2), controllable companion
    original = ss_doc([[0, 1, 0], [0, 0, 1], [-2, -5, -4]], [[0], [0], [1]], [[2, 1, 0]], [[0]],
                      None, "original")
    got, pc = verdict_of(original, converted)
    assert got == "equivalent", pc.evidence[0].summary
    text = " ".join(pc.warnings)
    assert "channel [0][0]" in text and "3e-17" in text and "numerator degree 4 > denominator degree 3" in text
    assert "audited as stored up to" in text


def test_genuinely_improper_transfer_function_is_still_refused() -> None:
    with pytest.raises(InvalidModelError, match=r"improper \(numerator degree 4 > denominator degree 3\)"):
        tf_doc([[[1e-3, 0.0, 0.0, 1.0, 2.0]]], [[[1.0, 4.0, 5.0, 2.0]]], None, "improper")
