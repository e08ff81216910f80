"""Reports: the published JSON shape (pydantic models -> ``schemas/``) and renderers.

Renderers only format what the verdict and inspection modules computed; they never do
numerics.
"""

from __future__ import annotations

import json
import math
from importlib import metadata
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from .evidence import to_jsonable
from .trade_units import TRADE_UNITS_FLOOR, describe_channel_difference as trade_units_phrase

CAUTION = (
    "Caution: this verdict is numerical evidence within the stated tolerances, not a "
    "certification; deployed control systems follow the applicable standards and "
    "licensed engineering review."
)

Number = float | int | str | None


def package_version() -> str:
    try:
        return metadata.version("lti-audit")
    except metadata.PackageNotFoundError:  # pragma: no cover - running from a checkout
        return "0+unknown"


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class EvidenceEntry(_Strict):
    key: str = Field(description="Stable identifier of the check")
    title: str
    metric: str = Field(description="What was measured")
    value: Number = Field(description="Measured value of the metric ('inf' when unbounded)")
    tolerance: float | None
    outcome: Literal["pass", "fail", "unclear", "info", "skipped"]
    decisive: bool = Field(description="True for the evidence that decides the verdict")
    precision: str = Field(description="Arithmetic used (double, ball arithmetic, ...)")
    seconds: float
    summary: str
    details: dict[str, Any]


class PairEntry(_Strict):
    reference: str
    other: str
    verdict: Literal["equivalent", "different", "inconclusive"]
    explanation: str
    evidence: list[EvidenceEntry]
    diagnosis: dict[str, Any]
    warnings: list[str]
    seconds: float


class ModelEntry(_Strict):
    name: str
    source: str
    order: int
    inputs: int
    outputs: int
    sample_period: float | None
    input_names: list[str] | None = Field(default=None, description="Names (units) of the "
                                          "inputs, from the model document, when given")
    output_names: list[str] | None = Field(default=None, description="Names (units) of the "
                                           "outputs, from the model document, when given")


class Tolerances(_Strict):
    rtol: float = Field(description="Relative tolerance on the peak gain of G1 - G2")
    rank_tol: float | None = Field(description="Staircase rank tolerance (null: scale-aware default)")
    escalation_seconds: float = Field(description="Time budget for extended precision per pair")


class CompareReport(_Strict):
    """The report of ``lti-audit compare``."""

    report: Literal["compare"]
    lti_audit_version: str
    verdict: Literal["equivalent", "different", "inconclusive"]
    summary: str = Field(description="One or two sentences a reviewer can paste into a merge request")
    tolerances: Tolerances
    models: list[ModelEntry]
    comparisons: list[PairEntry]
    seconds: float
    caution: str


class InspectReport(_Strict):
    """The report of ``lti-audit inspect``."""

    report: Literal["inspect"]
    lti_audit_version: str
    status: Literal["ok", "problem", "inconclusive"]
    summary: str
    model: ModelEntry
    problems: list[str]
    notes: list[str]
    properties: dict[str, Any]
    evidence: list[EvidenceEntry]
    seconds: float
    caution: str


# ------------------------------------------------------------------ builders
def model_entry(r: Any, source: str, signals: dict[str, list[str] | None] | None = None) -> dict[str, Any]:
    entry = {
        "name": r.name,
        "source": source,
        "order": r.order,
        "inputs": r.n_inputs,
        "outputs": r.n_outputs,
        "sample_period": r.sample_period,
    }
    if signals:
        entry["input_names"] = signals.get("inputs")
        entry["output_names"] = signals.get("outputs")
    return entry


def signal_labels(doc: Any) -> dict[str, list[str] | None]:
    """``{"inputs": [...], "outputs": [...]}`` as "name [unit]" from a model document."""
    def labels(items: Any) -> list[str] | None:
        if not items:
            return None
        return [f"{it.name} [{it.unit}]" if getattr(it, "unit", None) else str(it.name) for it in items]

    return {"inputs": labels(getattr(doc, "inputs", None)), "outputs": labels(getattr(doc, "outputs", None))}


def compare_report(models: list[Any], sources: list[str], pairs: list[Any], options: Any,
                   verdict: str, seconds: float,
                   signals: list[dict[str, list[str] | None]] | None = None) -> dict[str, Any]:
    """Assemble and validate the compare report (a plain dict following CompareReport)."""
    summary = _compare_summary(pairs, verdict)
    data = {
        "report": "compare",
        "lti_audit_version": package_version(),
        "verdict": verdict,
        "summary": summary,
        "tolerances": {"rtol": options.rtol, "rank_tol": options.rank_tol,
                       "escalation_seconds": options.escalation_seconds},
        "models": [model_entry(r, s, sig) for r, s, sig in
                   zip(models, sources, signals or [None] * len(models))],
        "comparisons": [p.as_dict() for p in pairs],
        "seconds": round(seconds, 6),
        "caution": CAUTION,
    }
    data = to_jsonable(data)
    CompareReport.model_validate(data)
    return data


def _compare_summary(pairs: list[Any], verdict: str) -> str:
    if len(pairs) == 1:
        return _with_trade_units(pairs[0])
    counts = {v: sum(p.verdict == v for p in pairs) for v in ("equivalent", "different", "inconclusive")}
    head = (f"{verdict.upper()}: of {len(pairs)} models compared with {pairs[0].reference}, "
            f"{counts['equivalent']} equivalent, {counts['different']} different, "
            f"{counts['inconclusive']} inconclusive.")
    if verdict == "equivalent":
        return head
    # every model that is not equivalent is named, differing ones first
    rest = [p for p in pairs if p.verdict == "different"] + [p for p in pairs if p.verdict == "inconclusive"]
    return " ".join([head] + [_with_trade_units(p) for p in rest])


def _with_trade_units(pair: Any) -> str:
    """The pair's explanation, plus the worst channel in dB and degrees when it differs."""
    text = str(pair.explanation)
    if pair.verdict != "different":
        return text
    grid = next((e for e in pair.evidence if e.key == "frequency_grid"), None)
    phrase = trade_units_phrase(grid.details.get("trade_units") if grid is not None else None)
    return text + (f" In dB and degrees: {phrase}." if phrase else "")


def inspect_report(r: Any, source: str, insp: Any) -> dict[str, Any]:
    props = insp.properties
    summary = (
        f"{insp.name}: order {props['order']} (minimal {props['minimal_order']}), "
        f"{props['internal_stability']} internally, {props['input_output_stability']} "
        "input-output"
    )
    if insp.problems:
        summary += "; " + "; ".join(insp.problems)
    data = {
        "report": "inspect",
        "lti_audit_version": package_version(),
        "status": insp.status,
        "summary": summary + ".",
        "model": model_entry(r, source),
        "problems": list(insp.problems),
        "notes": list(insp.notes),
        "properties": insp.properties,
        "evidence": [e.as_dict() for e in insp.evidence],
        "seconds": round(insp.seconds, 6),
        "caution": CAUTION,
    }
    data = to_jsonable(data)
    InspectReport.model_validate(data)
    return data


# ------------------------------------------------------------------ renderers
def render_json(data: dict[str, Any]) -> str:
    return json.dumps(data, indent=2, sort_keys=False) + "\n"


def _num(v: Any) -> str:
    if v is None:
        return "-"
    if isinstance(v, str):
        return v
    if isinstance(v, (int,)) and not isinstance(v, bool):
        return str(v)
    return f"{float(v) + 0.0:.3g}"  # + 0.0: no "-0"


def evidence_value_text(ev: dict[str, Any]) -> str:
    """The value column of an evidence entry, in words where a bare number would mislead."""
    det = ev.get("details") or {}
    if ev.get("outcome") == "skipped":
        return "-"
    if str(ev.get("summary", "")).startswith("neither model has"):
        return "none"  # no poles / zeros to match: a 0 would read as "no move"
    if ev.get("key") == "similarity" and not det.get("found", True):
        return "none found"
    if ev.get("key") == "similarity":
        return f"cond(T) {_num(ev.get('value'))}"
    if ev.get("key") == "static_gains":
        dc = det.get("dc")
        if isinstance(dc, dict) and "relative_difference" not in dc:  # a DC gain is infinite
            if dc.get("first") is None and dc.get("second") is None:
                return f"{_num(ev.get('value'))} (high-frequency gain only; both DC gains infinite)"
            return "DC gain infinite in one model only"
    return _num(ev.get("value"))


def render_compare_text(data: dict[str, Any]) -> str:
    lines = [f"lti-audit compare: {data['verdict'].upper()}  (rtol {data['tolerances']['rtol']:.1e})"]
    for i, m in enumerate(data["models"]):
        role = "reference" if i == 0 else f"model {i}"
        dom = "continuous" if m["sample_period"] is None else f"discrete T={m['sample_period']:g}s"
        lines.append(f"  {role:9s}: {m['name']}  [{m['source']}]  order {m['order']}, "
                     f"{m['inputs']} in / {m['outputs']} out, {dom}")
    for pair in data["comparisons"]:
        lines.append("")
        lines.append(f"== {pair['other']}  vs  {pair['reference']}: {pair['verdict'].upper()}")
        lines.append(_wrap(pair["explanation"], "   "))
        for w in pair["warnings"]:
            lines.append(_wrap(("!! " if w.startswith("UNSTABLE") else "note: ") + w, "   "))
        lines.append("   evidence:")
        for ev in pair["evidence"]:
            mark = "*" if ev["decisive"] else "-"
            tol = "" if ev["tolerance"] is None else f" tol {_num(ev['tolerance'])}"
            lines.append(f"   {mark} [{ev['outcome']:7s}] {ev['title']}: value {evidence_value_text(ev)}{tol}; "
                         f"{ev['precision']}, {ev['seconds']:.3f}s")
            lines.append(_wrap(ev["summary"], "       "))
        trade = trade_lines(pair, data["models"][0])
        if trade:
            lines.append("   in dB and degrees:")
            for line in trade:
                lines.append(_wrap(line, "     "))
        diag_lines = _diagnosis_lines(pair["diagnosis"] or {}, data["models"][0])
        if diag_lines:  # no empty heading
            lines.append("   diagnosis:")
            for line in diag_lines:
                lines.append(_wrap(line, "     "))
    lines.append("")
    lines.append(_wrap(data["summary"], ""))
    lines.append(data["caution"])
    return "\n".join(lines) + "\n"


def trade_lines(pair: dict[str, Any], reference: dict[str, Any], limit: int = 4) -> list[str]:
    """Per-channel gain (dB) and phase (degrees) differences of a pair that is not equivalent."""
    if pair.get("verdict") == "equivalent":
        return []
    grid = next((e for e in pair.get("evidence", []) if e.get("key") == "frequency_grid"), None)
    trade = (grid or {}).get("details", {}).get("trade_units")
    if not trade or not trade.get("channels"):
        return []
    chans = sorted(trade["channels"], key=lambda c: -c["at_worst"].get("absolute_difference", 0.0))
    shown = [trade_units_phrase(trade, c, reference) for c in chans[:limit]
             if c["at_worst"].get("absolute_difference", 0.0) > 0.0]
    if len(chans) > limit:
        shown.append(f"({len(chans) - limit} more channel(s) in the JSON report)")
    return [s for s in shown if s]


def _signal(names: list[str] | None, index: int) -> str:
    return f"{index} ({names[index]})" if names and index < len(names) else str(index)


def _diagnosis_lines(diag: dict[str, Any], reference: dict[str, Any] | None = None) -> list[str]:
    out = []
    ins = (reference or {}).get("input_names")
    outs = (reference or {}).get("output_names")
    chans = diag.get("differing_channels") or []
    if chans:
        out.append("channels that differ (output <- input: relative difference): " + ", ".join(
            f"{_signal(outs, c['output'])} <- {_signal(ins, c['input'])}: {c['relative_difference']:.3g}"
            for c in chans))
    if diag.get("band_of_largest_discrepancy_rad_s"):
        lo, hi = diag["band_of_largest_discrepancy_rad_s"]
        out.append(f"band of largest discrepancy: {lo:.4g} to {hi:.4g} rad/s")
    if diag.get("first_differing_markov_parameter") is not None:
        out.append(f"first differing Markov parameter: term {diag['first_differing_markov_parameter']}")
    if "permutation" in diag:
        out.append(diag["permutation"]["sentence"])
    if "constant_scale" in diag:
        out.append(diag["constant_scale"]["sentence"])
    if "reversed_coefficients" in diag:
        out.append(diag["reversed_coefficients"]["sentence"])
    for key, what in (("moved_poles", "pole"), ("moved_zeros", "zero")):
        for mv in diag.get(key, [])[:3]:
            out.append(f"{what} moved: {_pt(mv.get('first'))} -> {_pt(mv.get('second'))} "
                       f"(relative {float(mv.get('relative_distance', 0)):.2g})")
    return out


def _pt(v: Any) -> str:
    if isinstance(v, (list, tuple)) and len(v) == 2:
        re, im = float(v[0]) + 0.0, float(v[1]) + 0.0  # + 0.0: no "-0"
        return f"{re:.6g}" if im == 0 else f"{re:.6g}{'+' if im >= 0 else '-'}{abs(im):.6g}j"
    return str(v)


def render_inspect_text(data: dict[str, Any]) -> str:
    p = data["properties"]
    m = data["model"]
    lines = [f"lti-audit inspect: {data['status'].upper()}  {m['name']}  [{m['source']}]"]
    lines.append(f"  order {p['order']} (minimal {p['minimal_order']}), {p['inputs']} in / "
                 f"{p['outputs']} out, {p['time_domain']}")
    lines.append(f"  stability: internal {p['internal_stability']}, input-output "
                 f"{p['input_output_stability']}")
    lines.append("  poles: " + _pts(p["poles"]))
    lines.append("  transmission zeros: " + (_pts(p["transmission_zeros"]) or "none"))
    lines.append(f"  DC gain: {_mat(p['dc_gain'])}   high-frequency gain: {_mat(p['high_frequency_gain'])}")
    pk = p["peak_gain"]
    if pk.get("value") is not None:
        lines.append(f"  peak gain: {_num(pk['value'])} at {_num(pk.get('frequency_rad_s'))} rad/s")
    c = p["conditioning"]
    lines.append(f"  conditioning: eigenvector matrix {c['eigenvector_condition']:.2e}, "
                 f"largest eigenvalue condition {c['largest_eigenvalue_condition']:.2e}")
    if p.get("claimed_form"):
        cf = p["claimed_form"]
        lines.append(f"  claimed form: {cf['claimed']} -> " + ("holds" if cf.get("holds") else "does NOT hold"))
    rec = p.get("recognised_forms")
    if rec and rec.get("forms"):
        lines.append("  recognised forms: " + ", ".join(str(f) for f in rec["forms"]))
    for h in p["hidden_modes"]:
        lines.append(f"  hidden mode {_pt(h['location'])} ({h['kind']}{', UNSTABLE' if h['unstable'] else ''})")
    for prob in data["problems"]:
        lines.append(_wrap("!! " + prob, "  "))
    for note in data["notes"]:
        lines.append(_wrap("note: " + note, "  "))
    lines.append(data["caution"])
    return "\n".join(lines) + "\n"


def _pts(values: list[Any], limit: int = 12) -> str:
    shown = ", ".join(_pt(v) for v in values[:limit])
    return shown + (f", ... ({len(values)} in all)" if len(values) > limit else "")


def _mat(v: Any) -> str:
    if v is None:
        return "infinite (pole at that point)"
    if isinstance(v, list) and len(v) == 1 and isinstance(v[0], list) and len(v[0]) == 1:
        return _num(v[0][0])
    if isinstance(v, list) and all(isinstance(row, list) for row in v):
        return "[" + "; ".join(" ".join(f"{float(x) + 0.0:.6g}" for x in row) for row in v) + "]"
    return json.dumps(to_jsonable(v))


def _wrap(text: str, indent: str, width: int = 100) -> str:
    import textwrap

    return textwrap.fill(text, width=width, initial_indent=indent, subsequent_indent=indent + "  ")
