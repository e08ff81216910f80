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

from audit.evidence.record import to_jsonable
from audit.reports.trade_units import TRADE_UNITS_FLOOR, describe_channel_difference as trade_units_phrase

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
    outcome: Literal["pass", "fail", "unclear", "info", "skipped", "not_computed"]
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


class ModeCouplingEntry(_Strict):
    inputs: float = Field(description="Coupling to the inputs in the stored state coordinates, "
                          "relative to the model's size (0: decoupled, 1: largest possible)")
    outputs: float = Field(description="Coupling to the outputs, same scale")
    joint: float | None = Field(default=None, description="Input times output coupling in the "
                                "coordinates the staircase analysed (after its state scaling); "
                                "this decides 'nearly_hidden'")


class HiddenModeEntry(_Strict):
    """A hidden or nearly hidden mode of one model (for plots: mark and highlight it)."""

    location: list[float] = Field(description="[re, im] (s-plane, or z-plane for discrete time)")
    classification: Literal["hidden", "nearly_hidden"]
    kind: Literal["uncontrollable", "unobservable", "uncontrollable_and_unobservable"] | None
    stability: Literal["stable", "marginal", "unstable"]
    unstable: bool = Field(description="True for unstable and marginally stable modes")
    coupling: ModeCouplingEntry
    method: Literal["eigenvector", "pbh"] = Field(description="How the coupling was measured")
    eigenvalue_condition: float | str


class ModeThresholds(_Strict):
    hidden: float = Field(description="Staircase rank tolerance (relative) behind 'hidden'")
    nearly_hidden: float = Field(description="Joint coupling at or below which a kept mode is "
                                 "'nearly_hidden'")
    marginal: float = Field(description="Relative width of the marginal band")


class ProblemEntry(_Strict):
    """A problem beyond the input-output verdict; the exit status follows the unaccepted ones."""

    kind: Literal["unstable_hidden_mode", "marginal_hidden_mode"]
    model: str = Field(description="Name of the model that has the problem")
    model_index: int = Field(description="Index of that model in `models`")
    location: list[float] = Field(description="[re, im] of the mode")
    coupling: ModeCouplingEntry
    classification: Literal["hidden", "nearly_hidden"]
    decoupled_from: Literal["inputs", "outputs", "inputs_and_outputs"]
    accepted: bool = Field(description="Accepted explicitly (command-line flag or manifest "
                           "field); an accepted problem does not fail the gate")
    reason: str | None = Field(description="The reason given with the acceptance")
    message: str


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
    hidden_modes: list[HiddenModeEntry] | None = Field(default=None, description="Hidden and "
                                                       "nearly hidden modes of the stored model")
    mode_thresholds: ModeThresholds | None = Field(default=None, description="Thresholds "
                                                   "behind the classification of hidden_modes")


class ChannelTolerance(_Strict):
    output: int = Field(description="0-based output index")
    input: int = Field(description="0-based input index")
    rtol: float = Field(description="Relative tolerance of this channel (relative to the reference peak gain)")
    label: str = Field(description="The channel with its signal names, when the documents give them")


class Tolerances(_Strict):
    rtol: float = Field(description="Relative tolerance on the peak gain of G1 - G2")
    atol: float = Field(default=0.0, description="Absolute tolerance on the difference, in the models' "
                        "gain units (output units per input unit); 0: none. A difference within the "
                        "larger of rtol x reference peak gain and atol passes")
    band_rad_s: list[float] | None = Field(default=None, description="Band of interest [low, high] in "
                                           "rad/s: only the difference inside it decides")
    channel_rtol: list[ChannelTolerance] = Field(default_factory=list, description="Per-channel relative "
                                                 "tolerances; when given the decision is made channel by channel")
    rule: str = Field(default="", description="The decision rule in words")
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
    problems: list[ProblemEntry] = Field(description="Problems beyond the input-output verdict "
                                         "(a new unstable or marginal hidden or nearly hidden "
                                         "mode); any unaccepted one makes the exit status 1")
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
                   signals: list[dict[str, list[str] | None]] | None = None, *,
                   modes: list[Any] | None = None,
                   accepted_reason: str | None = None) -> dict[str, Any]:
    """Assemble and validate the compare report (a plain dict following CompareReport).

    ``modes`` are the :class:`audit.structure.internal_stability.ModelModes` of ``models`` (computed
    here when not given); the top-level ``problems`` list follows from them
    (:func:`audit.structure.internal_stability.hidden_mode_problems`), every one accepted with
    ``accepted_reason`` when that is given.
    """
    from audit.structure.internal_stability import hidden_mode_problems, model_modes, modes_from_comparisons

    if modes is None:
        modes = [modes_from_comparisons(r, pairs)
                 or model_modes(r, label=r.name, rank_tol=getattr(options, "rank_tol", None))
                 for r in models]
    problems = hidden_mode_problems(modes[0], list(modes[1:]), accepted_reason=accepted_reason)
    summary = _compare_summary(pairs, verdict)
    open_problems = [p for p in problems if not p["accepted"]]
    if open_problems:
        summary += f" Problem: {open_problems[0]['message']}" + (
            f" (and {len(open_problems) - 1} more problem(s))." if len(open_problems) > 1 else ".")
    entries = [model_entry(r, s, sig) for r, s, sig in
               zip(models, sources, signals or [None] * len(models))]
    for entry, mm in zip(entries, modes):
        entry["hidden_modes"] = [dict(m) for m in mm.modes]
        entry["mode_thresholds"] = dict(mm.thresholds)
    data = {
        "report": "compare",
        "lti_audit_version": package_version(),
        "verdict": verdict,
        "summary": summary,
        "tolerances": tolerances_entry(options, (signals or [None])[0]),
        "models": entries,
        "comparisons": [p.as_dict() for p in pairs],
        "problems": problems,
        "seconds": round(seconds, 6),
        "caution": CAUTION,
    }
    data = to_jsonable(data)
    CompareReport.model_validate(data)
    return data


def tolerances_entry(options: Any, signals: dict[str, list[str] | None] | None = None) -> dict[str, Any]:
    """The ``tolerances`` object of a report: every tolerance as stated, and the rule."""
    from audit.evidence.tolerances import channel_label

    outs = (signals or {}).get("outputs")
    ins = (signals or {}).get("inputs")
    band = getattr(options, "band", None)
    channels = list(getattr(options, "channel_rtol", ()) or ())
    atol = float(getattr(options, "atol", 0.0) or 0.0)
    rule = ("pass when the peak of the difference" + (" inside the band" if band else "")
            + (" in each channel" if channels else " (largest singular value)")
            + " is within the larger of rtol x the larger peak gain of the two models"
            + (" (the channel's own rtol where stated)" if channels else "") + f" and atol ({atol:g})")
    return {"rtol": options.rtol, "rank_tol": options.rank_tol,
            "escalation_seconds": options.escalation_seconds, "atol": atol,
            "band_rad_s": None if band is None else [float(band[0]), float(band[1])],
            "channel_rtol": [{"output": i, "input": j, "rtol": v, "label": channel_label(i, j, outs, ins)}
                             for i, j, v in channels],
            "rule": rule}


def _tolerance_line(tol: dict[str, Any]) -> str:
    parts = [f"rtol {tol['rtol']:.1e}"]
    if tol.get("atol"):
        parts.append(f"atol {tol['atol']:.3g}")
    if tol.get("band_rad_s"):
        lo, hi = tol["band_rad_s"]
        parts.append(f"band {lo:.4g} to {hi:.4g} rad/s")
    for ch in tol.get("channel_rtol") or []:
        parts.append(f"rtol {ch['rtol']:.1e} for {ch['label']}")
    return ", ".join(parts)


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


def compare_headline(data: dict[str, Any]) -> str:
    """The first line of the compare output: the verdict, and the first unaccepted
    problem when there is one (e.g. "EQUIVALENT input-output, but vendor.json has an
    unstable hidden mode at 0.5 ...")."""
    verdict = data["verdict"].upper()
    problems = data.get("problems") or []
    open_problems = [p for p in problems if not p["accepted"]]
    if not open_problems:
        accepted = len(problems)
        return f"lti-audit compare: {verdict}" + (
            f" input-output; {accepted} hidden-mode problem(s) accepted" if accepted else "")
    head = f"lti-audit compare: {verdict} input-output, but {open_problems[0]['message']}"
    if len(open_problems) > 1:
        head += f" (and {len(open_problems) - 1} more problem(s))"
    return head


def render_compare_text(data: dict[str, Any]) -> str:
    lines = [f"{compare_headline(data)}  ({_tolerance_line(data['tolerances'])})"]
    if data["tolerances"].get("atol") or data["tolerances"].get("band_rad_s") or data["tolerances"].get("channel_rtol"):
        lines.append(_wrap("tolerance rule: " + data["tolerances"]["rule"], "  "))
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
    problems = data.get("problems") or []
    if problems:
        lines.append("")
        lines.append("problems (internal stability):")
        for p in problems:
            state = f"ACCEPTED ({p['reason']})" if p["accepted"] else "NOT ACCEPTED"
            lines.append(_wrap(f"!! {p['message']} -- {state}", "   "))
        th = data["models"][0].get("mode_thresholds")
        if th:
            lines.append(f"   (hidden: removed by the staircase at rank tolerance {th['hidden']:.1e}; "
                         f"nearly hidden: joint coupling <= {th['nearly_hidden']:.1e})")
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
        verdict = ("not checkable by pattern" if cf.get("checked") is False
                   else "holds" if cf.get("holds") else "does NOT hold")
        lines.append(f"  claimed form: {cf['claimed']} -> {verdict}")
    rec = p.get("recognised_forms")
    if rec and rec.get("forms"):
        lines.append("  recognised forms: " + ", ".join(str(f) for f in rec["forms"]))
    for h in p["hidden_modes"] + p.get("nearly_hidden_modes", []):
        c = h.get("coupling", {})
        label = "hidden mode" if h.get("classification", "hidden") == "hidden" else "nearly hidden mode"
        levels = (f"; coupling: inputs {c['inputs']:.2g}, outputs {c['outputs']:.2g}, "
                  f"joint {c['joint']:.2g}") if c else ""
        lines.append(f"  {label} {_pt(h['location'])} ({h['kind']}"
                     f"{', UNSTABLE' if h['unstable'] else ''}{levels})")
    thr = p.get("mode_coupling_thresholds")
    if thr and (p["hidden_modes"] or p.get("nearly_hidden_modes")):
        lines.append(f"  (hidden: removed by the staircase at rank tolerance {thr['hidden']:.1e}; "
                     f"nearly hidden: joint coupling <= {thr['nearly_hidden']:.1e})")
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
