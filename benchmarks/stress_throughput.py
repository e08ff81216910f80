"""Stress-campaign throughput: systems audited per second per worker, and 1 -> 2 worker scaling.

Runs the same deterministic campaign (same seed, same budget, all pipelines) with 1 and
with 2 worker processes and prints one table row per worker count.  A "system" is one
random model pushed through every applicable pipeline (about 20 audits each).  Shrinking
of failures is switched off (``max_counterexamples=0``) so that the rows measure auditing
throughput only; worker start-up is included.

Usage: python benchmarks/stress_throughput.py [--budget N] [--seed S] [--max-order N]
"""

from __future__ import annotations

import argparse
import time

from audit.stress import CampaignSettings, run_campaign


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--budget", type=int, default=16)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--max-order", type=int, default=8)
    args = parser.parse_args()
    settings = CampaignSettings(max_order=args.max_order, max_counterexamples=0)
    rows = []
    for workers in (1, 2):
        start = time.perf_counter()
        result = run_campaign(budget=args.budget, seed=args.seed, workers=workers, settings=settings)
        seconds = time.perf_counter() - start
        audits = sum(v["audited"] for v in result.summary.values())
        rows.append((workers, len(result.records), audits, seconds))
    base = rows[0][1] / rows[0][3]
    print(f"stress throughput (seed {args.seed}, budget {args.budget}, orders 1..{args.max_order}, "
          "all pipelines, no shrinking)")
    print("| workers | systems | audits | seconds | systems/s | systems/s per worker | audits/s | speed-up |")
    print("|---|---|---|---|---|---|---|---|")
    for workers, systems, audits, seconds in rows:
        rate = systems / seconds
        print(f"| {workers} | {systems} | {audits} | {seconds:.1f} | {rate:.3f} | {rate / workers:.3f} "
              f"| {audits / seconds:.1f} | {rate / base:.2f}x |")


if __name__ == "__main__":
    main()
