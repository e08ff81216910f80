"""Model document validation: one table of bad inputs, good documents, properties.

Scenarios are invented (a conveyor drive, a heated-enclosure zone, a supplier's valve
actuator). Messages are the contract: key ones are checked word for word.
"""

from __future__ import annotations

import copy
import json
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from audit.documents.schema import (
    CLAIMED_FORMS,
    MAX_LISTED_PROBLEMS,
    MAX_ORDER,
    ModelDocument,
    format_path,
    validate_model_document,
)
from audit.errors import AuditError, InvalidModelError

NAN = float("nan")
INF = float("inf")


# ----------------------------------------------------------------- invented models
def conveyor(**changes: Any) -> dict[str, Any]:
    """Conveyor drive, speed loop: 2 states (current, speed), 1 input, 1 output."""
    doc: dict[str, Any] = {
        "lti_model": 1,
        "name": "conveyor drive, speed loop",
        "sample_period": None,
        "state_space": {
            "a": [[-50.0, -2.0], [4.0, -0.5]],
            "b": [[20.0], [0.0]],
            "c": [[0.0, 0.1]],
            "d": [[0.0]],
        },
    }
    doc.update(changes)
    return doc


def conveyor_ss(**matrices: Any) -> dict[str, Any]:
    doc = conveyor()
    doc["state_space"] = {**doc["state_space"], **matrices}
    return doc


def enclosure_4() -> dict[str, Any]:
    """Heated-enclosure zone: 4 states, 1 input, 1 output (for shape errors)."""
    a = [[-1.0 if i == j else 0.1 for j in range(4)] for i in range(4)]
    return conveyor(name="heated-enclosure zone", state_space={
        "a": a, "b": [[1.0], [0.0], [0.0], [0.0]], "c": [[0.0, 0.0, 0.0, 1.0]], "d": [[0.0]]})


def valve_tf(**changes: Any) -> dict[str, Any]:
    """Supplier's valve actuator: 2 outputs (position, flow), 1 input, transfer functions."""
    doc: dict[str, Any] = {
        "lti_model": 1,
        "name": "supplier valve actuator",
        "sample_period": None,
        "transfer_function": {
            "numerator": [[[40.0]], [[0.0, 3.0, 1.0]]],
            "denominator": [[[1.0, 8.0, 40.0]], [[1.0, 5.0, 6.0]]],
        },
    }
    doc.update(changes)
    return doc


def valve_tf_with(numerator: Any = None, denominator: Any = None) -> dict[str, Any]:
    doc = valve_tf()
    tf = doc["transfer_function"]
    if numerator is not None:
        tf["numerator"] = numerator
    if denominator is not None:
        tf["denominator"] = denominator
    return doc


def valve_zeros_poles_gain(**zeros_poles_gain: Any) -> dict[str, Any]:
    """Valve actuator as zeros-poles-gain: one channel, poles -4 +/- 4.9j, zero -10."""
    body = {"zeros": [[[[-10.0, 0.0]]]], "poles": [[[[-4.0, 4.9], [-4.0, -4.9]]]],
            "gain": [[4.0]]}
    body.update(zeros_poles_gain)
    return {"lti_model": 1, "name": "valve actuator (zeros_poles_gain)", "sample_period": 0.001,
            "zeros_poles_gain": body}


def without(doc: dict[str, Any], key: str) -> dict[str, Any]:
    doc = copy.deepcopy(doc)
    del doc[key]
    return doc


def big_a(n: int) -> list[list[float]]:
    row = [0.0] * n
    return [row] * n  # shared rows: cheap to build


# ----------------------------------------------------------- THE table of bad inputs
# (document, expected fragment of the first message line, exact first line?)
BAD_DOCUMENTS = [
    # --- state-space shapes
    pytest.param(enclosure_4() | {"state_space": {**enclosure_4()["state_space"],
                                                  "c": [[0.0, 0.0, 1.0]]}},
                 "state_space.c: has 3 columns but A is 4x4 (C must be outputs x states)",
                 True, id="c-wrong-columns"),
    pytest.param(conveyor_ss(b=[[20.0], [0.0], [1.0]]),
                 "state_space.b: has 3 rows but A is 2x2 (B must be states x inputs)",
                 True, id="b-wrong-rows"),
    pytest.param(conveyor_ss(b=[[20.0, 1.0], [0.0, 1.0]]),
                 "state_space.b: has 2 columns but D has 1 column (B must be states x inputs, "
                 "D outputs x inputs)", True, id="b-columns-disagree-with-d"),
    pytest.param(conveyor_ss(c=[[0.0, 0.1], [1.0, 0.0]]),
                 "state_space.c: has 2 rows but D has 1 row", False,
                 id="c-rows-disagree-with-d"),
    pytest.param(conveyor_ss(a=[[-50.0, -2.0, 0.0], [4.0, -0.5, 0.0]]),
                 "state_space.a: is 2x3 but must be square (states x states)", True,
                 id="a-not-square"),
    pytest.param(conveyor_ss(d=[]),
                 "state_space.d: is empty but must be outputs x inputs with at least one "
                 "output and one input", False, id="d-empty"),
    pytest.param(conveyor_ss(a=[], b=[[1.0]], c=[], d=[[2.0]]),
                 "state_space.b: is 1x1 but A is empty (order 0, a pure gain); write [] for B",
                 True, id="order0-b-not-empty"),
    pytest.param(conveyor_ss(a=[[-50.0, -2.0], [4.0]]),
                 "state_space.a: ragged rows: row 0 has 2 entries but row 1 has 1 (every row "
                 "of a matrix must have the same length)", True, id="a-ragged"),
    pytest.param(conveyor_ss(b=[20.0, 0.0]),
                 "state_space.b: expected a matrix written as a list of rows", False,
                 id="b-flat-list"),
    pytest.param(conveyor_ss(d=0.0),
                 "state_space.d: expected a list, got 0.0", True, id="d-scalar"),
    pytest.param(conveyor_ss(e=[[1.0]]),
                 "state_space.e: unknown key (expected one of: a, b, c, d)", True,
                 id="state-space-unknown-key"),
    pytest.param({**conveyor(), "state_space": {"a": [[-1.0]], "b": [[1.0]], "c": [[1.0]]}},
                 "state_space.d: is required but missing", False, id="d-missing"),
    pytest.param(conveyor(state_space=[[1.0]]),
                 "state_space: expected an object", False, id="state-space-not-object"),
    # --- numbers
    pytest.param(enclosure_4() | {"state_space": {**enclosure_4()["state_space"],
                                                  "a": [[-1.0, 0, 0, 0], [0, -1.0, NAN, 0],
                                                        [0, 0, -1.0, 0], [0, 0, 0, -1.0]]}},
                 "state_space.a[1][2]: NaN is not allowed", True, id="a-nan"),
    pytest.param(conveyor_ss(d=[[INF]]),
                 "state_space.d[0][0]: infinity is not allowed", True, id="d-infinity"),
    pytest.param(conveyor_ss(b=[[20.0], [-INF]]),
                 "state_space.b[1][0]: infinity is not allowed", True, id="b-minus-infinity"),
    pytest.param(conveyor_ss(a=[["-50.0", -2.0], [4.0, -0.5]]),
                 'state_space.a[0][0]: expected a number, got the string "-50.0"', True,
                 id="a-string-number"),
    pytest.param(conveyor_ss(c=[[0.0, True]]),
                 "state_space.c[0][1]: expected a number, got true", True, id="c-boolean"),
    pytest.param(conveyor_ss(d=[[10**400]]),
                 "state_space.d[0][0]: a 401-digit integer is too large for a double-precision "
                 "number", True, id="integer-overflows-double"),
    pytest.param(conveyor_ss(d=[[None]]),
                 "state_space.d[0][0]: expected a number, got null", True, id="d-null-entry"),
    # --- transfer functions
    pytest.param(valve_tf_with(numerator=[[[40.0], [1.0]], [[1.0], [1.0]]],
                               denominator=[[[1.0, 8.0, 40.0], [0.0, 1.0, 2.0]],
                                            [[1.0, 1.0], [1.0, 1.0]]]),
                 "transfer_function.denominator[0][1]: leading coefficient is 0 (the highest "
                 "power must have a non-zero coefficient)", True, id="tf-leading-zero"),
    pytest.param(valve_tf_with(numerator=[[[40.0]], [[1.0, 0.0, 3.0, 1.0]]]),
                 "transfer_function[1][0]: improper (numerator degree 3 > denominator degree "
                 "2); lti-audit handles proper models only", True, id="tf-improper"),
    pytest.param(valve_tf_with(numerator=[[[40.0]], [[]]]),
                 "transfer_function.numerator[1][0]: is empty (write [0.0] for a channel "
                 "with no transmission)", True, id="tf-empty-numerator"),
    pytest.param(valve_tf_with(denominator=[[[1.0, 8.0, 40.0]], []]),
                 "transfer_function.denominator[1]: is empty; each output row needs one "
                 "entry per input", True, id="tf-empty-output-row"),
    pytest.param(valve_tf_with(denominator=[[[1.0, 8.0, 40.0]], [[]]]),
                 "transfer_function.denominator[1][0]: is empty", False,
                 id="tf-empty-denominator"),
    pytest.param(valve_tf_with(denominator=[[[1.0, 8.0, 40.0]], [[0.0, 0.0]]]),
                 "transfer_function.denominator[1][0]: all coefficients are 0", False,
                 id="tf-zero-denominator"),
    pytest.param(valve_tf_with(denominator=[[[1.0, 8.0, 40.0]]]),
                 "transfer_function.denominator: is 1x1 (outputs x inputs) but numerator is "
                 "2x1; both are indexed [output][input]", True, id="tf-shape-mismatch"),
    pytest.param(valve_tf_with(numerator=[[[40.0], [1.0]], [[1.0]]]),
                 "transfer_function.numerator: ragged rows", False, id="tf-ragged"),
    pytest.param(valve_tf_with(numerator=[]),
                 "transfer_function.numerator: is empty; expected one row per output", False,
                 id="tf-empty-table"),
    pytest.param(valve_tf_with(numerator=[[40.0], [1.0]]),
                 "transfer_function.numerator[0][0]: expected a list of coefficients "
                 "(descending powers), got 40.0", True,
                 id="tf-missing-nesting-level"),
    pytest.param(valve_tf_with(numerator=[[[1.0]], [[1.0]]],
                               denominator=[[[1.0] + [0.0] * 1500], [[1.0] + [0.0] * 600]]),
                 f"transfer_function.denominator: degrees sum to 2100, above the limit "
                 f"MAX_ORDER = {MAX_ORDER} states", True, id="tf-oversize"),
    # --- zeros, poles, gain
    pytest.param(valve_zeros_poles_gain(zeros=[[[[-10.0, 0.0], [-20.0, 0.0], [-30.0, 0.0]]]]),
                 "zeros_poles_gain[0][0]: improper (3 zeros > 2 poles); lti-audit handles "
                 "proper models only", True, id="zeros_poles_gain-improper"),
    pytest.param(valve_zeros_poles_gain(poles=[[[[-4.0, 4.9], [-4.0, -4.8]]]]),
                 "zeros_poles_gain.poles[0][0][0]: [-4.0, 4.9] has no complex-conjugate "
                 "partner [-4.0, -4.9]", False, id="zeros_poles_gain-unpaired-pole"),
    pytest.param(valve_zeros_poles_gain(zeros=[[[[-10.0]]]]),
                 "zeros_poles_gain.zeros[0][0][0]: expected a complex number as an [re, im] "
                 "pair", False, id="zeros_poles_gain-not-a-pair"),
    pytest.param(valve_zeros_poles_gain(zeros=[[[-10.0]]]),
                 "zeros_poles_gain.zeros[0][0][0]: expected a complex number as an [re, im] "
                 "pair, got -10.0 (write [-2.0, 0.0] for the real value -2)", True,
                 id="zeros_poles_gain-bare-real"),
    pytest.param(valve_zeros_poles_gain(gain=[[4.0, 1.0]]),
                 "zeros_poles_gain.gain: is 1x2 (outputs x inputs) but zeros is 1x1", False,
                 id="zeros_poles_gain-gain-shape"),
    pytest.param(valve_zeros_poles_gain(zeros=[[[]]], poles=[[[[-1.0, 0.0]] * (MAX_ORDER + 1)]]),
                 f"zeros_poles_gain.poles: {MAX_ORDER + 1} poles in all, above the limit "
                 f"MAX_ORDER = {MAX_ORDER} states", True, id="zeros_poles_gain-oversize"),
    # --- sample period
    pytest.param(conveyor(sample_period=-0.01),
                 "sample_period: must be a number of seconds > 0, or null for continuous "
                 "time (got -0.01)", True, id="sample-period-negative"),
    pytest.param(conveyor(sample_period=0),
                 "sample_period: must be a number of seconds > 0, or null for continuous "
                 "time (got 0)", True, id="sample-period-zero"),
    pytest.param(conveyor(sample_period="0.01"),
                 'sample_period: must be a number of seconds > 0, or null for continuous '
                 'time (got the string "0.01")', True, id="sample-period-string"),
    pytest.param(conveyor(sample_period=10**400),
                 "(got a 401-digit integer)", False, id="sample-period-integer-overflow"),
    pytest.param(conveyor(sample_period=NAN),
                 "(got NaN)", False, id="sample-period-nan"),
    pytest.param(without(conveyor(), "sample_period"),
                 "sample_period: is required but missing (write null for continuous time or "
                 "the sample period in seconds)", True, id="sample-period-missing"),
    # --- document level
    pytest.param(without(conveyor(), "lti_model"),
                 "is not an lti-audit model document (no 'lti_model' key)", True,
                 id="no-lti-model-key"),
    pytest.param([conveyor()],
                 "is not an lti-audit model document (expected a mapping with an 'lti_model' "
                 "key, got a list of 1 item(s))", True, id="not-a-mapping"),
    pytest.param(conveyor(lti_model=2),
                 "lti_model: must be 1 (the document version this lti-audit reads), got 2",
                 True, id="lti-model-version-2"),
    pytest.param(conveyor(lti_model=True),
                 "lti_model: must be 1", False, id="lti-model-true"),
    pytest.param(without(conveyor(), "state_space"),
                 "no model given: expected exactly one of 'state_space', 'transfer_function' "
                 "or 'zeros_poles_gain'", True, id="no-representation"),
    pytest.param(conveyor(state_space=None),
                 "no model given", False, id="representation-null"),
    pytest.param(conveyor(transfer_function=valve_tf()["transfer_function"]),
                 "2 representations given (state_space, transfer_function); a document "
                 "holds exactly one of", False, id="two-representations"),
    pytest.param(without(conveyor(), "state_space") | {"state_spce": {}},
                 "(unknown key 'state_spce' looks like a misspelling)", False,
                 id="misspelt-representation"),
    pytest.param(conveyor(sampel_period=0.1),
                 "sampel_period: unknown key (expected one of: lti_model, name, "
                 "sample_period,", False, id="unknown-top-level-key"),
    pytest.param(conveyor(name=""),
                 "name: must not be empty", True, id="name-empty"),
    pytest.param(conveyor(name=42),
                 "name: expected a text string, got 42", True, id="name-not-string"),
    pytest.param(without(conveyor(), "name"),
                 "name: is required but missing", False, id="name-missing"),
    # --- names, forms, provenance
    pytest.param(conveyor(inputs=[{"name": "motor_voltage", "unit": "V"},
                                  {"name": "load_torque", "unit": "N m"}]),
                 "inputs: 2 names given but the model has 1 input", True,
                 id="inputs-count"),
    pytest.param(conveyor(outputs=[]),
                 "outputs: 0 names given but the model has 1 output", True,
                 id="outputs-count"),
    pytest.param(conveyor(states=[{"name": "current", "unit": "A"}]),
                 "states: 1 name given but the model has 2 states", True, id="states-count"),
    pytest.param(conveyor(states=[{"name": "speed"}, {"name": "speed"}]),
                 "states[1].name: 'speed' is already used by states[0] (names must be "
                 "unique)", True, id="duplicate-state-names"),
    pytest.param(valve_tf(states=[{"name": "x1"}]),
                 "states: state names are only meaningful for a state_space model", False,
                 id="states-for-transfer-function"),
    pytest.param(conveyor(inputs=[{"unit": "V"}]),
                 "inputs[0].name: is required but missing", True, id="input-without-name"),
    pytest.param(conveyor(inputs=[{"name": "u", "units": "V"}]),
                 "inputs[0].units: unknown key (expected one of: name, unit); did you mean "
                 "'unit'?", True, id="signal-unknown-key"),
    pytest.param(conveyor(claimed_form="diagonal"),
                 "claimed_form: expected 'controllable_companion', 'observable_companion', "
                 "'modal', 'jordan', 'balanced', 'kalman' or 'staircase', got the string "
                 '"diagonal"', True, id="claimed-form-unknown"),
    pytest.param(valve_tf(claimed_form="modal"),
                 "claimed_form: 'modal' describes state-space matrices, but this document "
                 "gives a transfer_function", True, id="claimed-form-for-transfer-function"),
    pytest.param(conveyor(provenance="from the supplier"),
                 "provenance: expected an object", False, id="provenance-not-object"),
    # --- size limit (rejected before the 4 million entries are looked at)
    pytest.param(conveyor_ss(a=big_a(MAX_ORDER + 1)),
                 f"state_space.a: has {MAX_ORDER + 1} rows (states), above the limit "
                 f"MAX_ORDER = {MAX_ORDER} states", True, id="state-space-oversize"),
]


@pytest.mark.parametrize(("document", "fragment", "exact"), BAD_DOCUMENTS)
def test_bad_document_is_rejected_with_a_located_message(
    document: Any, fragment: str, exact: bool
) -> None:
    with pytest.raises(InvalidModelError) as info:
        validate_model_document(document)
    first_line = str(info.value).splitlines()[0]
    if exact:
        assert first_line == fragment
    else:
        assert fragment in first_line
    # Never pydantic's raw dump.
    assert "validation error" not in str(info.value)
    assert "pydantic" not in str(info.value)
    assert isinstance(info.value, ValueError) and isinstance(info.value, AuditError)


def test_error_field_attribute_and_source_prefix() -> None:
    with pytest.raises(InvalidModelError) as info:
        validate_model_document(conveyor(sample_period=-1.0), source="drive.json")
    assert info.value.field == "sample_period"
    assert info.value.source == "drive.json"
    assert str(info.value).startswith("drive.json: sample_period: ")


def test_several_problems_one_per_line_most_relevant_first() -> None:
    doc = without(conveyor(sample_period=-1.0, inputs=[{"name": 3}]), "state_space")
    doc["state_spce"] = {}
    with pytest.raises(InvalidModelError) as info:
        validate_model_document(doc)
    lines = str(info.value).splitlines()
    assert lines[0].startswith("no model given")
    assert any(line.strip().startswith("state_spce: unknown key") for line in lines)
    assert any(line.strip().startswith("sample_period: must be") for line in lines)
    assert any(line.strip().startswith("inputs[0].name: expected a text string") for line in lines)
    assert len(lines) == 4


def test_many_problems_are_capped() -> None:
    a = [[NAN] * 30 for _ in range(30)]
    doc = conveyor_ss(a=a, b=[[0.0]] * 30, c=[[0.0] * 30])
    with pytest.raises(InvalidModelError) as info:
        validate_model_document(doc)
    lines = str(info.value).splitlines()
    assert len(lines) == MAX_LISTED_PROBLEMS + 1
    assert lines[-1].strip() == f"... and {900 - MAX_LISTED_PROBLEMS} more problem(s)"


def test_oversize_state_space_is_rejected_before_its_entries_are_read() -> None:
    # A size check must not validate 4 million entries (common practice, no source).
    # Checked without a clock (timed unit tests are flaky on shared machines): a NaN
    # planted in the oversize matrix must NOT be what the message is about.
    a = big_a(MAX_ORDER + 1)
    a[0][0] = NAN
    doc = conveyor_ss(a=a)
    with pytest.raises(InvalidModelError) as info:
        validate_model_document(doc)
    message = str(info.value)
    assert str(MAX_ORDER) in message
    assert "NaN" not in message


def test_order_at_the_limit_is_accepted() -> None:
    doc = valve_tf_with(numerator=[[[1.0]], [[1.0]]],
                        denominator=[[[1.0] + [0.0] * 1000], [[1.0] + [0.0] * 1000]])
    assert validate_model_document(doc).n_outputs == 2  # degrees sum to exactly MAX_ORDER


# ---------------------------------------------------------------------- good documents
def test_siso_state_space_continuous() -> None:
    doc = validate_model_document(conveyor(
        inputs=[{"name": "motor_voltage", "unit": "V"}],
        outputs=[{"name": "belt_speed", "unit": "m/s"}],
        states=[{"name": "current", "unit": "A"}, {"name": "speed", "unit": "rad/s"}],
        claimed_form=None,
        provenance={"source": "drive vendor datasheet", "notes": "speed loop only"}))
    assert doc.representation == "state_space"
    assert (doc.n_outputs, doc.n_inputs, doc.state_space.order) == (1, 1, 2)
    assert not doc.is_discrete
    assert doc.inputs[0].unit == "V" and doc.provenance.source == "drive vendor datasheet"


def test_mimo_discrete_state_space_with_integers() -> None:
    doc = validate_model_document({
        "lti_model": 1, "name": "heated-enclosure zones 1-2", "sample_period": 60,
        "state_space": {"a": [[1, 0, 0], [0, 1, 0], [0, 0, 1]],
                        "b": [[1, 0], [0, 1], [1, 1]],
                        "c": [[1, 0, 0], [0, 1, 1]], "d": [[0, 0], [0, 0]]},
        "inputs": [{"name": "heater_1", "unit": "W"}, {"name": "heater_2", "unit": "W"}],
        "outputs": [{"name": "zone_1"}, {"name": "zone_2"}],
        "claimed_form": "modal"})
    assert (doc.n_outputs, doc.n_inputs) == (2, 2)
    assert doc.is_discrete
    assert isinstance(doc.sample_period, float)
    assert all(isinstance(x, float) for row in doc.state_space.a for x in row)


@pytest.mark.parametrize(
    ("a", "b", "c"),
    [
        pytest.param([], [], [], id="all-bare-empty"),
        pytest.param([[]], [[]], [[]], id="one-empty-row"),
        pytest.param([], [], [[], []], id="numpy-tolist-spelling"),
        pytest.param([[]], [], [[], []], id="mixed"),
    ],
)
def test_order_zero_spellings(a: Any, b: Any, c: Any) -> None:
    doc = validate_model_document(conveyor(
        name="valve actuator, static gain", state_space={"a": a, "b": b, "c": c,
                                                         "d": [[2.5], [0.1]]}))
    assert (doc.state_space.order, doc.n_outputs, doc.n_inputs) == (0, 2, 1)


def test_transfer_function_mimo_and_pure_gain() -> None:
    doc = validate_model_document(valve_tf(outputs=[{"name": "position"},
                                                    {"name": "flow"}]))
    assert doc.representation == "transfer_function"
    assert (doc.n_outputs, doc.n_inputs) == (2, 1)
    gain = validate_model_document(valve_tf_with(
        numerator=[[[2.5]], [[0.0]]], denominator=[[[1.0]], [[4.0]]]))
    assert gain.n_outputs == 2


def test_transfer_function_numerator_leading_zeros_are_allowed() -> None:
    # numerator [0, 0, 0, 5] has degree 0, proper over a degree-2 denominator
    doc = validate_model_document(valve_tf_with(
        numerator=[[[0.0, 0.0, 0.0, 5.0]], [[1.0]]]))
    assert doc.transfer_function.numerator[0][0][-1] == 5.0


def test_zeros_poles_gain_discrete() -> None:
    doc = validate_model_document(valve_zeros_poles_gain(
        poles=[[[[-4.0, -4.9], [0.5, 0.0], [-4.0, 4.9]]]]))  # pairs in any order
    assert doc.representation == "zeros_poles_gain"
    assert doc.sample_period == 0.001


def test_zeros_poles_gain_pure_gain() -> None:
    doc = validate_model_document(valve_zeros_poles_gain(zeros=[[[]]], poles=[[[]]], gain=[[2.5]]))
    assert (doc.n_outputs, doc.n_inputs) == (1, 1)


def test_zero_gain_channel_may_list_extra_zeros() -> None:
    doc = validate_model_document(valve_zeros_poles_gain(zeros=[[[[-1.0, 0.0]] * 3]], gain=[[0.0]]))
    assert doc.n_inputs == 1


def test_model_document_is_immutable() -> None:
    doc = validate_model_document(conveyor())
    with pytest.raises(Exception):
        doc.name = "other"  # type: ignore[misc]


def test_claimed_forms_are_the_documented_ones() -> None:
    assert set(CLAIMED_FORMS) == {"controllable_companion", "observable_companion", "modal",
                                  "jordan", "balanced", "kalman", "staircase"}


def test_format_path() -> None:
    assert format_path(("state_space", "a", 1, 2)) == "state_space.a[1][2]"
    assert format_path(("transfer_function", 1, 0)) == "transfer_function[1][0]"
    assert format_path(()) == ""


def test_good_and_bad_documents_agree_with_the_published_schema() -> None:
    jsonschema = pytest.importorskip("jsonschema")
    from audit.documents.schema_export import model_document_schema

    validator = jsonschema.Draft202012Validator(model_document_schema())
    for good in (conveyor(), valve_tf(), valve_zeros_poles_gain()):
        validator.validate(good)
    for bad in (without(conveyor(), "sample_period"), conveyor(extra=1),
                conveyor(transfer_function=valve_tf()["transfer_function"])):
        assert not validator.is_valid(bad)


# ------------------------------------------------------------------------ properties
@st.composite
def state_space_shapes(draw: st.DrawFn) -> tuple[int, int, int]:
    n = draw(st.integers(0, 6), label="states")
    m = draw(st.integers(1, 3), label="inputs")
    p = draw(st.integers(1, 3), label="outputs")
    return n, m, p


def _matrix(rng: np.random.Generator, rows: int, cols: int) -> list[list[float]]:
    return rng.standard_normal((rows, cols)).tolist()


@settings(max_examples=40, deadline=None)
@given(shape=state_space_shapes(), seed=st.integers(0, 2**32 - 1))
def test_any_consistent_state_space_is_accepted(shape: tuple[int, int, int], seed: int) -> None:
    n, m, p = shape
    rng = np.random.default_rng(seed)
    doc = validate_model_document(conveyor(state_space={
        "a": _matrix(rng, n, n), "b": _matrix(rng, n, m), "c": _matrix(rng, p, n),
        "d": _matrix(rng, p, m)}))
    assert (doc.state_space.order, doc.n_inputs, doc.n_outputs) == (n, m, p)


@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.filter_too_much])
@given(data=st.data())
def test_one_wrong_dimension_names_the_matrix(data: st.DataObject) -> None:
    n = data.draw(st.integers(1, 5), label="states")
    m = data.draw(st.integers(1, 3), label="inputs")
    p = data.draw(st.integers(1, 3), label="outputs")
    shapes = {"a": (n, n), "b": (n, m), "c": (p, n)}
    key = data.draw(st.sampled_from(sorted(shapes)), label="broken matrix")
    axis = data.draw(st.integers(0, 1), label="axis")
    delta = data.draw(st.sampled_from([-1, 1]), label="delta")
    rows, cols = shapes[key]
    new = [rows + delta, cols] if axis == 0 else [rows, cols + delta]
    if min(new) < 1:
        new = [rows + 1, cols] if axis == 0 else [rows, cols + 1]
    shapes[key] = (new[0], new[1])
    rng = np.random.default_rng(0)
    ss = {k: _matrix(rng, *s) for k, s in shapes.items()} | {"d": _matrix(rng, p, m)}
    with pytest.raises(InvalidModelError) as info:
        validate_model_document(conveyor(state_space=ss))
    assert str(info.value).startswith(f"state_space.{key}: ")


def test_json_text_with_nan_token_is_rejected_with_its_path() -> None:
    # Python's json module accepts the non-standard NaN token; validation must not.
    text = json.dumps(conveyor()).replace("-0.5", "NaN")
    with pytest.raises(InvalidModelError) as info:
        validate_model_document(json.loads(text))
    assert str(info.value) == "state_space.a[1][1]: NaN is not allowed"


def test_direct_construction_still_validates() -> None:
    from pydantic import ValidationError

    with pytest.raises(ValidationError):
        ModelDocument.model_validate(conveyor(sample_period=-1.0))
