"""Hostile and malformed inputs through every front end (issue 12, deliverable 7).

Generated cases -- garbage bytes, truncated files, wrong types, extreme values, deep
nesting, huge integers, special files (FIFO, links to /dev/zero and /dev/urandom,
folders), archive bombs and malformed .npz archives, hostile names -- go through
``compare``, ``inspect``, ``convert``, ``check``, ``promote`` (in-process calls of
``audit.cli.main``) and the service (FastAPI TestClient on SQLite, and on PostgreSQL
when ``LTI_AUDIT_TEST_POSTGRES_URL`` is set). Each run must:

* end with exit status 2 (422/413 in the service) and a message naming the file,
* print no traceback and no "internal error",
* finish within a time limit (a SIGALRM guard raises in the test if it does not),
* write nothing outside its output folder and change no file that existed before.

Documents whose names are hostile but which are valid models are audited; their names
must reach every output format as plain text (Markdown, JUnit XML, terminal, HTML page).

The default run generates a little over 250 documents and takes about half a minute; the
nightly profile (``LTI_AUDIT_PROFILE=nightly``) adds many more random ones and a real
1.1 MB .npz that decompresses to 1.15 GB. Expected behaviour is "common practice, no
source": a refusal with the reason, never a crash.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import os
import random
import signal
import stat
import warnings
import xml.etree.ElementTree as ET
import zipfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from audit.cli import main

from .service_cluster import wait_done

NIGHTLY = os.environ.get("LTI_AUDIT_PROFILE") == "nightly"
#: Seconds one command may take on one hostile input before the case fails.
TIME_LIMIT = 20.0


# ------------------------------------------------------------------- helpers
class _Hang(BaseException):
    """Raised by the time guard (BaseException: the CLI's last-resort handler lets it by)."""


@contextlib.contextmanager
def time_guard(seconds: float) -> Iterator[None]:
    def fire(signum: int, frame: Any) -> None:
        raise _Hang(f"no answer within {seconds} s")

    previous = signal.signal(signal.SIGALRM, fire)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


def run_cli(*argv: str, limit: float = TIME_LIMIT) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with time_guard(limit), contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main(list(argv))
            except SystemExit as exc:  # argparse usage errors
                code = int(exc.code or 0)
    return code, out.getvalue(), err.getvalue()


def snapshot(root: Path) -> dict[str, str]:
    """Every entry below ``root``: content hash of files, target of links, kind otherwise."""
    found: dict[str, str] = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for name in dirnames + filenames:
            p = Path(dirpath) / name
            st = os.lstat(p)
            rel = str(p.relative_to(root))
            if stat.S_ISLNK(st.st_mode):
                found[rel] = "link:" + os.readlink(p)
            elif stat.S_ISREG(st.st_mode):
                found[rel] = hashlib.sha256(p.read_bytes()).hexdigest()
            else:
                found[rel] = "kind:" + str(stat.S_IFMT(st.st_mode))
    return found


def assert_refused(code: int, err: str, what: str) -> None:
    assert code == 2, f"exit {code} (expected 2) for {what}:\n{err}"
    assert "lti-audit: error:" in err, err
    assert "Traceback" not in err and "internal error" not in err, err


def assert_untouched(before: dict[str, str], after: dict[str, str], allowed: tuple[str, ...] = ()
                     ) -> None:
    changed = [k for k, v in before.items() if after.get(k) != v]
    assert not changed, f"changed or removed: {changed}"
    new = [k for k in after if k not in before and not k.startswith(allowed)]
    assert not new, f"written outside the intended folder: {new}"


# ------------------------------------------------------------ the documents
def good_document(name: str = "conveyor drive, speed loop") -> dict[str, Any]:
    """An invented, valid two-state model (a conveyor drive's speed loop)."""
    return {"lti_model": 1, "name": name, "sample_period": None,
            "state_space": {"a": [[-2.0, 1.0], [0.0, -5.0]], "b": [[0.0], [3.0]],
                            "c": [[1.0, 0.0]], "d": [[0.0]]}}


@dataclass
class Case:
    """One hostile input file; ``data`` is its JSON value when it has one (for the service)."""

    id: str
    filename: str
    write: Callable[[Path], None]
    data: Any = field(default=None)
    json_body: bool = False  # the service can receive ``data`` inside a request


def _text_case(cid: str, filename: str, text: str | bytes) -> Case:
    raw = text.encode("utf-8", "surrogatepass") if isinstance(text, str) else text
    return Case(cid, filename, lambda p: p.write_bytes(raw))


def _doc_case(cid: str, doc: Any, suffix: str = ".json") -> Case:
    if suffix == ".json":
        text = json.dumps(doc, allow_nan=True)
    elif suffix == ".yaml":
        import yaml

        text = yaml.safe_dump(doc, allow_unicode=False)
    else:
        raise ValueError(suffix)
    return Case(cid, f"model{suffix}", lambda p: p.write_text(text, "utf-8"), doc,
                json_body=suffix == ".json")


def _set(doc: dict[str, Any], path: tuple[Any, ...], value: Any) -> dict[str, Any]:
    doc = json.loads(json.dumps(doc))
    target = doc
    for key in path[:-1]:
        target = target[key]
    if value is _DELETE:
        del target[path[-1]]
    else:
        target[path[-1]] = value
    return doc


_DELETE = object()

_MATRIX_NOT = [None, 1, "x", {}, [[1.0, 2.0], [3.0]], [["1"]], [[True, 1.0]], [1.0, 2.0],
               [[[1.0]]], [[None, 1.0]]]
_WRONG = {  # field path -> values that are certainly wrong there
    ("lti_model",): [0, 2, "1", True, None, 1.5, [], {}, _DELETE],
    ("name",): [None, 1, True, [], {}, "", 1.5, ["x"], _DELETE],
    ("sample_period",): [True, "0.1", [], {}, 0, -1.0, "1:30", _DELETE],
    ("state_space",): [None, 1, "x", [], True, [[1.0]]],
    **{("state_space", k): _MATRIX_NOT for k in "abcd"},
    ("state_space", "a", 0): [[1.0], [1.0, 2.0, 3.0], "x", None],
    ("inputs",): [1, "x", [{}], [{"name": ""}], [{"name": 1}], [{"name": "u", "unit": 5}],
                  [{"name": "u"}, {"name": "v"}], [{"name": "u", "extra": 1}]],
    ("outputs",): [[{"name": "y", "unit": []}], [], [{"name": None}], {"name": "y"}],
    ("states",): [[{"name": "x1"}, {"name": "x1"}], [{"name": "x1"}]],
    ("claimed_form",): ["diagonal", 1, True, "MODAL"],
    ("provenance",): [1, "x", {"source": 1}, {"notes": []}, {"x": 1}],
    ("stat_space",): [{"a": [[1.0]]}],
    ("transfer_function",): [{"numerator": [[[1.0]]], "denominator": [[[1.0, 1.0]]]}],
}

_TF_BAD = [
    {"numerator": [[[1.0, 0.0, 0.0]]], "denominator": [[[1.0, 1.0]]]},   # improper
    {"numerator": [[[1.0]]], "denominator": [[[0.0, 1.0]]]},             # zero leading
    {"numerator": [[[]]], "denominator": [[[1.0, 1.0]]]},                # empty numerator
    {"numerator": [[[1.0]]], "denominator": [[[0.0, 0.0]]]},             # zero polynomial
    {"numerator": [[[1.0]], [[1.0]]], "denominator": [[[1.0, 1.0]]]},    # shapes differ
    {"numerator": [[["1"]]], "denominator": [[[1.0, 1.0]]]},             # string
    {"numerator": [[[1.0]]], "denominator": [[[1.0, -1e-320]]]},          # subnormal
    {"numerator": [[1.0]], "denominator": [[[1.0, 1.0]]]},               # not a table
    {"numerator": [], "denominator": []},                                # empty tables
]
_ZEROS_POLES_GAIN_BAD = [
    {"zeros": [[[]]], "poles": [[[[-1.0, 2.0]]]], "gain": [[1.0]]},        # unpaired
    {"zeros": [[[[-1.0]]]], "poles": [[[[-1.0, 0.0]]]], "gain": [[1.0]]},  # not a pair
    {"zeros": [[[[-1.0, 0.0], [-2.0, 0.0]]]], "poles": [[[[-1.0, 0.0]]]], "gain": [[1.0]]},
    {"zeros": [[[]]], "poles": [[[[-1.0, 0.0]]]], "gain": [[1.0, 2.0]]},   # gain shape
    {"zeros": [[[]]], "poles": [[[[-1e308, 0.0]]]], "gain": [[1.0]]},     # extreme pole
    {"zeros": [[[]]], "poles": [[[[-1.0, 0.0]]]], "gain": [[1e308]]},     # extreme gain
    {"zeros": [[[[-5e-324, 0.0]]]], "poles": [[[[-1.0, 0.0]]]], "gain": [[1.0]]},
]
_EXTREME = [1e308, -1e308, 1e200, -1e151, 5e-324, -1e-320, 2.2e-309, 1e-200, -1e-151]
_PERIODS = [5e-324, 1e-300, 1e-13, 0.0, -1.0, -5e-324]


def _model_documents() -> list[Case]:
    cases: list[Case] = []
    base = good_document()
    for path, values in _WRONG.items():
        for k, value in enumerate(values):
            cases.append(_doc_case(f"wrong-{'.'.join(map(str, path))}-{k}",
                                   _set(base, path, value)))
    for k, tf in enumerate(_TF_BAD):
        doc = _set(_set(base, ("state_space",), _DELETE), ("transfer_function",), tf)
        cases.append(_doc_case(f"transfer-function-{k}", doc))
    for k, zeros_poles_gain in enumerate(_ZEROS_POLES_GAIN_BAD):
        doc = _set(_set(base, ("state_space",), _DELETE), ("zeros_poles_gain",), zeros_poles_gain)
        cases.append(_doc_case(f"zeros-poles-gain-{k}", doc))
    for key, index in (("a", (0, 0)), ("b", (1, 0)), ("c", (0, 0)), ("d", (0, 0))):
        for value in _EXTREME:
            cases.append(_doc_case(f"extreme-{key}-{value:g}",
                                   _set(base, ("state_space", key, *index), value)))
    for value in _PERIODS:
        cases.append(_doc_case(f"sample-period-{value:g}", _set(base, ("sample_period",), value)))
    for key in "abcd":
        for token in ("NaN", "Infinity", "-Infinity"):
            text = json.dumps(_set(base, ("state_space", key, 0, 0), 12345.678)).replace(
                "12345.678", token)
            cases.append(Case(f"non-finite-{key}-{token}", "model.json",
                              lambda p, t=text: p.write_text(t)))
    cases.append(_text_case("overflow-literal", "model.json",
                            json.dumps(base).replace("-5.0", "-1e400")))
    for k, name in enumerate(["x" * 201, "a\x00b", "\ud800 lone surrogate", "\x00"]):
        cases.append(_doc_case(f"bad-name-{k}", _set(base, ("name",), name)))
    # YAML spellings of a few wrong documents, and YAML 1.1 surprises
    for k, (path, value) in enumerate([(("sample_period",), "1:30"), (("name",), None),
                                       (("state_space", "a"), "x")]):
        cases.append(_doc_case(f"yaml-wrong-{k}", _set(base, path, value), ".yaml"))
    yaml_text = ("lti_model: 1\nname: belt\nsample_period: {v}\nstate_space: {{a: [[0.5]], "
                 "b: [[1]], c: [[1]], d: [[0]]}}\n")
    for k, v in enumerate(["1:30", "yes", "0b101", "1_000", "2001-12-14", "!!python/object:os.system x",
                           "&a [1]", "*undefined", ".inf", "0x1p3"]):
        cases.append(_text_case(f"yaml-scalar-{k}", "model.yaml", yaml_text.format(v=v)))
    return cases


def _garbage(seed: int, suffix: str) -> Case:
    rng = random.Random(seed)
    kind = seed % 4
    if kind == 0:
        raw = bytes(rng.randrange(256) for _ in range(rng.randrange(1, 400)))
    elif kind == 1:
        raw = "".join(rng.choice("{}[]:,\"' \n\t0123456789.eE-+truefalsenul") for _ in
                      range(rng.randrange(1, 300))).encode()
    elif kind == 2:
        text = json.dumps(good_document())
        raw = text[: rng.randrange(1, len(text))].encode()  # truncated
    else:
        raw = b"\xef\xbb\xbf" + bytes(rng.randrange(128, 256) for _ in range(50))
    return _text_case(f"garbage-{seed}{suffix}", f"model{suffix}", raw)


def _deep_cases() -> list[Case]:
    cases = []
    for depth in (1000, 5000, 100_000):
        cases.append(_text_case(f"deep-json-{depth}", "model.json", "[" * depth + "]" * depth))
    cases.append(_text_case("deep-json-in-field", "model.json",
                            '{"lti_model": 1, "name": "x", "sample_period": null, "state_space": '
                            '{"a": ' + "[" * 3000 + "]" * 3000 + "}}"))
    cases.append(_text_case("deep-json-objects", "model.json", '{"a":' * 5000 + "1" + "}" * 5000))
    for depth in (1000, 50_000):
        cases.append(_text_case(f"deep-yaml-{depth}", "model.yaml", "[" * depth + "]" * depth))
    cases.append(_text_case("deep-yaml-block", "model.yaml",
                            "".join("  " * i + "- \n" for i in range(1500))))
    for depth in (1000, 5000):
        cases.append(_text_case(f"deep-toml-{depth}", "model.toml",
                                "a = " + "[" * depth + "]" * depth + "\n"))
    for fmt, text in (("json", '{"lti_model": ' + "9" * 5000 + "}"),
                      ("toml", "lti_model = " + "9" * 5000 + "\n"),
                      ("yaml", "lti_model: " + "9" * 5000 + "\n"),
                      ("json", '{"lti_model": 1, "name": "x", "sample_period": ' + "9" * 400 + "}"),
                      ("yaml", "lti_model: 1\nname: x\nsample_period: " + "9" * 400 + "\n"),
                      ("toml", 'lti_model = 1\nname = "x"\nsample_period = ' + "9" * 30 + "\n")):
        cases.append(_text_case(f"huge-integer-{fmt}-{len(text)}", f"model.{fmt}", text))
    return cases


def _npy_bytes(shape: tuple[int, ...], dtype: str = "<f8", body: bytes | None = None) -> bytes:
    header = {"descr": dtype, "fortran_order": False, "shape": shape}
    buf = io.BytesIO()
    np.lib.format.write_array_header_1_0(buf, header)
    return buf.getvalue() + (body if body is not None else b"\0" * 64)


def _npz(members: dict[str, bytes], compress: bool = True) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED if compress else zipfile.ZIP_STORED) as z:
        for name, data in members.items():
            z.writestr(name, data)
    return buf.getvalue()


def _arrays(**overrides: Any) -> bytes:
    arrays: dict[str, Any] = {"a": -np.eye(2), "b": np.ones((2, 1)), "c": np.ones((1, 2)),
                              "d": np.zeros((1, 1))}
    arrays.update(overrides)
    buf = io.BytesIO()
    np.savez(buf, **{k: v for k, v in arrays.items() if v is not None})
    return buf.getvalue()


def _npz_cases() -> list[Case]:
    bomb = _npz({"a.npy": _npy_bytes((1000, 1000), body=b"\0" * 8_000_000),
                 "b.npy": _npy_bytes((1000, 1)), "c.npy": _npy_bytes((1, 1000)),
                 "d.npy": _npy_bytes((1, 1))})
    liar = _npz({"a.npy": _npy_bytes((12000, 12000)), "b.npy": _npy_bytes((12000, 1)),
                 "c.npy": _npy_bytes((1, 12000)), "d.npy": _npy_bytes((1, 1))})
    cases = [
        # 8 MB of zeros compressed to about 8 kB, refused at a 1 MB limit (set by the test)
        _text_case("npz-bomb-over-limit", "model.npz", bomb),
        _text_case("npz-header-claims-huge-array", "model.npz", liar),
        _text_case("npz-object-array", "model.npz", _npz({"a.npy": _npy_bytes((1, 1), "|O"),
                                                          "b.npy": _npy_bytes((1, 1)),
                                                          "c.npy": _npy_bytes((1, 1)),
                                                          "d.npy": _npy_bytes((1, 1))})),
        _text_case("npz-complex", "model.npz", _arrays(a=-np.eye(2) * (1 + 1j))),
        _text_case("npz-strings", "model.npz", _arrays(d=np.array([["x"]]))),
        _text_case("npz-3d", "model.npz", _arrays(a=np.zeros((2, 2, 2)))),
        _text_case("npz-missing", "model.npz", _arrays(d=None)),
        _text_case("npz-extra", "model.npz", _arrays(e=np.zeros(1))),
        _text_case("npz-extreme", "model.npz", _arrays(a=-np.eye(2) * 1e308)),
        _text_case("npz-subnormal-period", "model.npz", _arrays(sample_period=np.array(5e-324))),
        _text_case("npz-nan", "model.npz", _arrays(b=np.array([[np.nan], [1.0]]))),
        _text_case("npz-truncated-member", "model.npz",
                   _npz({"a.npy": _npy_bytes((2, 2), body=b"\0" * 5), "b.npy": _npy_bytes((2, 1)),
                         "c.npy": _npy_bytes((1, 2)), "d.npy": _npy_bytes((1, 1))})),
        _text_case("npz-bad-header", "model.npz", _npz({"a.npy": b"\x93NUMPY\x01\x00zz",
                                                        "b.npy": b"", "c.npy": b"", "d.npy": b""})),
        _text_case("npz-not-zip", "model.npz", b"PK\x03\x04" + b"\0" * 40),
        _text_case("npy-not-npz", "model.npz", _npy_bytes((2, 2), body=b"\0" * 32)),
    ]
    return cases


def _special_cases() -> list[Case]:
    cases = []
    for suffix in (".json", ".yaml", ".toml", ".npz"):
        cases.append(Case(f"fifo{suffix}", f"model{suffix}", lambda p: os.mkfifo(p)))
        cases.append(Case(f"link-to-dev-zero{suffix}", f"model{suffix}",
                          lambda p: os.symlink("/dev/zero", p)))
        cases.append(Case(f"link-to-dev-urandom{suffix}", f"model{suffix}",
                          lambda p: os.symlink("/dev/urandom", p)))
    cases.append(Case("folder-named-model", "model.json", lambda p: p.mkdir()))
    cases.append(Case("dangling-link", "model.json", lambda p: os.symlink("no/such/file", p)))
    cases.append(Case("link-loop", "model.json", lambda p: os.symlink(p.name, p)))
    cases.append(_text_case("empty-file", "model.json", b""))
    cases.append(_text_case("not-utf8", "model.yaml", b"name: \xff\xfe\n"))
    cases.append(_text_case("wrong-suffix", "model.txt", json.dumps(good_document())))
    return cases


def all_documents() -> list[Case]:
    seeds = range(400 if NIGHTLY else 28)
    cases = _model_documents() + _deep_cases() + _npz_cases() + _special_cases()
    cases += [_garbage(seed, (".json", ".yaml", ".toml", ".npz")[seed % 4]) for seed in seeds]
    if NIGHTLY:
        rng = random.Random(12)
        base = good_document()
        for k in range(1000):  # random single-field corruptions
            path, values = rng.choice(list(_WRONG.items()))
            cases.append(_doc_case(f"nightly-wrong-{k}", _set(base, path, rng.choice(values))))
    return cases


DOCUMENTS = all_documents()


def test_enough_hostile_documents() -> None:
    assert len(DOCUMENTS) >= 250, len(DOCUMENTS)
    assert len({c.id for c in DOCUMENTS}) == len(DOCUMENTS)  # readable, unique test ids


# ------------------------------------------------------------- the sandbox
@pytest.fixture
def sandbox(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """work/ (inputs), out/ (the only place outputs may go), precious/ (must not change)."""
    for name in ("work", "out", "precious"):
        (tmp_path / name).mkdir()
    (tmp_path / "precious" / "pyproject.toml").write_text("[project]\nname = 'victim'\n")
    (tmp_path / "precious" / "conftest.py").write_text("# must never be replaced\n")
    (tmp_path / "work" / "good.json").write_text(json.dumps(good_document()))
    (tmp_path / ".git").mkdir()  # promote's default root: this "repository"
    monkeypatch.chdir(tmp_path / "work")
    monkeypatch.setenv("LTI_AUDIT_MAX_ARRAY_BYTES", str(1024 * 1024))
    return tmp_path


@pytest.mark.parametrize("case", DOCUMENTS, ids=lambda c: c.id)
def test_hostile_document_is_refused_by_every_command(case: Case, sandbox: Path) -> None:
    work, out = sandbox / "work", sandbox / "out"
    path = work / case.filename
    case.write(path)
    before = snapshot(sandbox)
    name = case.filename
    runs = [
        ("inspect", ["inspect", name]),
        ("compare", ["compare", "good.json", name, "-o", str(out / "report.txt")]),
        ("convert", ["convert", name, "--to", "modal", "-o", str(out / "converted.json")]),
    ]
    for what, argv in runs:
        code, _, err = run_cli(*argv)
        assert_refused(code, err, f"{what} {case.id}")
        assert name in err, err
    assert_untouched(before, snapshot(sandbox))
    # check: a claim on the hostile file; the claim is an error (exit 2), reports go to out/
    (work / "lti-audit.toml").write_text(
        f'[[claim]]\nname = "belt drive"\nexpect = "equivalent"\nmodels = ["good.json", "{name}"]\n')
    before = snapshot(sandbox)
    code, _, err = run_cli("check", "lti-audit.toml", "--junit", str(out / "j.xml"),
                           "--markdown", str(out / "m.md"))
    assert code == 2 and "Traceback" not in err and "internal error" not in err, err
    assert_untouched(before, snapshot(sandbox), allowed=("out/",))
    ET.parse(out / "j.xml")  # well-formed
    # promote: the hostile file as a counterexample's reference model
    if not name.endswith((".json", ".yaml", ".yml", ".toml", ".npz")):
        return
    cx = sandbox / "cx"
    cx.mkdir()
    os.rename(path, cx / name)  # files, links, FIFOs and folders alike
    (cx / "converted.json").write_text(json.dumps(good_document("converted")))
    (cx / "manifest.json").write_text(json.dumps({
        "lti_audit_counterexample": 1, "pipeline": "test: hostile", "case": 1,
        "files": {"reference": name, "converted": "converted.json"}}))
    before = snapshot(sandbox)
    code, _, err = run_cli("promote", str(cx), "--name", "hostile")
    assert_refused(code, err, f"promote {case.id}")
    assert_untouched(before, snapshot(sandbox), allowed=("fixtures",))
    assert not any((sandbox / "fixtures").rglob("*")) if (sandbox / "fixtures").exists() else True


# ------------------------------------------------------ hostile names (valid)
HOSTILE_NAMES = [
    "<script>alert(1)</script>",
    "<iframe src=javascript:alert(5)>",
    "[click](javascript:alert(2)) ![x](https://tracker.example/p.png)",
    "@all please look",
    r"$\undefinedmacro$",
    r"$\sqrt{\sqrt{\sqrt{x}}}$ and $",
    "drive\x1b[2J\x1b]0;owned\x07 name\x1b[31m",
    "bell\x07 form\x0c feed\x08 back",
    "right\u202eto-left override",
    "pipe | and `tick` and *stars* and _under_ & <b>bold</b>",
]


def _claim_manifest(work: Path, model_file: str) -> None:
    (work / "lti-audit.toml").write_text(
        '[[claim]]\nname = "same drive"\nexpect = "equivalent"\n'
        f'models = ["good.json", "{model_file}"]\n')


def _markdown_is_inert(md: str) -> None:
    # Rendered by markdown-it-py (a CommonMark implementation, with GitHub's tables): no
    # HTML element, link or image may come out of a hostile name.
    from markdown_it import MarkdownIt

    html = MarkdownIt("commonmark").enable("table").render(md)
    for tag in ("<script", "<iframe", "<a ", "<img", "<b>", "<br"):
        assert tag not in html, (tag, html)
    assert "@all" not in md  # a word joiner follows every '@': no mention
    assert "https://" not in md  # GitHub links bare https:// URLs; a word joiner stops it
    assert "\x1b" not in md and "\x07" not in md and "\u202e" not in md


@pytest.mark.parametrize("name", HOSTILE_NAMES, ids=range(len(HOSTILE_NAMES)))
def test_hostile_names_are_plain_text_in_every_output(name: str, sandbox: Path) -> None:
    work, out = sandbox / "work", sandbox / "out"
    doc = good_document(name)
    doc["inputs"] = [{"name": name[:50] or "u", "unit": "V<br>"}]
    doc["provenance"] = {"source": name, "notes": name}
    (work / "named.json").write_text(json.dumps(doc))
    code, text, err = run_cli("compare", "good.json", "named.json")
    assert code == 0, err
    assert "\x1b" not in text + err and "\x07" not in text and "\u202e" not in text
    code, text, err = run_cli("inspect", "named.json")
    assert code in (0, 1, 3) and "\x1b" not in text + err
    # Markdown, JUnit XML, JSON and text reports of check
    _claim_manifest(work, "named.json")
    # a claim named after the hostile name too
    (work / "lti-audit.toml").write_text(
        (work / "lti-audit.toml").read_text().replace('"same drive"', json.dumps(name)))
    code, text, err = run_cli("check", "lti-audit.toml", "--junit", str(out / "j.xml"),
                              "--markdown", str(out / "m.md"), "--json", str(out / "r.json"))
    assert code == 0, err
    assert "\x1b" not in text and "\x07" not in text
    _markdown_is_inert((out / "m.md").read_text())
    ET.parse(out / "j.xml")
    json.loads((out / "r.json").read_text())
    code, text, _ = run_cli("check", "lti-audit.toml", "--format", "markdown")
    _markdown_is_inert(text)
    code, text, _ = run_cli("check", "lti-audit.toml", "--format", "junit")
    ET.fromstring(text)


def test_hostile_name_in_html_report_renders_as_text(sandbox: Path) -> None:
    work, out = sandbox / "work", sandbox / "out"
    for k, name in enumerate([r"$\undefinedmacro$ <script>alert(1)</script> $\sqrt{\sqrt{$"
                              + "\x1b[2J"]):
        (work / f"n{k}.json").write_text(json.dumps(good_document(name)))
        code, _, err = run_cli("compare", "good.json", f"n{k}.json", "--format", "html",
                               "-o", str(out / f"page{k}.html"))
        assert code == 0, err
        page = (out / f"page{k}.html").read_text()
        assert "<script>alert" not in page and "\x1b" not in page
        assert "&lt;script&gt;" in page


@pytest.mark.parametrize("name", HOSTILE_NAMES, ids=range(len(HOSTILE_NAMES)))
def test_markdown_helpers_keep_names_literal(name: str) -> None:
    from markdown_it import MarkdownIt

    from audit.reports.safe_output import markdown_code, markdown_text

    md = f"| a | b |\n|---|---|\n| {markdown_text(name)} | {markdown_code(name)} |\n"
    html = MarkdownIt("commonmark").enable("table").render(md)
    assert html.count("<td>") == 2  # no cell break from '|'
    for tag in ("<script", "<iframe", "<a ", "<img", "<b>", "<em>", "<strong>"):
        assert tag not in html, (tag, html)


# ----------------------------------------------------------- the output rule
def test_outputs_never_overwrite_or_follow_links(sandbox: Path) -> None:
    work, out, precious = sandbox / "work", sandbox / "out", sandbox / "precious"
    (work / "other.json").write_text(json.dumps(good_document("other")))
    _claim_manifest(work, "other.json")
    os.symlink(precious / "pyproject.toml", out / "link.txt")
    (out / "existing.txt").write_text("keep me\n")
    before = snapshot(sandbox)
    attempts = [
        ["compare", "good.json", "other.json", "-o", str(out / "existing.txt")],
        ["compare", "good.json", "other.json", "-o", str(out / "link.txt")],
        ["compare", "good.json", "other.json", "-o", str(out / "missing" / "r.txt")],
        ["compare", "good.json", "other.json", "-o", str(out)],
        ["compare", "good.json", "other.json", "-o", str(precious / "pyproject.toml")],
        ["convert", "good.json", "--to", "modal", "-o", str(out / "existing.txt")],
        ["convert", "good.json", "--to", "modal", "-o", str(out / "link.txt")],
        ["convert", "good.json", "--to", "modal", "-o", str(out / "missing" / "c.json")],
        ["check", "lti-audit.toml", "--junit", str(precious / "pyproject.toml")],
        ["check", "lti-audit.toml", "--markdown", str(out / "link.txt")],
        ["check", "lti-audit.toml", "--json", str(out / "link.txt"), "--overwrite"],
        ["check", "lti-audit.toml", "--json", str(work / "good.json"), "--overwrite"],
        ["check", "lti-audit.toml", "--junit", str(out / "existing.txt")],
        ["stress", "--budget", "1", "--out", str(out)],
        ["stress", "--budget", "1", "--out", str(out / "link.txt")],
    ]
    for argv in attempts:
        code, _, err = run_cli(*argv)
        assert_refused(code, err, " ".join(argv))
        assert_untouched(before, snapshot(sandbox))
    # the explicit flag replaces a report (atomically), never a link or an input
    code, _, err = run_cli("check", "lti-audit.toml", "--junit", str(out / "existing.txt"),
                           "--overwrite")
    assert code == 0, err
    ET.parse(out / "existing.txt")
    assert not [p for p in out.iterdir() if p.name.endswith(".tmp")]


# ------------------------------------------------------- claims manifests
MANIFESTS = {
    "parent-path": '[[claim]]\nexpect = "equivalent"\nmodels = ["good.json", "../precious/x.json"]\n',
    "absolute-path": '[[claim]]\nexpect = "equivalent"\nmodels = ["good.json", "/etc/passwd"]\n',
    "deep": "a = " + "[" * 5000 + "]" * 5000 + "\n",
    "huge-integer": "rtol = " + "9" * 5000 + "\n",
    "garbage": "\x00\x01[[[claim",
    "wrong-types": '[[claim]]\nexpect = 3\nmodels = "good.json"\n',
}


@pytest.mark.parametrize("key", [*MANIFESTS, "link-out", "fifo", "dev-zero"])
def test_hostile_claims_manifest(key: str, sandbox: Path) -> None:
    work, precious = sandbox / "work", sandbox / "precious"
    (precious / "x.json").write_text(json.dumps(good_document("outside")))
    manifest = work / "lti-audit.toml"
    if key in MANIFESTS:
        manifest.write_text(MANIFESTS[key])
    elif key == "link-out":  # a model file inside that is a link to a file outside
        os.symlink(precious / "x.json", work / "inside.json")
        manifest.write_text('[[claim]]\nexpect = "equivalent"\nmodels = ["good.json", '
                            '"inside.json"]\n')
    elif key == "fifo":
        os.mkfifo(manifest)
    else:
        os.symlink("/dev/zero", manifest)
    before = snapshot(sandbox)
    code, _, err = run_cli("check", "lti-audit.toml", "--format", "json")
    assert code == 2 and "Traceback" not in err and "internal error" not in err, err
    assert_untouched(before, snapshot(sandbox))


# ---------------------------------------------------------- counterexamples
def _counterexample(root: Path, files: Any, **extra: Any) -> Path:
    cx = root / "cx"
    cx.mkdir(exist_ok=True)
    for n in ("reference.json", "converted.json"):
        (cx / n).write_text(json.dumps(good_document(n)))
    (cx / "manifest.json").write_text(json.dumps({
        "lti_audit_counterexample": 1, "pipeline": "test: hostile", "case": 3,
        "files": files, **extra}))
    return cx


COUNTEREXAMPLES: dict[str, Any] = {
    "traversal": {"reference": "../../precious/conftest.py", "converted": "converted.json"},
    "traversal-json": {"reference": "../precious/x.json", "converted": "converted.json"},
    "absolute": {"reference": "/etc/passwd", "converted": "converted.json"},
    "nested": {"reference": "sub/reference.json", "converted": "converted.json"},
    "list": ["reference.json", "converted.json"],
    "string": "reference.json",
    "not-a-name": {"reference": 5, "converted": "converted.json"},
    "manifest-itself": {"reference": "manifest.json"},
    "missing": {"reference": "nope.json", "converted": "converted.json"},
    "duplicate": {"reference": "reference.json", "converted": "reference.json"},
    "dot-dot-name": {"reference": "..", "converted": "converted.json"},
    "backslash": {"reference": "..\\..\\x.json", "converted": "converted.json"},
}


@pytest.mark.parametrize("key", [*COUNTEREXAMPLES, "link-inside", "link-to-dev-zero",
                                 "manifest-fifo", "manifest-link", "manifest-deep",
                                 "manifest-list", "bad-rtol", "bad-case", "bad-name"])
def test_hostile_counterexample_is_refused_and_leaves_nothing(key: str, sandbox: Path) -> None:
    precious = sandbox / "precious"
    (precious / "x.json").write_text(json.dumps(good_document("outside")))
    files = COUNTEREXAMPLES.get(key, {"reference": "reference.json",
                                      "converted": "converted.json"})
    extra = {"rtol": "1e-5"} if key == "bad-rtol" else {}
    if key == "bad-case":
        extra = {"case": [1]}
    cx = _counterexample(sandbox, files, **extra)
    if key == "link-inside":
        (cx / "reference.json").unlink()
        os.symlink(precious / "x.json", cx / "reference.json")
    elif key == "link-to-dev-zero":
        (cx / "reference.json").unlink()
        os.symlink("/dev/zero", cx / "reference.json")
    elif key == "manifest-fifo":
        (cx / "manifest.json").unlink()
        os.mkfifo(cx / "manifest.json")
    elif key == "manifest-link":
        (cx / "manifest.json").unlink()
        os.symlink("/dev/urandom", cx / "manifest.json")
    elif key == "manifest-deep":
        (cx / "manifest.json").write_text("[" * 5000 + "]" * 5000)
    elif key == "manifest-list":
        (cx / "manifest.json").write_text("[1, 2]")
    before = snapshot(sandbox)
    argv = ["promote", str(cx), "--name", "../../escape" if key == "bad-name" else "hostile"]
    code, _, err = run_cli(*argv)
    assert_refused(code, err, f"promote {key}")
    after = snapshot(sandbox)
    assert_untouched(before, after, allowed=("fixtures/promoted",))
    leftovers = [k for k in after if k.startswith("fixtures/promoted/")]
    assert not leftovers, leftovers


def test_promote_defaults_to_the_current_repository(sandbox: Path) -> None:
    cx = _counterexample(sandbox, {"reference": "reference.json", "converted": "converted.json"})
    code, out, err = run_cli("promote", str(cx), "--name", "kept")
    assert code == 0, err
    target = sandbox / "fixtures" / "promoted" / "kept"
    assert sorted(p.name for p in target.iterdir()) == ["converted.json", "manifest.json",
                                                        "reference.json"]
    # the two documents hold the same matrices (only their names differ)
    assert json.loads((target / "manifest.json").read_text())["promoted"]["expected"][
        "compare_verdict"] == "equivalent"
    code, _, err = run_cli("promote", str(cx), "--name", "kept")
    assert_refused(code, err, "promote twice")


# ----------------------------------------------------------------- service
SERVICE_CASES = [c for c in DOCUMENTS if c.json_body]


def _backends() -> list[str]:
    urls = ["sqlite"]
    if os.environ.get("LTI_AUDIT_TEST_POSTGRES_URL"):
        urls.append("postgresql")
    return urls


@pytest.fixture(scope="module", params=_backends())
def service(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Any:
    pytest.importorskip("fastapi")
    pytest.importorskip("sqlalchemy")
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path_factory.mktemp('svc') / 'hostile.sqlite3'}"
    else:
        pytest.importorskip("psycopg")
        url = os.environ["LTI_AUDIT_TEST_POSTGRES_URL"]
    return _service_for(url)


def _post(service: Any, body: bytes) -> Any:
    client, headers = service
    with time_guard(TIME_LIMIT):
        return client.post("/audits", content=body, headers=headers)


@pytest.mark.parametrize("case", SERVICE_CASES, ids=lambda c: c.id)
def test_service_refuses_hostile_document(case: Case, service: Any) -> None:
    body = json.dumps({"models": [case.data], "reference": good_document()},
                      allow_nan=True).encode("utf-8")
    r = _post(service, body)
    assert r.status_code in (413, 422), (r.status_code, r.text)
    payload = r.json()
    assert payload["message"] and "Traceback" not in r.text


@pytest.mark.parametrize("body", [
    b"[" * 5000 + b"]" * 5000,
    b'{"models": [' + b"[" * 3000 + b"]" * 3000 + b"]}",
    b'{"models": [' + b"9" * 5000 + b"]}",
    b"\xff\xfe garbage",
    b'{"models": [{"lti_model": 1, "name": "\\u0000"}]}',
    b'{"models": [{"lti_model": 1, "name": "\\ud800"}]}',
    b'{"models": "x"}',
], ids=["deep-array", "deep-in-models", "huge-int", "not-utf8", "nul-name", "surrogate", "type"])
def test_service_refuses_hostile_bodies(body: bytes, service: Any) -> None:
    r = _post(service, body)
    assert r.status_code in (413, 422), (r.status_code, r.text)
    assert r.json()["message"]


def test_service_stores_and_shows_hostile_names_safely(service: Any) -> None:
    client, headers = service
    name = r"$\sqrt{\sqrt{$ <script>alert(1)</script> " + "n" * 150
    body = json.dumps({"models": [good_document(name)], "reference": good_document()}).encode()
    r = _post(service, body)
    assert r.status_code == 202, r.text  # stored as a job; the page is there once done
    assert wait_done(client, r.json()["id"], headers).json()["status"] == "done"
    page = client.get(f"/audits/{r.json()['id']}/report.html", headers=headers)
    assert page.status_code == 200
    csp = page.headers["content-security-policy"]
    # no script may run but the report page's own zoom script, named by its SHA-256 hash
    # (CSP Level 2 hash source): an injected inline script has another hash and is blocked
    from audit.reports.html_page import zoom_script_csp_source

    assert "default-src 'none'" in csp and "unsafe-inline' " not in csp.split("script-src")[-1]
    assert csp.split("script-src")[-1].strip() == zoom_script_csp_source()
    # the browser hashes the script element's text as served: it must be that exact text
    import base64
    import hashlib
    import re

    served = re.findall(r"<script[^>]*>(.*?)</script>", page.text, flags=re.S)
    assert len(served) == 1
    digest = base64.b64encode(hashlib.sha256(served[0].encode("utf-8")).digest()).decode()
    assert f"'sha256-{digest}'" == zoom_script_csp_source()
    assert "<script>alert" not in page.text


# ------------------------------------------------------------------- nightly
@pytest.mark.nightly
def test_real_npz_bomb_is_refused_fast(tmp_path: Path) -> None:
    # 1.15 GB of zeros in a ~1.1 MB archive (issue 12's reproduction)
    path = tmp_path / "bomb.npz"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as z:
        with z.open("a.npy", "w", force_zip64=True) as member:
            member.write(_npy_bytes((12000, 12000), body=b""))
            chunk = b"\0" * (1 << 24)
            for _ in range(12000 * 12000 * 8 // len(chunk)):
                member.write(chunk)
        for key, shape in (("b", (12000, 1)), ("c", (1, 12000)), ("d", (1, 1))):
            z.writestr(f"{key}.npy", _npy_bytes(shape, body=b"\0" * (8 * shape[0] * shape[1])))
    code, _, err = run_cli("inspect", str(path), limit=10.0)
    assert_refused(code, err, "bomb")
    assert "LTI_AUDIT_MAX_ARRAY_BYTES" in err


def test_sqlite_and_postgresql_accept_and_store_the_same() -> None:
    """Whatever the document schema accepts, both databases store and give back unchanged."""
    url = os.environ.get("LTI_AUDIT_TEST_POSTGRES_URL")
    if not url:
        pytest.skip("PostgreSQL not tested: set LTI_AUDIT_TEST_POSTGRES_URL (.ci/run does)")
    pytest.importorskip("psycopg")
    import tempfile

    from audit.documents.schema import MAX_NAME_LENGTH, MAX_NOTE_LENGTH

    edge = [good_document("n" * MAX_NAME_LENGTH),                     # longest name
            good_document("belt \U0001f600 drive \u00e9\u4e2d \x07\x1b[1m"),  # astral, controls
            good_document("x" * (MAX_NAME_LENGTH + 1)),               # one too long
            good_document("nul \x00 inside")]
    edge[1]["provenance"] = {"notes": "\u00fc" * MAX_NOTE_LENGTH}
    answers = []
    with tempfile.TemporaryDirectory() as tmp:
        for backend_url in (f"sqlite:///{tmp}/equal.sqlite3", url):
            client, headers = _service_for(backend_url)
            got = []
            for doc in edge:
                body = json.dumps({"models": [doc], "reference": good_document()}).encode()
                with time_guard(TIME_LIMIT):
                    r = client.post("/audits", content=body, headers=headers)
                if r.status_code == 202:
                    stored = wait_done(client, r.json()["id"], headers).json()
                    got.append((202, stored["model_names"], stored["report"]["verdict"]))
                else:
                    got.append((r.status_code, r.json()["field"], None))
            answers.append(got)
    assert answers[0] == answers[1]
    assert [a[0] for a in answers[0]] == [202, 202, 422, 422]
    assert answers[0][1][1] == [edge[1]["name"]]  # stored exactly as sent


def _service_for(url: str) -> tuple[Any, dict[str, str]]:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from fastapi.testclient import TestClient

    from audit.service import create_app
    from audit.service.db import open_database
    from audit.service.tokens import create_token

    from .service_cluster import inproc_scheduler

    client = TestClient(create_app(url, scheduler=inproc_scheduler()),
                        raise_server_exceptions=False)
    _, sessions = open_database(url)
    with sessions() as s:
        token, _ = create_token(s, holder="equality test", role="team")
    return client, {"Authorization": f"Bearer {token}", "content-type": "application/json"}
