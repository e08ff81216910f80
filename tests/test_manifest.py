"""Claims manifests: validation messages, glob semantics, and the evaluation of claims.

Reference data: the models of fixtures/example_repo were derived with python-control
(tf2ss) and scipy (eig, cont2discrete) by fixtures/example_repo/generate_models.py, not
with lti-audit; other systems are built here with numpy by construction.
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import jsonschema
import numpy as np
import pytest
import scipy.signal
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from audit.errors import InvalidModelError
from audit.workflows.manifest import (
    ClaimsManifest,
    InvalidManifestError,
    evaluate_claims,
    glob_matches,
    load_claims_manifest,
    parse_claims_manifest,
)
from tests.systems import random_transform, realization_with_poles

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "fixtures" / "example_repo"
SCHEMA = json.loads((ROOT / "schemas" / "claims-manifest.schema.json").read_text())


def write_model(path: Path, a, b, c, d, period=None) -> str:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps({
        "lti_model": 1, "name": path.stem, "sample_period": period,
        "state_space": {"a": np.asarray(a).tolist(), "b": np.asarray(b).tolist(),
                        "c": np.asarray(c).tolist(), "d": np.asarray(d).tolist()}}))
    return path.name


def manifest(tmp_path: Path, text: str):
    p = tmp_path / "lti-audit.toml"
    p.write_text(text)
    return load_claims_manifest(p)


def claim(models: list[str], **kw) -> str:
    lines = ["[[claim]]", f"models = {json.dumps(models)}"]
    for k, v in kw.items():
        lines.append(f"{k} = {json.dumps(v) if not isinstance(v, str) or not v.startswith('{') else v}")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------- validation
BAD_MANIFESTS = [
    pytest.param('[[claim]]\nname = "refactor"\nmodels = ["a.json", "b.json"]\nexpect = "same"\n',
                 "m.toml: claim #1 ('refactor'), field expect: got 'same', expected "
                 "'equivalent', 'similar' or 'different'", id="unknown-expectation"),
    pytest.param('[[claim]]\nmodels = ["a.json", "b.json"]\nexpect = "equivalent"\nform = "modal"\n',
                 "m.toml: claim #1: says expect and form; a claim says exactly one of expect, "
                 "form, discretization", id="two-kinds"),
    pytest.param('[[claim]]\nmodels = ["a.json", "b.json"]\n',
                 "m.toml: claim #1: says none; a claim says exactly one of", id="no-kind"),
    pytest.param('[[claim]]\nmodels = ["a.json"]\nexpect = "similar"\n',
                 "m.toml: claim #1: expect = 'similar' needs at least two models, got 1",
                 id="one-model"),
    pytest.param('[[claim]]\nmodels = ["ok.json"]\nform = "modal"\n[[claim]]\nname = "x"\n'
                 'models = ["/etc/a.json"]\nform = "modal"\n',
                 "m.toml: claim #2 ('x'), field models: got the absolute path '/etc/a.json'; "
                 "expected a path relative to the manifest's directory", id="absolute-path"),
    pytest.param('[[claim]]\nmodels = ["a.json", "b.json"]\nexpect = "equivalent"\nrtol = 2.0\n',
                 "claim #1, field rtol: got 2.0, expected a relative tolerance between 0 and 1",
                 id="rtol-out-of-range"),
    pytest.param('[[claim]]\nmodels = ["a.json"]\ndiscretization = {method = "zero-order-hold", off = "c.json"}\n',
                 "claim #1, field discretization.off: unknown key (expected one of: method, of, "
                 "prewarp_frequency); did you mean 'of'?", id="discretization-typo"),
    pytest.param('[[claim]]\nmodels = ["a.json"]\ndiscretization = {method = "euler", of = "c.json"}\n',
                 "claim #1, field discretization.method: got 'euler' but one of these "
                 "discretization methods was expected: zero-order-hold (input held constant",
                 id="discretization-method"),
    pytest.param('[[claim]]\nmodels = ["a.json"]\ndiscretization = {method = "tustin", of = "c.json"}\n',
                 "claim #1, field discretization.method: got 'tustin' but one of these "
                 "discretization methods was expected: zero-order-hold", id="discretization-short-keyword"),
    pytest.param('[[claims]]\nmodels = ["a.json", "b.json"]\nexpect = "equivalent"\n',
                 "m.toml: claims: unknown key (expected one of: lti_audit_manifest, rtol, files, "
                 "claim, accept_hidden_instability); did you mean 'claim'?", id="plural-claims"),
    pytest.param('[files]\ninclude = "*.json"\n', "m.toml: files.include: expected an array, "
                 "got '*.json'", id="include-not-array"),
    pytest.param('lti_audit_manifest = 2\n', "m.toml: lti_audit_manifest: got 2, expected 1",
                 id="version"),
    pytest.param('[[claim]]\nmodels = []\nform = "modal"\n',
                 "m.toml: claim #1, field models: must list at least 1 entry", id="no-models"),
]


@pytest.mark.parametrize(("text", "message"), BAD_MANIFESTS)
def test_bad_manifest_messages(text: str, message: str) -> None:
    with pytest.raises(InvalidManifestError) as info:
        parse_claims_manifest(tomllib.loads(text), source="m.toml")
    assert message in str(info.value)
    assert isinstance(info.value, InvalidModelError) and isinstance(info.value, ValueError)


def test_file_level_problems(tmp_path: Path) -> None:
    with pytest.raises(InvalidManifestError, match="missing.toml: manifest not found"):
        load_claims_manifest(tmp_path / "missing.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text('[[claim]\nmodels = ["a"]\n')
    with pytest.raises(InvalidManifestError, match=r"bad.toml: TOML syntax error: .*line 1"):
        load_claims_manifest(bad)
    latin = tmp_path / "latin.toml"
    latin.write_bytes(b'# caf\xe9\n')
    with pytest.raises(InvalidManifestError, match="is not UTF-8 text"):
        load_claims_manifest(latin)


@pytest.mark.parametrize(("path", "pattern", "expected"), [
    ("speed.json", "*.json", True),
    ("models/a/speed.json", "*.json", True),            # no '/': any directory
    ("models/a/speed.json", "models/*.json", False),    # '*' stays in one level
    ("models/speed.json", "models/*.json", True),
    ("models/a/b/speed.json", "models/**/*.json", True),
    ("models/speed.json", "models/**/*.json", True),    # '**/' may match nothing
    ("drafts/x/y.json", "drafts/**", True),
    ("drafts/x/y.json", "drafts/", True),
    ("other/drafts/y.json", "drafts/**", False),        # anchored at the manifest
    ("models/speed.json", "/models/speed.json", True),
    ("models/speed.yaml", "models/speed.y?ml", True),
    ("models/speed.npz", "*.[jn]*", True),
])
def test_glob_semantics(path: str, pattern: str, expected: bool) -> None:
    # gitignore-like semantics, documented in glob_matches (from memory: git's gitignore docs)
    assert glob_matches(path, pattern) is expected


def test_example_manifest_follows_published_schema() -> None:
    data = tomllib.loads((EXAMPLE / "lti-audit.toml").read_text())
    jsonschema.validate(data, SCHEMA)
    bad = {"claim": [{"models": ["a", "b"], "expect": "equivalent", "form": "modal"}]}
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(bad, SCHEMA)
    assert SCHEMA["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert set(ClaimsManifest.model_json_schema(by_alias=True)["properties"]) == set(
        SCHEMA["properties"])


# ---------------------------------------------------------------- evaluation
def test_example_repository_claims_all_hold() -> None:
    results = evaluate_claims(load_claims_manifest(EXAMPLE / "lti-audit.toml"))
    assert [r.status for r in results] == ["holds"] * 5, [r.explanation for r in results]
    assert [r.kind for r in results] == ["equivalent", "similar", "form", "discretization",
                                        "different"]
    assert all(r.rtol == 1e-6 for r in results if r.kind != "form")   # manifest rtol
    assert results[2].rtol == 1e-9                                     # forms' own default
    json.dumps([r.as_dict() for r in results])
    # independent: scipy.signal.freqresp of both transfer functions on a dense grid
    w = np.concatenate([[0.0], np.logspace(-2, 3, 20000)])
    ref = json.loads((EXAMPLE / "models" / "pitch_axis_tf.json").read_text())["transfer_function"]
    new = json.loads((EXAMPLE / "models" / "pitch_axis_retuned.json").read_text())["transfer_function"]
    _, g1 = scipy.signal.freqresp((ref["numerator"][0][0], ref["denominator"][0][0]), w)
    _, g2 = scipy.signal.freqresp((new["numerator"][0][0], new["denominator"][0][0]), w)
    expected = np.abs(g1 - g2).max() / max(np.abs(g1).max(), np.abs(g2).max())
    # a dense grid is a lower bound of the supremum; 1 % for these smooth responses
    assert results[4].peak_relative_difference == pytest.approx(expected, rel=1e-2)


def test_failing_claims_explain_themselves(tmp_path: Path) -> None:
    models = EXAMPLE / "models"
    for name in ("pitch_axis_tf.json", "pitch_axis_ss.json", "pitch_axis_zero_order_hold_10ms.json",
                 "pitch_axis_retuned.json"):
        (tmp_path / name).write_bytes((models / name).read_bytes())
    m = manifest(tmp_path, "".join([
        claim(["pitch_axis_tf.json", "pitch_axis_retuned.json"], expect="equivalent"),
        claim(["pitch_axis_tf.json", "pitch_axis_ss.json"], expect="different"),
        claim(["pitch_axis_zero_order_hold_10ms.json"],
              discretization='{method = "bilinear", of = "pitch_axis_ss.json"}'),
        claim(["pitch_axis_ss.json"], form="modal"),
        claim(["pitch_axis_tf.json", "nowhere.json"], expect="equivalent"),
        claim(["pitch_axis_tf.json", "pitch_axis_zero_order_hold_10ms.json"], expect="equivalent"),
    ]))
    r = evaluate_claims(m)
    assert [x.status for x in r] == ["fails", "fails", "fails", "fails", "error", "error"]
    assert "does not have the same transfer function" in r[0].explanation
    assert r[0].diagnosis.get("moved_poles")
    assert "has the same transfer function" in r[1].explanation
    assert "look like a zero-order-hold discretization, not bilinear" in r[2].explanation
    assert "is not in modal form" in r[3].explanation
    assert r[4].explanation == "nowhere.json: file not found"
    assert "continuous-time but" in r[5].explanation


def test_tolerance_precedence(tmp_path: Path) -> None:
    # G2 = (1 + 1e-4) G1: relative peak difference 1e-4 / (1 + 1e-4) (closed form)
    a, b, c, d = [[-1.0]], [[1.0]], [[1.0]], [[0.0]]
    write_model(tmp_path / "g1.json", a, b, c, d)
    write_model(tmp_path / "g2.json", a, b, [[1.0001]], d)
    text = "rtol = 1e-3\n" + claim(["g1.json", "g2.json"], expect="equivalent") + claim(
        ["g1.json", "g2.json"], expect="equivalent", rtol=1e-5)
    r = evaluate_claims(manifest(tmp_path, text))
    assert [x.status for x in r] == ["holds", "fails"]
    assert [x.rtol for x in r] == [1e-3, 1e-5]
    assert r[1].peak_relative_difference == pytest.approx(1e-4 / 1.0001, rel=1e-6)
    r = evaluate_claims(manifest(tmp_path, text), rtol=1e-6)   # caller overrides the manifest
    assert [x.status for x in r] == ["fails", "fails"]


def test_similar_requires_minimal_realizations_of_equal_order(tmp_path: Path) -> None:
    a = np.array([[-1.0, 0.0], [0.0, -5.0]])
    b = np.array([[1.0], [1.0]])
    c = np.array([[1.0, 2.0]])
    d = np.zeros((1, 1))
    write_model(tmp_path / "ref.json", a, b, c, d)
    # an extra unobservable state (C has a zero there): same transfer function, order 3
    a3 = np.diag([-1.0, -5.0, -7.0])
    write_model(tmp_path / "nonmin.json", a3, np.vstack([b, [[1.0]]]), np.hstack([c, [[0.0]]]), d)
    # a reduced-order model with the same transfer function: 1/(s+1) + 2/(s+5) cannot be
    # order 1, so take an identical copy for the positive case
    write_model(tmp_path / "copy.json", a, b, c, d)
    text = claim(["ref.json", "nonmin.json"], expect="similar") + claim(
        ["ref.json", "nonmin.json"], expect="equivalent") + claim(["ref.json", "copy.json"],
                                                                  expect="similar")
    r = evaluate_claims(manifest(tmp_path, text))
    assert [x.status for x in r] == ["fails", "holds", "holds"]
    assert "order changed (2 -> 3)" in r[0].explanation
    assert r[2].details[0]["coordinate_change"] == "identical"


def test_similar_rejects_a_non_minimal_pair_of_equal_order(tmp_path: Path) -> None:
    # both order 2; the second has an unobservable mode and a different minimal part order
    write_model(tmp_path / "a.json", [[-1.0, 0.0], [0.0, -3.0]], [[1.0], [1.0]], [[1.0, 0.0]],
                [[0.0]])
    write_model(tmp_path / "b.json", [[-1.0, 0.0], [0.0, -4.0]], [[1.0], [1.0]], [[1.0, 0.0]],
                [[0.0]])
    r = evaluate_claims(manifest(tmp_path, claim(["a.json", "b.json"], expect="similar")))
    assert r[0].status == "fails"
    assert "not minimal" in r[0].explanation
    assert "hidden modes differ (-3 vs -4)" in r[0].explanation  # eigenvalues of A, by construction


def test_similar_is_not_decided_when_hidden_modes_agree(tmp_path: Path) -> None:
    # both order 2 with the same unobservable mode at -3, the second in other coordinates
    # (x2 = 2 x2): similar in exact arithmetic, but the staircase of the minimal parts
    # cannot show it, so the claim is reported as not decided, never as failing
    write_model(tmp_path / "a.json", [[-1.0, 0.0], [0.0, -3.0]], [[1.0], [1.0]], [[1.0, 0.0]],
                [[0.0]])
    write_model(tmp_path / "b.json", [[-1.0, 0.0], [0.0, -3.0]], [[1.0], [2.0]], [[1.0, 0.0]],
                [[0.0]])
    r = evaluate_claims(manifest(tmp_path, claim(["a.json", "b.json"], expect="similar")))
    assert r[0].status == "inconclusive"
    assert "not decided" in r[0].explanation and "FAILS" not in r[0].explanation


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_random_change_of_coordinates_is_similar(tmp_path: Path, data: st.DataObject) -> None:
    seed = data.draw(st.integers(0, 2**32 - 1), label="seed")
    n = data.draw(st.integers(1, 6), label="order")
    m = data.draw(st.integers(1, 2), label="inputs")
    p = data.draw(st.integers(1, 2), label="outputs")
    cond = data.draw(st.sampled_from([1.0, 10.0, 1e3]), label="cond(T)")
    rng = np.random.default_rng(seed)
    poles = [complex(-10 ** rng.uniform(-1, 1)) for _ in range(n)]
    r = realization_with_poles(rng, poles, m, p)
    t = random_transform(rng, n, cond)
    a2 = np.linalg.solve(t.T, (t @ r.a).T).T
    c2 = np.linalg.solve(t.T, r.c.T).T
    write_model(tmp_path / "r1.json", r.a, r.b, r.c, r.d)
    write_model(tmp_path / "r2.json", a2, t @ r.b, c2, r.d)
    res = evaluate_claims(manifest(tmp_path, claim(["r1.json", "r2.json"], expect="similar")))
    # closed form: any change of coordinates keeps the transfer function (Kailath 1980)
    assert res[0].status == "holds", res[0].explanation
