"""pytest plugin: model-equivalence assertions for a team's own test suite.

Registered through the ``pytest11`` entry point ``lti_audit`` (installed with the
package), so that in any project with lti-audit installed::

    def test_refactored_plant_is_unchanged(lti_audit):
        lti_audit.assert_same_system("models/plant.json", "models/plant_modal.json")

    from audit.pytest_plugin import assert_same_system   # also usable without the fixture

    def test_reduced_model():
        assert_same_system(reference_realization, reduced_realization, rtol=1e-4)

``a`` and ``b`` may each be a path to a model file, an
:class:`audit.core.realization.Realization`, an :class:`audit.documents.schema.ModelDocument`, a
model-document ``dict``, or a python-control ``StateSpace`` / ``TransferFunction`` or
scipy.signal LTI object (converted by :mod:`audit.documents.interop`). The assertion compares them with
:func:`audit.verdict.compare.compare_pair`; on failure the ``AssertionError`` message is the
human-readable diagnosis (explanation, diagnosis lines, warnings, the decisive evidence).
An inconclusive comparison fails too (the assertion cannot be confirmed), with the reason.

The default tolerance of the fixture is ``--lti-audit-rtol`` on the command line, else
the ini option ``lti_audit_rtol``, else :data:`audit.evidence.record.DEFAULT_RTOL`.

Numerical modules are imported lazily: loading the plugin costs nothing in a test run
that does not use it. No numerical method is implemented here.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import pytest

if TYPE_CHECKING:  # pragma: no cover
    from audit.verdict.compare import PairComparison

__all__ = ["LtiAuditHelper", "assert_same_system", "compare_systems", "lti_audit"]

_RTOL_INI = "lti_audit_rtol"
_RTOL_OPTION = "--lti-audit-rtol"


def _as_realization(obj: Any, argument: str) -> Any:
    from audit.documents.schema import ModelDocument
    from audit.errors import InvalidModelError
    from audit.documents.loading import load_realization, parse_model_document, realization_from_document
    from audit.core.realization import Realization

    if isinstance(obj, Realization):
        return obj.with_name(obj.name or argument)
    if isinstance(obj, (str, os.PathLike)):
        r = load_realization(obj)
        return r.with_name(str(obj))
    if isinstance(obj, ModelDocument):
        return realization_from_document(obj)
    if isinstance(obj, dict):
        doc = parse_model_document(obj, source=f"{argument} (model-document dict)")
        return realization_from_document(doc)
    from audit.documents.interop import is_foreign_system, realization_from_object

    if is_foreign_system(obj):  # python-control / scipy.signal objects
        r = realization_from_object(obj)
        return r.with_name(r.name or argument)
    raise InvalidModelError(
        f"{argument}: got {type(obj).__name__}, expected a path to a model file, a "
        "Realization, a ModelDocument, a model-document dict, or a python-control / "
        "scipy.signal LTI object", field=argument)


def compare_systems(a: Any, b: Any, *, rtol: float | None = None,
                    escalation_seconds: float | None = None) -> "PairComparison":
    """Compare two models (see the module docstring for what ``a`` and ``b`` may be).

    Parameters
    ----------
    a, b : path, Realization, ModelDocument, dict, or python-control / scipy.signal system
        The reference and the model under test; ``A : (n, n)``, ``B : (n, m)``,
        ``C : (p, n)``, ``D : (p, m)`` once loaded.
    rtol : float or None, keyword-only
        Relative tolerance on the peak gain of ``G1 - G2``; ``None``:
        :data:`audit.evidence.record.DEFAULT_RTOL`.
    escalation_seconds : float or None, keyword-only
        Extended-precision budget (``None``: the default of :class:`audit.verdict.compare.Options`).

    Returns
    -------
    audit.verdict.compare.PairComparison

    Raises
    ------
    InvalidModelError
        A model cannot be loaded, or ``a``/``b`` has an unsupported type.
    IncompatibleModelsError
        Different input/output counts or time domains.
    """
    from audit.evidence.record import DEFAULT_RTOL
    from audit.core.realization import check_comparable
    from audit.verdict.compare import Options, compare_pair

    r1 = _as_realization(a, "a")
    r2 = _as_realization(b, "b")
    if r1.name == r2.name:
        r1, r2 = r1.with_name(f"a ({r1.name})"), r2.with_name(f"b ({r2.name})")
    check_comparable(r1, r2)
    tol = DEFAULT_RTOL if rtol is None else float(rtol)
    opts = Options(rtol=tol) if escalation_seconds is None else Options(
        rtol=tol, escalate=escalation_seconds > 0, escalation_seconds=escalation_seconds)
    return compare_pair(r1, r2, options=opts)


def failure_message(pair: "PairComparison") -> str:
    """The human-readable diagnosis of a comparison that is not ``equivalent``."""
    from audit.reports.ci_outputs import diagnosis_lines

    head = {"different": "models are DIFFERENT", "inconclusive": "equivalence is INCONCLUSIVE"}
    lines = [f"lti-audit: {head.get(pair.verdict, pair.verdict)}", pair.explanation]
    diag = diagnosis_lines(pair.diagnosis)  # includes the worst channel in dB and degrees
    if diag:
        lines.append("diagnosis:")
        lines += [f"  - {d}" for d in diag]
    for w in pair.warnings:
        lines.append(("!! " if w.startswith("UNSTABLE") else "note: ") + w)
    decisive = [e for e in pair.evidence if e.decisive]
    for e in decisive:
        lines.append(f"decisive evidence: {e.title}: {e.summary} [{e.precision}]")
    return "\n".join(lines)


def assert_same_system(a: Any, b: Any, *, rtol: float | None = None,
                       escalation_seconds: float | None = None) -> "PairComparison":
    """Assert that two models have the same transfer function within ``rtol``.

    Parameters
    ----------
    a, b : path, Realization, ModelDocument or dict
        See :func:`compare_systems`.
    rtol : float or None, keyword-only
        Relative tolerance on the peak gain of ``G1 - G2`` (default
        :data:`audit.evidence.record.DEFAULT_RTOL`).
    escalation_seconds : float or None, keyword-only
        Extended-precision budget.

    Returns
    -------
    audit.verdict.compare.PairComparison
        The comparison (verdict ``equivalent``), e.g. to inspect its evidence.

    Raises
    ------
    AssertionError
        The verdict is ``different`` or ``inconclusive``; the message is the diagnosis.
    InvalidModelError, IncompatibleModelsError
        As in :func:`compare_systems` (bad input is not an assertion failure).

    Examples
    --------
    >>> from audit.core.realization import Realization
    >>> g = Realization.from_arrays([[-1.0]], [[1.0]], [[2.0]], [[0.0]])
    >>> h = Realization.from_arrays([[-1.0]], [[2.0]], [[1.0]], [[0.0]])   # x scaled by 2
    >>> assert_same_system(g, h).verdict
    'equivalent'
    """
    __tracebackhide__ = True
    pair = compare_systems(a, b, rtol=rtol, escalation_seconds=escalation_seconds)
    if pair.verdict != "equivalent":
        raise AssertionError(failure_message(pair))
    return pair


@dataclass(frozen=True)
class LtiAuditHelper:
    """What the ``lti_audit`` fixture gives a test.

    Attributes
    ----------
    rtol : float
        The session's default tolerance (``--lti-audit-rtol`` / ini ``lti_audit_rtol``).
    """

    rtol: float

    def assert_same_system(self, a: Any, b: Any, *, rtol: float | None = None,
                           escalation_seconds: float | None = None) -> "PairComparison":
        """:func:`assert_same_system` with this session's default ``rtol``.

        Raises
        ------
        AssertionError
            Different or inconclusive; the message is the diagnosis.
        """
        __tracebackhide__ = True
        return assert_same_system(a, b, rtol=self.rtol if rtol is None else rtol,
                                  escalation_seconds=escalation_seconds)

    def compare(self, a: Any, b: Any, *, rtol: float | None = None) -> "PairComparison":
        """:func:`compare_systems` with this session's default ``rtol`` (never asserts).

        Raises
        ------
        InvalidModelError, IncompatibleModelsError
            Bad input.
        """
        return compare_systems(a, b, rtol=self.rtol if rtol is None else rtol)


def _parse_rtol(text: Any, where: str) -> float:
    try:
        value = float(text)
    except (TypeError, ValueError):
        raise pytest.UsageError(f"{where}: expected a number between 0 and 1, got {text!r}") from None
    if not (0.0 < value < 1.0):
        raise pytest.UsageError(f"{where}: expected a number between 0 and 1 (exclusive), got {text!r}")
    return value


def pytest_addoption(parser: pytest.Parser) -> None:
    """Register ``--lti-audit-rtol`` and the ini option ``lti_audit_rtol``."""
    group = parser.getgroup("lti-audit", "model-equivalence assertions (lti-audit)")
    group.addoption(_RTOL_OPTION, dest="lti_audit_rtol", default=None, metavar="RTOL",
                    help="default relative tolerance of the lti_audit fixture")
    parser.addini(_RTOL_INI, "default relative tolerance of the lti_audit fixture",
                  default=None)


@pytest.fixture
def lti_audit(request: pytest.FixtureRequest) -> LtiAuditHelper:
    """Model-equivalence assertions with the session's default tolerance.

    Raises
    ------
    pytest.UsageError
        The configured tolerance is not a number in (0, 1).
    """
    from audit.evidence.record import DEFAULT_RTOL

    config = request.config
    text = config.getoption("lti_audit_rtol", default=None)
    if text is not None:
        return LtiAuditHelper(_parse_rtol(text, _RTOL_OPTION))
    ini = config.getini(_RTOL_INI)
    if ini not in (None, ""):
        return LtiAuditHelper(_parse_rtol(ini, f"ini option {_RTOL_INI}"))
    return LtiAuditHelper(DEFAULT_RTOL)
