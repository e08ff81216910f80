"""``lti-audit check [MANIFEST] [--against REF]``: the pre-merge check.

Runs every claim of the claims manifest (default ``lti-audit.toml`` in the current
directory; see :mod:`audit.workflows.manifest`) and, with ``--against REF``, audits every model
file changed between the git revision ``REF`` and the working tree (see
:mod:`audit.workflows.gitbase`). Without a manifest file, ``--against`` uses the default file
globs and the current directory.

Output: ``--format text|json|junit|markdown`` on stdout; ``--junit FILE``,
``--markdown FILE`` and ``--json FILE`` also write those reports under the tool's output
rule (:mod:`audit.reports.safe_output`: atomically, never through a symbolic link, never over a
model file or the manifest, and over an existing report only with ``--overwrite``). Exit status: 0 every claim holds and no changed file changed behaviour;
1 a claim fails or a file's behaviour changed; 2 invalid input (bad manifest, missing or
invalid model file, unknown REF) or usage; 3 otherwise inconclusive.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path
from typing import Any

from audit.commands._options import relative_tolerance, seconds

NAME = "check"
HELP = "check a claims manifest (lti-audit.toml) and, with --against REF, the model files changed since a git revision"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """Options of ``lti-audit check``."""
    parser.add_argument("manifest", nargs="?", default=None, metavar="MANIFEST",
                        help="claims manifest (TOML); default lti-audit.toml in the current "
                        "directory")
    parser.add_argument("--against", metavar="REF", default=None,
                        help="also audit the model files changed between the git revision REF "
                        "and the working tree (e.g. origin/main)")
    parser.add_argument("--rtol", type=relative_tolerance, default=None,
                        help="default relative tolerance for claims without their own "
                        "(default: the manifest's rtol, else 1e-5)")
    parser.add_argument("--format", choices=("text", "json", "junit", "markdown"),
                        default="text", help="what to print on stdout (default text)")
    parser.add_argument("--junit", metavar="FILE", default=None,
                        help="also write a JUnit XML report to FILE")
    parser.add_argument("--markdown", metavar="FILE", default=None,
                        help="also write a Markdown summary (merge-request comment) to FILE")
    parser.add_argument("--json", metavar="FILE", default=None,
                        help="also write the JSON report to FILE")
    parser.add_argument("--overwrite", action="store_true",
                        help="replace existing --junit/--markdown/--json report files (never "
                        "a model file, the manifest or a symbolic link)")
    parser.add_argument("--escalation-seconds", type=seconds, default=None,
                        help="extended-precision budget per comparison (0 disables it)")


def run(args: argparse.Namespace) -> int:
    """Run the check; return the exit status (see the module docstring)."""
    from audit.reports.ci_outputs import (
        CheckRun,
        render_check_json,
        render_check_text,
        render_junit_xml,
        render_markdown,
        write_output,
    )
    from audit.workflows.manifest import (
        DEFAULT_MANIFEST_NAME,
        default_manifest,
        evaluate_claims,
        load_claims_manifest,
    )

    from audit.reports.ci_outputs import check_report_target

    for option in ("junit", "markdown", "json"):  # refuse before the audits run
        target = getattr(args, option)
        if target is not None:
            check_report_target(target, overwrite=args.overwrite)
    start = time.perf_counter()
    if args.manifest is None and args.against is not None and not Path(DEFAULT_MANIFEST_NAME).exists():
        manifest = default_manifest(Path.cwd())
    else:
        path = args.manifest if args.manifest is not None else DEFAULT_MANIFEST_NAME
        if args.manifest is None and not Path(path).exists():
            sys.stderr.write(
                f"lti-audit: error: {path}: manifest not found in {os.getcwd()}; name one "
                "(lti-audit check path/to/lti-audit.toml) or use --against REF to audit "
                "changed model files without a manifest\n")
            return 2
        manifest = load_claims_manifest(path)
    claims = evaluate_claims(manifest, rtol=args.rtol, escalation_seconds=args.escalation_seconds)
    changes: tuple[Any, ...] = ()
    commit = None
    skipped: tuple[str, ...] = ()
    if args.against is not None:
        from audit.workflows.gitbase import classify_changes

        changes, commit, skipped = classify_changes(
            manifest, args.against, rtol=args.rtol, escalation_seconds=args.escalation_seconds)
    result = CheckRun(
        manifest=None if manifest.path is None else str(manifest.path),
        directory=str(manifest.directory),
        claims=claims,
        changes=changes,
        against=args.against,
        against_commit=commit,
        skipped_files=skipped,
        rtol=args.rtol,
        seconds=time.perf_counter() - start,
    )
    protected = _protected_files(manifest, claims, changes)
    renderers = {"text": render_check_text, "json": render_check_json,
                 "junit": render_junit_xml, "markdown": render_markdown}
    for option, fmt in (("junit", "junit"), ("markdown", "markdown"), ("json", "json")):
        target = getattr(args, option)
        if target is not None:
            write_output(target, renderers[fmt](result), protected=protected,
                         overwrite=args.overwrite)
    sys.stdout.write(renderers[args.format](result))
    return result.exit_status


def _protected_files(manifest: Any, claims: Any, changes: Any) -> list[Path]:
    out = []
    if manifest.path is not None:
        out.append(Path(manifest.path))
    for c in claims:
        out.extend(manifest.directory / m for m in c.models)
    for cl in manifest.content.claims:
        if cl.discretization is not None:
            out.append(manifest.directory / cl.discretization.of)
    for f in changes:
        out.append(manifest.directory / f.path)
    return out
