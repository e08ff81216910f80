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
    "ModelDocument": "audit.documents",
    "load_model_document": "audit.loading",
    "load_realization": "audit.loading",
    "realization_from_document": "audit.loading",
    "Realization": "audit.realization",
    "difference_system": "audit.realization",
    "similarity_transformed": "audit.realization",
    "realization_from_object": "audit.interop",
    "realization_from_transfer_function": "audit.conversions",
    "realization_from_zeros_poles_gain": "audit.conversions",
    "transfer_function_from_realization": "audit.conversions",
    "zeros_poles_gain_from_realization": "audit.conversions",
    # structure, evidence, verdict
    "minimal_realization": "audit.structure",
    "transmission_zeros": "audit.structure",
    "frequency_response": "audit.frequency",
    "peak_gain": "audit.norms",
    "markov_parameters": "audit.markov",
    "similarity_transform_between": "audit.similarity",
    "Evidence": "audit.evidence",
    "DEFAULT_RTOL": "audit.evidence",
    "Options": "audit.verdict",
    "PairComparison": "audit.verdict",
    "compare_pair": "audit.verdict",
    "compare_models": "audit.verdict",
    "overall_verdict": "audit.verdict",
    "inspect_model": "audit.inspection",
    # forms, time domain, discretization
    "FORMS": "audit.forms",
    "recognise_form": "audit.forms",
    "check_claimed_form": "audit.forms",
    "discretize": "audit.discretization",
    "check_discretization_claim": "audit.discretization",
    "step_response": "audit.timedomain",
    "impulse_response": "audit.timedomain",
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
