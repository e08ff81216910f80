"""``lti-audit promote``: turn a stress-campaign counterexample into a regression fixture.

Copies a counterexample directory written by ``lti-audit stress`` (its ``manifest.json``
and model documents) into ``fixtures/promoted/NAME/`` of the current repository (the
nearest folder above the working directory that holds ``.git``; ``--into DIR`` names
another root) and records the expected outcome (the pipeline, the property it broke,
the verdict lti-audit gives on the stored pair now). ``tests/test_promoted.py``
replays every promoted fixture.

The counterexample is untrusted input. The whole manifest is validated before anything
is copied: ``files`` must map roles to plain file names (no folders, no ``..``, no
absolute paths) of regular model files inside the counterexample folder (symbolic links
are refused, not followed). The fixture is assembled in a private staging folder and
appears under its name in one rename; on any failure nothing is left behind. An existing
fixture is never overwritten.

Exit status: 0 promoted; 2 invalid input or usage (missing or invalid manifest, unsafe
file names, existing name, ...).
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import stat
import sys
import tempfile
from pathlib import Path
from typing import Any

NAME = "promote"
HELP = "copy a stress counterexample into fixtures/promoted/NAME (replayed by the test suite)"

_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,99}$")
#: A file listed in a counterexample manifest: one plain model-file name.
_FILE_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,99}\.(?:json|yaml|yml|toml|npz)$")
_ROLE_RE = re.compile(r"^[A-Za-z0-9_-]{1,40}$")
#: At most this many files in one counterexample (stress writes three).
MAX_FILES = 16


class _Refused(Exception):
    """Internal: a message for the user (exit 2)."""


def default_fixture_root(start: Path | None = None) -> Path:
    """``fixtures/promoted`` of the repository that holds ``start`` (default: the cwd).

    The repository is the nearest folder at or above ``start`` with a ``.git`` entry.

    Raises
    ------
    FileNotFoundError
        ``start`` is not inside a git repository.
    """
    here = (start or Path.cwd()).resolve()
    for folder in (here, *here.parents):
        if (folder / ".git").exists():
            return folder / "fixtures" / "promoted"
    raise FileNotFoundError(f"{here} is not inside a git repository")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("source", metavar="COUNTEREXAMPLE",
                        help="a counterexample directory (or a file in it) from lti-audit stress")
    parser.add_argument("--name", default=None,
                        help="fixture name (default: pipeline and case, e.g. scipy-transfer-function-round-trip-case7)")
    parser.add_argument("--into", default=None, metavar="DIR",
                        help="fixture root (default: fixtures/promoted of the git repository "
                        "holding the current directory)")


def _fail(message: str) -> int:
    from audit.reports.safe_output import terminal_text

    sys.stderr.write(terminal_text(f"lti-audit: error: {message}\n"))
    return 2


def run(args: argparse.Namespace) -> int:
    try:
        return _promote(args)
    except _Refused as exc:
        return _fail(str(exc))


def _regular_file(path: Path, what: str) -> None:
    """Refuse links and anything but a regular file (never followed, never read)."""
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        raise _Refused(f"{path}: {what} is missing") from None
    except OSError as exc:
        raise _Refused(f"{path}: cannot be read ({exc.strerror})") from None
    if stat.S_ISLNK(st.st_mode):
        raise _Refused(f"{path}: {what} is a symbolic link; a counterexample holds regular "
                       "files only (links are not followed)")
    if not stat.S_ISREG(st.st_mode):
        raise _Refused(f"{path}: {what} is not a regular file")


def _read_manifest(directory: Path) -> dict[str, Any]:
    from audit.errors import AuditError
    from audit.documents.loading import read_input_bytes

    path = directory / "manifest.json"
    if not os.path.lexists(path):
        raise _Refused(f"{directory}: has no manifest.json; expected a counterexample "
                       "directory written by 'lti-audit stress'")
    _regular_file(path, "manifest.json")
    try:
        text = read_input_bytes(path, what="a counterexample manifest").decode("utf-8")
        manifest = json.loads(text)
    except AuditError as exc:
        raise _Refused(str(exc)) from None
    except UnicodeDecodeError as exc:
        raise _Refused(f"{path}: is not UTF-8 text (byte {exc.start})") from None
    except RecursionError:
        raise _Refused(f"{path}: JSON nesting is too deep to read") from None
    except ValueError as exc:
        raise _Refused(f"{path}: is not valid JSON ({str(exc).split(';')[0]})") from None
    if not isinstance(manifest, dict) or manifest.get("lti_audit_counterexample") != 1 \
            or not isinstance(manifest.get("pipeline"), str) or not manifest["pipeline"]:
        raise _Refused(f"{path}: is not a counterexample manifest (expected an object with "
                       "'lti_audit_counterexample': 1 and a 'pipeline' name)")
    return manifest


def _validated_files(directory: Path, manifest: dict[str, Any]) -> dict[str, str]:
    """The ``files`` mapping, every entry checked before anything is copied."""
    where = f"{directory / 'manifest.json'}: files"
    files = manifest.get("files", {})
    if files is None:
        files = {}
    if not isinstance(files, dict):
        raise _Refused(f"{where}: expected an object mapping roles to file names (e.g. "
                       f"{{\"reference\": \"reference.json\"}}), got {type(files).__name__}")
    if len(files) > MAX_FILES:
        raise _Refused(f"{where}: {len(files)} entries, more than {MAX_FILES}")
    seen: set[str] = set()
    for role, name in files.items():
        if not _ROLE_RE.match(str(role)):
            raise _Refused(f"{where}: role {role!r} is not a plain word")
        if not isinstance(name, str) or not _FILE_RE.match(name) or name == "manifest.json":
            raise _Refused(
                f"{where}.{role}: {name!r} is not a plain model-file name in the "
                "counterexample folder (expected e.g. 'reference.json': no folders, no '..', "
                "no absolute paths)")
        if name in seen:
            raise _Refused(f"{where}.{role}: {name!r} is listed twice")
        seen.add(name)
        _regular_file(directory / name, f"file listed as {role!r}")
    for key, low, high in (("rtol", 0.0, 1.0), ("escalation_seconds", 0.0, 600.0),
                           ("case", 0, 10**9)):
        value = manifest.get(key)
        whole = key == "case"
        if value is None:
            continue
        if isinstance(value, bool) or not isinstance(value, int if whole else (int, float)) \
                or not (low <= value <= high) or (key == "rtol" and value == 0):
            raise _Refused(f"{directory / 'manifest.json'}: {key}: expected a "
                           f"{'whole ' if whole else ''}number in [{low}, {high}]"
                           f"{' (> 0)' if key == 'rtol' else ''}, got {value!r}")
    return {str(k): v for k, v in files.items()}


def _promote(args: argparse.Namespace) -> int:
    from audit.errors import AuditError
    from audit.reports.safe_output import OutputRefusedError, publish_directory

    source = Path(args.source)
    if not os.path.lexists(source):
        raise _Refused(f"{source}: does not exist")
    directory = source if source.is_dir() else source.parent
    manifest = _read_manifest(directory)
    files = _validated_files(directory, manifest)
    from audit.workflows.stress import slug

    case = manifest.get("case", 0)
    name = args.name or f"{slug(manifest['pipeline'])}-case{case}"
    if not _NAME_RE.match(name):
        raise _Refused(f"--name: got {name!r} but up to 100 letters, digits, '.', '_' or '-' "
                       "(starting with a letter or digit) were expected")
    if args.into:
        root = Path(args.into)
    else:
        try:
            root = default_fixture_root()
        except FileNotFoundError as exc:
            raise _Refused(f"{exc}; run promote inside the repository or pass --into DIR"
                           ) from None
    if root.is_symlink() or (root.exists() and not root.is_dir()):
        raise _Refused(f"{root}: the fixture root must be a folder, not a link or a file")
    target = root / name
    if os.path.lexists(target):
        raise _Refused(f"{target}: a promoted fixture named {name!r} already exists; "
                       "choose another --name (fixtures are never overwritten)")
    try:
        expected = _expected_outcome(directory, manifest, files)
    except AuditError as exc:
        raise _Refused(f"{directory}: the counterexample cannot be replayed: {exc}") from None
    try:
        root.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=f".{name}.", suffix=".staging", dir=root))
    except OSError as exc:
        raise _Refused(f"{root}: cannot create the fixture ({exc.strerror})") from None
    try:
        for f in files.values():
            _copy_regular_file(directory / f, staging / f)
        record = dict(manifest)
        record["promoted"] = {"from": str(directory), "expected": expected}
        (staging / "manifest.json").write_text(json.dumps(record, indent=2) + "\n",
                                               encoding="utf-8")
        publish_directory(staging, target)
    except OutputRefusedError as exc:
        shutil.rmtree(staging, ignore_errors=True)
        raise _Refused(f"{exc}; not overwritten") from None
    except (OSError, _Refused) as exc:
        shutil.rmtree(staging, ignore_errors=True)
        raise _Refused(f"{target}: not promoted ({exc}); nothing was written") from None
    from audit.reports.safe_output import terminal_text

    sys.stdout.write(terminal_text(f"promoted {manifest['pipeline']} counterexample to {target}\n"
                                   f"expected outcome recorded: {json.dumps(expected)}\n"))
    return 0


def _copy_regular_file(src: Path, dst: Path) -> None:
    """Copy bytes of a regular file without following a link swapped in meanwhile."""
    from audit.documents.loading import max_input_bytes

    flags = os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0)
    fd = os.open(src, flags)
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode) or st.st_size > max_input_bytes():
            raise _Refused(f"{src}: is not a regular file within the input size limit")
        with os.fdopen(os.dup(fd), "rb") as fin, open(dst, "xb") as fout:
            shutil.copyfileobj(fin, fout)
    finally:
        os.close(fd)


def _expected_outcome(directory: Path, manifest: dict[str, Any],
                      files: dict[str, str]) -> dict[str, Any]:
    """What lti-audit says now: the verdict on the stored pair and the pipeline outcome."""
    from audit.documents.loading import load_realization
    from audit.verdict.compare import Options, compare_pair

    expected: dict[str, Any] = {"pipeline_outcome": manifest.get("outcome")}
    if "reference" in files and "converted" in files:
        r1 = load_realization(directory / files["reference"])
        r2 = load_realization(directory / files["converted"])
        rtol = manifest.get("rtol")
        seconds = manifest.get("escalation_seconds")
        opts = Options(rtol=1e-5 if rtol is None else float(rtol),
                       escalation_seconds=2.0 if seconds is None else float(seconds))
        expected["compare_verdict"] = compare_pair(r1, r2, options=opts).verdict
    return expected
