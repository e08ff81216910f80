"""Speed of lti-audit: end-to-end audit, frequency response, scaling with order, start-up.

Usage::

    python benchmarks/speed.py [--quick] [--repeat R] [--case-budget S] [--ladder-only]
                               [--sparse-ladder]

(a) a 100-state SISO claimed-equivalent pair audited end to end
    (:func:`audit.verdict.compare.compare_pair`), median wall-clock time;
(b) frequency response of a 200-state 2x2 model at 1000 frequencies:
    :func:`audit.evidence.frequency.frequency_response` against python-control's
    ``StateSpace.frequency_response`` (slycot TB05AD when slycot is installed), both
    timed in the same run, both checked against a 128-bit python-flint evaluation of the
    stored model at 20 of the frequencies;
(c) time per piece of evidence (the ``seconds`` stamped on each evidence object) and of
    the building blocks (minimal_realization, peak_gain, TransferEvaluator at 1000
    points, markov_parameters, similarity_transform_between) for orders 10..200, SISO
    and 4x4;
(d) start-up time of ``lti-audit --help`` (subprocess) and which heavy modules it loads;
(e) a size ladder (SISO, 3x3, 10x10; 50 to 1500 states): each pair audited end to end in
    its own subprocess (wall-clock, CPU time, peak resident memory, verdict), equivalent
    by an exact change of coordinates (states scaled by powers of two and permuted) and
    different by one pole moved by 1e-3 of its modulus; a series stops climbing when a
    case exceeds ``--case-budget`` seconds;
(f) the published benchmark models in ``benchmarks/data`` (Chahlaoui and Van Dooren,
    SLICOT Working Note 2002-2): the same audits, and the frequency response on the
    adaptive grid against python-control's, timed in the same run (CPU seconds, one
    BLAS thread each), both checked against a python-flint ball evaluation of the stored
    matrices whose precision is raised until the radius is below 1e-20 of the value
    (pointwise error relative to the local value);
(g) a sparse ladder (2,000 to 20,000 states; the reheating-bar finite-difference model of
    ``benchmarks/_sparse_cases.py``): each pair audited from .npz files in its own
    subprocess by the sampled sparse route (:func:`audit.documents.sparse.compare_sparse_pair`,
    sampled evidence accepted), against a rational Krylov reduced model, against a
    refactored sparse copy (states scaled by powers of two and permuted: exact; bar only), and
    against a copy with the loss coefficient moved by 1e-3; wall-clock, CPU, peak
    resident memory, grid points, verdict. ``--sparse-ladder`` runs only this table.

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
from audit.core.realization import Realization  # noqa: E402


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
    from audit.verdict.compare import compare_pair

    r1, r2 = _pair(1, n, (1, 1))
    t, pc = _median_time(lambda: compare_pair(r1, r2), repeat)
    return {"order": n, "median_seconds": t, "repeat": repeat, "verdict": pc.verdict,
            "evidence_seconds": {e.key: e.seconds for e in pc.evidence}}


# ----------------------------------------------------------------------- (b)
def frequency_response_race(n: int, points: int, repeat: int, check_points: int) -> dict[str, Any]:
    import control
    import flint

    from audit.evidence.frequency import frequency_response

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
    from audit.evidence.frequency import TransferEvaluator
    from audit.evidence.markov import common_frequency_scale, markov_parameters
    from audit.evidence.peak_gain import peak_gain
    from audit.evidence.similarity import similarity_transform_between
    from audit.structure.minimal import minimal_realization
    from audit.verdict.compare import compare_pair

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
    lines.append(f"| audit.evidence.frequency.frequency_response | {b['ours_seconds']:.4f} | "
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


# ----------------------------------------------------------------------- (e) / (f)
DATA = Path(__file__).resolve().parent / "data"
PUBLISHED = ["build48", "cdplayer120", "heat200", "iss270"]


def _exact_coordinate_change(r: Realization, seed: int, name: str) -> Realization:
    """States scaled by powers of two and permuted: exact in doubles, same system."""
    rng = np.random.default_rng(seed)
    n = r.order
    s = 2.0 ** rng.integers(-4, 5, n)
    p = rng.permutation(n)
    a = (r.a * s[:, None] / s[None, :])[np.ix_(p, p)]
    return Realization.from_arrays(a, (r.b * s[:, None])[p], (r.c / s[None, :])[:, p], r.d,
                                   r.sample_period, name=name)


def ladder_pair(n: int, io: tuple[int, int], kind: str, seed: int = 11) -> tuple[Realization, Realization]:
    """A dense random reference (poles over 4 decades, damping 1e-2..0.7, rotated by a random
    orthogonal matrix) and its equivalent or different partner."""
    rng = np.random.default_rng([seed, n, io[0], io[1]])
    poles = cs.random_poles(rng, n, spread_decades=4.0, damping=(1e-2, 0.7))
    modal = cs.reference_model(rng, poles, inputs=io[0], outputs=io[1], name="reference")
    q, _ = np.linalg.qr(rng.standard_normal((n, n)))
    def rotated(a: np.ndarray, name: str) -> Realization:
        return Realization.from_arrays(q.T @ a @ q, q.T @ modal.b, modal.c @ q, modal.d, name=name)
    ref = rotated(modal.a, "reference")
    if kind == "equivalent":
        return ref, _exact_coordinate_change(ref, seed + n, "claimed")
    moved = list(poles)
    j = int(np.argmin([abs(p.real) / max(abs(p), 1e-300) for p in moved]))  # most lightly damped
    moved[j] = moved[j] * (1 + 1e-3)
    a2 = cs.block_diagonal_state_matrix(moved)
    return ref, rotated(a2, "claimed")


def published_pair(name: str, kind: str) -> tuple[Realization, Realization]:
    from audit.documents.loading import load_realization

    r = load_realization(DATA / f"{name}.json").with_name(name)
    if kind == "equivalent":
        return r, _exact_coordinate_change(r, 7, name + " (rescaled, permuted)")
    a = np.array(r.a)
    i = int(np.argmax(np.abs(np.diag(a)) > 0))
    a[i, i] *= 1 + 1e-3  # a small move of the state matrix: a few poles move
    return r, Realization.from_arrays(a, r.b, r.c, r.d, r.sample_period, name=name + " (moved)")


def _case_in_process(spec: dict[str, Any]) -> dict[str, Any]:
    import resource

    from audit.core.threads import set_audit_threads
    from audit.verdict.compare import compare_pair

    set_audit_threads()  # as the command line does for one audit
    if spec["source"] == "ladder":
        r1, r2 = ladder_pair(spec["n"], tuple(spec["io"]), spec["kind"])
    else:
        r1, r2 = published_pair(spec["name"], spec["kind"])
    wall, cpu = time.perf_counter(), time.process_time()
    pc = compare_pair(r1, r2)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    decisive = next(e for e in pc.evidence if e.decisive)
    return {"verdict": pc.verdict, "seconds": wall, "cpu_seconds": cpu,
            "decisive_seconds": decisive.seconds,
            "peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
            "load": os.getloadavg()[0]}


def _sparse_case_in_process(spec: dict[str, Any]) -> dict[str, Any]:
    import resource
    import tempfile

    import scipy.sparse as sp
    from _sparse_cases import LOSS, SLAB_LOSS, floor_slab, krylov_reduced, reheating_bar

    from audit.core.threads import set_audit_threads
    from audit.documents.loading import load_model_document
    from audit.documents.sparse import (compare_sparse_pair, model_for_comparison,
                                     save_sparse_model_npz)

    set_audit_threads()
    n, kind = spec["n"], spec["kind"]
    slab = spec.get("model") == "slab"
    side = int(round(n ** 0.5))

    def build(moved: bool = False) -> Any:
        if slab:
            return floor_slab(side, loss=SLAB_LOSS * (1 + 1e-3) if moved else SLAB_LOSS)
        return reheating_bar(n, loss=LOSS * (1 + 1e-3) if moved else LOSS)

    bar = build()
    n = bar.order
    extra: dict[str, Any] = {}
    with tempfile.TemporaryDirectory() as tmp:
        first = Path(tmp) / "bar.npz"
        save_sparse_model_npz(first, bar.a, bar.b, bar.c, bar.d)
        if kind == "reduced":
            t = time.perf_counter()
            other: Any = krylov_reduced(bar)
            extra = {"reduction_seconds": time.perf_counter() - t, "reduced_order": other.order}
        else:
            if kind == "refactored":
                rng = np.random.default_rng(5)
                perm = sp.identity(n, format="csr")[rng.permutation(n)]
                scale = sp.diags(2.0 ** rng.integers(-6, 7, n))
                inv = sp.diags(1.0 / scale.diagonal())
                a, b, c = perm @ scale @ bar.a @ inv @ perm.T, perm @ (scale @ bar.b), \
                    bar.c @ inv @ perm.T
            else:
                moved = build(moved=True)
                a, b, c = moved.a, moved.b, moved.c
            second = Path(tmp) / "other.npz"
            save_sparse_model_npz(second, a, b, c, bar.d)
        wall, cpu = time.perf_counter(), time.process_time()
        r1 = model_for_comparison(load_model_document(first)).with_name("bar")
        if kind != "reduced":
            other = model_for_comparison(load_model_document(second)).with_name(kind)
        pc = compare_sparse_pair(r1, other, accept_sampled=True)
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    decisive = pc.evidence[0]
    return {"verdict": pc.verdict, "seconds": wall, "cpu_seconds": cpu, "n": n,
            "points": decisive.details["grid"]["points"], "nnz": int(bar.a.nnz),
            "peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
            "load": os.getloadavg()[0], **extra}


SPARSE_LADDER = [2000, 5000, 10000, 20000]


def sparse_ladder(orders: list[int], budget: float) -> list[dict[str, Any]]:
    rows = []
    for model in ("bar", "slab"):
        for n in orders:
            # the rescaled, permuted slab is left out: partial pivoting on its rescaled
            # rows fills the LU (a 5,000-node case ran for minutes; see README)
            kinds = ("reduced", "refactored", "moved") if model == "bar" else ("reduced", "moved")
            for kind in kinds:
                row: dict[str, Any] = {"n": n, "kind": kind, "model": model}
                row.update(run_case({"source": "sparse", "n": n, "kind": kind, "model": model},
                                    budget))
                rows.append(row)
                print(render_sparse_ladder([row]).splitlines()[-1], file=sys.stderr, flush=True)
    return rows


def render_sparse_ladder(rows: list[dict[str, Any]]) -> str:
    lines = ["(g) sparse ladder: reheating bar (tridiagonal A) and floor slab (2-D five-point "
             "A), audited from .npz files by the sampled sparse-LU route, one subprocess per pair",
             f"{'model':<5} {'n':>6} {'nnz(A)':>7} {'against':<11} {'wall s':>7} {'CPU s':>7} "
             f"{'peak MiB':>8} {'points':>6}  verdict"]
    for r in rows:
        lines.append(f"{r['model']:<5} {r['n']:>6} {r.get('nnz', 0):>7} {r['kind']:<11} {r['seconds']:>7.2f} "
                     f"{r.get('cpu_seconds', float('nan')):>7.2f} "
                     f"{r.get('peak_rss_mib', float('nan')):>8.0f} {r.get('points', 0):>6}  "
                     f"{r['verdict']}"
                     + (f" (reduced order {r['reduced_order']}, reduction "
                        f"{r['reduction_seconds']:.1f} s)" if "reduced_order" in r else ""))
    return "\n".join(lines)


def run_case(spec: dict[str, Any], budget: float) -> dict[str, Any]:
    """One audit in a fresh subprocess (so that peak memory is per case)."""
    import json

    code = (f"import json, sys; sys.path.insert(0, {str(Path(__file__).resolve().parent)!r}); "
            f"import speed; print(json.dumps(speed."
            f"{'_sparse_case_in_process' if spec['source'] == 'sparse' else '_case_in_process'}"
            f"({spec!r})))")
    try:
        res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                             timeout=budget, check=False)
    except subprocess.TimeoutExpired:
        return {"verdict": f"not finished within {budget:.0f} s", "seconds": float("nan")}
    try:
        return json.loads(res.stdout.strip().splitlines()[-1])
    except (ValueError, IndexError):
        return {"verdict": "failed: " + (res.stderr.strip().splitlines() or ["?"])[-1][:80],
                "seconds": float("nan")}


def size_ladder(orders: list[int], ios: list[tuple[int, int]], budget: float) -> list[dict[str, Any]]:
    rows = []
    for io in ios:
        for kind in ("equivalent", "different"):
            stopped = None
            for n in orders:
                row: dict[str, Any] = {"io": f"{io[1]}x{io[0]}", "n": n, "kind": kind}
                if stopped is not None:
                    row.update(verdict=f"not run ({stopped})", seconds=float("nan"))
                else:
                    row.update(run_case({"source": "ladder", "n": n, "io": list(io), "kind": kind}, budget))
                    if not (row["seconds"] <= budget / 3):
                        stopped = f"n = {n} took {row['seconds']:.0f} s" if row["seconds"] == row["seconds"] \
                            else f"n = {n} did not finish"
                rows.append(row)
    return rows


def _flint_reference(r: Realization, omegas: np.ndarray, target: float = 1e-20) -> np.ndarray:
    """G(j omega) of the stored matrices in ball arithmetic, precision raised until the
    radius is below ``target`` times the value (python-flint acb_mat.solve)."""
    import flint

    out = []
    old = flint.ctx.prec
    try:
        for w in omegas:
            prec = 128
            while True:
                flint.ctx.prec = prec
                n = r.order
                m = flint.acb_mat(n, n, [flint.acb(-float(v)) for v in r.a.ravel()])
                for i in range(n):
                    m[i, i] += flint.acb(0, float(w))
                b = flint.acb_mat(n, r.n_inputs, [flint.acb(float(v)) for v in r.b.ravel()])
                c = flint.acb_mat(r.n_outputs, n, [flint.acb(float(v)) for v in r.c.ravel()])
                d = flint.acb_mat(r.n_outputs, r.n_inputs, [flint.acb(float(v)) for v in r.d.ravel()])
                try:
                    g = c * m.solve(b) + d
                    mid = np.array([complex(float(z.real.mid()), float(z.imag.mid())) for z in g.entries()])
                    rad = np.array([float(z.real.rad()) + float(z.imag.rad()) for z in g.entries()])
                    done = np.linalg.norm(rad) <= target * np.linalg.norm(mid)
                except ZeroDivisionError:
                    done = False
                if done or prec >= 8192:
                    out.append(mid.reshape(r.n_outputs, r.n_inputs))
                    break
                prec *= 2
    finally:
        flint.ctx.prec = old
    return np.array(out)


def response_race(r: Realization, *, check_points: int, repeat: int) -> dict[str, Any]:
    """Our frequency response against python-control's on the adaptive grid of ``r``."""
    import control
    from threadpoolctl import threadpool_limits

    from audit.evidence.frequency import TransferEvaluator

    from audit.evidence.frequency_grid import adaptive_frequency_grid

    grid = adaptive_frequency_grid([r])
    sys_ = control.StateSpace(r.a, r.b, r.c, r.d)
    p, m = r.n_outputs, r.n_inputs

    def ours() -> np.ndarray:
        return TransferEvaluator(r).at(1j * grid) if r.order else np.zeros(0)

    def theirs() -> np.ndarray:
        resp = sys_.frequency_response(grid)
        return np.moveaxis(np.asarray(resp.frdata).reshape(p, m, grid.size), 2, 0)

    def cpu_median(fn: Callable[[], Any]) -> tuple[float, Any]:
        times, out = [], None
        for _ in range(repeat):
            from audit.evidence import frequency as fr

            fr._EVALUATOR_CACHE.clear()  # time the reductions too
            t0 = time.process_time()
            out = fn()
            times.append(time.process_time() - t0)
        return statistics.median(times), out

    with threadpool_limits(limits=1, user_api="blas"):
        t_ours, g_ours = cpu_median(ours)
        t_ctrl, g_ctrl = cpu_median(theirs)
    row: dict[str, Any] = {"points": int(grid.size), "ours_cpu": t_ours, "control_cpu": t_ctrl,
                           "speed_ratio": t_ctrl / t_ours if t_ours > 0 else float("nan")}
    if check_points:
        idx = np.unique(np.linspace(0, grid.size - 1, check_points).round().astype(int))
        ref = _flint_reference(r, grid[idx])
        norm = np.linalg.norm(ref, 2, axis=(1, 2))
        ok = norm > 0
        e_o = np.linalg.norm(g_ours[idx] - ref, 2, axis=(1, 2))[ok] / norm[ok]
        e_c = np.linalg.norm(g_ctrl[idx] - ref, 2, axis=(1, 2))[ok] / norm[ok]
        row.update(checked=int(ok.sum()), ours_max=float(e_o.max()), control_max=float(e_c.max()),
                   ours_median=float(np.median(e_o)), control_median=float(np.median(e_c)),
                   smallest_gain=float(norm[ok].min()))
    return row


def published(names: list[str], budget: float, *, check_points: int, repeat: int) -> list[dict[str, Any]]:
    from audit.documents.loading import load_realization

    rows = []
    for name in names:
        r = load_realization(DATA / f"{name}.json")
        row: dict[str, Any] = {"model": name, "n": r.order, "io": f"{r.n_outputs}x{r.n_inputs}"}
        for kind in ("equivalent", "different"):
            row[kind] = run_case({"source": "published", "name": name, "kind": kind}, budget)
        row["response"] = response_race(r, check_points=check_points, repeat=repeat)
        rows.append(row)
    return rows


def _fmt_s(x: Any) -> str:
    return "-" if not isinstance(x, (int, float)) or x != x else f"{x:.2f}"


def render_ladder(ladder: list[dict[str, Any]], pub: list[dict[str, Any]]) -> str:
    lines = ["(e) size ladder: compare_pair end to end, one subprocess per pair "
             "(wall s / CPU s / peak resident MiB / verdict; 1-minute load average at the end)", "",
             "| io | n | pair | wall s | CPU s | peak gain of G1-G2 s | peak MiB | load | verdict |",
             "|---|---|---|---|---|---|---|---|---|"]
    for r in ladder:
        lines.append(f"| {r['io']} | {r['n']} | {r['kind']} | {_fmt_s(r.get('seconds'))} | "
                     f"{_fmt_s(r.get('cpu_seconds'))} | {_fmt_s(r.get('decisive_seconds'))} | "
                     f"{r.get('peak_rss_mib', float('nan')):.0f} | {_fmt_s(r.get('load'))} | {r['verdict']} |")
    lines += ["", "(f) published models (Chahlaoui and Van Dooren, SLICOT Working Note 2002-2): "
              "audits, and the frequency response on the adaptive grid against python-control "
              "(CPU seconds, one BLAS thread; pointwise error relative to |G| against python-flint)", "",
              "| model | n | io | equivalent pair: wall s / verdict | moved pair: wall s / verdict | "
              "points | ours CPU s | python-control CPU s | ratio | max rel. error ours / control | "
              "median ours / control | smallest abs(G) checked |",
              "|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in pub:
        e, d, f = r["equivalent"], r["different"], r["response"]
        err = (f"{f['ours_max']:.1e} / {f['control_max']:.1e}", f"{f['ours_median']:.1e} / {f['control_median']:.1e}",
               f"{f['smallest_gain']:.1e}") if "ours_max" in f else ("-", "-", "-")
        lines.append(f"| {r['model']} | {r['n']} | {r['io']} | {_fmt_s(e.get('seconds'))} / {e['verdict']} | "
                     f"{_fmt_s(d.get('seconds'))} / {d['verdict']} | {f['points']} | {f['ours_cpu']:.4f} | "
                     f"{f['control_cpu']:.4f} | {f['speed_ratio']:.1f}x | {err[0]} | {err[1]} | {err[2]} |")
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


LADDER_ORDERS = [50, 100, 200, 350, 700, 1000, 1500]
LADDER_IOS = [(1, 1), (3, 3), (10, 10)]


def run(*, quick: bool, repeat: int, case_budget: float = 600.0,
        ladder_only: bool = False, sparse_only: bool = False) -> tuple[dict[str, Any], str]:
    sparse = sparse_ladder([600] if quick else SPARSE_LADDER, case_budget)
    sparse_text = render_sparse_ladder(sparse)
    if sparse_only:
        return {"sparse_ladder": sparse}, sparse_text
    if quick:
        ladder = size_ladder([8], [(1, 1)], case_budget)
        pub = published(["build48"], case_budget, check_points=3, repeat=1)
    else:
        ladder = size_ladder(LADDER_ORDERS, LADDER_IOS, case_budget)
        pub = published(PUBLISHED, case_budget, check_points=25, repeat=repeat)
    ladder_text = render_ladder(ladder, pub) + "\n\n" + sparse_text
    if ladder_only:
        return {"ladder": ladder, "published": pub, "sparse_ladder": sparse}, ladder_text
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
    result = {"end_to_end": a, "frequency_response": b, "scaling": c, "startup": d,
              "ladder": ladder, "published": pub, "sparse_ladder": sparse}
    return result, render(a, b, c, d) + "\n\n" + ladder_text


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="tiny sizes (seconds)")
    parser.add_argument("--repeat", type=int, default=3, help="repetitions for medians (full run)")
    parser.add_argument("--case-budget", type=float, default=600.0,
                        help="seconds allowed per ladder audit; a series stops climbing after a "
                        "case uses a third of it")
    parser.add_argument("--ladder-only", action="store_true", help="only tables (e), (f), (g)")
    parser.add_argument("--sparse-ladder", action="store_true", help="only table (g)")
    args = parser.parse_args(argv)
    start = time.perf_counter()
    _, text = run(quick=args.quick, repeat=args.repeat, case_budget=args.case_budget,
                  ladder_only=args.ladder_only, sparse_only=args.sparse_ladder)
    print(text)
    print(f"\ntotal wall-clock {time.perf_counter() - start:.1f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
