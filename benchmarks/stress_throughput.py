"""Stress-campaign throughput against the number of Dask workers: 1, 2 and every CPU.

Runs the same deterministic campaign (same seed, same budget, all pipelines) in one
process (1 worker, no cluster) and on local Dask clusters of 2 and of ``os.cpu_count()``
worker processes (the same count is run once), or with ``--scheduler`` on an existing
cluster, and prints one table row per run. A "system" is one random model pushed through
every applicable pipeline (about 20 audits each). Shrinking of failures is switched off
(``max_counterexamples=0``) so that the rows measure auditing throughput only. Each
local cluster is started and warmed up (every worker imports the libraries and runs one
case) before the campaign is timed; the start-up and warm-up time is printed in its own
column. Every run's report is checked to equal the single-process one
(:func:`audit.workflows.stress.reproducible_part`).

Usage: python benchmarks/stress_throughput.py [--budget N] [--seed S] [--max-order N]
       [--scheduler tcp://HOST:PORT]
"""

from __future__ import annotations

import argparse
import os
import time

from dataclasses import replace

from audit.workflows.stress import CampaignSettings, pipelines, reproducible_part, run_campaign, run_case


def _warm(settings: CampaignSettings) -> None:
    """Import everything and run one case (on a Dask worker: warms that process)."""
    run_case(0, replace(settings, pipelines=tuple(pipelines())))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--budget", type=int, default=16)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--max-order", type=int, default=8)
    parser.add_argument("--scheduler", default=None,
                        help="also run on this existing Dask scheduler")
    args = parser.parse_args()
    settings = CampaignSettings(max_order=args.max_order, max_counterexamples=0)
    runs: list[tuple[str, int, str | None]] = [("in process", 1, None)]
    for n in sorted({2, os.cpu_count() or 1}):
        if n > 1:
            runs.append((f"local cluster, {n} processes", n, None))
    if args.scheduler:
        runs.append((f"scheduler {args.scheduler}", 0, args.scheduler))
    rows = []
    reference = None
    for label, workers, scheduler in runs:
        from distributed import Client, LocalCluster

        t0 = time.perf_counter()
        cluster = None
        if workers > 1:
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                   host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                   worker_dashboard_address="127.0.0.1:0")
            scheduler = cluster.scheduler_address
        if scheduler:
            with Client(scheduler, set_as_default=False) as client:
                client.run(_warm, settings)
        else:
            _warm(settings)
        warm_seconds = time.perf_counter() - t0
        start = time.perf_counter()
        try:
            result = run_campaign(budget=args.budget, seed=args.seed, workers=1,
                                  settings=settings, scheduler=scheduler)
        finally:
            if cluster is not None:
                cluster.close()
        seconds = time.perf_counter() - start
        rep = reproducible_part(result.as_dict())
        reference = reference or rep
        audits = sum(v["audited"] for v in result.summary.values())
        rows.append((label, result.workers, len(result.records), audits, seconds,
                     rep == reference, warm_seconds))
    base = rows[0][2] / rows[0][4]
    print(f"stress throughput (seed {args.seed}, budget {args.budget}, orders 1..{args.max_order}, "
          f"all pipelines, no shrinking, {os.cpu_count()} CPUs)")
    print("| run | workers | start-up + warm-up s | systems | audits | seconds | systems/s "
          "| systems/s per worker | audits/s | speed-up | same report |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for label, workers, systems, audits, seconds, same, warm in rows:
        rate = systems / seconds
        print(f"| {label} | {workers} | {warm:.1f} | {systems} | {audits} | {seconds:.1f} "
              f"| {rate:.3f} | {rate / workers:.3f} | {audits / seconds:.1f} "
              f"| {rate / base:.2f}x | {'yes' if same else 'NO'} |")


if __name__ == "__main__":
    main()
