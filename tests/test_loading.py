"""Loading model files (JSON, YAML, TOML, npz), writing them, and building realizations.

Reference data: the SLICOT TD04AD example (SLICOT/SLICOT-Reference, doc/TD04AD.html,
"Program Data" and "Program Results"): a 2x2 transfer matrix with common row denominator
s^3 + 6 s^2 + 11 s + 6 and its published minimal realization (4 decimals).
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from audit.documents.schema import ModelDocument, Provenance
from audit.errors import InvalidModelError, NumericalTroubleError
from audit.documents.loading import (
    document_from_realization,
    dump_model_document,
    load_model_document,
    load_realization,
    parse_model_document,
    realization_from_document,
)
from audit.core.realization import Realization

# ------------------------------------------------- SLICOT TD04AD example (published)
# Program Data, ROWCOL = 'R': index 3 3, row denominators, numerators UCOEFF(i, j, :).
TD04AD_DENOMINATOR = [1.0, 6.0, 11.0, 6.0]
TD04AD_NUMERATOR = [[[1.0, 6.0, 12.0, 7.0], [0.0, 1.0, 4.0, 3.0]],
                    [[0.0, 0.0, 1.0, 1.0], [1.0, 8.0, 20.0, 15.0]]]
# Program Results: minimal realization, order 3 (printed with 4 decimals).
TD04AD_A = [[0.5000, -0.8028, 0.9387], [4.4047, -2.3380, 2.5076],
            [-5.5541, 1.6872, -4.1620]]
TD04AD_B = [[-0.2000, -1.2500], [0.0000, -0.6097], [0.0000, 2.2217]]
TD04AD_C = [[0.0000, -0.8679, 0.2119], [0.0000, 0.0000, 0.9002]]
TD04AD_D = [[1.0, 0.0], [0.0, 1.0]]

POINTS = [0.1j, 1j, 3j, 10j, 0.5, -0.5 + 2j]


def transfer_from_polynomials(num: Any, den: Any, s: complex) -> np.ndarray:
    """Closed form: G_ij(s) = num_ij(s) / den_ij(s) by Horner (numpy.polyval)."""
    return np.array([[np.polyval(n, s) / np.polyval(d, s) for n, d in zip(nr, dr)]
                     for nr, dr in zip(num, den)])


def transfer_from_matrices(r: Realization, s: complex) -> np.ndarray:
    """Closed form: G(s) = C (sI - A)^-1 B + D, with a linear solve."""
    if r.order == 0:
        return r.d.astype(complex)
    return r.c @ np.linalg.solve(s * np.eye(r.order) - r.a, r.b) + r.d


def td04ad_state_space_document() -> dict[str, Any]:
    return {"lti_model": 1, "name": "SLICOT TD04AD published minimal realization",
            "sample_period": None,
            "state_space": {"a": TD04AD_A, "b": TD04AD_B, "c": TD04AD_C, "d": TD04AD_D},
            "provenance": {"source": "SLICOT-Reference doc/TD04AD.html, Program Results"}}


def td04ad_transfer_function_document() -> dict[str, Any]:
    den = [[TD04AD_DENOMINATOR, TD04AD_DENOMINATOR], [TD04AD_DENOMINATOR, TD04AD_DENOMINATOR]]
    return {"lti_model": 1, "name": "SLICOT TD04AD transfer matrix", "sample_period": None,
            "transfer_function": {"numerator": TD04AD_NUMERATOR, "denominator": den}}


YAML_TD04AD = """\
# SLICOT TD04AD published minimal realization, written as YAML
lti_model: 1
name: SLICOT TD04AD published minimal realization
sample_period: null
state_space:
  a:
    - [0.5000, -0.8028, 0.9387]
    - [4.4047, -2.3380, 2.5076]
    - [-5.5541, 1.6872, -4.1620]
  b: [[-0.2000, -1.2500], [0.0000, -0.6097], [0.0000, 2.2217]]
  c: [[0.0000, -0.8679, 0.2119], [0.0000, 0.0000, 0.9002]]
  d: [[1, 0], [0, 1]]
"""

TOML_TD04AD = """\
# SLICOT TD04AD published minimal realization, written as TOML (no sample_period:
# TOML has no null, so leaving it out means continuous time)
lti_model = 1
name = "SLICOT TD04AD published minimal realization"

[state_space]
a = [[0.5000, -0.8028, 0.9387], [4.4047, -2.3380, 2.5076], [-5.5541, 1.6872, -4.1620]]
b = [[-0.2000, -1.2500], [0.0000, -0.6097], [0.0000, 2.2217]]
c = [[0.0000, -0.8679, 0.2119], [0.0000, 0.0000, 0.9002]]
d = [[1, 0], [0, 1]]
"""


def write(tmp_path: Path, name: str, text: str | bytes) -> Path:
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def td04ad_in_every_format(tmp_path: Path) -> dict[str, Path]:
    paths = {
        "json": write(tmp_path, "td04ad.json", json.dumps(td04ad_state_space_document())),
        "yaml": write(tmp_path, "td04ad.yaml", YAML_TD04AD),
        "toml": write(tmp_path, "td04ad.toml", TOML_TD04AD),
    }
    npz = tmp_path / "td04ad.npz"
    np.savez(npz, a=np.array(TD04AD_A), b=np.array(TD04AD_B), c=np.array(TD04AD_C),
             d=np.array(TD04AD_D))
    paths["npz"] = npz
    return paths


# ------------------------------------------------------------------ reference checks
@pytest.mark.parametrize("fmt", ["json", "yaml", "toml", "npz"])
def test_published_realization_loads_to_the_published_transfer_matrix(
    tmp_path: Path, fmt: str
) -> None:
    r = load_realization(td04ad_in_every_format(tmp_path)[fmt])
    assert (r.order, r.n_inputs, r.n_outputs, r.sample_period) == (3, 2, 2, None)
    den = [[TD04AD_DENOMINATOR] * 2] * 2
    for s in POINTS:
        g = transfer_from_matrices(r, s)
        ref = transfer_from_polynomials(TD04AD_NUMERATOR, den, s)
        # SLICOT TD04AD example (doc/TD04AD.html): the published realization is printed to
        # 4 decimals, so it matches the published transfer matrix to about 1e-4 relative.
        np.testing.assert_allclose(g, ref, rtol=0, atol=2e-4 * np.max(np.abs(ref)))


def test_every_format_gives_the_same_matrices(tmp_path: Path) -> None:
    loaded = {fmt: load_realization(p) for fmt, p in td04ad_in_every_format(tmp_path).items()}
    for fmt, r in loaded.items():
        for key, ref in (("a", TD04AD_A), ("b", TD04AD_B), ("c", TD04AD_C), ("d", TD04AD_D)):
            # the same decimal literals parse to the same doubles in every format
            # (IEEE 754 round-to-nearest), so exact agreement is expected
            np.testing.assert_allclose(getattr(r, key), np.array(ref), rtol=0, atol=0,
                                       err_msg=f"{fmt}: {key}")
    assert loaded["npz"].name == "td04ad"
    assert loaded["json"].name == "SLICOT TD04AD published minimal realization"


def test_transfer_function_document_through_conversions() -> None:
    pytest.importorskip("audit.core.from_transfer_function")
    doc = parse_model_document(td04ad_transfer_function_document(), source="td04ad")
    r = realization_from_document(doc)
    assert r.name == "SLICOT TD04AD transfer matrix"
    assert (r.n_outputs, r.n_inputs, r.sample_period) == (2, 2, None)
    published = Realization.from_arrays(TD04AD_A, TD04AD_B, TD04AD_C, TD04AD_D)
    den = [[TD04AD_DENOMINATOR] * 2] * 2
    for s in POINTS:
        g = transfer_from_matrices(r, s)
        # closed form: polynomial ratio evaluated by numpy.polyval
        ref = transfer_from_polynomials(TD04AD_NUMERATOR, den, s)
        np.testing.assert_allclose(g, ref, rtol=1e-9, atol=1e-12)
        # SLICOT TD04AD Program Results (4 decimals)
        np.testing.assert_allclose(g, transfer_from_matrices(published, s), rtol=0,
                                   atol=2e-4 * np.max(np.abs(ref)))


def test_zeros_poles_gain_document_through_conversions() -> None:
    pytest.importorskip("audit.core.from_zeros_poles_gain")
    # supplier's valve actuator, two outputs: 4 (s + 10) / ((s + 4)^2 + 4.9^2) and
    # -2 / (s + 0.5); invented data
    doc = parse_model_document({
        "lti_model": 1, "name": "valve actuator", "sample_period": None,
        "zeros_poles_gain": {
            "zeros": [[[[-10.0, 0.0]]], [[]]],
            "poles": [[[[-4.0, 4.9], [-4.0, -4.9]]], [[[-0.5, 0.0]]]],
            "gain": [[4.0], [-2.0]]}}, source="valve")
    r = realization_from_document(doc)
    assert (r.n_outputs, r.n_inputs) == (2, 1)
    for s in POINTS:
        ref = np.array([[4.0 * (s + 10.0) / ((s + 4.0 - 4.9j) * (s + 4.0 + 4.9j))],
                        [-2.0 / (s + 0.5)]])
        # closed form, common practice, no source: k * prod(s - z) / prod(s - p)
        np.testing.assert_allclose(transfer_from_matrices(r, s), ref, rtol=1e-9, atol=1e-12)


def test_discrete_transfer_function_keeps_its_sample_period() -> None:
    pytest.importorskip("audit.core.from_transfer_function")
    doc = parse_model_document({
        "lti_model": 1, "name": "conveyor drive, discrete speed loop", "sample_period": 0.002,
        "transfer_function": {"numerator": [[[0.0, 0.0, 0.5]]],  # leading zeros allowed
                              "denominator": [[[1.0, -1.2, 0.35]]]}}, source="conveyor")
    r = realization_from_document(doc)
    assert r.sample_period == pytest.approx(0.002, rel=1e-15)  # copied, not computed
    z = np.exp(0.3j)
    # closed form: 0.5 / (z^2 - 1.2 z + 0.35)
    np.testing.assert_allclose(transfer_from_matrices(r, z)[0, 0],
                               0.5 / (z * z - 1.2 * z + 0.35), rtol=1e-9, atol=0)


def test_order_zero_document_gives_order_zero_realization() -> None:
    doc = parse_model_document({
        "lti_model": 1, "name": "valve actuator, static gain", "sample_period": 0.01,
        "state_space": {"a": [], "b": [], "c": [[], []], "d": [[2.5], [0.1]]}},
        source="gain")
    r = realization_from_document(doc)
    assert (r.order, r.n_outputs, r.n_inputs, r.sample_period) == (0, 2, 1, 0.01)
    assert r.a.shape == (0, 0) and r.b.shape == (0, 1) and r.c.shape == (2, 0)
    np.testing.assert_allclose(r.d, [[2.5], [0.1]], rtol=0, atol=0)  # copied as written


# --------------------------------------------------------------------- file problems
@pytest.mark.parametrize(
    ("filename", "content", "expected"),
    [
        pytest.param("drive.txt", "{}", "drive.txt: unsupported file type '.txt'; expected "
                     "one of .json, .yaml, .yml, .toml, .npz", id="unsupported-suffix"),
        pytest.param("drive.json", b"\xff\xfe{", "drive.json: is not UTF-8 text",
                     id="not-utf8"),
        pytest.param("drive.json", '{\n  "lti_model": 1,\n  "name": "x"\n  "sample_period": 1\n}',
                     "drive.json: JSON syntax error at line 4, column 3: Expecting ',' "
                     "delimiter", id="json-syntax"),
        pytest.param("drive.yaml", "lti_model: 1\nname: [unclosed\n",
                     "drive.yaml: YAML syntax error at line 3, column 1: while parsing a flow "
                     "sequence, expected ',' or ']'", id="yaml-syntax"),
        pytest.param("drive.toml", "lti_model = 1\nname = \n",
                     "drive.toml: TOML syntax error: Invalid value (at line 2, column 8)",
                     id="toml-syntax"),
        pytest.param("drive.json", "[1, 2, 3]",
                     "drive.json: is not an lti-audit model document (expected a mapping with "
                     "an 'lti_model' key, got a list of 3 item(s))", id="json-list"),
        pytest.param("drive.yaml", "name: conveyor\nstate_space: {}\n",
                     "drive.yaml: is not an lti-audit model document (no 'lti_model' key)",
                     id="yaml-dict-without-lti-model"),
        pytest.param("drive.yaml", "just some text\n",
                     "drive.yaml: is not an lti-audit model document (expected a mapping with "
                     "an 'lti_model' key, got the string \"just some text\")", id="yaml-scalar"),
        pytest.param("drive.yaml", "", "drive.yaml: is not an lti-audit model document "
                     "(expected a mapping with an 'lti_model' key, got null)", id="yaml-empty"),
        pytest.param("drive.json", '{"lti_model": 1, "name": "a", "name": "b"}',
                     "drive.json: invalid JSON: duplicate key 'name' in one object",
                     id="json-duplicate-key"),
        pytest.param("drive.yaml", "lti_model: 1\nname: a\nname: b\n",
                     "drive.yaml: YAML error at line 3, column 1: duplicate key 'name'",
                     id="yaml-duplicate-key"),
        pytest.param("drive.yaml", "lti_model: 1\n---\nlti_model: 1\n",
                     "drive.yaml: YAML syntax error at line 2, column 1: expected a single "
                     "document in the stream, but found another document",
                     id="yaml-two-documents"),
        pytest.param("drive.json", json.dumps({
            "lti_model": 1, "name": "conveyor", "sample_period": None,
            "state_space": {"a": [[-1.0]], "b": [[1.0]], "c": [[1.0]], "d": [[0.0]]}}
        ).replace("-1.0", "NaN"), "drive.json: state_space.a[0][0]: NaN is not allowed",
            id="json-nan-token"),
        pytest.param("drive.json", json.dumps({
            "lti_model": 1, "name": "conveyor", "sample_period": None,
            "state_space": {"a": [[-1.0]], "b": [[1.0]], "c": [[1.0]], "d": [[0.0]]}}
        ).replace("-1.0", "-Infinity"), "drive.json: state_space.a[0][0]: infinity is not "
            "allowed", id="json-infinity-token"),
        pytest.param("drive.json", '{"lti_model": 1, "name": "x", "sample_period": 1e999, '
                     '"state_space": {"a": [], "b": [], "c": [], "d": [[1]]}}',
                     "drive.json: sample_period: must be a number of seconds > 0, or null "
                     "for continuous time (got Infinity)", id="json-overflowing-number"),
        pytest.param("drive.yaml", "lti_model: 1\nname: x\nsample_period: .nan\nstate_space:"
                     " {a: [], b: [], c: [], d: [[1]]}\n",
                     "drive.yaml: sample_period: must be a number of seconds > 0, or null for "
                     "continuous time (got NaN)", id="yaml-nan"),
        pytest.param("drive.toml", "lti_model = 1\nname = 'x'\n[state_space]\na = [[nan]]\n"
                     "b = [[1.0]]\nc = [[1.0]]\nd = [[0.0]]\n",
                     "drive.toml: state_space.a[0][0]: NaN is not allowed", id="toml-nan"),
    ],
)
def test_file_problems(tmp_path: Path, filename: str, content: str | bytes,
                       expected: str) -> None:
    path = write(tmp_path, filename, content)
    with pytest.raises(InvalidModelError) as info:
        load_model_document(path)
    message = str(info.value).replace(str(tmp_path) + os.sep, "")
    assert message.splitlines()[0].startswith(expected)


def test_missing_file_and_directory(tmp_path: Path) -> None:
    with pytest.raises(InvalidModelError, match=r"nothing\.json: file not found$"):
        load_model_document(tmp_path / "nothing.json")
    (tmp_path / "models.json").mkdir()
    with pytest.raises(InvalidModelError, match="is a directory, not a model file"):
        load_model_document(tmp_path / "models.json")


def test_unreadable_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # chmod 0 does not stop root, so the refusal is simulated
    path = write(tmp_path, "secret.json", "{}")

    def refuse(*args: object, **kwargs: object) -> int:
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(os, "open", refuse)
    with pytest.raises(InvalidModelError, match=r"secret\.json: cannot be read \(Permission denied\)"):
        load_model_document(path)


def test_yaml_exponent_without_dot_is_a_number(tmp_path: Path) -> None:
    # PyYAML follows YAML 1.1, where 1e-3 is a string; YAML 1.2 reads it as a float.
    path = write(tmp_path, "zone.yml", "lti_model: 1\nname: heated-enclosure zone\n"
                 "sample_period: 1e-3\nstate_space: {a: [[0.99]], b: [[2E-4]], c: [[1]], "
                 "d: [[0]]}\n")
    doc = load_model_document(path)
    assert doc.sample_period == pytest.approx(1e-3, rel=0, abs=0)  # exact decimal parse
    assert doc.state_space.b[0][0] == pytest.approx(2e-4, rel=0, abs=0)


def test_toml_without_sample_period_is_continuous_but_json_requires_it(tmp_path: Path) -> None:
    assert load_model_document(write(tmp_path, "m.toml", TOML_TD04AD)).sample_period is None
    doc = td04ad_state_space_document()
    del doc["sample_period"]
    with pytest.raises(InvalidModelError, match="sample_period: is required but missing"):
        load_model_document(write(tmp_path, "m.json", json.dumps(doc)))


def test_toml_discrete(tmp_path: Path) -> None:
    path = write(tmp_path, "m.toml", TOML_TD04AD.replace("lti_model = 1",
                                                         "lti_model = 1\nsample_period = 0.01"))
    assert load_model_document(path).sample_period == 0.01


def test_json_with_byte_order_mark(tmp_path: Path) -> None:
    path = write(tmp_path, "bom.json",
                 b"\xef\xbb\xbf" + json.dumps(td04ad_state_space_document()).encode())
    assert load_model_document(path).n_inputs == 2


# -------------------------------------------------------------------------------- npz
def test_npz_discrete_with_sample_period(tmp_path: Path) -> None:
    path = tmp_path / "conveyor_20ms.npz"
    np.savez(path, a=np.array([[0.9]]), b=np.array([[0.1]]), c=np.array([[1.0]]),
             d=np.array([[0.0]]), sample_period=np.float64(0.02))
    r = load_realization(path)
    assert (r.name, r.sample_period, r.order) == ("conveyor_20ms", 0.02, 1)


def test_npz_order_zero(tmp_path: Path) -> None:
    path = tmp_path / "gain.npz"
    np.savez(path, a=np.zeros((0, 0)), b=np.zeros((0, 2)), c=np.zeros((1, 0)),
             d=np.array([[1.0, -1.0]]))
    r = load_realization(path)
    assert (r.order, r.n_outputs, r.n_inputs) == (0, 1, 2)


@pytest.mark.parametrize(
    ("arrays", "expected"),
    [
        pytest.param({"a": [[1.0]], "b": [[1.0]], "c": [[1.0]]},
                     "arrays 'd' missing", id="missing-d"),
        pytest.param({"A": [[1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[1.0]]},
                     "(array names are lower case: a, b, c, d)", id="upper-case-names"),
        pytest.param({"a": [[1.0]], "b": [[1.0]], "c": [[1.0]], "d": [[1.0]], "e": [1.0]},
                     "unexpected array(s) 'e'", id="extra-array"),
        pytest.param({"a": [[1.0]], "b": [1.0], "c": [[1.0]], "d": [[1.0]]},
                     "array 'b' has shape (1,) but must be 2-D (states x inputs)",
                     id="one-dimensional-b"),
        pytest.param({"a": [[1j]], "b": [[1.0]], "c": [[1.0]], "d": [[1.0]]},
                     "array 'a' has dtype complex128 but must hold real numbers", id="complex"),
        pytest.param({"a": [[1.0]], "b": [[1.0]], "c": [[1.0]], "d": [[1.0]],
                      "sample_period": [0.1, 0.2]},
                     "array 'sample_period' must be one real number of seconds > 0",
                     id="sample-period-vector"),
        pytest.param({"a": [[1.0]], "b": [[1.0]], "c": [[1.0]], "d": [[1.0]],
                      "sample_period": -0.1},
                     "sample_period: must be a number of seconds > 0, or null for continuous "
                     "time (got -0.1)", id="sample-period-negative"),
        pytest.param({"a": [[1.0, 0.0]], "b": [[1.0]], "c": [[1.0]], "d": [[1.0]]},
                     "state_space.a: is 1x2 but must be square", id="a-not-square"),
        pytest.param({"a": [[np.nan]], "b": [[1.0]], "c": [[1.0]], "d": [[1.0]]},
                     "state_space.a[0][0]: NaN is not allowed", id="nan"),
    ],
)
def test_npz_problems(tmp_path: Path, arrays: dict[str, Any], expected: str) -> None:
    path = tmp_path / "valve.npz"
    np.savez(path, **{k: np.array(v) for k, v in arrays.items()})
    with pytest.raises(InvalidModelError) as info:
        load_model_document(path)
    assert str(info.value).startswith(f"{path}: ")
    assert expected in str(info.value)


def test_npz_pickled_object_array_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "valve.npz"
    np.savez(path, a=np.array([[1.0]]), b=np.array([[1.0]]), c=np.array([[1.0]]),
             d=np.array([[{"x": 1}]], dtype=object))
    with pytest.raises(InvalidModelError, match="array 'd' holds Python objects; pickled arrays are refused"):
        load_model_document(path)


def test_npz_that_is_not_an_archive(tmp_path: Path) -> None:
    path = write(tmp_path, "valve.npz", b"not a zip file")
    with pytest.raises(InvalidModelError, match="valve.npz: is not a readable .npz archive"):
        load_model_document(path)


# ---------------------------------------------------------- writing and round trips
def test_dump_refuses_to_overwrite_and_leaves_no_temporary_files(tmp_path: Path) -> None:
    doc = parse_model_document(td04ad_state_space_document(), source="td04ad")
    target = tmp_path / "out.json"
    assert dump_model_document(doc, target) == target
    with pytest.raises(FileExistsError, match="already exists; pass overwrite=True"):
        dump_model_document(doc, target)
    renamed = doc.model_copy(update={"name": "renamed"})
    dump_model_document(renamed, target, overwrite=True)
    assert load_model_document(target).name == "renamed"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.json"]


def test_dump_then_load_is_the_same_document(tmp_path: Path) -> None:
    data = td04ad_state_space_document() | {
        "inputs": [{"name": "u1", "unit": "V"}, {"name": "u2"}], "claimed_form": "staircase"}
    doc = parse_model_document(data, source="td04ad")
    path = dump_model_document(doc, tmp_path / "td04ad.json")
    again = load_model_document(path)
    assert again == doc
    text = path.read_text()
    assert '"sample_period": null' in text
    assert text.endswith("\n")
    assert "[0.5, -0.8028, 0.9387]" in text  # one matrix row per line


@settings(max_examples=30, deadline=None)
@given(data=st.data())
def test_realization_round_trip_is_lossless(tmp_path_factory: pytest.TempPathFactory,
                                            data: st.DataObject) -> None:
    n = data.draw(st.integers(0, 4), label="states")
    m = data.draw(st.integers(1, 2), label="inputs")
    p = data.draw(st.integers(1, 2), label="outputs")
    # every value a document accepts: 0 and magnitudes in [MIN_MAGNITUDE, MAX_MAGNITUDE]
    finite = st.one_of(st.just(0.0), st.floats(1e-150, 1e150), st.floats(-1e150, -1e-150))

    def matrix(rows: int, cols: int, label: str) -> np.ndarray:
        values = data.draw(st.lists(finite, min_size=rows * cols, max_size=rows * cols),
                           label=label)
        return np.array(values, dtype=float).reshape(rows, cols)

    period = data.draw(st.one_of(st.none(), st.floats(1e-9, 1e3)), label="sample period")
    r = Realization.from_arrays(matrix(n, n, "A"), matrix(n, m, "B"), matrix(p, n, "C"),
                                matrix(p, m, "D"), period)
    doc = document_from_realization(r, name="heated-enclosure zone (round trip)")
    path = dump_model_document(doc, tmp_path_factory.mktemp("rt") / "zone.json")
    back = load_realization(path)
    assert back.sample_period == r.sample_period  # None or the identical double
    for key in "abcd":
        # lossless serialization: JSON floats are written with repr (shortest round-trip
        # representation, Python float spec), so the doubles come back bit for bit
        np.testing.assert_allclose(getattr(back, key), getattr(r, key), rtol=0, atol=0)


def test_document_from_realization_with_form_and_provenance() -> None:
    r = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[0.0]], 0.5)
    doc = document_from_realization(
        r, name="valve actuator", claimed_form="observable_companion",
        provenance=Provenance(source="supplier letter", notes="ZOH at 2 Hz"))
    assert isinstance(doc, ModelDocument)
    assert (doc.claimed_form, doc.provenance.source, doc.sample_period) == (
        "observable_companion", "supplier letter", 0.5)
    doc2 = document_from_realization(r, name="valve actuator",
                                     provenance={"source": "supplier letter"})
    assert doc2.provenance.notes is None


def test_document_from_realization_rejects_bad_arguments() -> None:
    r = Realization.from_arrays([[-2.0]], [[1.0]], [[3.0]], [[0.0]])
    with pytest.raises(InvalidModelError, match="claimed_form: expected"):
        document_from_realization(r, name="valve", claimed_form="diagonal")  # type: ignore[arg-type]
    with pytest.raises(InvalidModelError, match="name: must not be empty"):
        document_from_realization(r, name="")
    with pytest.raises(InvalidModelError, match=r"provenance\.author: unknown key"):
        document_from_realization(r, name="valve", provenance={"author": "me"})


def test_failing_conversion_becomes_numerical_trouble(monkeypatch: pytest.MonkeyPatch) -> None:
    from_transfer_function = pytest.importorskip("audit.core.from_transfer_function")

    def broken(*args: Any, **kwargs: Any) -> Realization:
        raise np.linalg.LinAlgError("singular matrix")

    monkeypatch.setattr(from_transfer_function, "realization_from_transfer_function", broken)
    doc = parse_model_document(td04ad_transfer_function_document(), source="td04ad")
    with pytest.raises(NumericalTroubleError,
                       match="converting the transfer function to state space failed"):
        realization_from_document(doc)


def test_conversion_with_wrong_size_is_caught(monkeypatch: pytest.MonkeyPatch) -> None:
    from_transfer_function = pytest.importorskip("audit.core.from_transfer_function")
    monkeypatch.setattr(from_transfer_function, "realization_from_transfer_function",
                        lambda *a, **k: Realization.from_arrays([], [], [], [[1.0]]))
    doc = parse_model_document(td04ad_transfer_function_document(), source="td04ad")
    with pytest.raises(NumericalTroubleError, match="gave 1 output"):
        realization_from_document(doc)
