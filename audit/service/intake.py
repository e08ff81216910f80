"""Checks of a submission at the door: sizes before any conversion, then the documents.

``POST /audits`` answers at once, so everything it can judge without numerics is judged
here, in the web process, before the submission is stored:

1. :func:`check_sizes` reads the raw JSON documents and refuses a model whose state
   count would exceed ``max_order`` -- for state space the rows of ``A``; for a
   transfer function the sum of the denominator degrees (the order of the realization
   built channel by channel); for zeros-poles-gain the sum over channels of
   ``max(#poles, #zeros)`` -- or whose input or output count exceeds ``max_channels``.
   Nothing is converted, so a 2000-pole document is refused in microseconds.
2. :func:`check_documents` validates every document with
   :func:`audit.documents.loading.parse_model_document` (pydantic; no conversion), checks the
   ``claims.dc_gain`` shape, and checks that the models can be compared (input and
   output counts, time domains; a continuous reference with discrete models needs a
   discretization claim). The worker repeats the full check after conversion.
"""

from __future__ import annotations

from typing import Any

from audit.errors import IncompatibleModelsError, InvalidModelError
from audit.core.realization import SAMPLE_PERIOD_RTOL

__all__ = ["DEFAULT_MAX_CHANNELS", "check_documents", "check_sizes"]

DEFAULT_MAX_CHANNELS = 64
"""Largest number of inputs or outputs of a submitted model."""


def _rows(value: Any) -> int:
    return len(value) if isinstance(value, list) else 0


def _cols(value: Any) -> int:
    return len(value[0]) if isinstance(value, list) and value and isinstance(value[0], list) else 0


def _channels(table: Any) -> list[Any]:
    if not isinstance(table, list):
        return []
    return [ch for row in table if isinstance(row, list) for ch in row]


def model_size(doc: Any) -> tuple[int, int, int]:
    """(states, outputs, inputs) a raw document describes, read without converting it.

    Unknown or malformed parts count as 0 (the document check reports them).
    """
    if not isinstance(doc, dict):
        return 0, 0, 0
    ss, tf, factored = doc.get("state_space"), doc.get("transfer_function"), doc.get("zeros_poles_gain")
    if isinstance(ss, dict):
        d = ss.get("d")
        return _rows(ss.get("a")), _rows(d), _cols(d)
    if isinstance(tf, dict):
        den = tf.get("denominator")
        order = sum(max(len(ch) - 1, 0) for ch in _channels(den) if isinstance(ch, list))
        return order, _rows(den), _cols(den)
    if isinstance(factored, dict):
        poles, zeros = _channels(factored.get("poles")), _channels(factored.get("zeros"))
        order = 0
        for k, p in enumerate(poles):
            z = zeros[k] if k < len(zeros) else []
            order += max(len(p) if isinstance(p, list) else 0, len(z) if isinstance(z, list) else 0)
        return order, _rows(factored.get("gain")), _cols(factored.get("gain"))
    return 0, 0, 0


def check_sizes(body: dict[str, Any], *, max_order: int, max_channels: int) -> None:
    """Refuse documents above the service's limits, before anything is converted.

    Raises
    ------
    InvalidModelError
        Naming the document (``models[i]`` or ``reference``), its size and the limit.
    """
    docs: list[tuple[str, Any]] = []
    if body.get("reference") is not None:
        docs.append(("reference", body["reference"]))
    docs += [(f"models[{i}]", d) for i, d in enumerate(body.get("models") or [])]
    for source, doc in docs:
        order, outputs, inputs = model_size(doc)
        if order > max_order:
            raise InvalidModelError(
                f"has order {order} (states after conversion to state space, counted on the "
                f"document before converting it), above this service's limit "
                f"max_order={max_order}", field=source, source=source)
        for what, count in (("outputs", outputs), ("inputs", inputs)):
            if count > max_channels:
                raise InvalidModelError(
                    f"has {count} {what}, above this service's limit max_channels="
                    f"{max_channels}", field=source, source=source)


def check_documents(sub: Any) -> list[dict[str, Any]]:
    """Validate the documents of a :class:`~audit.service.submission.Submission`.

    Returns
    -------
    list of dict
        One entry per document: ``role``, ``position``, ``name``, ``sha256``.

    Raises
    ------
    InvalidModelError
        A document is invalid (the CLI's message; source ``models[i]``/``reference``),
        or ``claims.dc_gain``/``claims.poles`` do not fit the models.
    IncompatibleModelsError
        Input/output counts or time domains differ and no discretization claim bridges
        a continuous reference and discrete models.
    """
    from audit.documents.loading import parse_model_document
    from audit.service.submission import canonical_sha256, check_claim_shapes, stated_tolerance_options

    parsed: list[tuple[str, Any]] = []
    entries: list[dict[str, Any]] = []
    if sub.reference is not None:
        doc = parse_model_document(sub.reference, source="reference")
        parsed.append(("reference", doc))
        entries.append({"role": "reference", "position": 0, "name": doc.name,
                        "sha256": canonical_sha256(sub.reference)})
    for i, raw in enumerate(sub.models):
        doc = parse_model_document(raw, source=f"models[{i}]")
        parsed.append((f"models[{i}]", doc))
        entries.append({"role": "model", "position": i, "name": doc.name,
                        "sha256": canonical_sha256(raw)})
    models = [d for src, d in parsed if src != "reference"]
    check_claim_shapes(sub.claims, models[0].n_outputs, models[0].n_inputs)
    if len(parsed) >= 2:
        _check_comparable(parsed, sub.claims.discretization is not None)
    stated_tolerance_options(sub, sub, parsed[0][1].n_outputs, parsed[0][1].n_inputs)
    return entries


def _same_period(a: float | None, b: float | None) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= SAMPLE_PERIOD_RTOL * max(a, b)


def _check_comparable(parsed: list[tuple[str, Any]], discretization_claimed: bool) -> None:
    src0, first = parsed[0]
    for src, doc in parsed[1:]:
        if (doc.n_outputs, doc.n_inputs) != (first.n_outputs, first.n_inputs):
            raise IncompatibleModelsError(
                f"{src}: has {doc.n_outputs} output(s) x {doc.n_inputs} input(s) but "
                f"{src0} has {first.n_outputs} x {first.n_inputs}")
    if src0 == "reference" and first.sample_period is None and discretization_claimed \
            and all(d.sample_period is not None for _, d in parsed[1:]):
        return  # the worker discretizes the reference with the claimed method
    for src, doc in parsed[1:]:
        if not _same_period(doc.sample_period, first.sample_period):
            dom = lambda t: "continuous-time" if t is None else f"discrete-time (T = {t:g} s)"  # noqa: E731
            hint = ("; declare claims.discretization to compare a continuous reference with "
                    "discrete models") if first.sample_period is None or doc.sample_period is None else ""
            raise IncompatibleModelsError(
                f"{src}: is {dom(doc.sample_period)} but {src0} is "
                f"{dom(first.sample_period)}{hint}")
