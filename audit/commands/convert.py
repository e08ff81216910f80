"""``lti-audit convert MODEL --to FORM [-o OUT]``: produce a structured realization.

The new realization is audited against the source before anything is written; the
written document carries ``claimed_form`` and a ``certificate`` (verdict, relative
error, cond(T), warnings). A conversion that does not reproduce the source within the
tolerance is not written (exit 1). An existing output file is never overwritten.
"""

from __future__ import annotations

import argparse
import sys

from audit.commands._options import relative_tolerance

NAME = "convert"
HELP = "produce a structured form of a model, audited against the source"

# the names of audit.documents.schema.ClaimedForm (kept here so that --help needs no pydantic;
# tests/test_cli.py checks that the two lists agree)
FORM_NAMES = (
    "controllable_companion",
    "observable_companion",
    "modal",
    "jordan",
    "balanced",
    "kalman",
    "staircase",
)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("model", metavar="MODEL", help="source model document")
    parser.add_argument("--to", dest="form", required=True, choices=FORM_NAMES,
                        help="form to produce")
    parser.add_argument("-o", "--output", metavar="OUT",
                        help="write the new model document here (refuses to overwrite); "
                        "default: print it on stdout")
    parser.add_argument("--rtol", type=relative_tolerance, default=None,
                        help="tolerance of the audit of the new realization (default: "
                        "the compare default)")
    parser.add_argument("--name", help="name of the new document (default: source name + form)")


def run(args: argparse.Namespace) -> int:
    import hashlib

    from audit.errors import InvalidModelError
    from audit.evidence.record import DEFAULT_RTOL
    from audit.forms.catalogue import FORMS
    from audit.documents.loading import (
        document_from_realization,
        dump_model_document,
        load_model_document,
        realization_from_document,
        render_model_document,
    )
    from audit.reports.shapes import CAUTION, package_version
    from audit.verdict.compare import Options, compare_pair

    rtol = DEFAULT_RTOL if args.rtol is None else float(args.rtol)
    if args.output:
        from audit.reports.safe_output import check_new_output

        check_new_output(args.output, flag="")  # the output rule, checked before any work
    doc = load_model_document(args.model)
    source = realization_from_document(doc)
    source = source.with_name(doc.name)
    conversion = FORMS[args.form](source)
    new = conversion.realization.with_name(args.name or f"{doc.name[:170]} ({args.form} form)")
    pair = compare_pair(source, new, options=Options(rtol=rtol))
    decisive = next(e for e in pair.evidence if e.decisive)
    with open(args.model, "rb") as fh:
        digest = hashlib.sha256(fh.read()).hexdigest()
    eig_conds = [float(c) for c in getattr(conversion, "eigenvalue_condition_numbers", ()) or ()]
    certificate = {
        "source": args.model,
        "source_sha256": digest,
        "conversion": args.form,
        "verdict": pair.verdict,
        "relative_error": None if decisive.value is None else float(decisive.value),
        "tolerance": rtol,
        "transform_condition": None if conversion.transform_condition is None
        else float(conversion.transform_condition),
        "largest_eigenvalue_condition": max(eig_conds) if eig_conds else None,
        "warnings": list(conversion.warnings),
        "lti_audit_version": package_version(),
    }
    lines = [
        f"lti-audit convert: {args.form} form of {doc.name}: {pair.verdict.upper()} "
        f"(relative error {decisive.value:.2e}, tolerance {rtol:.1e})",
    ]
    if conversion.transform_condition is not None:
        lines.append(f"  cond(T) = {conversion.transform_condition:.3e}")
    if eig_conds:
        lines.append(f"  largest eigenvalue condition number = {max(eig_conds):.3e}")
    for warning in conversion.warnings:
        lines.append(f"  warning: {warning}")
    if pair.verdict != "equivalent":
        lines.append(f"  not written: {pair.explanation}")
        lines.append(CAUTION)
        sys.stderr.write("\n".join(lines) + "\n")
        return 1 if pair.verdict == "different" else 3
    claimed, claim_note = _checkable_claim(args.form, new, conversion.details.get("block_sizes"))
    if claim_note:
        lines.append(f"  note: {claim_note}")
    notes = f"lti-audit convert --to {args.form}"
    if claim_note:
        notes += f"; {claim_note}"
    signals = {"inputs": [s.model_dump() for s in doc.inputs] if doc.inputs else None,
               "outputs": [s.model_dump() for s in doc.outputs] if doc.outputs else None}
    new_doc = document_from_realization(
        new,
        name=new.name,
        claimed_form=claimed,  # type: ignore[arg-type]
        provenance={"source": args.model, "notes": notes},
        certificate=certificate,
        signals=signals,
    )
    if args.output:
        try:
            dump_model_document(new_doc, args.output)
        except FileExistsError:
            raise InvalidModelError(f"{args.output}: exists already; lti-audit never "
                                    "overwrites a file") from None
        lines.append(f"  written to {args.output}")
        lines.append(CAUTION)
        sys.stdout.write("\n".join(lines) + "\n")
    else:
        sys.stdout.write(render_model_document(new_doc))
        lines.append(CAUTION)
        sys.stderr.write("\n".join(lines) + "\n")
    return 0


# forms whose claim `inspect` and `check` verify by pattern (audit.forms.catalogue.check_claimed_form);
# the Kalman and staircase forms rest on rank decisions a pattern check cannot repeat
PATTERN_CHECKED_FORMS = ("controllable_companion", "observable_companion", "modal", "jordan",
                         "balanced")


def _checkable_claim(form: str, new: object, sizes: object) -> tuple[str | None, str]:
    """The ``claimed_form`` to write (only one that lti-audit itself confirms) and a note."""
    from audit.forms.catalogue import check_claimed_form

    if form not in PATTERN_CHECKED_FORMS:
        return None, (f"no claimed_form written: the {form} form rests on rank decisions that "
                      "a pattern check cannot confirm" + (f" (block sizes {_sizes(sizes)})" if sizes else ""))
    check = check_claimed_form(new, form)  # type: ignore[arg-type]
    if check.holds:
        return form, ""
    return None, (f"no claimed_form written: the produced matrices do not pass lti-audit's own "
                  f"{form} pattern check ({'; '.join(check.deviations[:2]) or check.variant})")


def _sizes(sizes: object) -> str:
    if isinstance(sizes, dict):
        return ", ".join(f"{k} {v}" for k, v in sizes.items())
    if isinstance(sizes, (list, tuple)):
        return ", ".join(str(v) for v in sizes)
    return str(sizes)
