"""Property suite: every conversion and form of lti-audit, and the verdict itself.

Hypothesis profiles (tests/conftest.py): the fast ``default`` profile runs a dozen examples
per property; ``--nightly`` / ``LTI_AUDIT_PROFILE=nightly`` runs thousands.  Systems come
from the public strategies of :mod:`audit.workflows.strategies` (equivalent-by-construction pairs are
exact up to one rounding per entry; different-by-construction pairs differ by a closed-form
relative amount).  The reference for discretization is scipy.signal.cont2discrete
(independent of our code); everything else is judged by the verdict against the input.
"""

from __future__ import annotations

import itertools
import json
import tempfile
from pathlib import Path

import numpy as np
import pytest
import scipy.signal
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from audit.core.from_realization import (
    transfer_function_from_realization,
    zeros_poles_gain_from_realization,
)
from audit.core.from_transfer_function import realization_from_transfer_function
from audit.core.from_zeros_poles_gain import realization_from_zeros_poles_gain
from audit.dynamics.discretization import discretize
from audit.errors import InvalidModelError, NumericalTroubleError
from audit.forms.catalogue import FORMS
from audit.core.realization import Realization
from audit.workflows.strategies import different_pairs, equivalent_pairs, lti_systems
from audit.structure.minimal import minimal_realization
from audit.verdict.compare import Options, compare_models, compare_pair, overall_verdict

RTOL = 1e-5  # the default audit tolerance (audit.evidence.record.DEFAULT_RTOL)
OPTS = Options(rtol=RTOL, escalation_seconds=2.0)

# Moderate systems: the properties must hold here; the stress campaign maps the limits.
MODERATE = dict(max_order=5, max_spread_decades=2.0, coordinate_condition=(1.0, 100.0))


def verdict(r1: Realization, r2: Realization) -> str:
    return compare_pair(r1, r2, options=OPTS).verdict


# ----------------------------------------------------------------- conversions
@given(lti_systems(**MODERATE))
def test_transfer_function_round_trip_keeps_equivalence(r: Realization) -> None:
    tf = transfer_function_from_realization(r)
    back = realization_from_transfer_function(tf.numerator, tf.denominator, r.sample_period)
    assert verdict(r, back) == "equivalent"


@given(lti_systems(**MODERATE))
def test_zeros_poles_gain_round_trip_keeps_equivalence(r: Realization) -> None:
    z = zeros_poles_gain_from_realization(r)
    pairs = lambda cells: [[[[v.real, v.imag] for v in c] for c in row] for row in cells]  # noqa: E731
    back = realization_from_zeros_poles_gain(pairs(z.zeros), pairs(z.poles), z.gain, r.sample_period)
    assert verdict(r, back) == "equivalent"


@given(lti_systems(**MODERATE, hidden=True))
def test_minimal_realization_keeps_equivalence(r: Realization) -> None:
    m = minimal_realization(r)
    assert m.order <= r.order
    assert verdict(r, m.realization) == "equivalent"


@pytest.mark.parametrize("form", sorted(FORMS))
@given(r=lti_systems(min_order=1, **MODERATE))
def test_every_form_producer_keeps_equivalence(form: str, r: Realization) -> None:
    try:
        conv = FORMS[form](r)
    except (NumericalTroubleError, InvalidModelError):
        assume(False)  # an honest refusal is allowed; the stress campaign counts them
        return
    assert verdict(r, conv.realization) == "equivalent"


@pytest.mark.parametrize("ours, theirs", [("zero-order-hold", "zoh"), ("bilinear", "bilinear")])
@given(r=lti_systems(time_domain="continuous", **MODERATE))
def test_discretization_agrees_with_scipy(ours: str, theirs: str, r: Realization) -> None:
    mags = np.abs(r.poles())
    period = 0.2 / float(mags.max()) if mags.size and mags.max() > 0 else 0.2
    mine = discretize(r, period, method=ours)  # type: ignore[arg-type]
    ad, bd, cd, dd, _ = scipy.signal.cont2discrete((r.a, r.b, r.c, r.d), period, method=theirs)
    # independent: scipy.signal.cont2discrete
    assert verdict(mine, Realization.from_arrays(ad, bd, cd, dd, period)) == "equivalent"


# ---------------------------------------------------------------------- verdict
@given(equivalent_pairs(**MODERATE, hidden=True, near_cancellation=True, clustered=True,
                        stabilities=("stable", "unstable")))
def test_equivalent_by_construction_is_never_judged_different(pair) -> None:
    assert verdict(pair.first, pair.second) != "different"


@given(equivalent_pairs(**MODERATE))
def test_well_conditioned_equivalent_pairs_are_judged_equivalent(pair) -> None:
    assert verdict(pair.first, pair.second) == "equivalent"


@given(different_pairs(**MODERATE, relative_amount=(10 * RTOL, 0.5),
                       stabilities=("stable", "unstable")))
def test_different_by_construction_is_never_judged_equivalent(pair) -> None:
    assert verdict(pair.first, pair.second) != "equivalent"


@given(st.one_of(equivalent_pairs(**MODERATE),
                 different_pairs(**MODERATE, relative_amount=(RTOL / 10, 0.1))))
def test_verdict_is_symmetric(pair) -> None:
    assert verdict(pair.first, pair.second) == verdict(pair.second, pair.first)


@settings(max_examples=4)  # writes files and runs the CLI three times per example
@given(equivalent_pairs(max_order=4, max_spread_decades=1.0), st.booleans(), st.data())
def test_command_line_verdict_does_not_depend_on_model_order(pair, third_differs: bool,
                                                              data: st.DataObject) -> None:
    from audit.cli import main
    from audit.documents.loading import document_from_realization, dump_model_document
    from audit.workflows.strategies import different_pair

    third = different_pair(pair.spec, relative_amount=1e-2, seed=pair.seed).second \
        if third_differs else pair.first
    models = [pair.first, pair.second, third]
    with tempfile.TemporaryDirectory() as tmp:
        paths = []
        for k, r in enumerate(models):
            path = Path(tmp) / f"m{k}.json"
            dump_model_document(document_from_realization(r, name=f"m{k}"), path)
            paths.append(str(path))
        statuses = set()
        perms = list(itertools.permutations(paths))
        for perm in data.draw(st.lists(st.sampled_from(perms), min_size=3, max_size=3, unique=True),
                              label="orders"):
            statuses.add(main(["compare", *perm, "--format", "json", "--escalation-seconds", "2"]))
    assert statuses == {1 if third_differs else 0}


@given(equivalent_pairs(max_order=4, max_spread_decades=1.0))
def test_library_verdict_does_not_depend_on_model_order(pair) -> None:
    from audit.workflows.strategies import different_pair

    third = different_pair(pair.spec, relative_amount=1e-2, seed=pair.seed).second
    results = {overall_verdict(compare_models(list(p), options=OPTS))
               for p in itertools.permutations([pair.first, pair.second, third])}
    assert results == {"different"}


# ------------------------------------------------------------------- nightly only
@pytest.mark.nightly
@given(equivalent_pairs(max_order=12, max_spread_decades=6.0, coordinate_condition=(1.0, 1e3),
                        hidden=True, near_cancellation=True, clustered=True, repeated=True,
                        stabilities=("stable", "unstable")))
def test_nightly_hard_equivalent_pairs_are_never_judged_different(pair) -> None:
    assert verdict(pair.first, pair.second) != "different"


@pytest.mark.nightly
@given(different_pairs(max_order=12, max_spread_decades=6.0, relative_amount=(10 * RTOL, 0.5),
                       hidden=True, clustered=True, stabilities=("stable", "unstable")))
def test_nightly_hard_different_pairs_are_never_judged_equivalent(pair) -> None:
    assert verdict(pair.first, pair.second) != "equivalent"
