"""The output rule and the plain-text helpers (audit.reports.safe_output), and YAML 1.2 reading."""

from __future__ import annotations

import math
import os
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from audit.documents.loading import _parse_yaml
from audit.reports.safe_output import (
    OutputRefusedError,
    markdown_text,
    new_output_directory,
    path_inside,
    terminal_text,
    write_output_file,
    xml_text,
)


# ------------------------------------------------------------------ YAML 1.2
# Expected values: YAML 1.2.2 specification, section 10.3.2 "Tag Resolution" (core
# schema) -- base-60, yes/no, '_' separators and timestamps are YAML 1.1 only.
@pytest.mark.parametrize("text, expected", [
    ("1:30", "1:30"), ("yes", "yes"), ("off", "off"), ("1_000", "1_000"),
    ("2001-12-14", "2001-12-14"), ("0b101", "0b101"), ("0755", 755), ("0o17", 15),
    ("0x1F", 31), ("-12", -12), ("1e-3", 1e-3), ("-2E+5", -2e5), (".5", 0.5), ("1.", 1.0),
    (".inf", math.inf), ("-.Inf", -math.inf), ("~", None), ("Null", None), ("TRUE", True),
    ("False", False), ("=", "="),
])
def test_yaml_scalars_follow_the_1_2_core_schema(text: str, expected: object) -> None:
    got = _parse_yaml(f"v: {text}\n", "t.yaml")["v"]
    assert got == expected and type(got) is type(expected)


def test_yaml_base_60_sample_period_is_refused_with_the_value(tmp_path: Path) -> None:
    from audit.errors import InvalidModelError
    from audit.documents.loading import load_model_document

    path = tmp_path / "belt.yaml"
    path.write_text("lti_model: 1\nname: belt\nsample_period: 1:30\n"
                    "state_space: {a: [[0.5]], b: [[1]], c: [[1]], d: [[0]]}\n")
    with pytest.raises(InvalidModelError, match=r'sample_period: .*got the string "1:30"'):
        load_model_document(path)


# ------------------------------------------------------------- output rule
def test_write_output_file_rule(tmp_path: Path) -> None:
    target = tmp_path / "r.txt"
    write_output_file(target, "one")
    with pytest.raises(OutputRefusedError, match="exists already"):
        write_output_file(target, "two")
    write_output_file(target, "two", overwrite=True)
    assert target.read_text() == "two"
    victim = tmp_path / "victim.txt"
    victim.write_text("keep")
    os.symlink(victim, tmp_path / "link.txt")
    with pytest.raises(OutputRefusedError, match="symbolic link"):
        write_output_file(tmp_path / "link.txt", "x", overwrite=True)
    with pytest.raises(OutputRefusedError, match="does not exist"):
        write_output_file(tmp_path / "no" / "r.txt", "x")
    with pytest.raises(OutputRefusedError, match="input of this run"):
        write_output_file(victim, "x", overwrite=True, protected=[victim])
    assert victim.read_text() == "keep"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["link.txt", "r.txt", "victim.txt"]


def test_new_output_directory_and_path_inside(tmp_path: Path) -> None:
    new_output_directory(tmp_path / "a")
    (tmp_path / "a" / "f").write_text("x")
    with pytest.raises(OutputRefusedError, match="not empty"):
        new_output_directory(tmp_path / "a")
    assert path_inside(tmp_path, "a/f") == tmp_path / "a" / "f"
    for bad in ("../x", "/etc/passwd", "a/../../x", "", "a\\..\\x"):
        with pytest.raises(OutputRefusedError):
            path_inside(tmp_path / "a", bad)
    os.symlink("/etc", tmp_path / "a" / "out")
    with pytest.raises(OutputRefusedError, match="outside its folder"):
        path_inside(tmp_path / "a", "out/passwd")


# -------------------------------------------------------------- plain text
@given(st.text())
def test_xml_text_always_gives_well_formed_xml(text: str) -> None:
    # ElementTree does the escaping of <, & and quotes; xml_text removes what cannot be
    # carried at all (XML 1.0, 5th ed., section 2.2 "Char"); the parser is the judge.
    root = ET.Element("a", b=xml_text(text))
    root.text = xml_text(text)
    ET.fromstring(ET.tostring(root, encoding="unicode"))


@given(st.text())
def test_terminal_text_has_no_control_characters(text: str) -> None:
    out = terminal_text(text)
    assert not any((ord(c) < 32 and c not in "\t\n") or 127 <= ord(c) < 160 for c in out)


@given(st.text())
def test_markdown_text_is_one_line_without_raw_markup(text: str) -> None:
    out = markdown_text(text)
    assert "\n" not in out
    for ch in "<>[]`|*_":
        # every markup character is preceded by an odd number of backslashes
        k = out.find(ch)
        while k != -1:
            run = len(out[:k]) - len(out[:k].rstrip("\\"))
            assert run % 2 == 1, (ch, out)
            k = out.find(ch, k + 1)
