"""Replay every promoted stress counterexample under fixtures/promoted/.

Each fixture was written by ``lti-audit stress`` and copied by ``lti-audit promote``,
which recorded the expected outcome (``manifest.json`` -> ``promoted.expected``):

* ``compare_verdict``: what lti-audit's verdict says about the stored pair
  (reference.json, converted.json) -- it must still say so;
* ``pipeline_outcome``: what the pipeline, re-run on the stored input.json, is judged
  to be -- it must still be judged so.

When a deliberate fix changes an outcome (say a conversion now passes), update the
manifest's ``promoted.expected`` in the same change, so that the history stays explicit.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from audit.documents.loading import load_realization
from audit.workflows.strategies import SystemSpec
from audit.workflows.stress import pipelines, run_pipeline
from audit.verdict.compare import Options, compare_pair

ROOT = Path(__file__).resolve().parents[1] / "fixtures" / "promoted"
FIXTURES = sorted(p.parent for p in ROOT.glob("*/manifest.json"))


def _manifest(directory: Path) -> dict:
    return json.loads((directory / "manifest.json").read_text(encoding="utf-8"))


@pytest.mark.parametrize("directory", FIXTURES, ids=[d.name for d in FIXTURES])
def test_promoted_pair_verdict_is_unchanged(directory: Path) -> None:
    manifest = _manifest(directory)
    expected = manifest["promoted"]["expected"]
    if "compare_verdict" not in expected:
        pytest.skip("the pipeline raised: no pair to compare")
    files = manifest["files"]
    r1 = load_realization(directory / files["reference"])
    r2 = load_realization(directory / files["converted"])
    opts = Options(rtol=manifest["rtol"], escalation_seconds=manifest["escalation_seconds"])
    assert compare_pair(r1, r2, options=opts).verdict == expected["compare_verdict"]


@pytest.mark.parametrize("directory", FIXTURES, ids=[d.name for d in FIXTURES])
def test_promoted_pipeline_outcome_is_unchanged(directory: Path) -> None:
    manifest = _manifest(directory)
    registry = pipelines()
    if manifest["pipeline"] not in registry:
        pytest.fail(f"{directory.name}: pipeline {manifest['pipeline']!r} no longer exists; "
                    "retire the fixture deliberately")
    system = load_realization(directory / manifest["files"]["input"])
    result, _ = run_pipeline(registry[manifest["pipeline"]], system, SystemSpec(**manifest["spec"]),
                             rtol=manifest["rtol"], escalation_seconds=manifest["escalation_seconds"])
    assert result.outcome == manifest["promoted"]["expected"]["pipeline_outcome"], result.message


def test_promoted_fixtures_are_complete() -> None:
    for directory in FIXTURES:
        manifest = _manifest(directory)
        for name in manifest["files"].values():
            assert (directory / name).is_file(), f"{directory.name}: {name} missing"
        assert manifest["lti_audit_counterexample"] == 1 and "expected" in manifest["promoted"]
