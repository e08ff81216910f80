"""The published JSON Schemas under schemas/ are in sync with the code."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from audit.documents import schema_export
from audit.documents.schema import CLAIMED_FORMS, REPRESENTATIONS

SCHEMA_DIR = Path(__file__).resolve().parent.parent / "schemas"


@pytest.mark.parametrize("filename", sorted(schema_export.SCHEMAS))
def test_registered_schema_file_is_in_sync(filename: str) -> None:
    path = SCHEMA_DIR / filename
    assert path.is_file(), f"{path} missing: run python -m audit.documents.schema_export"
    expected = schema_export.render_schema(schema_export.SCHEMAS[filename]())
    assert path.read_text(encoding="utf-8") == expected, (
        f"{path} is out of date: run python -m audit.documents.schema_export")


def test_check_mode_on_the_repository_passes() -> None:
    assert schema_export.outdated_schemas(SCHEMA_DIR) == []
    assert schema_export.main(["--check", "--directory", str(SCHEMA_DIR)]) == 0


def test_check_mode_names_stale_and_missing_files(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert schema_export.main(["--check", "--directory", str(tmp_path)]) == 1
    assert "model-document.schema.json" in capsys.readouterr().err
    assert schema_export.main(["--directory", str(tmp_path)]) == 0
    assert schema_export.main(["--check", "--directory", str(tmp_path)]) == 0
    stale = tmp_path / "model-document.schema.json"
    stale.write_text(stale.read_text().replace('"lti_model"', '"lti_modell"', 1))
    assert schema_export.main(["--check", "--directory", str(tmp_path)]) == 1
    assert f"out of date: {stale}" in capsys.readouterr().err


def test_rendering_is_sorted_indented_and_ends_with_newline() -> None:
    text = schema_export.render_schema({"b": 1, "a": {"d": 2, "c": 3}})
    assert text == '{\n  "a": {\n    "c": 3,\n    "d": 2\n  },\n  "b": 1\n}\n'


def test_model_document_schema_content() -> None:
    schema = json.loads((SCHEMA_DIR / "model-document.schema.json").read_text())
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert schema["additionalProperties"] is False
    assert set(schema["required"]) == {"lti_model", "name", "sample_period"}
    assert schema["properties"]["lti_model"]["const"] == 1
    assert [alt["required"] for alt in schema["oneOf"]] == [[k] for k in REPRESENTATIONS]
    forms = schema["properties"]["claimed_form"]["anyOf"][0]["enum"]
    assert tuple(forms) == CLAIMED_FORMS
    for name in ("StateSpace", "TransferFunction", "ZerosPolesGain", "Signal", "Provenance"):
        assert schema["$defs"][name]["additionalProperties"] is False


def test_schema_accepts_and_rejects_like_the_validator() -> None:
    jsonschema = pytest.importorskip("jsonschema")
    schema = json.loads((SCHEMA_DIR / "model-document.schema.json").read_text())
    validator = jsonschema.Draft202012Validator(schema)
    good = {"lti_model": 1, "name": "conveyor drive", "sample_period": None,
            "state_space": {"a": [[-1.0]], "b": [[1.0]], "c": [[1.0]], "d": [[0.0]]}}
    assert validator.is_valid(good)
    assert not validator.is_valid({**good, "sample_period": -0.01})
    assert not validator.is_valid({**good, "lti_model": 2})
