"""Speed of lti-audit: end-to-end audit, frequency response, scaling with order, start-up.

Usage::

    python benchmarks/speed.py [--quick] [--repeat R]

(a) a 100-state SISO claimed-equivalent pair audited end to end
    (:func:`audit.verdict.compare_pair`), median wall-clock time;
(b) frequency response of a 200-state 2x2 model at 1000 frequencies:
    :func:`audit.frequency.frequency_response` against python-control's
    ``StateSpace.frequency_response`` (slycot TB05AD when slycot is installed), both
    timed in the same run, both checked against a 128-bit python-flint evaluation of the
    stored model at 20 of the frequencies;
(c) time per piece of evidence (the ``seconds`` stamped on each evidence object) and of
    the building blocks (minimal_realization, peak_gain, TransferEvaluator at 1000
    points, markov_parameters, similarity_transform_between) for orders 10..200, SISO
    and 4x4;
(d) start-up time of ``lti-audit --help`` (subprocess) and which heavy modules it loads.

Timings are wall-clock on whatever machine runs this; they are noisy when other
processes compete for the cores.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path
from typing import Any, Callable

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import _cases as cs  # noqa: E402
from audit.realization import Realization  # noqa: E402


def _median_time(fn: Callable[[], Any], repeat: int) -> tuple[float, Any]:
    times, out = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times), out


def _pair(seed: int, n: int, io: tuple[int, int], *, cond: float = 1e3,
          spread: float = 4.0) -> tuple[Realization, Realization]:
    rng = np.random.default_rng(seed)
    poles = cs.random_poles(rng, n, spread_decades=spread, damping=(1e-2, 0.7))
    r1 = cs.reference_model(rng, poles, inputs=io[0], outputs=io[1], name="reference")
    t = cs.conditioned_transform(rng, n, cond)
    return r1, cs.transform_in_extended_precision(r1, t, name="claimed")


# ----------------------------------------------------------------------- (a)
def end_to_end(n: int, repeat: int) -> dict[str, Any]:
    from audit.verdict import compare_pair

    r1, r2 = _pair(1, n, (1, 1))
    t, pc = _median_time(lambda: compare_pair(r1, r2), repeat)
    return {"order": n, "median_seconds": t, "repeat": repeat, "verdict": pc.verdict,
            "evidence_seconds": {e.key: e.seconds for e in pc.evidence}}


# ----------------------------------------------------------------------- (b)
def frequency_response_race(n: int, points: int, repeat: int, check_points: int) -> dict[str, Any]:
    import control
    import flint

    from audit.frequency import frequency_response

    _, r = _pair(2, n, (2, 2))
    omega = np.geomspace(1e-3, 1e3, points)
    sys_ = control.StateSpace(r.a, r.b, r.c, r.d)
    t_ours, g_ours = _median_time(lambda: frequency_response(r, omega), repeat)
    t_ctrl, resp = _median_time(lambda: sys_.frequency_response(omega), repeat)
    g_ctrl = np.moveaxis(np.asarray(resp.frdata).reshape(2, 2, points), 2, 0)
    idx = np.unique(np.linspace(0, points - 1, check_points).round().astype(int))
    old = flint.ctx.prec
    flint.ctx.prec = cs.VERIFY_BITS
    try:
        model = cs._BallModel(flint, r)
        ref = np.stack([cs._acb_to_complex(model.at(flint.acb(0, float(omega[k])), rigorous=False))
                        for k in idx])
    finally:
        flint.ctx.prec = old
    norm_ref = np.linalg.norm(ref, 2, axis=(1, 2))
    err_ours = np.linalg.norm(g_ours[idx] - ref, 2, axis=(1, 2)) / norm_ref
    err_ctrl = np.linalg.norm(g_ctrl[idx] - ref, 2, axis=(1, 2)) / norm_ref
    return {"order": n, "points": points, "ours_seconds": t_ours, "control_seconds": t_ctrl,
            "speed_ratio": t_ctrl / t_ours, "ours_max_rel_error": float(err_ours.max()),
            "control_max_rel_error": float(err_ctrl.max()),
            "ours_median_rel_error": float(np.median(err_ours)),
            "control_median_rel_error": float(np.median(err_ctrl)),
            "checked_points": int(idx.size)}


# ----------------------------------------------------------------------- (c)
def scaling(orders: list[int], ios: list[tuple[int, int]], *, audit_max_order: int) -> list[dict[str, Any]]:
    from audit.frequency import TransferEvaluator
    from audit.markov import common_frequency_scale, markov_parameters
    from audit.norms import peak_gain
    from audit.similarity import similarity_transform_between
    from audit.structure import minimal_realization
    from audit.verdict import compare_pair

    # warm-up: first calls pay for lazy imports (scipy.sparse, slycot, ...); keep that
    # out of the table
    w1, w2 = _pair(0, 4, (2, 2))
    compare_pair(w1, w2)
    similarity_transform_between(w1, w2)
    rows = []
    for io in ios:
        for n in orders:
            r1, r2 = _pair(3 + n, n, io)
            row: dict[str, Any] = {"order": n, "io": f"{io[1]}x{io[0]}"}
            t0 = time.perf_counter()
            minimal_realization(r2)
            row["minimal_realization"] = time.perf_counter() - t0
            t0 = time.perf_counter()
            peak_gain(r2)
            row["peak_gain"] = time.perf_counter() - t0
            pts = 1j * np.geomspace(1e-3, 1e3, 1000)
            t0 = time.perf_counter()
            TransferEvaluator(r2).at(pts)
            row["transfer_evaluator_1000"] = time.perf_counter() - t0
            t0 = time.perf_counter()
            markov_parameters(r2, 2 * n + 1, frequency_scale=common_frequency_scale(r1, r2))
            row["markov_parameters"] = time.perf_counter() - t0
            t0 = time.perf_counter()
            similarity_transform_between(r1, r2)
            row["similarity"] = time.perf_counter() - t0
            if n <= audit_max_order:
                t0 = time.perf_counter()
                pc = compare_pair(r1, r2)
                row["compare_pair"] = time.perf_counter() - t0
                row["verdict"] = pc.verdict
                row["evidence"] = {e.key.split(":")[0] + (":2" if e.key.endswith("model") and "second" in e.key else ""): e.seconds
                                   for e in pc.evidence}
            rows.append(row)
    return rows


# ----------------------------------------------------------------------- (d)
def startup(repeat: int, *, quick: bool = False) -> dict[str, Any]:
    exe = Path(sys.executable).with_name("lti-audit")
    cmd_help = [str(exe), "--help"] if exe.exists() else [sys.executable, "-m", "audit.cli", "--help"]
    env = dict(os.environ)

    def run(cmd: list[str]) -> float:
        start = time.perf_counter()
        subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=False, env=env)
        return time.perf_counter() - start

    out = {}
    commands = [
        ("python -c pass", [sys.executable, "-c", "pass"]),
        ("python -c 'import numpy'", [sys.executable, "-c", "import numpy"]),
        ("python -c 'import scipy.signal, control'", [sys.executable, "-c", "import scipy.signal, control"]),
        ("lti-audit --help", cmd_help),
    ]
    if quick:
        commands = [commands[0], commands[-1]]
    for label, cmd in commands:
        out[label] = statistics.median(run(cmd) for _ in range(repeat))
    probe = (
        "import sys, audit.cli; audit.cli.build_parser(); "
        "print(','.join(m for m in ('numpy', 'scipy', 'control', 'slycot', 'flint', 'mpmath', "
        "'pydantic', 'yaml') if m in sys.modules))"
    )
    res = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=False)
    out["modules_loaded_by_parser"] = res.stdout.strip() or "(none)"
    return out


# ----------------------------------------------------------------------- output
def render(a: dict[str, Any], b: dict[str, Any], c: list[dict[str, Any]], d: dict[str, Any]) -> str:
    lines = ["# Speed benchmark", ""]
    lines.append(f"(a) compare_pair, {a['order']}-state SISO equivalent pair: median "
                 f"{a['median_seconds']:.2f} s over {a['repeat']} run(s), verdict {a['verdict']}")
    ev = ", ".join(f"{k} {v:.2f}" for k, v in a["evidence_seconds"].items())
    lines.append(f"    evidence seconds (last run): {ev}")
    lines.append("")
    lines.append(f"(b) frequency response, {b['order']}-state 2x2 model, {b['points']} frequencies")
    lines.append("")
    lines.append("| implementation | seconds | max rel. error | median rel. error |")
    lines.append("|---|---|---|---|")
    lines.append(f"| audit.frequency.frequency_response | {b['ours_seconds']:.4f} | "
                 f"{b['ours_max_rel_error']:.1e} | {b['ours_median_rel_error']:.1e} |")
    lines.append(f"| control.StateSpace.frequency_response | {b['control_seconds']:.4f} | "
                 f"{b['control_max_rel_error']:.1e} | {b['control_median_rel_error']:.1e} |")
    lines.append(f"speed ratio (python-control / ours): {b['speed_ratio']:.1f}x; errors against a "
                 f"128-bit python-flint evaluation at {b['checked_points']} frequencies")
    one = b.get("single_thread")
    if one:
        lines.append(f"with OMP_NUM_THREADS=1 (subprocess): ours {one['ours_seconds']:.4f} s, "
                     f"python-control {one['control_seconds']:.4f} s, ratio {one['speed_ratio']:.1f}x")
    lines.append("")
    lines.append("(c) time [s] by order (claimed-equivalent pair, cond(T)=1e3, poles over 4 decades)")
    lines.append("")
    keys = ["minimal_realization", "peak_gain", "transfer_evaluator_1000", "markov_parameters",
            "similarity", "compare_pair"]
    ev_keys: list[str] = []
    for row in c:
        for k in row.get("evidence", {}):
            if k not in ev_keys:
                ev_keys.append(k)
    lines.append("| io | n | " + " | ".join(keys) + " |")
    lines.append("|---" * (len(keys) + 2) + "|")
    for row in c:
        vals = [f"{row[k]:.3f}" if k in row else "skipped" for k in keys]
        lines.append(f"| {row['io']} | {row['order']} | " + " | ".join(vals) + " |")
    lines.append("")
    lines.append("Evidence seconds inside compare_pair:")
    lines.append("")
    lines.append("| io | n | verdict | " + " | ".join(ev_keys) + " |")
    lines.append("|---" * (len(ev_keys) + 3) + "|")
    for row in c:
        if "evidence" not in row:
            continue
        vals = [f"{row['evidence'].get(k, float('nan')):.3f}" for k in ev_keys]
        lines.append(f"| {row['io']} | {row['order']} | {row['verdict']} | " + " | ".join(vals) + " |")
    lines.append("")
    lines.append("(d) start-up (median wall-clock of a subprocess)")
    lines.append("")
    lines.append("| command | seconds |")
    lines.append("|---|---|")
    for k, v in d.items():
        if k != "modules_loaded_by_parser":
            lines.append(f"| {k} | {v:.3f} |")
    lines.append(f"heavy modules loaded by building the lti-audit parser: {d['modules_loaded_by_parser']}")
    return "\n".join(lines)


def frequency_race_single_thread(n: int, points: int, repeat: int, check_points: int) -> dict[str, Any] | None:
    """(b) again in a subprocess with OMP_NUM_THREADS=OPENBLAS_NUM_THREADS=1."""
    import json

    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    code = (
        "import json, sys; sys.argv = ['speed']; "
        f"sys.path.insert(0, {str(Path(__file__).resolve().parent)!r}); import speed; "
        f"print(json.dumps(speed.frequency_response_race({n}, {points}, {repeat}, {check_points})))"
    )
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                         check=False)
    try:
        return json.loads(res.stdout.strip().splitlines()[-1])
    except (ValueError, IndexError):
        return None


def run(*, quick: bool, repeat: int) -> tuple[dict[str, Any], str]:
    if quick:
        a = end_to_end(8, 1)
        b = frequency_response_race(20, 100, 1, 5)
        c = scaling([4, 8], [(1, 1), (4, 4)], audit_max_order=8)
        d = startup(1, quick=True)
    else:
        a = end_to_end(100, repeat)
        b = frequency_response_race(200, 1000, repeat, 20)
        b["single_thread"] = frequency_race_single_thread(200, 1000, repeat, 20)
        c = scaling([10, 25, 50, 100, 200], [(1, 1), (4, 4)], audit_max_order=200)
        d = startup(5)
    result = {"end_to_end": a, "frequency_response": b, "scaling": c, "startup": d}
    return result, render(a, b, c, d)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="tiny sizes (seconds)")
    parser.add_argument("--repeat", type=int, default=3, help="repetitions for medians (full run)")
    args = parser.parse_args(argv)
    start = time.perf_counter()
    _, text = run(quick=args.quick, repeat=args.repeat)
    print(text)
    print(f"\ntotal wall-clock {time.perf_counter() - start:.1f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
