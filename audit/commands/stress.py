"""``lti-audit stress``: a property-based stress campaign over model-conversion pipelines.

Draws random systems (deterministically from ``--seed``), runs every pipeline (lti-audit's
own conversions and forms, scipy.signal's and python-control's conversions, properties of
the verdict), audits each result with the verdict, shrinks failures, and writes
``campaign.json``, ``campaign.md``, ``envelope.png`` and ``counterexamples/`` to ``--out``.

Exit status: 0 no pipeline failed; 1 some pipeline failed (counterexamples written);
2 invalid usage.  The numerics live in :mod:`audit.workflows.stress`; this module only parses
arguments, shows progress on stderr and writes files.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import Any

from audit.commands._options import positive_number, whole_number

NAME = "stress"
HELP = "stress model conversions with random systems; report pass rates, envelopes, counterexamples"


def _shard(text: str) -> tuple[int, int]:
    try:
        i, n = (int(x) for x in text.split("/"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"--shard must look like i/N (e.g. 0/4), got {text!r}") from None
    if not (n >= 1 and 0 <= i < n):
        raise argparse.ArgumentTypeError(f"--shard i/N needs 0 <= i < N, got {text!r}")
    return i, n


def add_arguments(parser: argparse.ArgumentParser) -> None:
    limit = parser.add_mutually_exclusive_group()
    limit.add_argument("--budget", type=whole_number(0), metavar="N",
                       help="number of random systems of the whole campaign (default 20)")
    limit.add_argument("--minutes", type=positive_number, metavar="M",
                       help="stop submitting new systems after M minutes (the set completed then "
                       "depends on machine speed; --budget is exactly reproducible)")
    parser.add_argument("--seed", type=whole_number(0), default=0, help="campaign seed (default 0)")
    parser.add_argument("--workers", type=whole_number(1), default=None, metavar="K",
                        help="worker processes of the local Dask cluster (default: number of "
                        "CPUs; 1 runs in this process)")
    parser.add_argument("--scheduler", metavar="tcp://HOST:PORT", default=None,
                        help="submit the cases to this existing Dask scheduler instead of "
                        "starting local workers (the report is the same for the same seed)")
    parser.add_argument("--out", default="stress-report", metavar="DIR",
                        help="output directory; must be absent or empty (default ./stress-report)")
    parser.add_argument("--replace", action="store_true",
                        help="delete a previous campaign's report in --out first (only a folder "
                        "holding a campaign.json is deleted)")
    parser.add_argument("--shard", type=_shard, default=(0, 1), metavar="i/N",
                        help="run only the systems with index %% N == i (spread a campaign over "
                        "N machines; merge with --merge)")
    parser.add_argument("--pipeline", action="append", default=None, metavar="NAME",
                        help="run only this pipeline (repeatable; see --list-pipelines)")
    parser.add_argument("--max-order", type=whole_number(1), default=None, metavar="N",
                        help="largest order drawn (default 12)")
    parser.add_argument("--max-spread", type=positive_number, default=None, metavar="DECADES",
                        help="largest pole spread drawn, in decades (default 8)")
    parser.add_argument("--rtol", type=positive_number, default=None,
                        help="relative tolerance of the verdict (default 1e-5)")
    parser.add_argument("--merge", nargs="+", default=None, metavar="SHARD_DIR",
                        help="merge the campaign.json of shard directories into --out instead of running")
    parser.add_argument("--list-pipelines", action="store_true", help="list the pipelines and exit")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")


class _Progress:
    """A plain-text progress bar on stderr, one line per update (CI-log friendly)."""

    def __init__(self, quiet: bool, minutes: float | None) -> None:
        self.quiet = quiet
        self.minutes = minutes
        self.start = time.perf_counter()
        self.last_time = -1e9
        self.last_step = -1

    def __call__(self, done: int, planned: int | None, failures: int) -> None:
        if self.quiet:
            return
        now = time.perf_counter() - self.start
        if planned:
            step = (20 * done) // planned
            if step == self.last_step and now - self.last_time < 10 and done != planned:
                return
            bar = "#" * step + "-" * (20 - step)
            text = f"stress: [{bar}] {done}/{planned} systems, {failures} failure(s), {now:.0f} s"
            self.last_step = step
        else:
            if now - self.last_time < 5:
                return
            limit = f" of {60 * self.minutes:.0f} s" if self.minutes else ""
            text = f"stress: {done} systems, {failures} failure(s), {now:.0f} s{limit}"
        self.last_time = now
        sys.stderr.write(text + "\n")
        sys.stderr.flush()


def run(args: argparse.Namespace) -> int:
    from audit.workflows import stress

    if args.list_pipelines:
        for name, p in stress.pipelines().items():
            sys.stdout.write(f"{name}\t{p.description}\n")
        return 0
    out = Path(args.out)
    from audit.reports.safe_output import new_output_directory

    if args.replace:
        problem = _remove_previous_campaign(out)
        if problem:
            sys.stderr.write(f"lti-audit: error: --out: {problem}\n")
            return 2
    new_output_directory(out, flag="--replace")  # a fresh or empty folder: campaigns never mix
    if args.merge:
        reports = []
        for d in args.merge:
            path = Path(d) / "campaign.json"
            if not path.exists() and not path.is_symlink():
                sys.stderr.write(f"lti-audit: error: --merge: {path} does not exist\n")
                return 2
            reports.append(stress.read_campaign_report(path))
        merged: Any = stress.merge_campaigns(reports)
        paths = stress.write_reports(merged, out)
        sys.stderr.write(f"stress: merged {len(reports)} shard(s) into {paths['markdown']}\n")
        return 1 if _failures(merged) else 0
    settings = stress.CampaignSettings(
        max_order=args.max_order or stress.DEFAULT_MAX_ORDER,
        max_spread_decades=args.max_spread or stress.DEFAULT_MAX_SPREAD_DECADES,
        rtol=args.rtol or stress.DEFAULT_RTOL,
        pipelines=tuple(args.pipeline or ()),
    )
    budget = args.budget if args.budget is not None or args.minutes is not None else 20
    workers = args.workers or stress.default_workers()
    result = stress.run_campaign(budget=budget, minutes=args.minutes, seed=args.seed,
                                 workers=workers, shard=args.shard, settings=settings,
                                 progress=_Progress(args.quiet, args.minutes),
                                 scheduler=args.scheduler)
    try:
        paths = stress.write_reports(result, out)
    except FileExistsError as exc:
        sys.stderr.write(f"lti-audit: error: {exc} (use a fresh --out directory)\n")
        return 2
    report = result.as_dict()
    if not args.quiet:
        sys.stderr.write(f"stress: {report['completed_cases']} systems, {report['audits']} audits in "
                         f"{report['seconds']:.1f} s; report {paths['markdown']}\n")
    return 1 if _failures(report) else 0


def _remove_previous_campaign(out: Path) -> str | None:
    """``--replace``: delete ``out`` if it holds a previous campaign (a ``campaign.json``).

    Any other non-empty folder is refused (returns the problem); links and files are left
    to the output rule (:func:`audit.reports.safe_output.new_output_directory`) to refuse.
    """
    import shutil

    if out.is_symlink() or not out.is_dir() or not any(out.iterdir()):
        return None
    if not (out / "campaign.json").is_file():
        return (f"{out} is not empty and holds no campaign.json: --replace deletes only a "
                "previous campaign's report folder")
    shutil.rmtree(out)
    return None


def _failures(report: dict[str, Any]) -> int:
    return sum(v["counts"]["fail"] + v["counts"]["error"] for v in report["pipelines"].values())
