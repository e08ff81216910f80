"""lti-audit: evidence-based equivalence audits of linear time-invariant models.

The public surface is listed in ``__all__``; everything else is internal and may change.
Names are resolved lazily (PEP 562) so that ``import audit`` and the ``lti-audit``
command start quickly; numerical modules load on first use.

>>> import audit
>>> r1 = audit.Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[0.0]], name="a")
>>> r2 = audit.Realization.from_arrays([[-2.0]], [[2.0]], [[1.5]], [[0.0]], name="b")
>>> audit.compare_pair(r1, r2).verdict
'equivalent'
"""

from __future__ import annotations

import importlib
from typing import Any

_EXPORTS: dict[str, str] = {
    # errors
    "AuditError": "audit.errors",
    "InvalidModelError": "audit.errors",
    "IncompatibleModelsError": "audit.errors",
    "NumericalTroubleError": "audit.errors",
    # documents and the numeric core
    "ModelDocument": "audit.documents.schema",
    "load_model_document": "audit.documents.loading",
    "load_realization": "audit.documents.loading",
    "realization_from_document": "audit.documents.loading",
    "Realization": "audit.core.realization",
    "difference_system": "audit.core.realization",
    "similarity_transformed": "audit.core.realization",
    "realization_from_object": "audit.documents.interop",
    "realization_from_transfer_function": "audit.core.from_transfer_function",
    "realization_from_zeros_poles_gain": "audit.core.from_zeros_poles_gain",
    "transfer_function_from_realization": "audit.core.from_realization",
    "zeros_poles_gain_from_realization": "audit.core.from_realization",
    # structure, evidence, verdict
    "minimal_realization": "audit.structure.minimal",
    "transmission_zeros": "audit.structure.zeros",
    "frequency_response": "audit.evidence.frequency",
    "peak_gain": "audit.evidence.peak_gain",
    "markov_parameters": "audit.evidence.markov",
    "similarity_transform_between": "audit.evidence.similarity",
    "Evidence": "audit.evidence.record",
    "DEFAULT_RTOL": "audit.evidence.record",
    "Options": "audit.verdict.compare",
    "PairComparison": "audit.verdict.compare",
    "compare_pair": "audit.verdict.compare",
    "compare_models": "audit.verdict.compare",
    "overall_verdict": "audit.verdict.compare",
    "inspect_model": "audit.verdict.inspection",
    # forms, time domain, discretization
    "FORMS": "audit.forms.catalogue",
    "recognise_form": "audit.forms.catalogue",
    "check_claimed_form": "audit.forms.catalogue",
    "discretize": "audit.dynamics.discretization",
    "check_discretization_claim": "audit.dynamics.discretization_checks",
    "step_response": "audit.dynamics.time_responses",
    "impulse_response": "audit.dynamics.time_responses",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'audit' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
