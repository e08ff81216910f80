"""``lti-audit promote``: turn a stress-campaign counterexample into a regression fixture.

Copies a counterexample directory written by ``lti-audit stress`` (its ``manifest.json``
and model documents) into ``fixtures/promoted/NAME/`` and records the expected outcome
(the pipeline, the property it broke, the verdict lti-audit gives on the stored pair now).
An existing fixture is never overwritten.  ``tests/test_promoted.py`` replays every
promoted fixture.

Exit status: 0 promoted; 2 invalid usage (missing manifest, existing name, ...).
"""

from __future__ import annotations

import argparse
import json
import re
import shutil
import sys
from pathlib import Path
from typing import Any

NAME = "promote"
HELP = "copy a stress counterexample into fixtures/promoted/NAME (replayed by the test suite)"

_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")


def default_fixture_root() -> Path:
    """``fixtures/promoted`` of the source tree this package lives in."""
    return Path(__file__).resolve().parents[2] / "fixtures" / "promoted"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("source", metavar="COUNTEREXAMPLE",
                        help="a counterexample directory (or a file in it) from lti-audit stress")
    parser.add_argument("--name", default=None,
                        help="fixture name (default: pipeline and case, e.g. scipy-transfer-function-round-trip-case7)")
    parser.add_argument("--into", default=None, metavar="DIR",
                        help=f"fixture root (default {default_fixture_root()})")


def _fail(message: str) -> int:
    sys.stderr.write(f"lti-audit: error: {message}\n")
    return 2


def run(args: argparse.Namespace) -> int:
    source = Path(args.source)
    directory = source if source.is_dir() else source.parent
    manifest_path = directory / "manifest.json"
    if not source.exists():
        return _fail(f"{source}: does not exist")
    if not manifest_path.is_file():
        return _fail(f"{directory}: has no manifest.json; expected a counterexample directory "
                     "written by 'lti-audit stress'")
    try:
        manifest: dict[str, Any] = json.loads(manifest_path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        return _fail(f"{manifest_path}: is not valid JSON ({exc})")
    if manifest.get("lti_audit_counterexample") != 1 or "pipeline" not in manifest:
        return _fail(f"{manifest_path}: is not a counterexample manifest (expected the key "
                     "'lti_audit_counterexample': 1 and a 'pipeline')")
    files = manifest.get("files") or {}
    missing = [f for f in files.values() if not (directory / f).is_file()]
    if missing:
        return _fail(f"{directory}: manifest lists {missing} but they are missing")
    from ..stress import slug

    name = args.name or f"{slug(manifest['pipeline'])}-case{manifest.get('case', 0)}"
    if not _NAME_RE.match(name):
        return _fail(f"--name: got {name!r} but letters, digits, '.', '_' or '-' were expected")
    root = Path(args.into) if args.into else default_fixture_root()
    target = root / name
    if target.exists():
        return _fail(f"{target}: a promoted fixture named {name!r} already exists; "
                     "choose another --name (fixtures are never overwritten)")
    expected = _expected_outcome(directory, manifest)
    root.mkdir(parents=True, exist_ok=True)
    tmp = root / f".{name}.tmp"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    for f in files.values():
        shutil.copy2(directory / f, tmp / f)
    manifest["promoted"] = {"from": str(directory), "expected": expected}
    (tmp / "manifest.json").write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    try:
        tmp.rename(target)
    except OSError:
        shutil.rmtree(tmp, ignore_errors=True)
        return _fail(f"{target}: appeared while promoting; not overwritten")
    sys.stdout.write(f"promoted {manifest['pipeline']} counterexample to {target}\n"
                     f"expected outcome recorded: {json.dumps(expected)}\n")
    return 0


def _expected_outcome(directory: Path, manifest: dict[str, Any]) -> dict[str, Any]:
    """What lti-audit says now: the verdict on the stored pair and the pipeline outcome."""
    from ..loading import load_realization
    from ..verdict import Options, compare_pair

    expected: dict[str, Any] = {"pipeline_outcome": manifest.get("outcome")}
    files = manifest.get("files") or {}
    if "reference" in files and "converted" in files:
        r1 = load_realization(directory / files["reference"])
        r2 = load_realization(directory / files["converted"])
        opts = Options(rtol=float(manifest.get("rtol", 1e-5)),
                       escalation_seconds=float(manifest.get("escalation_seconds", 2.0)))
        expected["compare_verdict"] = compare_pair(r1, r2, options=opts).verdict
    return expected
