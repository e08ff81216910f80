"""Outputs of ``lti-audit check`` for people and CI systems.

A :class:`CheckRun` gathers the claim results (:mod:`audit.workflows.manifest`) and the changed
model files (:mod:`audit.workflows.gitbase`) of one run. Renderers:

* :func:`render_check_text` -- the terminal summary;
* :func:`render_check_json` -- one JSON document (``"report": "check"``);
* :func:`render_junit_xml` -- JUnit XML, one test case per claim and per changed file,
  in the de-facto layout read by Jenkins, GitLab and GitHub test reporters (the Ant
  JUnit task's ``testsuites/testsuite/testcase`` elements with ``failure``, ``error``
  and ``system-out`` children);
* :func:`render_markdown` -- a merge-request comment: a table (file/claim, verdict, peak
  relative difference, note), the largest discrepancies, and the caution line.

:func:`write_output` writes a report file under the tool's output rule
(:mod:`audit.reports.safe_output`: atomic, never through a link, never over an existing file
without ``--overwrite``, never over a model file or the manifest). Names, labels and
notes come from user documents: each renderer makes them plain text for its format
(:func:`audit.reports.safe_output.markdown_text`, :func:`~audit.reports.safe_output.xml_text`,
:func:`~audit.reports.safe_output.terminal_text`).

Exit statuses (DESIGN.md): 2 when any claim or file could not be evaluated (missing or
invalid model: invalid input), else 1 when any claim fails or any file's behaviour
changed, else 3 when any is inconclusive, else 0. Renderers only format; no numerical
method is implemented here.
"""

from __future__ import annotations

import json
import textwrap
import xml.etree.ElementTree as ET
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

from audit.workflows.gitbase import FileChange
from audit.workflows.manifest import ClaimResult
from audit.reports.safe_output import (
    OutputRefusedError,
    check_new_output,
    markdown_code,
    markdown_text,
    terminal_text,
    write_output_file,
    xml_text,
)

__all__ = [
    "CheckRun",
    "OutputRefusedError",
    "check_report_target",
    "diagnosis_lines",
    "render_check_json",
    "render_check_text",
    "render_junit_xml",
    "render_markdown",
    "write_output",
]

RunStatus = Literal["ok", "fail", "inconclusive", "invalid"]
Category = Literal["pass", "fail", "inconclusive", "error"]

_CLAIM_CATEGORY: dict[str, Category] = {
    "holds": "pass", "fails": "fail", "inconclusive": "inconclusive", "error": "error"}
_CHANGE_CATEGORY: dict[str, Category] = {
    "unchanged": "pass", "new": "pass", "deleted": "pass", "changed": "fail",
    "changed_internal_stability": "fail", "inconclusive": "inconclusive", "unreadable": "error"}
_EXIT = {"ok": 0, "fail": 1, "invalid": 2, "inconclusive": 3}
#: Entries listed under "largest discrepancies" in the Markdown summary.
LARGEST_DISCREPANCIES = 5


@dataclass(frozen=True)
class CheckRun:
    """Everything one ``lti-audit check`` run found.

    Attributes
    ----------
    manifest : str or None
        The manifest path (``None`` when running on the default globs without one).
    directory : str
        Model paths are relative to it.
    claims : tuple of audit.workflows.manifest.ClaimResult
    changes : tuple of audit.workflows.gitbase.FileChange
        Empty unless ``--against`` was given.
    against : str or None
        The revision as the user wrote it.
    against_commit : str or None
        The commit it resolved to.
    skipped_files : tuple of str
        Changed files matching the default globs that are not model documents.
    rtol : float or None
        The default tolerance given on the command line (``None``: manifest / built-in).
    seconds : float
    """

    manifest: str | None
    directory: str
    claims: tuple[ClaimResult, ...] = ()
    changes: tuple[FileChange, ...] = ()
    against: str | None = None
    against_commit: str | None = None
    skipped_files: tuple[str, ...] = ()
    rtol: float | None = None
    seconds: float = 0.0

    @property
    def categories(self) -> list[Category]:
        return ([_CLAIM_CATEGORY[c.status] for c in self.claims]
                + [_CHANGE_CATEGORY[f.status] for f in self.changes])

    @property
    def status(self) -> RunStatus:
        """``invalid`` > ``fail`` > ``inconclusive`` > ``ok`` (see the module docstring)."""
        cats = set(self.categories)
        if "error" in cats:
            return "invalid"
        if "fail" in cats:
            return "fail"
        if "inconclusive" in cats:
            return "inconclusive"
        return "ok"

    @property
    def exit_status(self) -> int:
        return _EXIT[self.status]

    def summary(self) -> str:
        """One sentence with the counts."""
        parts = []
        if self.claims or self.manifest:
            counts = _counts(c.status for c in self.claims)
            parts.append(f"{len(self.claims)} claim(s): " + (", ".join(
                f"{n} {w}" for w, n in counts.items()) or "none"))
        if self.against is not None:
            counts = _counts(f.status for f in self.changes)
            parts.append(f"{len(self.changes)} changed model file(s) since {self.against}: "
                         + (", ".join(f"{n} {w}" for w, n in counts.items()) or "none"))
        return "; ".join(parts) + "." if parts else "Nothing to check."

    def as_dict(self) -> dict[str, Any]:
        """The JSON report: plain floats, lists and strings."""
        from audit.reports.shapes import CAUTION, package_version

        return {
            "report": "check",
            "lti_audit_version": package_version(),
            "status": self.status,
            "exit_status": self.exit_status,
            "summary": self.summary(),
            "manifest": self.manifest,
            "directory": self.directory,
            "against": self.against,
            "against_commit": self.against_commit,
            "compared_with": "working tree" if self.against is not None else None,
            "rtol": self.rtol,
            "claims": [c.as_dict() for c in self.claims],
            "changes": [f.as_dict() for f in self.changes],
            "skipped_files": list(self.skipped_files),
            "seconds": round(float(self.seconds), 6),
            "caution": CAUTION,
        }


def _counts(statuses: Iterable[str]) -> dict[str, int]:
    out: dict[str, int] = {}
    for s in statuses:
        out[s] = out.get(s, 0) + 1
    return out


# ------------------------------------------------------------------- rows
@dataclass(frozen=True)
class _Row:
    kind: Literal["claim", "file"]
    label: str
    verdict: str
    category: Category
    peak: float | None
    frequency: float | None
    note: str
    explanation: str
    diagnosis: tuple[str, ...]
    warnings: tuple[str, ...]
    seconds: float


def _rows(run: CheckRun) -> list[_Row]:
    rows = []
    for c in run.claims:
        title = f"claim #{c.index}" + ("" if c.name == f"claim #{c.index}" else f": {c.name}")
        rows.append(_Row("claim", f"{title} ({c.expected})", c.status,
                         _CLAIM_CATEGORY[c.status], c.peak_relative_difference,
                         c.peak_frequency_rad_s, _claim_note(c), c.explanation,
                         tuple(diagnosis_lines(c.diagnosis)), c.warnings, c.seconds))
    for f in run.changes:
        label = f.path if f.old_path is None else f"{f.path} (renamed from {f.old_path})"
        verdict = f.status
        rows.append(_Row("file", label, verdict, _CHANGE_CATEGORY[f.status],
                         f.peak_relative_difference, f.peak_frequency_rad_s, _change_note(f),
                         f.explanation, tuple(diagnosis_lines(f.diagnosis)), f.warnings,
                         f.seconds))
    return rows


def _first_sentence(text: str, limit: int = 160) -> str:
    cut = text.split(". ")[0].rstrip(".")
    return cut if len(cut) <= limit else cut[: limit - 3].rstrip() + "..."


def _claim_note(c: ClaimResult) -> str:
    if c.status == "holds":
        return {
            "equivalent": "same transfer function",
            "similar": "equal up to a change of state coordinates",
            "different": "differs, as claimed",
            "form": f"in {c.expected}",
            "discretization": f"is the {c.expected}",
        }[c.kind]
    if c.diagnosis:
        lines = diagnosis_lines(c.diagnosis, short=True)
        if lines:
            return lines[0]
    return _first_sentence(c.explanation)


_COORDINATE_WORDS = {
    "identical": "identical realization",
    "similar": "only the state coordinates changed",
    "transfer_only": "same transfer function, different realization (order or hidden modes)",
}


def _change_note(f: FileChange) -> str:
    if f.status == "unchanged":
        note = _COORDINATE_WORDS.get(f.coordinate_change or "", "same transfer function")
        if any(w.startswith("UNSTABLE") for w in f.warnings):
            note += "; UNSTABLE hidden mode"
        return note
    if f.status == "changed_internal_stability":
        first = next((p for p in f.problems if not p.get("accepted")), None)
        if first is not None:
            return "changed in internal stability: " + first["message"]
    if f.status == "changed" and f.diagnosis:
        lines = diagnosis_lines(f.diagnosis, short=True)
        if lines:
            return lines[0]
    return _first_sentence(f.explanation)


def diagnosis_lines(diag: dict[str, Any], *, short: bool = False) -> list[str]:
    """Readable lines of a :attr:`audit.verdict.compare.PairComparison.diagnosis`.

    Parameters
    ----------
    diag : dict
        ``differing_channels``, ``band_of_largest_discrepancy_rad_s``,
        ``first_differing_markov_parameter``, ``permutation``, ``constant_scale``,
        ``moved_poles``, ``moved_zeros`` (each optional).
    short : bool, keyword-only
        Only the most telling line (permutation, else unit change, else pole move, else
        the first differing Markov parameter, ...).

    Returns
    -------
    list of str

    Raises
    ------
    None
    """
    lines: list[str] = []
    if "permutation" in diag:
        lines.append(str(diag["permutation"].get("sentence", "")))
    if "constant_scale" in diag:
        lines.append(str(diag["constant_scale"].get("sentence", "")))
    if "reversed_coefficients" in diag:
        lines.append(str(diag["reversed_coefficients"].get("sentence", "")))
    if "in_db_and_degrees" in diag:
        lines.append("in dB and degrees: " + str(diag["in_db_and_degrees"].get("sentence", "")))
    moved = diag.get("moved_poles") or []
    for mv in moved[:3]:
        lines.append(f"pole moved: {_point(mv.get('first'))} -> {_point(mv.get('second'))}")
    k = diag.get("first_differing_markov_parameter")
    if k is not None:
        what = "D, the feedthrough" if int(k) == 0 else ("CB" if int(k) == 1 else f"C A^{int(k) - 1} B")
        lines.append(f"first differing Markov parameter: term {k} ({what})")
    for mv in (diag.get("moved_zeros") or [])[:3]:
        lines.append(f"zero moved: {_point(mv.get('first'))} -> {_point(mv.get('second'))}")
    chans = diag.get("differing_channels") or []
    if chans:
        lines.append("channels that differ (output, input): " + ", ".join(
            f"({c['output']}, {c['input']})" for c in chans[:12])
            + ("" if len(chans) <= 12 else f" and {len(chans) - 12} more"))
    band = diag.get("band_of_largest_discrepancy_rad_s")
    if band:
        lines.append(f"largest discrepancy between {float(band[0]):.4g} and {float(band[1]):.4g} rad/s")
    lines = [line for line in lines if line]
    return lines[:1] if short else lines


def _point(v: Any) -> str:
    if isinstance(v, (list, tuple)) and len(v) == 2:
        re_, im = float(v[0]) + 0.0, float(v[1]) + 0.0  # + 0.0: no "-0"
        if im == 0.0:
            return f"{re_:.6g}"
        return f"{re_:.6g}{'+' if im >= 0 else '-'}{abs(im):.6g}j"
    if isinstance(v, complex):
        return _point([v.real, v.imag])
    return str(v)


def _num(v: float | None) -> str:
    return "-" if v is None else f"{v:.2e}"


def _header(run: CheckRun) -> list[str]:
    out = []
    if run.manifest is not None:
        out.append(f"manifest: {run.manifest} ({len(run.claims)} claim(s))")
    else:
        out.append(f"no manifest: default file globs in {run.directory}")
    if run.against is not None:
        commit = (run.against_commit or "")[:12]
        out.append(f"changed model files: {run.against} ({commit}) compared with the working tree")
    if run.rtol is not None:
        out.append(f"default rtol: {run.rtol:g}")
    return out


# -------------------------------------------------------------- renderers
def render_check_text(run: CheckRun) -> str:
    """The terminal summary, ending with the caution line.

    Raises
    ------
    None
    """
    from audit.reports.shapes import CAUTION

    lines = [f"lti-audit check: {run.status.upper()} (exit {run.exit_status})"]
    lines += ["  " + h for h in _header(run)]
    rows = _rows(run)
    for kind, title in (("claim", "claims"), ("file", "changed model files")):
        group = [r for r in rows if r.kind == kind]
        if not group:
            continue
        lines.append("")
        lines.append(f"{title}:")
        for r in group:
            peak = "" if r.peak is None else f"  [peak rel. diff {r.peak:.2e}]"
            lines.append(f"  {r.verdict.upper():13s} {r.label}{peak}")
            if r.category != "pass" or r.kind == "file":
                lines.append(_wrap(r.explanation, "      "))
            for d in r.diagnosis:
                lines.append(_wrap(d, "      - "))
            for w in r.warnings:
                lines.append(_wrap(("!! " if w.startswith("UNSTABLE") else "note: ") + w, "      "))
    if run.skipped_files:
        lines.append("")
        lines.append(f"not model documents (skipped): {', '.join(run.skipped_files)}")
    lines.append("")
    lines.append(_wrap(run.summary(), ""))
    lines.append(CAUTION)
    return terminal_text("\n".join(lines) + "\n")  # names from documents are plain text


def _wrap(text: str, indent: str, width: int = 100) -> str:
    return textwrap.fill(text, width=width, initial_indent=indent,
                         subsequent_indent=" " * len(indent) + "  ") or indent.rstrip()


def render_check_json(run: CheckRun) -> str:
    """The JSON report (:meth:`CheckRun.as_dict`), indented, with a trailing newline.

    Raises
    ------
    None
    """
    return json.dumps(run.as_dict(), indent=2) + "\n"


def render_junit_xml(run: CheckRun) -> str:
    """JUnit XML: one ``testsuite`` for the claims, one for the changed files.

    Failing claims and changed files carry a ``failure`` (type ``fails``/``changed`` or
    ``inconclusive``) whose text is the explanation and diagnosis; claims and files
    that could not be evaluated carry an ``error``. Passing cases keep their
    explanation in ``system-out``.

    Raises
    ------
    None
    """
    from audit.reports.shapes import CAUTION

    rows = _rows(run)
    root = ET.Element("testsuites", name="lti-audit check")
    root.append(ET.Comment(" " + CAUTION.replace("--", "- -") + " "))
    suites = []
    if run.manifest is not None or run.claims:
        suites.append((f"claims ({run.manifest or 'manifest'})", "lti-audit.claims", "claim"))
    if run.against is not None:
        suites.append((f"model files changed since {run.against}", "lti-audit.changes", "file"))
    totals = {"tests": 0, "failures": 0, "errors": 0}
    total_time = 0.0
    for name, classname, kind in suites:
        group = [r for r in rows if r.kind == kind]
        fails = sum(r.category in ("fail", "inconclusive") for r in group)
        errors = sum(r.category == "error" for r in group)
        t = sum(r.seconds for r in group)
        suite = ET.SubElement(root, "testsuite", name=xml_text(name), tests=str(len(group)),
                              failures=str(fails), errors=str(errors), skipped="0",
                              time=f"{t:.3f}")
        # the caution travels with the verdicts (CI systems show suite properties)
        props = ET.SubElement(suite, "properties")
        ET.SubElement(props, "property", name="lti-audit.caution", value=CAUTION)
        for r in group:
            case = ET.SubElement(suite, "testcase", classname=classname,
                                 name=xml_text(r.label), time=f"{r.seconds:.3f}")
            body = xml_text("\n".join([r.explanation, *r.diagnosis, *r.warnings]))
            message = xml_text(_first_sentence(r.explanation, 300))
            if r.category in ("fail", "inconclusive"):
                el = ET.SubElement(case, "failure", message=message, type=r.verdict)
                el.text = body
            elif r.category == "error":
                el = ET.SubElement(case, "error", message=message, type=r.verdict)
                el.text = body
            else:
                out = ET.SubElement(case, "system-out")
                out.text = f"{r.verdict}: {body}"
        totals["tests"] += len(group)
        totals["failures"] += fails
        totals["errors"] += errors
        total_time += t
    for key, value in totals.items():
        root.set(key, str(value))
    root.set("time", f"{total_time:.3f}")
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def _md(text: str) -> str:
    # Everything shown comes from documents or embeds their names: literal text only.
    return markdown_text(text)


def render_markdown(run: CheckRun) -> str:
    """A merge-request comment: a table, the largest discrepancies, the caution line.

    Raises
    ------
    None
    """
    from audit.reports.shapes import CAUTION

    rows = _rows(run)
    mark = {"pass": "", "fail": "**", "inconclusive": "**", "error": "**"}
    lines = [f"## lti-audit check: {run.status.upper()}", ""]
    lines += [f"- {_md(h)}" for h in _header(run)]
    lines += ["", _md(run.summary()), ""]
    if rows:
        lines.append("| file / claim | verdict | peak relative difference | note |")
        lines.append("|---|---|---|---|")
        for r in rows:
            label = markdown_code(r.label) if r.kind == "file" else _md(r.label)
            m = mark[r.category]
            lines.append(f"| {label} | {m}{r.verdict}{m} | {_num(r.peak)} | {_md(r.note)} |")
        lines.append("")
    ranked = sorted((r for r in rows if r.peak is not None), key=lambda r: -float(r.peak or 0.0))
    lines.append("### Largest discrepancies")
    lines.append("")
    if not ranked:
        lines.append("No transfer-function comparison ran.")
    for i, r in enumerate(ranked[:LARGEST_DISCREPANCIES], start=1):
        at = "" if r.frequency is None else f" at {r.frequency:.4g} rad/s"
        lines.append(f"{i}. {_md(r.label)}: {_num(r.peak)}{at} ({r.verdict})")
        if r.category != "pass":
            lines.append(f"   - {_md(r.explanation)}")
            for d in r.diagnosis:
                lines.append(f"   - {_md(d)}")
        for w in r.warnings:
            if w.startswith("UNSTABLE"):
                lines.append(f"   - {_md(w)}")
    if run.skipped_files:
        lines += ["", "Changed files skipped (not model documents): "
                  + ", ".join(markdown_code(p) for p in run.skipped_files)]
    lines += ["", f"> {CAUTION}", ""]
    return "\n".join(lines)


# ------------------------------------------------------------------ files
def _looks_like_model_file(path: Path) -> bool:
    if path.suffix.lower() == ".npz":
        return True
    try:
        head = path.read_bytes()[:1_000_000].decode("utf-8", "replace")
    except OSError:
        return False
    return "lti_model" in head or "[[claim]]" in head


def check_report_target(path: str | Path, *, overwrite: bool = False) -> Path:
    """Refuse a report path before any audit runs (see :func:`write_output`).

    Raises
    ------
    OutputRefusedError
    """
    target = Path(path)
    if target.is_file() and not target.is_symlink() and _looks_like_model_file(target):
        raise OutputRefusedError(f"{path}: exists and looks like a model document or manifest; "
                                 "refusing to overwrite it with a report")
    return check_new_output(target, overwrite=overwrite, create_parents=True)


def write_output(path: str | Path, text: str, *, protected: Iterable[str | Path] = (),
                 overwrite: bool = False) -> Path:
    """Write a report file under the tool's output rule (:mod:`audit.reports.safe_output`).

    The file appears atomically; a missing folder is created; an existing file is
    replaced only with ``overwrite`` (``check --overwrite``), never through a symbolic
    link, and never when it is an input of the run or looks like a model document or
    manifest.

    Parameters
    ----------
    path : str or Path
        Target file.
    text : str
        UTF-8 content.
    protected : iterable of path, keyword-only
        Files that must never be overwritten (the manifest and every model file of the
        run).
    overwrite : bool, keyword-only
        Replace an existing report file.

    Returns
    -------
    Path
        The path written.

    Raises
    ------
    OutputRefusedError
        The target is protected, exists (without ``overwrite``), looks like a model file,
        is a link or a directory, or cannot be written.
    """
    check_report_target(path, overwrite=overwrite)
    return write_output_file(path, text, overwrite=overwrite, create_parents=True,
                             protected=protected)
