"""Stress campaign: push random systems through model-conversion pipelines and audit them.

Each *case* is a random system drawn from a :class:`~audit.workflows.strategies.SystemSpec` that is
itself drawn from a numpy generator seeded with ``(campaign seed, case index)``: the same
seed gives the same systems, whatever the number of workers or shards.  Every applicable
*pipeline* (lti-audit's own conversions and forms, scipy.signal's and python-control's
conversions, and three properties of the verdict itself) turns the system into a
(reference, converted) pair that the pipeline claims to be equivalent, and
:func:`audit.verdict.compare.compare_pair` judges the pair.  Outcomes per pipeline and case:

``pass``          judged equivalent
``fail``          judged different (the pipeline broke the claim)
``inconclusive``  the verdict could not tell at this numerical accuracy
``refused``       the conversion refused explicitly (see :data:`REFUSALS`: our own error
                  tree, ``ValueError``, ``ArithmeticError``, ``LinAlgError``); neither
                  pass nor fail, but counted and listed
``error``         the pipeline raised anything else or produced non-finite numbers
``n/a``           the pipeline does not apply (e.g. SISO-only conversions, continuous-only)

Failures (``fail`` and ``error``) are shrunk greedily (lower order, smaller pole spread,
better coordinates, fewer inputs/outputs, fewer special features, ...) while the same
outcome persists, and written as model documents (``reference.json``, ``converted.json``)
plus a ``manifest.json``; ``lti-audit compare reference.json converted.json``
reproduces the verdict.  The robustness envelope of a pipeline is the largest order (and
the largest pole spread, in decades) up to which every audited case passed or was
inconclusive: ``fail`` and ``error`` break it.

Distribution: ``shard=(i, N)`` runs the case indices ``k < budget`` with ``k % N == i``;
the union of the N shard reports (:func:`merge_campaigns`) is the unsharded campaign.  A
time limit (``minutes``) stops submitting new cases when it expires, so the set of
completed cases depends on machine speed (documented in the report).

The verdict is computed with a per-pair extended-precision budget of
``escalation_seconds`` (default 2 s) to keep campaigns bounded.

Published methods: the shrinking follows the idea of property-based testing with
integrated shrinking (D. R. MacIver, Z. Hatfield-Dodds et al., "Hypothesis: A new approach
to property-based testing", JOSS 4(43), 2019), applied to our own small specification.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import time
import uuid
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from audit.errors import AuditError, InvalidModelError, NumericalTroubleError
from audit.core.realization import Realization
from audit.workflows.strategies import HIDDEN_KINDS, SystemSpec, build_system, different_pair, equivalent_pair

OUTCOMES = ("pass", "fail", "inconclusive", "refused", "error", "n/a")
#: Outcomes that break a pipeline's robustness envelope and are shrunk and written out.
FAILING = ("fail", "error")
DEFAULT_RTOL = 1e-5
DEFAULT_ESCALATION_SECONDS = 2.0
DEFAULT_MAX_ORDER = 12
DEFAULT_MAX_SPREAD_DECADES = 8.0
#: At most this many distinct failing cases per pipeline are shrunk and written out; the
#: others are listed (with their spec, reproducible) in the JSON report.
DEFAULT_MAX_COUNTEREXAMPLES = 3
#: Greedy shrinking stops after this many re-evaluations of one counterexample.
DEFAULT_SHRINK_EVALUATIONS = 30
#: The campaign's discretization pipelines use the sample period
#: ``DISCRETIZATION_FRACTION / (largest pole magnitude)``.
DISCRETIZATION_FRACTION = 0.2


# ==================================================================== pipelines
Converter = Callable[[Realization, SystemSpec], tuple[Realization, Realization]]


@dataclass(frozen=True)
class Pipeline:
    """A conversion pipeline whose result is claimed equivalent to a reference.

    Attributes
    ----------
    name : str
        Unique name, also used in file names.
    library : str
        "lti-audit", "scipy", "python-control" or "verdict".
    description : str
        What is converted and compared with what.
    run : callable ``(system, spec) -> (reference, converted)``
        May raise; raising :class:`NotApplicable` means the pipeline does not apply.
    expected : {"equivalent", "different"}
        The verdict that counts as ``pass``.
    """

    name: str
    library: str
    description: str
    run: Converter
    expected: str = "equivalent"


class NotApplicable(Exception):
    """Raised by a pipeline that does not apply to a system (reason in the message)."""


class NonFiniteResult(Exception):
    """A third-party conversion returned NaN or infinite matrices (outcome ``error``)."""


def _result(a: Any, b: Any, c: Any, d: Any, sample_period: float | None) -> Realization:
    mats = [np.asarray(x, dtype=float) for x in (a, b, c, d)]
    for name, m in zip("ABCD", mats):
        if not np.all(np.isfinite(m)):
            raise NonFiniteResult(f"the conversion returned a non-finite {name}")
    return Realization.from_arrays(*mats, sample_period)


def _siso(r: Realization, what: str) -> None:
    if r.n_inputs != 1 or r.n_outputs != 1:
        raise NotApplicable(f"{what} is single-input single-output only")


def _continuous(r: Realization, what: str) -> None:
    if r.is_discrete:
        raise NotApplicable(f"{what} discretizes continuous-time models only")


def _states(r: Realization, what: str) -> None:
    if r.order == 0:
        raise NotApplicable(f"{what} needs at least one state")


def _period(r: Realization) -> float:
    mags = np.abs(r.poles())
    top = float(mags.max(initial=0.0))
    return DISCRETIZATION_FRACTION / top if top > 0 else DISCRETIZATION_FRACTION


def _block_stack(parts: list[tuple[Any, Any, Any, Any]], sample_period: float | None) -> Realization:
    """Single-input parts side by side: A, B block diagonal, C and D side by side."""
    import scipy.linalg as sla

    p = np.atleast_2d(np.asarray(parts[0][3], dtype=float)).reshape(-1, 1).shape[0]
    a_blocks, b_blocks, c_blocks, d_cols = [], [], [], []
    for a, b, c, d in parts:
        k = int(np.size(a) and np.shape(a)[0])
        a_blocks.append(np.asarray(a, dtype=float).reshape(k, k))
        b_blocks.append(np.asarray(b, dtype=float).reshape(k, 1))
        c_blocks.append(np.asarray(c, dtype=float).reshape(p, k))
        d_cols.append(np.asarray(d, dtype=float).reshape(p, 1))
    n = sum(x.shape[0] for x in a_blocks)
    a_all = sla.block_diag(*a_blocks) if n else np.zeros((0, 0))
    b_all = np.zeros((n, len(parts)))
    row = 0
    for j, b in enumerate(b_blocks):
        b_all[row:row + b.shape[0], j] = b[:, 0]
        row += b.shape[0]
    return _result(np.asarray(a_all).reshape(n, n), b_all, np.hstack(c_blocks).reshape(p, n),
                   np.hstack(d_cols), sample_period)


def _audit_tf(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    from audit.core.from_realization import transfer_function_from_realization
    from audit.core.from_transfer_function import realization_from_transfer_function

    tf = transfer_function_from_realization(r)
    return r, realization_from_transfer_function(tf.numerator, tf.denominator, r.sample_period)


def _audit_zeros_poles_gain_round_trip(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    from audit.core.from_realization import zeros_poles_gain_from_realization
    from audit.core.from_zeros_poles_gain import realization_from_zeros_poles_gain

    z = zeros_poles_gain_from_realization(r)
    pairs = lambda cells: [[[[v.real, v.imag] for v in cell] for cell in row] for row in cells]  # noqa: E731
    return r, realization_from_zeros_poles_gain(pairs(z.zeros), pairs(z.poles), z.gain,
                                                r.sample_period)


def _audit_form(form: str) -> Converter:
    def run(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
        from audit.forms.catalogue import FORMS

        _states(r, f"the {form} form")
        return r, FORMS[form](r).realization

    return run


def _audit_minimal(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    from audit.structure.minimal import minimal_realization

    return r, minimal_realization(r).realization


def _scipy_tf(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    import scipy.signal as sig

    _states(r, "scipy.signal.ss2tf")
    parts = []
    for j in range(r.n_inputs):
        num, den = sig.ss2tf(r.a, r.b, r.c, r.d, input=j)
        parts.append(sig.tf2ss(num, den))
    return r, _block_stack(parts, r.sample_period)


def _scipy_zeros_poles_gain_round_trip(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    import scipy.signal as sig

    _siso(r, "scipy.signal.ss2zpk / zpk2ss")
    _states(r, "scipy.signal.ss2zpk")
    z, p, k = sig.ss2zpk(r.a, r.b, r.c, r.d)
    return r, _result(*sig.zpk2ss(z, p, k), r.sample_period)


def _scipy_discretization(method: str) -> Converter:
    def run(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
        import scipy.signal as sig

        from audit.dynamics.discretization import discretize

        _continuous(r, "cont2discrete")
        h = _period(r)
        ad, bd, cd, dd, _ = sig.cont2discrete((r.a, r.b, r.c, r.d), h, method=method)
        ours = discretize(r, h, method="zero-order-hold" if method == "zoh" else "bilinear")
        return ours, _result(ad, bd, cd, dd, h)

    return run


def _control_sys(r: Realization) -> Any:
    import control

    return control.ss(r.a, r.b, r.c, r.d, 0 if r.sample_period is None else r.sample_period)


def _from_control(sys: Any, sample_period: float | None) -> Realization:
    return _result(sys.A, sys.B, sys.C, sys.D, sample_period)


def _control_tf(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    import control

    _states(r, "control.ss2tf")
    return r, _from_control(control.tf2ss(control.ss2tf(_control_sys(r))), r.sample_period)


def _python_control_form(form: str) -> Converter:
    def run(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
        import control

        _states(r, f"control.canonical_form {form}")
        if form != "modal":
            _siso(r, f"control.canonical_form {form}")
        new, _t = control.canonical_form(_control_sys(r), form)
        return r, _from_control(new, r.sample_period)

    return run


def _python_control_reduction(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    import control

    _states(r, "control.minreal")
    return r, _from_control(control.minreal(_control_sys(r), verbose=False), r.sample_period)


def _control_sample(method: str) -> Converter:
    def run(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
        import control

        from audit.dynamics.discretization import discretize

        _continuous(r, "control.sample_system")
        h = _period(r)
        new = control.sample_system(_control_sys(r), h, method=method)
        ours = discretize(r, h, method="zero-order-hold" if method == "zoh" else "bilinear")
        return ours, _from_control(new, h)

    return run


def _verdict_equivalent(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    pair = equivalent_pair(spec, transform_condition=100.0, seed=spec.seed)
    return pair.first, pair.second


def _verdict_different(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    pair = different_pair(spec, relative_amount=1e-3, seed=spec.seed)
    return pair.first, pair.second


def _verdict_symmetric(r: Realization, spec: SystemSpec) -> tuple[Realization, Realization]:
    # reference vs a gain change of 1e-4 (ten times the default tolerance), audited both
    # ways inside run_pipeline (see SYMMETRY_PIPELINE)
    pair = different_pair(spec, relative_amount=1e-4, seed=spec.seed)
    return pair.first, pair.second


SYMMETRY_PIPELINE = "verdict: symmetric"

#: Exceptions by which a conversion says explicitly that it cannot do the job (an honest
#: refusal, outcome ``refused``): our own error tree, ``ValueError`` (python-control's
#: "not controllable to working precision", scipy's shape checks) and
#: ``ArithmeticError`` / ``numpy.linalg.LinAlgError`` (singular matrices).  Anything else
#: (``TypeError``, ``IndexError``, ...) and non-finite results are ``error``.
REFUSALS: tuple[type[BaseException], ...] = (AuditError, ValueError, ArithmeticError,
                                             np.linalg.LinAlgError)


def _build_pipelines() -> dict[str, Pipeline]:
    from audit.forms.catalogue import FORMS

    items: list[Pipeline] = [
        Pipeline("lti-audit: tf round trip", "lti-audit",
                 "transfer_function_from_realization, then realization_from_transfer_function", _audit_tf),
        Pipeline("lti-audit: zeros-poles-gain round trip", "lti-audit",
                 "zeros_poles_gain_from_realization, then realization_from_zeros_poles_gain", _audit_zeros_poles_gain_round_trip),
        Pipeline("lti-audit: minimal realization", "lti-audit", "structure.minimal_realization",
                 _audit_minimal),
    ]
    for form in FORMS:
        items.append(Pipeline(f"lti-audit: {form} form", "lti-audit", f"forms.FORMS[{form!r}]",
                              _audit_form(form)))
    items += [
        Pipeline("scipy: transfer-function round trip", "scipy", "scipy.signal.ss2tf per input, tf2ss, inputs stacked",
                 _scipy_tf),
        Pipeline("scipy: zeros-poles-gain round trip", "scipy", "scipy.signal.ss2zpk then zpk2ss (SISO)", _scipy_zeros_poles_gain_round_trip),
        Pipeline("scipy: zero-order-hold sampling", "scipy",
                 "scipy.signal.cont2discrete(zoh) against lti-audit discretize(zero-order-hold)", _scipy_discretization("zoh")),
        Pipeline("scipy: bilinear sampling", "scipy",
                 "scipy.signal.cont2discrete(bilinear) against lti-audit discretize(bilinear)",
                 _scipy_discretization("bilinear")),
        Pipeline("python-control: transfer-function round trip", "python-control", "control.ss2tf then control.tf2ss",
                 _control_tf),
        Pipeline("python-control: reachable form", "python-control",
                 "control.canonical_form(reachable) (SISO)", _python_control_form("reachable")),
        Pipeline("python-control: observable form", "python-control",
                 "control.canonical_form(observable) (SISO)", _python_control_form("observable")),
        Pipeline("python-control: modal form", "python-control", "control.canonical_form(modal)",
                 _python_control_form("modal")),
        Pipeline("python-control: minimal realization", "python-control", "control.minreal", _python_control_reduction),
        Pipeline("python-control: zero-order-hold sampling", "python-control",
                 "control.sample_system(zoh) against lti-audit discretize(zero-order-hold)", _control_sample("zoh")),
        Pipeline("python-control: bilinear sampling", "python-control",
                 "control.sample_system(tustin) against lti-audit discretize(bilinear)",
                 _control_sample("tustin")),
        Pipeline("verdict: equivalent by construction", "verdict",
                 "equivalent_pair (cond(T) = 100) must be judged equivalent", _verdict_equivalent),
        Pipeline("verdict: different by construction", "verdict",
                 "different_pair (relative difference 1e-3) must be judged different",
                 _verdict_different, expected="different"),
        Pipeline(SYMMETRY_PIPELINE, "verdict",
                 "a 1e-4 gain change judged the same both ways (pass = same verdict)",
                 _verdict_symmetric, expected="same both ways"),
    ]
    return {p.name: p for p in items}


_REGISTRY: dict[str, Pipeline] = {}


def pipelines() -> dict[str, Pipeline]:
    """All registered pipelines by name (built-in ones first)."""
    if not _REGISTRY:
        _REGISTRY.update(_build_pipelines())
    return dict(_REGISTRY)


def register_pipeline(pipeline: Pipeline) -> None:
    """Add a pipeline (e.g. a team's own conversion) to the registry of this process.

    Worker processes are forked from the caller on POSIX, so they see it too.

    Raises
    ------
    InvalidModelError
        A pipeline with this name exists already.
    """
    pipelines()
    if pipeline.name in _REGISTRY:
        raise InvalidModelError(f"pipeline: a pipeline named {pipeline.name!r} is already "
                                "registered", field="pipeline")
    _REGISTRY[pipeline.name] = pipeline


def unregister_pipeline(name: str) -> None:
    """Remove a pipeline added with :func:`register_pipeline` (no error when absent)."""
    _REGISTRY.pop(name, None)


def slug(name: str) -> str:
    """A file-name-friendly version of a pipeline name."""
    out = "".join(ch.lower() if ch.isalnum() else "-" for ch in name)
    while "--" in out:
        out = out.replace("--", "-")
    return out.strip("-")


# ======================================================================== cases
@dataclass(frozen=True)
class CampaignSettings:
    """What a campaign draws and how it judges (JSON-friendly, recorded in the report)."""

    seed: int = 0
    max_order: int = DEFAULT_MAX_ORDER
    max_spread_decades: float = DEFAULT_MAX_SPREAD_DECADES
    rtol: float = DEFAULT_RTOL
    escalation_seconds: float = DEFAULT_ESCALATION_SECONDS
    pipelines: tuple[str, ...] = ()
    max_counterexamples: int = DEFAULT_MAX_COUNTEREXAMPLES
    shrink_evaluations: int = DEFAULT_SHRINK_EVALUATIONS

    def as_dict(self) -> dict[str, Any]:
        return {"seed": self.seed, "max_order": self.max_order,
                "max_spread_decades": float(self.max_spread_decades), "rtol": float(self.rtol),
                "escalation_seconds": float(self.escalation_seconds),
                "pipelines": list(self.pipelines), "max_counterexamples": self.max_counterexamples,
                "shrink_evaluations": self.shrink_evaluations}


def case_spec(seed: int, index: int, *, max_order: int = DEFAULT_MAX_ORDER,
              max_spread_decades: float = DEFAULT_MAX_SPREAD_DECADES) -> SystemSpec:
    """The system specification of case ``index`` of the campaign with ``seed``.

    Deterministic: drawn from ``numpy.random.default_rng([seed, index])``.

    Parameters
    ----------
    seed, index : int
        >= 0.
    max_order : int, keyword-only
        Orders are drawn uniformly from ``1 .. max_order``.
    max_spread_decades : float, keyword-only
        Pole spreads uniformly from ``[0, max_spread_decades]``.

    Returns
    -------
    SystemSpec

    Raises
    ------
    InvalidModelError
        Negative seed or index, or knobs out of the ranges of :class:`SystemSpec`.
    """
    if seed < 0 or index < 0:
        raise InvalidModelError(f"seed={seed!r}, index={index!r}: both must be >= 0", field="seed")
    rng = np.random.default_rng([int(seed), int(index)])
    order = int(rng.integers(1, max_order + 1))
    u = rng.random(8)
    return SystemSpec(
        order=order,
        inputs=int(rng.integers(1, 3)),
        outputs=int(rng.integers(1, 3)),
        discrete=bool(u[0] < 0.25),
        stability=("stable", "unstable", "marginal")[int(np.searchsorted([0.7, 0.9], u[1], side="right"))],  # type: ignore[arg-type]
        spread_decades=round(float(rng.uniform(0.0, max_spread_decades)), 3),
        complex_pairs=int(rng.integers(0, order // 2 + 1)),
        repeated=int(u[2] < 0.15),
        clustered=int(u[3] < 0.15),
        near_cancellation=bool(u[4] < 0.15),
        hidden=HIDDEN_KINDS[int(rng.integers(1, 3))] if u[5] < 0.2 else "none",  # type: ignore[arg-type]
        coordinate_condition=round(float(10.0 ** rng.uniform(0.0, 3.0)), 3),
        feedthrough=bool(u[6] < 0.5),
        seed=int(rng.integers(0, 2**31 - 1)),
    ).fitted()


@dataclass(frozen=True)
class PipelineResult:
    """The outcome of one pipeline on one system."""

    pipeline: str
    outcome: str
    verdict: str | None = None
    relative_difference: float | None = None
    message: str = ""
    seconds: float = 0.0

    def as_dict(self) -> dict[str, Any]:
        rd = self.relative_difference
        return {"pipeline": self.pipeline, "outcome": self.outcome, "verdict": self.verdict,
                "relative_difference": None if rd is None or not math.isfinite(rd) else float(rd),
                "message": self.message, "seconds": round(self.seconds, 4)}


def _decisive_value(pc: Any) -> float | None:
    for ev in pc.evidence:
        if ev.decisive:
            try:
                return float(ev.value)
            except (TypeError, ValueError):
                return None
    return None


def run_pipeline(pipeline: Pipeline, system: Realization, spec: SystemSpec, *,
                 rtol: float = DEFAULT_RTOL,
                 escalation_seconds: float = DEFAULT_ESCALATION_SECONDS,
                 keep_pair: bool = False) -> tuple[PipelineResult, tuple[Realization, Realization] | None]:
    """Run one pipeline on one system and judge the result.

    Parameters
    ----------
    pipeline : Pipeline
    system : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)``.
    spec : SystemSpec
        The specification ``system`` was built from (verdict pipelines rebuild pairs from it).
    rtol : float, keyword-only
        Relative tolerance of the verdict.
    escalation_seconds : float, keyword-only
        Extended-precision budget of the verdict per pair.
    keep_pair : bool, keyword-only
        Return the (reference, converted) pair too.

    Returns
    -------
    (PipelineResult, pair or None)

    Raises
    ------
    Nothing on purpose: an exception of the pipeline becomes outcome ``refused`` (one of
    :data:`REFUSALS`) or ``error`` (anything else, including non-finite results).
    """
    from audit.verdict.compare import Options, compare_pair

    start = time.perf_counter()
    opts = Options(rtol=rtol, escalate=escalation_seconds > 0,
                   escalation_seconds=max(escalation_seconds, 0.0))

    def done(outcome: str, **kw: Any) -> PipelineResult:
        return PipelineResult(pipeline.name, outcome, seconds=time.perf_counter() - start, **kw)

    import warnings

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # numerics never print; the verdict judges
            reference, converted = pipeline.run(system, spec)
    except NotApplicable as exc:
        return done("n/a", message=str(exc)), None
    except REFUSALS as exc:
        return done("refused", message=f"{type(exc).__name__}: {exc}"[:500]), None
    except Exception as exc:  # noqa: BLE001 - unexpected failures are the finding
        return done("error", message=f"{type(exc).__name__}: {exc}"[:500]), None
    reference = reference.with_name("reference")
    converted = converted.with_name("converted")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            pc = compare_pair(reference, converted, options=opts)
            back = compare_pair(converted, reference, options=opts) \
                if pipeline.name == SYMMETRY_PIPELINE else None
        if back is not None:
            outcome = "pass" if back.verdict == pc.verdict else "fail"
            msg = f"forward {pc.verdict}, backward {back.verdict}"
            return done(outcome, verdict=pc.verdict, relative_difference=_decisive_value(pc),
                        message=msg), ((reference, converted) if keep_pair else None)
    except AuditError as exc:
        return done("error", message=f"audit refused the pair: {type(exc).__name__}: {exc}"[:500]), None
    if pc.verdict == "inconclusive":
        outcome = "inconclusive"
    else:
        outcome = "pass" if pc.verdict == pipeline.expected else "fail"
    return (done(outcome, verdict=pc.verdict, relative_difference=_decisive_value(pc)),
            (reference, converted) if keep_pair else None)


def run_case(index: int, settings: CampaignSettings) -> dict[str, Any]:
    """Build case ``index`` and run every selected pipeline on it (a JSON-friendly record).

    Raises
    ------
    InvalidModelError
        Unknown pipeline name in ``settings``.
    """
    registry = pipelines()
    names = settings.pipelines or tuple(registry)
    unknown = [n for n in names if n not in registry]
    if unknown:
        raise InvalidModelError(f"pipelines: unknown {unknown!r}; known: {sorted(registry)}",
                                field="pipelines")
    spec = case_spec(settings.seed, index, max_order=settings.max_order,
                     max_spread_decades=settings.max_spread_decades)
    start = time.perf_counter()
    system = build_system(spec, name=f"case {index}")
    results = [run_pipeline(registry[n], system, spec, rtol=settings.rtol,
                            escalation_seconds=settings.escalation_seconds)[0].as_dict()
               for n in names]
    return {"index": index, "spec": spec.as_dict(), "results": results,
            "seconds": round(time.perf_counter() - start, 4)}


# ====================================================================== shrinking
def _shrink_candidates(spec: SystemSpec) -> Iterable[SystemSpec]:
    if spec.order > 1:
        yield replace(spec, order=1)
        yield replace(spec, order=spec.order // 2)
        yield replace(spec, order=spec.order - 1)
    if spec.spread_decades > 0:
        yield replace(spec, spread_decades=0.0)
        yield replace(spec, spread_decades=round(spec.spread_decades / 2, 3))
        yield replace(spec, spread_decades=round(max(spec.spread_decades - 1.0, 0.0), 3))
    if spec.coordinate_condition > 1:
        yield replace(spec, coordinate_condition=1.0)
        yield replace(spec, coordinate_condition=round(math.sqrt(spec.coordinate_condition), 3))
    for name, simple in (("inputs", 1), ("outputs", 1), ("hidden", "none"),
                         ("near_cancellation", False), ("clustered", 0), ("repeated", 0),
                         ("complex_pairs", 0), ("feedthrough", False), ("discrete", False),
                         ("stability", "stable")):
        if getattr(spec, name) != simple:
            yield replace(spec, **{name: simple})
    if spec.seed > 0:
        yield replace(spec, seed=0)


def shrink_failure(pipeline: Pipeline, spec: SystemSpec, outcome: str, settings: CampaignSettings
                   ) -> tuple[SystemSpec, PipelineResult, int]:
    """Greedily simplify ``spec`` while ``pipeline`` keeps producing ``outcome``.

    Returns
    -------
    (shrunk spec, its result, number of evaluations)

    Raises
    ------
    Nothing on purpose (see :func:`run_pipeline`).
    """
    evaluations = 0
    current = spec.fitted()
    best = run_pipeline(pipeline, build_system(current), current, rtol=settings.rtol,
                        escalation_seconds=settings.escalation_seconds)[0]
    improved = True
    while improved and evaluations < settings.shrink_evaluations:
        improved = False
        for cand in _shrink_candidates(current):
            cand = cand.fitted()
            if cand == current:
                continue
            if evaluations >= settings.shrink_evaluations:
                break
            evaluations += 1
            res = run_pipeline(pipeline, build_system(cand), cand, rtol=settings.rtol,
                               escalation_seconds=settings.escalation_seconds)[0]
            if res.outcome == outcome:
                current, best, improved = cand, res, True
                break
    return current, best, evaluations


def _shrink_task(args: tuple[str, dict[str, Any], str, int, CampaignSettings]) -> dict[str, Any]:
    name, spec_dict, outcome, index, settings = args
    pipeline = pipelines()[name]
    spec, res, evals = shrink_failure(pipeline, SystemSpec(**spec_dict), outcome, settings)
    return {"pipeline": name, "case": index, "original_spec": spec_dict, "spec": spec.as_dict(),
            "outcome": res.outcome, "verdict": res.verdict, "message": res.message,
            "relative_difference": res.as_dict()["relative_difference"],
            "shrink_evaluations": evals}


def _cases_task(args: tuple[list[int], CampaignSettings]) -> list[dict[str, Any]]:
    indices, settings = args
    return [run_case(i, settings) for i in indices]


# ======================================================================= summary
def _envelope(points: list[tuple[float, str]]) -> tuple[float | None, float | None]:
    """(largest x up to which nothing failed, smallest failing x)."""
    failing = [x for x, o in points if o in FAILING]
    first_fail = min(failing) if failing else None
    ok = [x for x, o in points if o not in FAILING and (first_fail is None or x < first_fail)]
    return (max(ok) if ok else None), first_fail


def summarize(records: Sequence[dict[str, Any]], pipeline_names: Sequence[str]) -> dict[str, Any]:
    """Per-pipeline counts, pass rates and robustness envelopes from case records."""
    out: dict[str, Any] = {}
    for name in pipeline_names:
        counts = {o: 0 for o in OUTCOMES}
        by_order: list[tuple[float, str]] = []
        by_spread: list[tuple[float, str]] = []
        failing_cases: list[int] = []
        for rec in records:
            for res in rec["results"]:
                if res["pipeline"] != name:
                    continue
                counts[res["outcome"]] += 1
                if res["outcome"] in ("n/a", "refused"):
                    continue
                by_order.append((rec["spec"]["order"], res["outcome"]))
                by_spread.append((rec["spec"]["spread_decades"], res["outcome"]))
                if res["outcome"] in FAILING:
                    failing_cases.append(rec["index"])
        audited = counts["pass"] + counts["fail"] + counts["inconclusive"] + counts["error"]
        env_order, fail_order = _envelope(by_order)
        env_spread, fail_spread = _envelope(by_spread)
        out[name] = {
            "counts": counts,
            "audited": audited,
            "pass_rate": (counts["pass"] / audited) if audited else None,
            "envelope": {"order": env_order, "spread_decades": env_spread,
                         "smallest_failing_order": fail_order,
                         "smallest_failing_spread_decades": fail_spread},
            "failing_cases": sorted(failing_cases),
        }
    return out


# ======================================================================= campaign
@dataclass
class CampaignResult:
    """Everything a campaign produced (see :meth:`as_dict` for the JSON report)."""

    settings: CampaignSettings
    records: list[dict[str, Any]]
    summary: dict[str, Any]
    counterexamples: list[dict[str, Any]] = field(default_factory=list)
    planned: int | None = None
    stopped_by_time: bool = False
    shard: tuple[int, int] = (0, 1)
    workers: int = 1
    seconds: float = 0.0
    versions: dict[str, str] = field(default_factory=dict)

    def as_dict(self) -> dict[str, Any]:
        from audit.reports.shapes import CAUTION

        audits = sum(v["audited"] for v in self.summary.values())
        return {
            "lti_audit_stress": 1,
            "settings": self.settings.as_dict(),
            "shard": list(self.shard),
            "workers": self.workers,
            "planned_cases": self.planned,
            "completed_cases": len(self.records),
            "stopped_by_time_limit": self.stopped_by_time,
            "seconds": round(self.seconds, 3),
            "audits": audits,
            "systems_per_second": (len(self.records) / self.seconds) if self.seconds > 0 else None,
            "versions": dict(self.versions),
            "pipelines": self.summary,
            "counterexamples": self.counterexamples,
            "cases": self.records,
            "caution": CAUTION,
        }


def library_versions() -> dict[str, str]:
    """Versions of the libraries whose conversions are stressed."""
    import importlib.metadata as md

    out = {}
    for dist in ("lti-audit", "numpy", "scipy", "control", "slycot"):
        try:
            out[dist] = md.version(dist)
        except md.PackageNotFoundError:
            out[dist] = "not installed"
    return out


@contextlib.contextmanager
def _dask_client(workers: int, scheduler: str | None) -> Iterator[Any]:
    """A Dask client: to ``scheduler``, or to a local cluster of ``workers`` processes."""
    from distributed import Client, LocalCluster

    if scheduler:
        client = Client(scheduler, timeout=30, set_as_default=False)
        try:
            yield client
        finally:
            client.close()
        return
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                      host="127.0.0.1", dashboard_address="127.0.0.1:0",
                      worker_dashboard_address="127.0.0.1:0") as cluster, \
            Client(cluster, set_as_default=False) as client:
        yield client


def _cluster_workers(client: Any, fallback: int) -> int:
    try:
        return max(1, len(client.scheduler_info()["workers"]))
    except Exception:  # noqa: BLE001 - only sizes the submission window
        return fallback


def run_campaign(
    *,
    budget: int | None = None,
    minutes: float | None = None,
    seed: int = 0,
    workers: int = 1,
    shard: tuple[int, int] = (0, 1),
    settings: CampaignSettings | None = None,
    progress: Callable[[int, int | None, int], None] | None = None,
    scheduler: str | None = None,
) -> CampaignResult:
    """Run a stress campaign (numerics only; nothing is printed or written).

    Parameters
    ----------
    budget : int, keyword-only
        Number of cases (systems) of the whole campaign; with a shard, this shard runs
        its share of them.  Default: unlimited (then ``minutes`` is required).
    minutes : float, keyword-only
        Stop submitting new cases after this wall-clock time.
    seed : int, keyword-only
        Campaign seed (overrides ``settings.seed``).
    workers : int, keyword-only
        Worker processes of a local Dask cluster (1: run in this process, no cluster).
    scheduler : str or None, keyword-only
        Address of an existing Dask scheduler (``tcp://HOST:PORT``): the cases are
        submitted to it as tasks and ``workers`` is ignored. Results are collected as
        they complete and sorted by case index, so the report is the same whatever the
        number of workers (only timings differ). A case whose worker dies is re-run by
        Dask on another worker. Pipelines added with :func:`register_pipeline` exist only
        in this process: run them with ``workers=1``.
    shard : (int, int), keyword-only
        ``(i, N)``: run the case indices ``k`` with ``k % N == i``.
    settings : CampaignSettings, keyword-only
    progress : callable ``(done, planned or None, failures)``, keyword-only
        Called once at the start (``done = 0``) and after each completed case.

    Returns
    -------
    CampaignResult

    Raises
    ------
    InvalidModelError
        No budget and no time limit, a bad shard, workers < 1, unknown pipeline names.
    """
    settings = replace(settings or CampaignSettings(), seed=int(seed))
    if budget is None and minutes is None:
        raise InvalidModelError("budget: give a number of cases (--budget) or a time limit "
                                "(--minutes)", field="budget")
    if budget is not None and budget < 0:
        raise InvalidModelError(f"budget: got {budget!r} but a number of cases >= 0 was expected",
                                field="budget")
    if minutes is not None and not minutes > 0:
        raise InvalidModelError(f"minutes: got {minutes!r} but a positive number was expected",
                                field="minutes")
    i, n = shard
    if not (n >= 1 and 0 <= i < n):
        raise InvalidModelError(f"shard: got {i}/{n} but 0 <= i < N was expected", field="shard")
    if workers < 1:
        raise InvalidModelError(f"workers: got {workers!r} but >= 1 was expected", field="workers")
    names = settings.pipelines or tuple(pipelines())
    unknown = [p for p in names if p not in pipelines()]
    if unknown:
        raise InvalidModelError(f"pipelines: unknown {unknown!r}; known: {sorted(pipelines())}",
                                field="pipelines")
    settings = replace(settings, pipelines=tuple(names))
    start = time.perf_counter()
    deadline = None if minutes is None else start + 60.0 * minutes

    def indices() -> Iterable[int]:
        k = i
        while budget is None or k < budget:
            yield k
            k += n

    planned = None if budget is None else len(range(i, budget, n))
    chunk = 1
    records: list[dict[str, Any]] = []
    failures = 0
    stopped = False

    def count_failures(recs: list[dict[str, Any]]) -> int:
        return sum(1 for r in recs for x in r["results"] if x["outcome"] in FAILING)

    gen = iter(indices())
    if progress:
        progress(0, planned, 0)
    if workers == 1 and not scheduler:
        for k in gen:
            if deadline is not None and time.perf_counter() >= deadline:
                stopped = True
                break
            rec = run_case(k, settings)
            records.append(rec)
            failures += count_failures([rec])
            if progress:
                progress(len(records), planned, failures)
        counterexamples = None
    else:
        from distributed import as_completed

        with _dask_client(workers, scheduler) as client:
            workers = _cluster_workers(client, workers)
            window = 2 * workers  # cases in flight: enough to keep every worker busy
            ac = as_completed(loop=client.loop)
            exhausted = False

            def submit_more() -> None:
                nonlocal exhausted, stopped
                while not exhausted and ac.count() < window:
                    if deadline is not None and time.perf_counter() >= deadline:
                        stopped, exhausted = True, True
                        return
                    batch = [k for _, k in zip(range(chunk), gen)]
                    if not batch:
                        exhausted = True
                        return
                    ac.add(client.submit(_cases_task, (batch, settings), pure=False,
                                         key=f"lti-audit-stress-{settings.seed}-{batch[0]}-"
                                             f"{uuid.uuid4().hex[:8]}"))

            submit_more()
            for fut in ac:
                recs = fut.result()
                fut.release()
                records.extend(recs)
                failures += count_failures(recs)
                if progress:
                    progress(len(records), planned, failures)
                submit_more()
            records.sort(key=lambda r: r["index"])
            summary = summarize(records, names)
            counterexamples = shrink_counterexamples(records, summary, settings,
                                                     client=client)
    records.sort(key=lambda r: r["index"])
    summary = summarize(records, names)
    if counterexamples is None:
        counterexamples = shrink_counterexamples(records, summary, settings)
    return CampaignResult(settings, records, summary, counterexamples, planned, stopped,
                          (i, n), workers, time.perf_counter() - start, library_versions())


def shrink_counterexamples(records: Sequence[dict[str, Any]], summary: dict[str, Any],
                           settings: CampaignSettings, *, client: Any = None) -> list[dict[str, Any]]:
    """Shrink the first ``settings.max_counterexamples`` failing cases of each pipeline.

    With a Dask ``client`` the shrinking tasks run on its cluster (results in task
    order). Duplicates (the same shrunk spec for the same pipeline) are dropped.

    Raises
    ------
    Nothing on purpose.
    """
    by_index = {r["index"]: r for r in records}
    tasks = []
    for name, info in summary.items():
        for index in info["failing_cases"][: settings.max_counterexamples]:
            res = next(x for x in by_index[index]["results"] if x["pipeline"] == name)
            tasks.append((name, by_index[index]["spec"], res["outcome"], index, settings))
    if client is not None and len(tasks) > 1:
        futures = [client.submit(_shrink_task, t, pure=False) for t in tasks]
        shrunk = client.gather(futures)
    else:
        shrunk = [_shrink_task(t) for t in tasks]
    seen: set[str] = set()
    out = []
    for item in shrunk:
        key = item["pipeline"] + json.dumps(item["spec"], sort_keys=True)
        if key in seen:
            continue
        seen.add(key)
        out.append(item)
    return out


MACHINE_DEPENDENT_KEYS = ("seconds", "systems_per_second", "workers")
"""Report entries that depend on the machine and the cluster, not on the seed."""


def reproducible_part(report: dict[str, Any]) -> dict[str, Any]:
    """A campaign report without timings and worker count: equal for equal seeds and
    settings, whatever the number of workers or machines (the property the cluster
    tests check)."""
    keep = {k: v for k, v in report.items() if k not in MACHINE_DEPENDENT_KEYS}
    keep["cases"] = [
        {**{k: v for k, v in c.items() if k != "seconds"},
         "results": [{k: v for k, v in r.items() if k != "seconds"} for r in c["results"]]}
        for c in report["cases"]]
    return keep


_REPORT_FIELDS: dict[str, tuple[type, ...]] = {
    "settings": (dict,), "shard": (list,), "planned_cases": (int, type(None)),
    "stopped_by_time_limit": (bool,), "seconds": (int, float), "counterexamples": (list,),
    "cases": (list,),
}


def read_campaign_report(path: Path) -> dict[str, Any]:
    """Read a shard's ``campaign.json`` for merging, checking its shape first.

    Raises
    ------
    InvalidModelError
        Not a regular file, too large, not JSON, or not a campaign report (the message
        names the file and the first field that does not fit).
    """
    from audit.documents.loading import _parse_json, read_input_bytes

    source = str(path)
    data = _parse_json(read_input_bytes(path, source=source, what="a campaign report")
                       .decode("utf-8", errors="replace"), source)
    if not isinstance(data, dict):
        raise InvalidModelError(f"expected a campaign report (a JSON object written by "
                                f"'lti-audit stress'), got {type(data).__name__}", source=source)
    for key, types in _REPORT_FIELDS.items():
        if not isinstance(data.get(key), types) or isinstance(data.get(key), bool) and bool not in types:
            raise InvalidModelError(f"{key}: missing or of the wrong type in this campaign report",
                                    field=key, source=source)
    for k, case in enumerate(data["cases"]):
        if not (isinstance(case, dict) and isinstance(case.get("index"), int)
                and isinstance(case.get("results"), list)
                and all(isinstance(r, dict) for r in case["results"])):
            raise InvalidModelError(f"cases[{k}]: expected an object with an integer 'index' and a "
                                    "list of 'results'", field=f"cases[{k}]", source=source)
    return data


def merge_campaigns(reports: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """Merge the JSON reports of the shards of one campaign into one report.

    Raises
    ------
    InvalidModelError
        The reports are not shards of the same campaign (settings differ).
    """
    if not reports:
        raise InvalidModelError("reports: nothing to merge", field="reports")
    first = reports[0]["settings"]
    for rep in reports[1:]:
        if rep["settings"] != first:
            raise InvalidModelError("reports: the shards were run with different settings "
                                    f"({rep['settings']} vs {first})", field="settings")
    records = sorted((c for rep in reports for c in rep["cases"]), key=lambda c: c["index"])
    try:
        summary = summarize(records, first["pipelines"])
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise InvalidModelError(f"cases: a result does not have the fields a campaign report "
                                f"holds ({type(exc).__name__}: {exc})", field="cases") from None
    merged = dict(reports[0])
    merged.update({
        "shard": [0, 1],
        "merged_from": [rep["shard"] for rep in reports],
        "planned_cases": None if any(r["planned_cases"] is None for r in reports)
        else sum(r["planned_cases"] for r in reports),
        "completed_cases": len(records),
        "stopped_by_time_limit": any(r["stopped_by_time_limit"] for r in reports),
        "seconds": max(r["seconds"] for r in reports),
        "pipelines": summary,
        "counterexamples": [c for rep in reports for c in rep["counterexamples"]],
        "cases": records,
    })
    merged["audits"] = sum(v["audited"] for v in merged["pipelines"].values())
    merged["systems_per_second"] = None
    return merged


# ======================================================================== writing
def write_counterexample(item: dict[str, Any], directory: Path, settings: dict[str, Any],
                         versions: dict[str, str]) -> Path:
    """Write one shrunk counterexample as model documents plus ``manifest.json``.

    ``input.json`` is the system fed to the pipeline; ``reference.json`` and
    ``converted.json`` (absent when the pipeline raised) are the pair it claims equivalent,
    so that ``lti-audit compare reference.json converted.json`` reproduces the verdict.

    Returns
    -------
    Path
        The counterexample directory.

    Raises
    ------
    FileExistsError
        The directory exists already.
    """
    from audit.documents.loading import document_from_realization, dump_model_document

    directory.mkdir(parents=True, exist_ok=False)
    pipeline = pipelines()[item["pipeline"]]
    spec = SystemSpec(**item["spec"])
    system = build_system(spec)
    result, pair = run_pipeline(pipeline, system, spec, rtol=settings["rtol"],
                                escalation_seconds=settings["escalation_seconds"], keep_pair=True)
    files: dict[str, str] = {}
    provenance = {"source": f"lti-audit stress campaign (seed {settings['seed']}, case {item['case']})",
                  "notes": f"pipeline {pipeline.name}: {pipeline.description}"}
    roles = [("input", system)] + (list(zip(("reference", "converted"), pair)) if pair else [])
    for role, r in roles:
        doc = document_from_realization(r, name=f"{role} ({pipeline.name}, case {item['case']})",
                                        provenance=provenance)
        dump_model_document(doc, directory / f"{role}.json")
        files[role] = f"{role}.json"
    manifest = {
        "lti_audit_counterexample": 1,
        "pipeline": pipeline.name,
        "library": pipeline.library,
        "description": pipeline.description,
        "property": (f"the pipeline's result is judged {pipeline.expected} to its reference"
                     if pipeline.name != SYMMETRY_PIPELINE else
                     "the verdict is the same with the two models swapped"),
        "expected": pipeline.expected,
        "outcome": result.outcome,
        "verdict": result.verdict,
        "message": result.message,
        "relative_difference": result.as_dict()["relative_difference"],
        "rtol": settings["rtol"],
        "escalation_seconds": settings["escalation_seconds"],
        "campaign_seed": settings["seed"],
        "case": item["case"],
        "spec": item["spec"],
        "original_spec": item["original_spec"],
        "files": files,
        "reproduce": ("lti-audit compare reference.json converted.json" if pair is not None
                      else "the pipeline raises on input.json"),
        "versions": versions,
    }
    (directory / "manifest.json").write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    return directory


def render_markdown(report: dict[str, Any]) -> str:
    """The campaign report as Markdown (one table row per pipeline)."""
    s = report["settings"]
    lines = [
        "# lti-audit stress campaign",
        "",
        f"Seed {s['seed']}, shard {report['shard'][0]}/{report['shard'][1]}, "
        f"{report['completed_cases']} systems completed"
        + (f" of {report['planned_cases']} planned" if report["planned_cases"] is not None else "")
        + f", {report['audits']} audits, {report['seconds']:.1f} s, {report['workers']} worker(s).",
        f"Orders 1..{s['max_order']}, pole spread 0..{s['max_spread_decades']:g} decades, "
        f"verdict rtol {s['rtol']:g}, extended-precision budget {s['escalation_seconds']:g} s per pair.",
    ]
    if report["stopped_by_time_limit"]:
        lines.append("Stopped by the time limit: the set of completed cases depends on machine speed; "
                     "rerun with --budget for an exactly reproducible campaign.")
    lines += ["", "| pipeline | audited | pass | fail | inconcl. | error | refused | n/a | pass rate "
              "| envelope: order | envelope: spread (dec) |",
              "|---|---|---|---|---|---|---|---|---|---|---|"]
    for name, info in report["pipelines"].items():
        c, env = info["counts"], info["envelope"]
        rate = "-" if info["pass_rate"] is None else f"{100 * info['pass_rate']:.1f}%"
        fo = "" if env["smallest_failing_order"] is None else f" (fails at {env['smallest_failing_order']})"
        fs = "" if env["smallest_failing_spread_decades"] is None else \
            f" (fails at {env['smallest_failing_spread_decades']:g})"
        eo = "-" if env["order"] is None else str(env["order"])
        es = "-" if env["spread_decades"] is None else f"{env['spread_decades']:g}"
        lines.append(f"| {name} | {info['audited']} | {c['pass']} | {c['fail']} | {c['inconclusive']} "
                     f"| {c['error']} | {c['refused']} | {c['n/a']} | {rate} | {eo}{fo} | {es}{fs} |")
    lines += ["", "Envelope: the largest order (pole spread) up to which every audited case of the "
              "pipeline passed or was inconclusive; `fail` and `error` break it.", ""]
    if report["counterexamples"]:
        lines += ["## Shrunk counterexamples", ""]
        for cx in report["counterexamples"]:
            sp = cx["spec"]
            lines.append(f"- `{cx.get('directory', '')}` {cx['pipeline']}: {cx['outcome']}"
                         f" ({cx['verdict'] or cx['message'][:80]}); order {sp['order']}, "
                         f"{sp['inputs']} in / {sp['outputs']} out, spread {sp['spread_decades']:g} dec, "
                         f"cond {sp['coordinate_condition']:g}, case {cx['case']}")
    from audit.reports.shapes import CAUTION

    lines += ["", "Versions: " + ", ".join(f"{k} {v}" for k, v in report["versions"].items()),
              "", CAUTION, ""]
    return "\n".join(lines)


def plot_envelope(report: dict[str, Any], path: Path) -> Path:
    """PNG of the robustness envelope per pipeline (matplotlib, Agg backend).

    Raises
    ------
    OSError
        The file cannot be written.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    names = list(report["pipelines"])
    s = report["settings"]
    fig, axes = plt.subplots(1, 2, figsize=(12, 0.35 * len(names) + 1.5), sharey=True)
    ypos = np.arange(len(names))
    for ax, key, fail_key, top, label in (
            (axes[0], "order", "smallest_failing_order", s["max_order"], "largest order within tolerance"),
            (axes[1], "spread_decades", "smallest_failing_spread_decades", s["max_spread_decades"],
             "largest pole spread within tolerance (decades)")):
        vals = [report["pipelines"][n]["envelope"][key] or 0.0 for n in names]
        fails = [report["pipelines"][n]["envelope"][fail_key] for n in names]
        colors = ["tab:green" if f is None else "tab:orange" for f in fails]
        ax.barh(ypos, vals, color=colors)
        for y, f in zip(ypos, fails):
            if f is not None:
                ax.plot([f], [y], "x", color="tab:red")
        ax.set_xlim(0, top * 1.05)
        ax.set_xlabel(label)
        ax.grid(axis="x", alpha=0.3)
    axes[0].set_yticks(ypos, names, fontsize=7)
    axes[0].invert_yaxis()
    fig.suptitle(f"lti-audit stress envelope (seed {s['seed']}, {report['completed_cases']} systems; "
                 "green: no failure seen, orange: failures, x: smallest failing value)", fontsize=9)
    fig.tight_layout()
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return path


def write_reports(result: CampaignResult | dict[str, Any], out: Path) -> dict[str, Path]:
    """Write ``campaign.json``, ``campaign.md``, ``envelope.png`` and the counterexamples.

    Parameters
    ----------
    result : CampaignResult or its ``as_dict()`` (e.g. a merged report)
    out : Path
        Output directory (created); counterexamples go to ``out/counterexamples/``.

    Returns
    -------
    dict of str to Path

    Raises
    ------
    FileExistsError
        A counterexample directory exists already (use a fresh ``out``).
    """
    report = result.as_dict() if isinstance(result, CampaignResult) else dict(result)
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    cx_root = out / "counterexamples"
    for cx in report["counterexamples"]:
        if "directory" in cx and (out / cx["directory"]).exists():
            continue  # merged report: already written by its shard
        directory = cx_root / f"{slug(cx['pipeline'])}-case{cx['case']}"
        write_counterexample(cx, directory, report["settings"], report["versions"])
        cx["directory"] = str(directory.relative_to(out))
    paths = {"json": out / "campaign.json", "markdown": out / "campaign.md",
             "plot": out / "envelope.png"}
    paths["json"].write_text(json.dumps(report, indent=1, allow_nan=False) + "\n", encoding="utf-8")
    paths["markdown"].write_text(render_markdown(report), encoding="utf-8")
    plot_envelope(report, paths["plot"])
    return paths


def default_workers() -> int:
    """The number of CPUs available to this process."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


__all__ = [
    "CampaignResult",
    "CampaignSettings",
    "NotApplicable",
    "Pipeline",
    "PipelineResult",
    "case_spec",
    "merge_campaigns",
    "pipelines",
    "plot_envelope",
    "register_pipeline",
    "render_markdown",
    "reproducible_part",
    "run_campaign",
    "run_case",
    "run_pipeline",
    "shrink_counterexamples",
    "shrink_failure",
    "summarize",
    "unregister_pipeline",
    "write_counterexample",
    "write_reports",
]
