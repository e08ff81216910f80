"""Submissions to the audit service: the request schema, claim checks, and the audit run.

A submission carries one or more model documents (``models``), an optional reference
model (``reference``), and the supplier's claims. The audit

1. validates every document with :func:`audit.documents.loading.parse_model_document` (same
   messages as the CLI; the source is ``models[i]`` or ``reference`` instead of a file
   name) and builds its realization;
2. compares the models with :func:`audit.verdict.compare.compare_models` -- against the
   reference when one is given, else against the first model. When the reference is
   continuous-time, the models are discrete-time and a discretization is claimed, the
   reference is first discretized with the claimed method at the models' sample period
   (:func:`audit.dynamics.discretization.discretize`) and that is compared;
3. checks each claim for each submitted model individually (never for the reference),
   each with its own outcome ``holds``, ``fails`` or ``not_checkable``:

   ``sample_period``   the document's sample period, relative tolerance 1e-9
                       (:data:`audit.core.realization.SAMPLE_PERIOD_RTOL`); ``null`` claims
                       continuous time;
   ``discretization``  :func:`audit.dynamics.discretization_checks.check_discretization_claim`
                       of the continuous reference against the model, tolerance ``rtol``;
   ``claimed_form``    :func:`audit.forms.catalogue.check_claimed_form` (pattern tolerance
                       ``form_rtol``); a document's own ``claimed_form`` is checked too;
   ``dc_gain``         ``G(0)`` (continuous) or ``G(1)`` (discrete) from
                       :func:`audit.verdict.inspection.inspect_model`, relative Frobenius-norm
                       difference <= ``claim_rtol``;
   ``poles``           optimal one-to-one matching (:func:`audit.evidence.matching.match_points`)
                       with every eigenvalue of A (or, when the counts differ, the poles
                       of the minimal part); largest relative distance <= ``claim_rtol``;
   ``bandwidth_rad_s`` see :func:`bandwidth`; relative difference <= ``claim_rtol``;
   ``stable``          ``true`` claims internal (asymptotic) stability of every mode,
                       hidden ones included (:func:`audit.verdict.inspection.inspect_model`).

Bandwidth definition
--------------------
The bandwidth is the smallest frequency ``w > 0`` at which the largest singular value of
the frequency response (for one input and one output: ``|G|``) has fallen to
``1/sqrt(2)`` of its DC value, i.e. 3.01 dB below the DC gain (the usual -3 dB definition;
common practice, no source). It is
found on the adaptive frequency grid of :func:`audit.evidence.frequency_grid.adaptive_frequency_grid`
(which in discrete time ends at the Nyquist frequency) and then refined by bisection in
``log w`` to a relative width of 1e-12. It is undefined (``None``) when the DC gain is
zero or infinite (a pole at DC) or when the gain never falls that far on the grid.

No numbers are printed; the service (``audit.service.app``) turns results into JSON.
"""

from __future__ import annotations

import hashlib
import json
import math
import time
from dataclasses import dataclass, field, replace
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from audit.dynamics.discretization_methods import DiscretizationMethod, accepted_methods_text, discretization_method
from audit.errors import AuditError, IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from audit.core.realization import SAMPLE_PERIOD_RTOL, Realization

__all__ = [
    "AuditOutcome",
    "Claims",
    "DEFAULT_CLAIM_RTOL",
    "DEFAULT_ESCALATION_SECONDS",
    "DiscretizationClaim",
    "ParsedSubmission",
    "Submission",
    "Tolerances",
    "bandwidth",
    "canonical_sha256",
    "compared_models",
    "parse_submission",
    "run_audit",
    "tolerances_for",
]

DEFAULT_CLAIM_RTOL = 1e-3
"""Relative tolerance of numeric claims (DC gain, poles, bandwidth). Suppliers quote these
in decimal with a few significant digits, so a looser tolerance than the equivalence
test's is the default (common practice, no source); a submission can set its own."""

DEFAULT_ESCALATION_SECONDS = 5.0
"""Per-pair extended-precision budget used by the service (the CLI default is 20 s);
keeps a request bounded. A submission can set 0..20 s."""

FORM_RTOL = 1e-9
"""Pattern tolerance of form claims (the default of :func:`audit.forms.catalogue.check_claimed_form`)."""

BANDWIDTH_BISECTION_RTOL = 1e-12
MAX_MODELS = 16



class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


class DiscretizationClaim(_Strict):
    """"The submitted discrete models are the ``method`` discretization of the reference"."""

    method: DiscretizationMethod = Field(
        description="Discretization method: " + accepted_methods_text())
    prewarp_frequency: float | None = Field(
        default=None, gt=0, description="Prewarp frequency in rad/s of the bilinear method (optional)")

    @field_validator("method", mode="before")
    @classmethod
    def _known_method(cls, value: Any) -> Any:
        try:
            return discretization_method(value, field="method")
        except InvalidModelError as exc:  # pydantic reports a ValueError as a 422 detail
            raise ValueError(str(exc).removeprefix("method: ")) from None


class Claims(_Strict):
    """The supplier's claims about every submitted model (each optional)."""

    sample_period: float | None = Field(
        default=None, gt=0,
        description="Seconds; give null explicitly to claim continuous time (absent: no claim)")
    discretization: DiscretizationClaim | None = Field(
        default=None, description="Needs a continuous-time reference model")
    claimed_form: Literal["controllable_companion", "observable_companion", "modal",
                          "jordan", "balanced"] | None = None
    dc_gain: float | list[list[float]] | None = Field(
        default=None, description="A number (one input, one output) or an outputs x inputs matrix")
    poles: list[list[float]] | None = Field(
        default=None, max_length=2000, description="Poles as [re, im] pairs")
    bandwidth_rad_s: float | None = Field(default=None, gt=0,
                                          description="-3 dB bandwidth in rad/s")
    stable: bool | None = Field(default=None, description="Claimed internal stability")


class Submission(_Strict):
    """Body of ``POST /audits``."""

    supplier: str | None = Field(default=None, min_length=1, max_length=200,
                                 description="Supplier name (forced to the token's supplier "
                                 "for supplier tokens)")
    models: list[dict[str, Any]] = Field(min_length=1, max_length=MAX_MODELS,
                                         description="Model documents (lti_model 1)")
    reference: dict[str, Any] | None = Field(default=None,
                                             description="Optional reference model document")
    claims: Claims = Field(default_factory=Claims)
    rtol: float | None = Field(default=None, gt=0, lt=1,
                               description="Equivalence tolerance (default 1e-5)")
    claim_rtol: float | None = Field(default=None, gt=0, lt=1,
                                     description=f"Tolerance of numeric claims (default {DEFAULT_CLAIM_RTOL:g})")
    escalation_seconds: float | None = Field(default=None, ge=0, le=20)
    accept_hidden_instability: str | None = Field(
        default=None, min_length=1, max_length=2000,
        description="Reason for accepting knowingly an unstable or marginal hidden or nearly "
        "hidden mode that the reference lacks; without it such a mode fails the submission")
    atol: float | None = Field(default=None, ge=0, description="Absolute tolerance on the "
                               "difference, in the models' gain units (default 0: none)")
    band_rad_s: list[float] | None = Field(default=None, min_length=2, max_length=2,
                                           description="Band of interest [low, high] in rad/s: only "
                                           "the difference inside it decides")
    channel_rtol: list[str] = Field(default_factory=list, max_length=400,
                                    description="Per-channel relative tolerances 'OUT:IN=R' or "
                                    "'OUT=R' (0-based index, signal name of the first compared "
                                    "model, or *)")


class Tolerances(_Strict):
    """Every tolerance an audit used; stored with it so that a re-run uses the same."""

    rtol: float
    rank_tol: float | None = None
    escalation_seconds: float
    claim_rtol: float
    form_rtol: float = FORM_RTOL
    sample_period_rtol: float = SAMPLE_PERIOD_RTOL
    atol: float = 0.0
    band_rad_s: list[float] | None = None
    channel_rtol: list[str] = Field(default_factory=list)


@dataclass(frozen=True)
class ParsedSubmission:
    """A validated submission: its realizations and documents."""

    submission: Submission
    reference: Realization | None
    models: tuple[Realization, ...]
    documents: tuple[dict[str, Any], ...]  # {"role", "position", "name", "sha256", "representation", "claimed_form"}


@dataclass(frozen=True)
class AuditOutcome:
    """The computed audit (before storage).

    Attributes
    ----------
    verdict : {"equivalent", "different", "inconclusive", "not_compared"}
    claims_outcome : {"hold", "fail", "unclear", "none"}
    report : dict
        JSON-friendly (see :func:`run_audit`).
    compare_data : dict or None
        The compare report (``audit.reports.shapes.compare_report``) when models were compared.
    compared : tuple of Realization
        The realizations of ``compare_data["models"]`` in order (for the HTML page).
    claims : tuple of dict
    seconds : float
    """

    verdict: str
    claims_outcome: str
    report: dict[str, Any]
    compare_data: dict[str, Any] | None
    compared: tuple[Realization, ...]
    claims: tuple[dict[str, Any], ...] = field(default_factory=tuple)
    seconds: float = 0.0

    def as_dict(self) -> dict[str, Any]:
        return dict(self.report)


# ------------------------------------------------------------------ parsing
def canonical_sha256(document: Any) -> str:
    """SHA-256 of a document's canonical JSON text (sorted keys, no spaces, UTF-8)."""
    text = json.dumps(document, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=True)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _realization(doc_data: dict[str, Any], source: str, max_order: int) -> tuple[Realization, Any]:
    from audit.documents.loading import parse_model_document, realization_from_document

    doc = parse_model_document(doc_data, source=source)
    if doc.stated_order > max_order:  # checked on the document, before any conversion
        raise InvalidModelError(
            f"has order {doc.stated_order} as written, above this service's limit "
            f"max_order={max_order}", field=source, source=source)
    r = realization_from_document(doc)
    if r.order > max_order:
        raise InvalidModelError(
            f"has order {r.order}, above this service's limit max_order={max_order}",
            field=source, source=source)
    return (r if r.name else r.with_name(source)), doc


def parse_submission(body: Any, *, max_order: int) -> ParsedSubmission:
    """Validate a submission body (parsed JSON) and build its realizations.

    Parameters
    ----------
    body : Any
        The parsed JSON body.
    max_order : int, keyword-only
        Largest accepted model order.

    Returns
    -------
    ParsedSubmission

    Raises
    ------
    InvalidModelError
        The body does not follow :class:`Submission` (message names the field), a
        document is invalid (the CLI's message, with source ``models[i]`` or
        ``reference``), a model's order exceeds ``max_order``, or a claim does not fit the
        models (``claims.dc_gain`` shape).
    NumericalTroubleError
        A transfer function or zeros-poles-gain document could not be converted.
    """
    try:
        sub = Submission.model_validate(body)
    except ValidationError as exc:
        err = exc.errors()[0]
        loc = ".".join(str(x) for x in err["loc"]) or "body"
        raise InvalidModelError(f"{loc}: {err['msg']}", field=loc) from None
    docs: list[dict[str, Any]] = []
    reference = None
    if sub.reference is not None:
        reference, rdoc = _realization(sub.reference, "reference", max_order)
        docs.append(_doc_entry("reference", 0, reference, rdoc, sub.reference))
    models = []
    for i, d in enumerate(sub.models):
        r, doc = _realization(d, f"models[{i}]", max_order)
        models.append(r)
        docs.append(_doc_entry("model", i, r, doc, d))
    check_claim_shapes(sub.claims, models[0].n_outputs, models[0].n_inputs)
    return ParsedSubmission(sub, reference, tuple(models), tuple(docs))


def _doc_entry(role: str, position: int, r: Realization, doc: Any, raw: Any) -> dict[str, Any]:
    return {"role": role, "position": position, "name": r.name,
            "sha256": canonical_sha256(raw), "representation": doc.representation,
            "claimed_form": getattr(doc, "claimed_form", None)}


def tolerances_for(sub: Submission) -> Tolerances:
    """The tolerances a new audit of ``sub`` uses (defaults filled in)."""
    from audit.evidence.record import DEFAULT_RTOL

    return Tolerances(
        rtol=DEFAULT_RTOL if sub.rtol is None else sub.rtol,
        escalation_seconds=(DEFAULT_ESCALATION_SECONDS if sub.escalation_seconds is None
                            else sub.escalation_seconds),
        claim_rtol=DEFAULT_CLAIM_RTOL if sub.claim_rtol is None else sub.claim_rtol,
        atol=0.0 if sub.atol is None else sub.atol,
        band_rad_s=sub.band_rad_s,
        channel_rtol=list(sub.channel_rtol),
    )


def check_claim_shapes(claims: Any, n_outputs: int, n_inputs: int) -> None:
    """Refuse a claimed DC gain of the wrong shape or poles that are not [re, im] pairs
    (InvalidModelError, 422)."""
    dc = claims.dc_gain
    if dc is not None:
        shape = (1, 1) if isinstance(dc, float) else (len(dc), len(dc[0]) if dc else 0)
        if isinstance(dc, list) and any(len(row) != shape[1] for row in dc):
            raise InvalidModelError("claims.dc_gain: rows have different lengths",
                                    field="claims.dc_gain")
        if shape != (n_outputs, n_inputs):
            raise InvalidModelError(
                f"claims.dc_gain: has shape {shape[0]}x{shape[1]} but the models have "
                f"{n_outputs} output(s) x {n_inputs} input(s) (a number is accepted for "
                "one input and one output)", field="claims.dc_gain")
    if claims.poles is not None and any(len(p) != 2 for p in claims.poles):
        raise InvalidModelError("claims.poles: every pole must be an [re, im] pair",
                                field="claims.poles")


def stated_tolerance_options(values: Submission | Tolerances, sub: Submission, n_outputs: int,
                             n_inputs: int) -> dict[str, Any]:
    """atol, band and channel tolerances (read from ``values``: the submission at intake,
    the audit's stored tolerances in the job) as Options fields; channel names are those of
    the first compared document of ``sub`` (the reference, else models[0]). Bad values
    raise InvalidModelError (422)."""
    from audit.evidence.band_peak import check_band
    from audit.evidence.tolerances import parse_channel_tolerance, resolve_channel_tolerances

    out: dict[str, Any] = {"atol": 0.0 if values.atol is None else values.atol}
    if values.band_rad_s is not None:
        out["band"] = check_band(values.band_rad_s, field="band_rad_s")
    if values.channel_rtol:
        raw = sub.reference if sub.reference is not None else sub.models[0]
        names = {k: [str(s.get("name")) for s in raw.get(k) or [] if isinstance(s, dict)] or None
                 for k in ("inputs", "outputs")}
        out["channel_rtol"] = resolve_channel_tolerances(
            [parse_channel_tolerance(t, field="channel_rtol") for t in values.channel_rtol],
            n_outputs=n_outputs, n_inputs=n_inputs, output_names=names["outputs"],
            input_names=names["inputs"], field="channel_rtol")
    return out


# ------------------------------------------------------------------ bandwidth
def _sigma_max_at(r: Realization, omegas: np.ndarray) -> np.ndarray:
    from audit.evidence.frequency import frequency_response

    g = frequency_response(r, omegas)
    return np.linalg.svd(g, compute_uv=False)[:, 0]


def bandwidth(r: Realization, *, rtol: float = BANDWIDTH_BISECTION_RTOL) -> float | None:
    """The -3 dB bandwidth in rad/s (see the module docstring for the definition).

    Parameters
    ----------
    r : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    rtol : float, keyword-only
        Relative width of the final bisection bracket (default 1e-12).

    Returns
    -------
    float or None
        ``None`` when the DC gain is zero or infinite, or the gain never drops 3.01 dB
        below it (up to 100x the fastest pole/zero frequency, or the Nyquist frequency).

    Raises
    ------
    InvalidModelError
        ``rtol`` not in (0, 1).

    Examples
    --------
    >>> r = Realization.from_arrays([[-4.0]], [[4.0]], [[1.0]], [[0.0]])
    >>> round(bandwidth(r), 9)
    4.0
    """
    from audit.evidence.frequency_grid import adaptive_frequency_grid

    if not (0.0 < rtol < 1.0):
        raise InvalidModelError(f"rtol={rtol!r}: expected a number in (0, 1)", field="rtol")
    try:
        dc = float(_sigma_max_at(r, np.array([0.0]))[0])
    except NumericalTroubleError:
        return None  # pole at DC: infinite gain
    if not math.isfinite(dc) or dc <= 1e-300:
        return None
    target = dc / math.sqrt(2.0)
    grid = adaptive_frequency_grid([r], points_per_decade=40)
    grid = grid[grid > 0]
    try:
        values = _sigma_max_at(r, grid)
    except NumericalTroubleError:
        return None
    below = np.nonzero(values < target)[0]
    if below.size == 0:
        return None
    k = int(below[0])
    hi = float(grid[k])
    lo = float(grid[k - 1]) if k > 0 else hi * 1e-6
    while hi - lo > rtol * hi:
        mid = math.sqrt(lo * hi)
        if float(_sigma_max_at(r, np.array([mid]))[0]) < target:
            hi = mid
        else:
            lo = mid
    return math.sqrt(lo * hi)


# ------------------------------------------------------------------ claims
def _claim(model: str, claim: str, claimed: Any, measured: Any, tolerance: float | None,
           outcome: str, message: str, details: dict[str, Any] | None = None) -> dict[str, Any]:
    return {"model": model, "claim": claim, "claimed": claimed, "measured": measured,
            "tolerance": tolerance, "outcome": outcome, "message": message,
            "details": details or {}}


def _pair(z: complex) -> list[float]:
    return [float(z.real), float(z.imag)]


def _check_claims(ps: ParsedSubmission, tol: Tolerances) -> list[dict[str, Any]]:
    from audit.dynamics.discretization_checks import check_discretization_claim
    from audit.evidence.record import to_jsonable
    from audit.forms.catalogue import check_claimed_form
    from audit.verdict.inspection import inspect_model
    from audit.evidence.matching import match_points

    claims = ps.submission.claims
    given = claims.model_fields_set
    out: list[dict[str, Any]] = []
    model_docs = [d for d in ps.documents if d["role"] == "model"]
    for r, doc in zip(ps.models, model_docs):
        name = r.name
        needs_inspection = any(getattr(claims, k) is not None for k in ("dc_gain", "poles", "stable"))
        insp = inspect_model(r, rank_tol=tol.rank_tol) if needs_inspection else None
        if "sample_period" in given:
            want, got = claims.sample_period, r.sample_period
            if want is None or got is None:
                ok = want is None and got is None
            else:
                ok = abs(want - got) <= tol.sample_period_rtol * max(want, got)
            dom = lambda t: "continuous time" if t is None else f"T = {t:g} s"  # noqa: E731
            out.append(_claim(name, "sample_period", want, got, tol.sample_period_rtol,
                              "holds" if ok else "fails",
                              f"claimed {dom(want)}, document has {dom(got)}"))
        if claims.discretization is not None:
            dc_claim = claims.discretization
            if ps.reference is None or ps.reference.is_discrete or not r.is_discrete:
                out.append(_claim(name, "discretization", dc_claim.method, None, tol.rtol,
                                  "not_checkable",
                                  "a discretization claim needs a continuous-time reference model "
                                  "and a discrete-time submitted model"))
            else:
                try:
                    res = check_discretization_claim(
                        ps.reference, r, method=dc_claim.method,
                        prewarp_frequency=dc_claim.prewarp_frequency, rtol=tol.rtol)
                    out.append(_claim(name, "discretization", dc_claim.method,
                                      res.relative_peak_difference, tol.rtol,
                                      "holds" if res.outcome == "holds" else "fails",
                                      res.message, to_jsonable(res.as_dict())))
                except AuditError as exc:
                    out.append(_claim(name, "discretization", dc_claim.method, None, tol.rtol,
                                      "not_checkable", str(exc)))
        forms_to_check: list[tuple[str, str]] = []
        if claims.claimed_form is not None:
            forms_to_check.append(("claimed_form", claims.claimed_form))
        if doc.get("claimed_form") and doc["claimed_form"] != claims.claimed_form:
            forms_to_check.append(("claimed_form (document)", doc["claimed_form"]))
        for label, form in forms_to_check:
            if doc["representation"] != "state_space":
                out.append(_claim(name, label, form, None, tol.form_rtol, "not_checkable",
                                  f"a form claim concerns state-space matrices but the document "
                                  f"holds a {doc['representation'].replace('_', ' ')}"))
                continue
            try:
                fc = check_claimed_form(r, form, rtol=tol.form_rtol)
            except AuditError as exc:
                out.append(_claim(name, label, form, None, tol.form_rtol, "not_checkable", str(exc)))
                continue
            msg = (f"in the {form} form ({fc.variant})" if fc.holds else
                   f"not in the {form} form: " + "; ".join(list(fc.deviations)[:3]))
            out.append(_claim(name, label, form, fc.largest_deviation, tol.form_rtol,
                              "holds" if fc.holds else "fails", msg, to_jsonable(fc.as_dict())))
        if claims.dc_gain is not None and insp is not None:
            want_m = np.atleast_2d(np.asarray(claims.dc_gain, dtype=float))
            got_l = insp.properties["dc_gain"]
            if got_l is None:
                out.append(_claim(name, "dc_gain", claims.dc_gain, None, tol.claim_rtol, "fails",
                                  "the model has a pole at DC: its DC gain is infinite"))
            else:
                got_m = np.asarray(got_l, dtype=float)
                scale = max(float(np.linalg.norm(got_m)), float(np.linalg.norm(want_m)), 1e-300)
                rel = float(np.linalg.norm(got_m - want_m)) / scale
                ok = rel <= tol.claim_rtol
                measured = float(got_m[0, 0]) if isinstance(claims.dc_gain, float) else got_m.tolist()
                out.append(_claim(name, "dc_gain", claims.dc_gain, measured, tol.claim_rtol,
                                  "holds" if ok else "fails",
                                  f"relative difference {rel:.3g} "
                                  f"({'<=' if ok else '>'} {tol.claim_rtol:g})",
                                  {"relative_difference": rel}))
        if claims.poles is not None and insp is not None:
            want_p = np.array([complex(a, b) for a, b in claims.poles], dtype=complex)
            all_p = np.array([complex(a, b) for a, b in insp.properties["poles"]], dtype=complex)
            min_p = np.array([complex(a, b) for a, b in insp.properties["poles_of_minimal_part"]],
                             dtype=complex)
            which, got_p = ("all modes", all_p)
            if want_p.size != all_p.size and want_p.size == min_p.size:
                which, got_p = ("minimal part", min_p)
            if want_p.size != got_p.size:
                out.append(_claim(name, "poles", claims.poles, [_pair(z) for z in all_p],
                                  tol.claim_rtol, "fails",
                                  f"{want_p.size} pole(s) claimed but the model has {all_p.size} "
                                  f"({min_p.size} in its minimal part)"))
            else:
                mt = match_points(want_p, got_p)
                worst = 0.0 if mt.largest_move is None else float(mt.largest_move.relative_distance)
                ok = worst <= tol.claim_rtol
                msg = f"largest relative distance of optimally paired poles {worst:.3g} ({which})"
                if not ok and mt.largest_move is not None:
                    msg += (f"; claimed {mt.largest_move.first:.6g} vs model "
                            f"{mt.largest_move.second:.6g}")
                out.append(_claim(name, "poles", claims.poles, [_pair(z) for z in got_p],
                                  tol.claim_rtol, "holds" if ok else "fails", msg,
                                  to_jsonable(mt.as_dict())))
        if claims.bandwidth_rad_s is not None:
            try:
                bw = bandwidth(r)
            except NumericalTroubleError as exc:
                bw, why = None, str(exc)
            else:
                why = "the DC gain is zero or infinite, or the gain never falls 3 dB below it"
            if bw is None:
                out.append(_claim(name, "bandwidth_rad_s", claims.bandwidth_rad_s, None,
                                  tol.claim_rtol, "fails", f"bandwidth undefined: {why}"))
            else:
                rel = abs(bw - claims.bandwidth_rad_s) / claims.bandwidth_rad_s
                ok = rel <= tol.claim_rtol
                out.append(_claim(name, "bandwidth_rad_s", claims.bandwidth_rad_s, bw,
                                  tol.claim_rtol, "holds" if ok else "fails",
                                  f"-3 dB bandwidth {bw:.6g} rad/s, relative difference {rel:.3g}",
                                  {"relative_difference": rel}))
        if claims.stable is not None and insp is not None:
            internal = insp.properties["internal_stability"]
            io = insp.properties["input_output_stability"]
            ok = (internal == "stable") == claims.stable
            out.append(_claim(name, "stable", claims.stable, internal, None,
                              "holds" if ok else "fails",
                              f"internally {internal} (input-output {io})"))
    return out


def _internal_stability_claims(ps: ParsedSubmission, tol: Tolerances) -> list[dict[str, Any]]:
    """One failing entry per unstable / marginal hidden or nearly hidden mode of a submitted
    model that the reference lacks (every such mode without a reference), holding when the
    submission accepts it with a reason (:mod:`audit.structure.internal_stability`)."""
    from audit.structure.internal_stability import ModelModes, hidden_mode_problems, model_modes

    ref = (model_modes(ps.reference, label="the reference", rank_tol=tol.rank_tol)
           if ps.reference is not None else ModelModes("", (), {}, 0, True, None))
    mods = [model_modes(r, label=r.name, rank_tol=tol.rank_tol) for r in ps.models]
    problems = hidden_mode_problems(ref, mods, accepted_reason=ps.submission.accept_hidden_instability)
    return [_claim(p["model"], "internal_stability", "no new unstable or marginal hidden mode",
                   p["location"], None, "holds" if p["accepted"] else "fails",
                   p["message"] + (f"; accepted: {p['reason']}" if p["accepted"] else ""), p)
            for p in problems]


def _claims_outcome(claims: list[dict[str, Any]]) -> str:
    if not claims:
        return "none"
    outcomes = {c["outcome"] for c in claims}
    if "fails" in outcomes:
        return "fail"
    if "not_checkable" in outcomes:
        return "unclear"
    return "hold"


# ------------------------------------------------------------------ the audit
def compared_models(ps: ParsedSubmission) -> tuple[list[Realization], list[str]]:
    """The realizations that are compared, and their sources (empty when nothing is).

    With a reference: ``[reference, *models]`` (the reference discretized with the
    claimed method when it is continuous-time, the models are discrete-time and a
    discretization is claimed); without one and with two or more models: the models.
    Repeated names get a ``#k`` suffix so that the report stays readable.

    Raises
    ------
    IncompatibleModelsError
        Input/output counts or time domains differ (message starts with the source).
    NumericalTroubleError
        The claimed discretization of the reference cannot be computed.
    """
    from audit.dynamics.discretization import discretize
    from audit.core.realization import check_comparable

    sub = ps.submission
    compared: list[Realization] = []
    sources: list[str] = []
    if ps.reference is not None:
        ref = ps.reference
        if (not ref.is_discrete and all(m.is_discrete for m in ps.models)
                and sub.claims.discretization is not None):
            dc = sub.claims.discretization
            period = float(ps.models[0].sample_period)  # type: ignore[arg-type]
            try:
                ref = discretize(ref, period, method=dc.method,
                                 prewarp_frequency=dc.prewarp_frequency)
            except InvalidModelError as exc:
                raise IncompatibleModelsError(
                    f"reference: cannot be discretized as claimed in claims.discretization: {exc}"
                ) from None
            ref = ref.with_name(f"{ps.reference.name} ({dc.method}, T = {period:g} s)")
        compared = [ref, *ps.models]
        sources = ["reference"] + [f"models[{i}]" for i in range(len(ps.models))]
    elif len(ps.models) >= 2:
        compared = list(ps.models)
        sources = [f"models[{i}]" for i in range(len(ps.models))]
    names_seen: dict[str, int] = {}
    unique: list[Realization] = []
    for r in compared:
        k = names_seen.get(r.name, 0)
        names_seen[r.name] = k + 1
        unique.append(r if k == 0 else r.with_name(f"{r.name} #{k + 1}"))
    for other, src in zip(unique[1:], sources[1:]):
        try:
            check_comparable(unique[0], other)
        except IncompatibleModelsError as exc:
            hint = ("; declare claims.discretization to compare a continuous reference with "
                    "discrete models") if "continuous-time" in str(exc) else ""
            raise IncompatibleModelsError(f"{src}: {exc}{hint}") from None
    return unique, sources


def run_audit(ps: ParsedSubmission, tol: Tolerances, *,
              time_budget: float | None = None) -> AuditOutcome:
    """Compare the models and check the claims of a parsed submission.

    Parameters
    ----------
    ps : ParsedSubmission
    tol : Tolerances
    time_budget : float or None, keyword-only
        Seconds this audit may take (``None``: no limit). The budget is checked before
        each model pair and before the claims, and each pair's extended-precision budget
        is capped by the time left; once it is spent, the remaining pairs are not
        compared, the verdict is ``inconclusive`` and ``report["time_budget"]`` says why.

    Returns
    -------
    AuditOutcome
        ``report`` holds ``verdict``, ``claims_outcome``, ``summary``, ``tolerances``,
        ``lti_audit_version``, ``documents`` (role, position, name, sha256),
        ``comparison`` (the compare report or ``None``), ``claims`` (one entry per
        claim and model: model, claim, claimed, measured, tolerance, outcome, message,
        details) and ``caution``.

    Raises
    ------
    IncompatibleModelsError
        The models (or the reference) cannot be compared and no discretization claim
        bridges continuous and discrete time.
    NumericalTroubleError
        A comparison could not be computed.
    """
    from audit.evidence.record import to_jsonable
    from audit.reports.shapes import CAUTION, compare_report, package_version
    from audit.verdict.compare import Options, compare_pair, overall_verdict

    start = time.perf_counter()
    deadline = None if time_budget is None else start + time_budget
    budget_note: dict[str, Any] | None = None if time_budget is None else {
        "seconds": time_budget, "exceeded": False, "reason": None}

    def spent(what: str) -> bool:
        if deadline is None or time.perf_counter() < deadline or budget_note is None:
            return False
        if not budget_note["exceeded"]:
            budget_note.update(exceeded=True, reason=(
                f"time budget of {time_budget:g} s spent before {what}; the audit is "
                "inconclusive (resubmit with fewer or smaller models, or ask the operator "
                "for a larger job budget)"))
        return True

    compared, sources = compared_models(ps)
    compare_data = None
    verdict = "not_compared"
    if compared:
        options = Options(rtol=tol.rtol, escalate=tol.escalation_seconds > 0,
                          escalation_seconds=tol.escalation_seconds, rank_tol=tol.rank_tol,
                          **stated_tolerance_options(tol, ps.submission, compared[0].n_outputs,
                                                   compared[0].n_inputs))
        t0 = time.perf_counter()
        pairs = []
        for k, other in enumerate(compared[1:], start=1):
            if spent(f"comparing {sources[k]} ({k} of {len(compared) - 1} comparisons)"):
                break
            opts = options
            if deadline is not None and options.escalate:
                left = max(0.0, deadline - time.perf_counter())
                opts = replace(options, escalation_seconds=min(options.escalation_seconds, left))
            pairs.append(compare_pair(compared[0], other, options=opts))
        done = compared[:len(pairs) + 1]
        verdict = overall_verdict(pairs) if pairs else "inconclusive"
        if len(pairs) < len(compared) - 1 and verdict != "different":
            verdict = "inconclusive"
        if pairs:
            compare_data = compare_report(done, sources[:len(done)], pairs, options, verdict,
                                          time.perf_counter() - t0,
                                          accepted_reason=ps.submission.accept_hidden_instability)
        compared = done
    claims = [] if spent("checking the claims") else (_check_claims(ps, tol) + _internal_stability_claims(ps, tol))
    claims_outcome = _claims_outcome(claims)
    failing = [c for c in claims if c["outcome"] != "holds"]
    summary = (compare_data["summary"] if compare_data else
               "No comparison: one model and no reference.")
    if budget_note is not None and budget_note["exceeded"]:
        summary = f"Inconclusive: {budget_note['reason']}. " + (summary if compare_data else "")
    if claims:
        summary += (f" Claims: {len(claims) - len(failing)} of {len(claims)} hold"
                    + (f"; first problem: {failing[0]['model']}: {failing[0]['claim']}: "
                       f"{failing[0]['message']}" if failing else "") + ".")
    seconds = time.perf_counter() - start
    report = to_jsonable({
        "report": "audit",
        "lti_audit_version": package_version(),
        "verdict": verdict,
        "claims_outcome": claims_outcome,
        "summary": summary,
        "tolerances": tol.model_dump(),
        "documents": [{k: d[k] for k in ("role", "position", "name", "sha256", "representation")}
                      for d in ps.documents],
        "comparison": compare_data,
        "claims": claims,
        "seconds": round(seconds, 6),
        "time_budget": budget_note,
        "caution": CAUTION,
    })
    return AuditOutcome(verdict, claims_outcome, report, compare_data, tuple(compared),
                        tuple(report["claims"]), seconds)
