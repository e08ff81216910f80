"""Properties of one model: order, minimal order, stability, poles, zeros, gains,
hidden modes, conditioning of the realization, and its claimed form.

A *problem* (exit status 1 from ``lti-audit inspect``) is an unstable or marginally
stable hidden or nearly hidden mode (:func:`audit.structure.mode_coupling.mode_couplings`) or a
claimed form the realization is not in. Stable hidden and nearly hidden modes and poor
conditioning are reported as notes. Rank decisions without a clear singular-value gap make the
inspection ``inconclusive``.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import scipy.linalg

from audit.errors import NumericalTroubleError
from audit.evidence.record import (
    Evidence,
    to_jsonable,
    complex_pairs,
    fmt_complex,
    minimal_order_evidence,
    stability_label,
)
from audit.core.realization import Realization

Status = Literal["ok", "problem", "inconclusive"]

ILL_CONDITIONED = 1e8
"""Eigenvector-matrix condition number above which a note warns that the poles of this
realization are sensitive (common practice, no source)."""


@dataclass(frozen=True)
class Inspection:
    """Result of inspecting one model."""

    name: str
    status: Status
    problems: tuple[str, ...]
    notes: tuple[str, ...]
    properties: dict[str, Any]
    evidence: tuple[Evidence, ...] = field(default=())
    seconds: float = 0.0

    def as_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "status": self.status,
            "problems": list(self.problems),
            "notes": list(self.notes),
            "properties": to_jsonable(self.properties),
            "evidence": [e.as_dict() for e in self.evidence],
            "seconds": round(self.seconds, 6),
        }


def _gain_at(r: Realization, lam: complex) -> np.ndarray | None:
    if r.order == 0:
        return r.d.copy()
    pencil = lam * np.eye(r.order) - r.a
    # a pole at lam: the gain is infinite there (reported as None)
    smin = np.linalg.svd(pencil, compute_uv=False)[-1]
    if smin <= 1e-13 * max(1.0, np.linalg.norm(r.a, 2)):
        return None
    g = r.c @ np.linalg.solve(pencil, r.b) + r.d
    return np.real_if_close(g, tol=1e6)


def _conditioning(r: Realization) -> dict[str, Any]:
    if r.order == 0:
        return {"eigenvector_condition": 1.0, "largest_eigenvalue_condition": 1.0,
                "balancing_norm_reduction": 1.0}
    w, vl, vr = scipy.linalg.eig(r.a, left=True, right=True)
    vr = vr / np.linalg.norm(vr, axis=0)
    vl = vl / np.linalg.norm(vl, axis=0)
    denom = np.abs(np.sum(np.conj(vl) * vr, axis=0))
    kappa = np.where(denom > 0, 1.0 / np.maximum(denom, 1e-300), np.inf)
    cond_v = float(np.linalg.cond(vr))
    balanced, _ = scipy.linalg.matrix_balance(r.a, permute=False)
    na = float(np.linalg.norm(r.a, 1))
    nb = float(np.linalg.norm(balanced, 1))
    return {
        "eigenvector_condition": cond_v,
        "largest_eigenvalue_condition": float(np.max(kappa)),
        "balancing_norm_reduction": na / nb if nb > 0 else 1.0,
        "norm_a": na,
    }


def inspect_model(r: Realization, *, claimed_form: str | None = None,
                  rank_tol: float | None = None) -> Inspection:
    """Inspect one model.

    Parameters
    ----------
    r : Realization
    claimed_form : str or None, keyword-only
        The document's ``claimed_form``; checked when given.
    rank_tol : float or None, keyword-only
        Tolerance of the staircase rank decisions (default: scale-aware, see
        :func:`audit.structure.minimal.minimal_realization`).

    Returns
    -------
    Inspection
    """
    from audit.core.threads import limited_blas_threads

    with limited_blas_threads():
        return _inspect_model(r, claimed_form=claimed_form, rank_tol=rank_tol)


def _inspect_model(r: Realization, *, claimed_form: str | None, rank_tol: float | None) -> Inspection:
    from audit.evidence.peak_gain import peak_gain
    from audit.structure.zeros import transmission_zeros

    start = time.perf_counter()
    label = r.name or "model"
    ev_min, mr = minimal_order_evidence(label, r, tol=rank_tol)
    discrete = r.is_discrete
    poles = r.poles()
    min_poles = mr.realization.poles()
    try:
        zeros = transmission_zeros(mr.realization)
    except NumericalTroubleError:
        zeros = np.zeros(0, dtype=complex)
    dc = _gain_at(r, 1.0 + 0j if discrete else 0j)
    hf = _gain_at(r, -1.0 + 0j) if discrete else r.d.copy()
    try:
        pk = peak_gain(mr.realization)
        peak = {"value": float(pk.value), "frequency_rad_s": float(pk.frequency),
                "certified": bool(getattr(pk, "certified", False))}
    except NumericalTroubleError as exc:
        peak = {"value": None, "note": str(exc)}
    except np.linalg.LinAlgError:  # norms.peak_gain evaluates at a pole exactly on the boundary
        peak = {"value": None, "note": "not computed: the frequency response is unbounded "
                "(a pole lies on the stability boundary)"}
    cond = _conditioning(r)
    problems: list[str] = []
    notes: list[str] = []
    hidden = ev_min.details["hidden_modes"]
    nearly = ev_min.details["nearly_hidden_modes"]
    for h in [h for h in hidden + nearly if h["unstable"]]:
        problems.append(hidden_mode_sentence(h) + ": the input-output behaviour hides an "
                        "internally " + ("unstable" if h["stability"] == "unstable" else
                                         "marginally stable") + " state")
    stable_hidden = [h for h in hidden if not h["unstable"]]
    if stable_hidden:
        notes.append(f"{len(stable_hidden)} stable hidden mode(s); minimal order {mr.order} of {r.order}")
    for h in [h for h in nearly if not h["unstable"]]:
        notes.append(hidden_mode_sentence(h))
    if cond["eigenvector_condition"] > ILL_CONDITIONED:
        notes.append(f"poles are sensitive in these coordinates: eigenvector matrix condition "
                     f"number {cond['eigenvector_condition']:.1e}")
    evidence = [ev_min]
    form_info: dict[str, Any] | None = None
    if claimed_form:
        form_info, form_problem = _check_form(r, claimed_form)
        if form_problem:
            problems.append(form_problem)
    recognised = _recognise(r)
    status: Status = "problem" if problems else ("inconclusive" if ev_min.outcome == "unclear" else "ok")
    if ev_min.outcome == "unclear":
        notes.append("a staircase rank decision had no clear singular-value gap; the minimal "
                     "order and hidden modes are uncertain")
    properties: dict[str, Any] = {
        "order": r.order,
        "inputs": r.n_inputs,
        "outputs": r.n_outputs,
        "time_domain": "continuous" if not discrete else f"discrete, T = {r.sample_period:g} s",
        "sample_period": r.sample_period,
        "minimal_order": mr.order,
        "internal_stability": stability_label(poles, discrete),
        "input_output_stability": stability_label(min_poles, discrete),
        "poles": complex_pairs(np.sort_complex(poles)),
        "poles_of_minimal_part": complex_pairs(np.sort_complex(min_poles)),
        "transmission_zeros": complex_pairs(np.sort_complex(np.asarray(zeros))),
        "dc_gain": None if dc is None else np.asarray(dc).real.tolist(),
        "high_frequency_gain": None if hf is None else np.asarray(hf).real.tolist(),
        "peak_gain": peak,
        "hidden_modes": hidden,
        "nearly_hidden_modes": nearly,
        "mode_coupling_thresholds": ev_min.details["mode_coupling_thresholds"],
        "conditioning": cond,
        "claimed_form": form_info,
        "recognised_forms": recognised,
    }
    return Inspection(
        name=label,
        status=status,
        problems=tuple(problems),
        notes=tuple(notes),
        properties=properties,
        evidence=tuple(evidence),
        seconds=time.perf_counter() - start,
    )


_SIDE = {"uncontrollable": "inputs", "unobservable": "outputs",
         "uncontrollable_and_unobservable": "inputs and outputs"}


def hidden_mode_sentence(h: dict[str, Any]) -> str:
    """One sentence for a hidden or nearly hidden mode (an entry of ``hidden_modes`` /
    ``nearly_hidden_modes``), with its coupling levels.

    >>> hidden_mode_sentence({"location": [0.5, 0.0], "classification": "nearly_hidden",
    ...     "kind": "unobservable", "stability": "unstable",
    ...     "coupling": {"inputs": 0.36, "outputs": 1.9e-6, "joint": 7e-7}})
    'UNSTABLE NEARLY HIDDEN MODE at 0.5 (weakly coupled to the outputs: input coupling 0.36, output coupling 1.9e-06, joint 7e-07)'
    """
    where = fmt_complex(complex(*h["location"]))
    c = h["coupling"]
    levels = f"input coupling {c['inputs']:.2g}, output coupling {c['outputs']:.2g}, joint {c['joint']:.2g}"
    state = {"unstable": "UNSTABLE ", "marginal": "MARGINALLY STABLE "}.get(h["stability"], "stable ")
    if h["classification"] == "hidden":
        return f"{state}HIDDEN MODE at {where} ({h['kind']}: {levels})"
    return (f"{state}NEARLY HIDDEN MODE at {where} (weakly coupled to the "
            f"{_SIDE.get(h['kind'] or '', 'inputs and outputs')}: {levels})")


def _check_form(r: Realization, claimed: str) -> tuple[dict[str, Any], str | None]:
    try:
        from audit.forms.catalogue import check_claimed_form
    except ImportError:  # pragma: no cover - forms module ships with the package
        return {"claimed": claimed, "checked": False}, None
    from audit.errors import InvalidModelError

    try:
        res = check_claimed_form(r, claimed)
    except InvalidModelError as exc:
        # kalman / staircase forms depend on rank decisions and have no pattern to check;
        # the model is still inspected (convert writes such documents)
        return {"claimed": claimed, "checked": False, "reason": str(exc)}, None
    info = {"claimed": claimed, "checked": True, **to_jsonable(res.as_dict())}
    if res.holds:
        return info, None
    devs = "; ".join(list(res.deviations)[:3])
    return info, f"claims the {claimed} form but is not in it: {devs}"


def _recognise(r: Realization) -> Any:
    try:
        from audit.forms.catalogue import recognise_form
    except ImportError:  # pragma: no cover
        return None
    from audit.errors import AuditError

    try:
        return to_jsonable(recognise_form(r).as_dict())
    except AuditError:  # recognition is a courtesy: a model it cannot judge gets none
        return None
