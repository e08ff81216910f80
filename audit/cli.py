"""The ``lti-audit`` command.

Exit statuses (DESIGN.md): 0 equivalent / no problem; 1 different / problem found;
2 invalid input or usage (a clear message on stderr); 3 inconclusive.
Heavy numerical modules are imported lazily so that ``--help`` and usage errors are fast.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from typing import Any, Sequence

EXIT_OK = 0
EXIT_DIFFERENT = 1
EXIT_INVALID = 2
EXIT_INCONCLUSIVE = 3
EXIT_INTERNAL = 4


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # type: ignore[override]
        self.print_usage(sys.stderr)
        sys.stderr.write(f"lti-audit: error: {message}\n")
        raise SystemExit(EXIT_INVALID)


def build_parser() -> argparse.ArgumentParser:
    from audit.commands._options import relative_tolerance, seconds
    from audit.dynamics.discretization_methods import METHODS
    from audit.evidence.record import DEFAULT_RTOL
    from audit.verdict.compare import ESCALATION_SECONDS

    parser = _Parser(
        prog="lti-audit",
        description="Decide, with numerical evidence, whether claimed-equivalent LTI models "
        "describe the same system.",
        epilog="Exit status: 0 equivalent / no problem, 1 different / problem, "
        "2 invalid input or usage, 3 inconclusive.",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    cmp_ = sub.add_parser("compare", help="audit a set of claimed-equivalent models (pairwise against the first)")
    cmp_.add_argument("models", nargs="+", metavar="MODEL", help="model documents (JSON, YAML, TOML or .npz)")
    cmp_.add_argument("--rtol", type=relative_tolerance, default=DEFAULT_RTOL,
                      help=f"relative tolerance on the peak gain of the difference (default {DEFAULT_RTOL:g})")
    cmp_.add_argument("--atol", type=_absolute_tolerance, default=0.0, metavar="GAIN",
                      help="absolute tolerance on the difference, in the models' gain units "
                      "(output units per input unit); a difference within the larger of "
                      "rtol x peak gain and GAIN passes (default 0: none)")
    cmp_.add_argument("--band", type=float, nargs=2, metavar=("LOW", "HIGH"), default=None,
                      help="band of interest in rad/s: only the difference inside it decides; "
                      "the difference over all frequencies is still reported")
    cmp_.add_argument("--channel-rtol", action="append", default=[], metavar="OUT:IN=R",
                      help="relative tolerance R for one channel (OUT:IN=R) or one output "
                      "(OUT=R); OUT and IN are 0-based indices, signal names from the first "
                      "model's document, or *; repeatable; the decision is then made channel "
                      "by channel")
    cmp_.add_argument("--format", choices=("text", "json", "html"), default="text",
                      help="report format (html needs -o and models in one time domain)")
    cmp_.add_argument("-o", "--output", metavar="FILE",
                      help="write the report to FILE (never overwrites) and print a one-line "
                      "summary")
    cmp_.add_argument("--discretization", type=_discretization_method, metavar="METHOD",
                      help="relate continuous and discrete models: the continuous one is "
                      "discretized with METHOD at the discrete one's period; METHOD is one of "
                      + ", ".join(METHODS))
    cmp_.add_argument("--prewarp", type=float, default=None, metavar="RAD_PER_S",
                      help="prewarp frequency for --discretization bilinear")
    cmp_.add_argument("--escalation-seconds", type=seconds, default=ESCALATION_SECONDS,
                      help="time budget per pair for extended-precision re-evaluation "
                      f"(default {ESCALATION_SECONDS:g}; 0 disables it)")
    cmp_.add_argument("--accept-sampled", action="store_true",
                      help="for sparse models above the dense route's size: accept 'no "
                      "difference on the sampled frequency grid' as 'equivalent on the sampled "
                      "grid' (default: inconclusive, as nothing is bounded between grid points)")
    cmp_.add_argument("--accept-hidden-instability", type=_reason, default=None, metavar="REASON",
                      help="accept knowingly that a model has an unstable or marginal hidden or "
                      "nearly hidden mode the reference lacks; REASON is printed in the report "
                      "and the exit status follows the input-output verdict alone")
    ins = sub.add_parser("inspect", help="report one model's properties and problems")
    ins.add_argument("model", metavar="MODEL")
    ins.add_argument("--format", choices=("text", "json"), default="text")
    for module in _command_modules():
        sp = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        module.add_arguments(sp)
        sp.set_defaults(_run=module.run)
    return parser


def _absolute_tolerance(text: str) -> float:
    """``--atol``: a finite number >= 0."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number >= 0 in the models' gain units, got {text!r}") from None
    if not (value >= 0 and value != float("inf")):
        raise argparse.ArgumentTypeError(f"expected a finite number >= 0 in the models' gain units, got {text}")
    return value


def _discretization_method(text: str) -> str:
    """``--discretization``: one of the method names, else a usage error listing them."""
    from audit.dynamics.discretization_methods import discretization_method
    from audit.errors import InvalidModelError

    try:
        return discretization_method(text, field="--discretization")
    except InvalidModelError as exc:
        raise argparse.ArgumentTypeError(str(exc).removeprefix("--discretization: ")) from None


def _command_modules() -> list[Any]:
    """The sub-command modules of :mod:`audit.commands`, sorted by name."""
    import importlib
    import pkgutil

    from audit import commands

    found = []
    for info in sorted(pkgutil.iter_modules(commands.__path__), key=lambda i: i.name):
        if info.name.startswith("_"):
            continue
        found.append(importlib.import_module(f"{commands.__name__}.{info.name}"))
    return found


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return EXIT_INVALID
    from audit.errors import AuditError

    if args.command in ("compare", "inspect", "convert", "check"):
        from audit.core.threads import set_audit_threads

        set_audit_threads()  # one audit at a time: its large factorizations may use every core
    try:
        if args.command == "compare":
            return _compare(args)
        if args.command == "inspect":
            return _inspect(args)
        return int(args._run(args))
    except AuditError as exc:
        from audit.reports.safe_output import terminal_text

        sys.stderr.write(terminal_text(f"lti-audit: error: {exc}\n"))
        return EXIT_INVALID
    except KeyboardInterrupt:  # pragma: no cover
        sys.stderr.write("lti-audit: interrupted\n")
        return 130
    except Exception as exc:  # noqa: BLE001 - last line of defence: no traceback for users
        if os.environ.get("LTI_AUDIT_DEBUG"):
            raise
        sys.stderr.write(
            f"lti-audit: internal error ({type(exc).__name__}: {exc}); this is a bug in "
            "lti-audit, not in your models. Re-run with LTI_AUDIT_DEBUG=1 for details and "
            "please report it.\n"
        )
        return EXIT_INTERNAL


def _compare(args: argparse.Namespace) -> int:
    from audit.errors import IncompatibleModelsError
    from audit.documents.loading import load_model_document
    from audit.reports.shapes import compare_report, render_compare_text, render_json, signal_labels
    from audit.reports.safe_output import terminal_text
    from audit.verdict.compare import Options, overall_verdict

    if len(args.models) < 2:
        sys.stderr.write("lti-audit: error: compare needs at least two models (got 1)\n")
        return EXIT_INVALID
    if args.prewarp is not None and not _is_bilinear(args.discretization):
        sys.stderr.write("lti-audit: error: --prewarp applies only to the bilinear (Tustin) "
                         "discretization; give --discretization with the bilinear method, or "
                         f"drop --prewarp (got --discretization {args.discretization})\n")
        return EXIT_INVALID
    if args.format == "html" and not args.output:
        sys.stderr.write("lti-audit: error: --format html needs -o FILE\n")
        return EXIT_INVALID
    if args.output:
        from audit.reports.safe_output import check_new_output

        check_new_output(args.output, flag="")  # the output rule, checked before any work
    start = time.perf_counter()
    docs = [load_model_document(path) for path in args.models]
    from audit.documents.sparse import SparseRealization, model_for_comparison

    models = [model_for_comparison(doc).with_name(doc.name) for doc in docs]
    if args.format == "html" and any(isinstance(m, SparseRealization) for m in models):
        sys.stderr.write("lti-audit: error: --format html does not draw sparse models above "
                         "the dense route's size; use --format text or json\n")
        return EXIT_INVALID
    signals = [signal_labels(doc) for doc in docs]
    names = [m.name or os.path.basename(p) for m, p in zip(models, args.models)]
    models = [m.with_name(n) for m, n in zip(models, names)]
    options = Options(rtol=args.rtol, escalate=args.escalation_seconds > 0,
                      escalation_seconds=args.escalation_seconds,
                      **_stated_tolerances(args, docs[0], models[0]))
    pairs = []
    ref = models[0]
    for other, path in zip(models[1:], args.models[1:]):
        try:
            pairs.append(_compare_one(ref, other, args, options))
        except IncompatibleModelsError as exc:
            raise IncompatibleModelsError(f"{path}: {exc}") from None
    verdict = overall_verdict(pairs)
    from audit.structure.internal_stability import model_modes, modes_from_comparisons, unaccepted

    modes = [_sparse_modes(m) if isinstance(m, SparseRealization)
             else modes_from_comparisons(m, pairs) or model_modes(m, label=m.name)
             for m in models]
    data = compare_report(models, list(args.models), pairs, options, verdict,
                          time.perf_counter() - start, signals=signals, modes=modes,
                          accepted_reason=args.accept_hidden_instability)
    if args.format == "html":
        from audit.reports.html_page import render_compare_html

        text = render_compare_html(data, _drawn_models(models, args))
    else:
        text = render_json(data) if args.format == "json" else render_compare_text(data)
        text = text if args.format == "json" else terminal_text(text)  # names: plain text
    if args.output:
        from audit.reports.shapes import compare_headline
        from audit.reports.safe_output import write_output_file

        write_output_file(args.output, text, flag="")
        sys.stdout.write(f"{compare_headline(data)}; report written to {args.output}\n")
    else:
        sys.stdout.write(text)
    if unaccepted(data["problems"]):  # a new unstable hidden mode fails whatever the verdict
        return EXIT_DIFFERENT
    return {"equivalent": EXIT_OK, "different": EXIT_DIFFERENT, "inconclusive": EXIT_INCONCLUSIVE}[verdict]


def _sparse_modes(m: Any) -> Any:
    """No hidden-mode analysis for a sparse model on the sampled route (a dense staircase
    of its order is what that route avoids): an empty, undecided entry."""
    from audit.structure.internal_stability import ModelModes

    nan = float("nan")  # not analysed
    return ModelModes(label=m.name, modes=(), minimal_order=m.order,
                      thresholds={"hidden": nan, "nearly_hidden": nan, "marginal": nan},
                      decisions_clear=False, sample_period=m.sample_period)


def _reason(text: str) -> str:
    """An acceptance reason: non-empty text."""
    if not text.strip():
        raise argparse.ArgumentTypeError("expected a non-empty reason (why the hidden mode is accepted)")
    return text.strip()


def _stated_tolerances(args: argparse.Namespace, doc: Any, reference: Any) -> dict[str, Any]:
    """``--atol``, ``--band`` and ``--channel-rtol`` as Options fields (names resolved
    against the first model's document); bad values raise InvalidModelError (exit 2)."""
    from audit.evidence.band_peak import check_band
    from audit.evidence.tolerances import parse_channel_tolerance, resolve_channel_tolerances

    out: dict[str, Any] = {"atol": args.atol}
    if args.band is not None:
        out["band"] = check_band(args.band, field="--band")
    if args.channel_rtol:
        specs = [parse_channel_tolerance(t, field="--channel-rtol") for t in args.channel_rtol]
        out["channel_rtol"] = resolve_channel_tolerances(
            specs, n_outputs=reference.n_outputs, n_inputs=reference.n_inputs,
            output_names=[s.name for s in doc.outputs] if getattr(doc, "outputs", None) else None,
            input_names=[s.name for s in doc.inputs] if getattr(doc, "inputs", None) else None,
            field="--channel-rtol")
    return out


def _is_bilinear(method: str | None) -> bool:
    """Whether a discretization method name is the bilinear (Tustin) map, the only one
    with a prewarp frequency."""
    return method is not None and ("tustin" in method.lower() or "bilinear" in method.lower())


def _drawn_models(models: list[Any], args: argparse.Namespace) -> list[Any]:
    """The models as drawn on one diagram: with ``--discretization``, every continuous-time
    model is replaced by its declared discretization at the first discrete model's period
    (what its pair was compared with)."""
    discrete = [m for m in models if m.is_discrete]
    if not args.discretization or not discrete or len(discrete) == len(models):
        return models
    from audit.dynamics.discretization import discretize

    period = float(discrete[0].sample_period)
    return [m if m.is_discrete else discretize(
        m, period, method=args.discretization, prewarp_frequency=args.prewarp).with_name(
        f"{m.name} ({args.discretization}, T = {period:g} s)") for m in models]


def _compare_one(ref, other, args: argparse.Namespace, options):  # type: ignore[no-untyped-def]
    from audit.core.realization import check_comparable, same_time_domain
    from audit.documents.sparse import SparseRealization, compare_sparse_pair
    from audit.verdict.compare import compare_discretized, compare_pair, compare_sample_periods

    if isinstance(ref, SparseRealization) or isinstance(other, SparseRealization):
        if options.atol or options.band is not None or getattr(options, "channel_rtol", None):
            from audit.errors import InvalidModelError

            raise InvalidModelError("--atol, --band and --channel-rtol are not available on "
                                    "the sampled sparse route (models above "
                                    "1000 states given as sparse_state_space)")
        return compare_sparse_pair(ref, other, rtol=options.rtol,
                                   accept_sampled=bool(getattr(args, "accept_sampled", False)))

    if ref.is_discrete != other.is_discrete:
        if not args.discretization:
            check_comparable(ref, other)  # raises the mixed-domain message
        return compare_discretized(ref, other, method=args.discretization,
                                   prewarp_frequency=args.prewarp, options=options)
    if args.discretization:
        from audit.errors import IncompatibleModelsError

        raise IncompatibleModelsError(
            "--discretization needs one continuous-time and one discrete-time model, but "
            f"{ref.name} and {other.name} are both "
            + ("discrete-time" if ref.is_discrete else "continuous-time"))
    if ref.is_discrete and not same_time_domain(ref, other):
        return compare_sample_periods(ref, other, options=options)
    return compare_pair(ref, other, options=options)


def _inspect(args: argparse.Namespace) -> int:
    from audit.verdict.inspection import inspect_model
    from audit.documents.loading import load_model_document, realization_from_document
    from audit.reports.shapes import inspect_report, render_inspect_text, render_json

    doc = load_model_document(args.model)
    r = realization_from_document(doc)
    if not r.name:
        r = r.with_name(os.path.basename(args.model))
    insp = inspect_model(r, claimed_form=getattr(doc, "claimed_form", None))
    data = inspect_report(r, args.model, insp)
    from audit.reports.safe_output import terminal_text

    sys.stdout.write(render_json(data) if args.format == "json"
                     else terminal_text(render_inspect_text(data)))
    return {"ok": EXIT_OK, "problem": EXIT_DIFFERENT, "inconclusive": EXIT_INCONCLUSIVE}[insp.status]


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
