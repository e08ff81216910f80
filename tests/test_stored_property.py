"""Property (issue 10): a random transfer-function document and the exact companion
realization of its STORED coefficients are always judged equivalent, up to order 60.

The observable companion form of a monic denominator and a strictly proper numerator has
the stored coefficients themselves as entries (``A[:, 0] = -den[1:]``, ``B = num``,
``C = e1``), so in exact arithmetic the two documents describe the same transfer function
(observable canonical form, common practice, no source); any verdict other than
"equivalent" is a defect. The default profile draws a few examples, the nightly profile
(``LTI_AUDIT_PROFILE=nightly``) thousands.
"""

from __future__ import annotations

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from audit.documents.loading import parse_model_document, realization_from_document
from audit.verdict.compare import compare_pair


@st.composite
def transfer_functions(draw):  # type: ignore[no-untyped-def]
    order = draw(st.integers(min_value=1, max_value=60))
    decades = draw(st.floats(min_value=0.0, max_value=3.0))
    seed = draw(st.integers(min_value=0, max_value=2**32 - 1))
    discrete = draw(st.booleans())
    rng = np.random.default_rng(seed)
    poles: list[complex] = []
    while len(poles) < order:
        mag = 10 ** rng.uniform(-decades / 2, decades / 2)
        if order - len(poles) >= 2 and rng.random() < 0.6:
            zeta = rng.uniform(0.02, 0.9)
            p = complex(-zeta * mag, mag * math.sqrt(1 - zeta * zeta))
            if rng.random() < 0.1:
                p = complex(-p.real, p.imag)  # an unstable pair now and then
            poles += [p, p.conjugate()]
        else:
            poles.append(complex(-mag if rng.random() < 0.9 else mag, 0.0))
    period = None
    if discrete:
        period = 10 ** rng.uniform(-3, -1) / 10 ** (decades / 2)
        poles = list(np.exp(np.array(poles) * period))
    den = np.real(np.poly(poles))
    num = rng.standard_normal(order) * np.abs(den[1:]) ** 0.5  # strictly proper
    return num, den, period


def _doc(payload: dict, period: float | None, name: str):  # type: ignore[no-untyped-def]
    return parse_model_document({"lti_model": 1, "name": name, "sample_period": period, **payload},
                                source=name)


# few examples in the default (CI) profile, many in the nightly one (tests/conftest.py)
_NIGHTLY = settings.default.max_examples > 100
_EXAMPLES = 300 if _NIGHTLY else 4


@settings(max_examples=_EXAMPLES)
@given(transfer_functions())
def test_transfer_function_and_exact_companion_of_its_coefficients_are_equivalent(case) -> None:  # type: ignore[no-untyped-def]
    num, den, period = case
    n = den.size - 1
    a = np.zeros((n, n))
    a[:, 0] = -den[1:]
    a[:-1, 1:] = np.eye(n - 1)
    c = np.zeros((1, n))
    c[0, 0] = 1.0
    tf = _doc({"transfer_function": {"numerator": [[num.tolist()]], "denominator": [[den.tolist()]]}},
              period, "stored transfer function")
    ss = _doc({"state_space": {"a": a.tolist(), "b": num.reshape(-1, 1).tolist(), "c": c.tolist(),
                               "d": [[0.0]]}}, period, "companion of its coefficients")
    pc = compare_pair(realization_from_document(tf), realization_from_document(ss))
    assert pc.verdict == "equivalent", pc.evidence[0].summary
