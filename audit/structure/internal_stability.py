"""Internal stability as part of "unchanged": the hidden-mode gate of compare and check.

Input-output equivalence is the verdict. On top of it, a model that has an unstable or
marginally stable *hidden* or *nearly hidden* mode (see
:func:`audit.structure.mode_coupling.mode_couplings`) that the reference model does not have is a
**problem**: it makes ``lti-audit compare`` exit with status 1 whatever the verdict,
makes ``lti-audit check`` classify the file as changed in internal stability, and fails
a service submission -- unless a team accepts it explicitly, with a reason
(``--accept-hidden-instability REASON`` on the command line, ``accept_hidden_instability``
in a claims manifest). An accepted problem stays in the report, marked accepted, with
its reason.

A mode of the model "is in the reference" when the reference has a hidden or nearly
hidden mode within ``MODE_MATCH_RTOL * max(1, |value|)`` of it: a hidden unstable mode
that the reference carries visibly (coupled) is still new, because hiding it is exactly
the change that makes it impossible to stabilise from the inputs or to see at the
outputs.

This module only arranges results of :mod:`audit.structure.mode_coupling`; it never prints.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Literal

from audit.core.realization import Realization

#: relative distance within which a model's mode and a reference mode are the same mode.
#: Computed hidden eigenvalues are accurate to about eps * condition (simple) or
#: sqrt(eps) (a double eigenvalue, 1.5e-8); 1e-6 leaves room for both (our choice).
MODE_MATCH_RTOL = 1e-6

ProblemKind = Literal["unstable_hidden_mode", "marginal_hidden_mode"]

_SIDE = {"uncontrollable": "inputs", "unobservable": "outputs",
         "uncontrollable_and_unobservable": "inputs_and_outputs"}


@dataclass(frozen=True)
class ModelModes:
    """The hidden and nearly hidden modes of one model, as report-ready dictionaries.

    Attributes
    ----------
    label : str
        Model name (as in the report).
    modes : tuple of dict
        :meth:`audit.structure.mode_coupling.ModeCoupling.as_dict` of every hidden or nearly hidden
        mode (location, classification, kind, stability, unstable, coupling, method,
        eigenvalue_condition).
    thresholds : dict
        ``{"hidden": rank tolerance, "nearly_hidden": level, "marginal": band}``.
    minimal_order : int
    decisions_clear : bool
    """

    label: str
    modes: tuple[dict[str, Any], ...]
    thresholds: dict[str, float]
    minimal_order: int
    decisions_clear: bool
    sample_period: float | None = None

    def as_dict(self) -> dict[str, Any]:
        return {"modes": [dict(m) for m in self.modes], "thresholds": dict(self.thresholds),
                "minimal_order": self.minimal_order, "decisions_clear": self.decisions_clear}


def model_modes(r: Realization, *, label: str | None = None,
                rank_tol: float | None = None) -> ModelModes:
    """Hidden and nearly hidden modes of one stored model (:func:`mode_couplings`).

    Parameters
    ----------
    r : Realization
    label : str, optional, keyword-only
        Name used in messages (default ``r.name`` or "model").
    rank_tol : float, optional, keyword-only
        Staircase rank tolerance (default: scale-aware, see
        :func:`audit.structure.minimal.minimal_realization`).

    Returns
    -------
    ModelModes
    """
    from audit.core.threads import limited_blas_threads
    from audit.structure.mode_coupling import mode_couplings

    with limited_blas_threads():
        mc = mode_couplings(r, tol=rank_tol)
    d = mc.as_dict()
    return ModelModes(label=label or r.name or "model", modes=tuple(d["modes"]),
                      thresholds=d["thresholds"], minimal_order=mc.minimal_order,
                      decisions_clear=mc.decisions_clear, sample_period=r.sample_period)


def modes_from_comparisons(r: Realization, pairs: list[Any]) -> ModelModes | None:
    """The :class:`ModelModes` of ``r`` as already computed inside ``pairs``
    (the ``minimal_order:<name>`` evidence of :func:`audit.verdict.compare.compare_pair`, which
    runs :func:`audit.structure.mode_coupling.mode_couplings` on the stored model), or None when no
    comparison analysed this very model (e.g. only a discretized copy of it)."""
    key = f"minimal_order:{r.name}"
    for pair in pairs:
        for ev in getattr(pair, "evidence", ()):
            d = ev.details
            if ev.key != key or "nearly_hidden_modes" not in d or d.get("order") != r.order:
                continue
            modes = sorted(list(d["hidden_modes"]) + list(d["nearly_hidden_modes"]),
                           key=lambda m: (m["location"][0], m["location"][1]))
            return ModelModes(label=r.name or "model", modes=tuple(modes),
                              thresholds=dict(d["mode_coupling_thresholds"]),
                              minimal_order=int(d["minimal_order"]),
                              decisions_clear=ev.outcome != "unclear",
                              sample_period=r.sample_period)
    return None


def _in_domain_of(location: list[float], source: float | None, target: float | None) -> list[float]:
    """A mode of a model with sample period ``source`` (None: continuous) seen in the
    domain of one with period ``target``: ``z = exp(s T)`` for a continuous mode and a
    discrete target, ``z^(T_target / T_source)`` (principal branch) between periods,
    ``log(z) / T`` for a discrete mode and a continuous target."""
    import cmath

    z = complex(*location)
    if source == target:
        return location
    if source is None and target is not None:
        w = cmath.exp(z * target)
    elif source is not None and target is None:
        w = cmath.log(z) / source if z != 0 else complex(-math.inf, 0.0)
    else:
        assert source is not None and target is not None
        w = cmath.exp(cmath.log(z) * (target / source)) if z != 0 else 0j
    return [w.real, w.imag]


def _same_mode(a: list[float], b: list[float]) -> bool:
    za, zb = complex(*a), complex(*b)
    return abs(za - zb) <= MODE_MATCH_RTOL * max(1.0, abs(za))


def _where(m: dict[str, Any]) -> str:
    from audit.evidence.record import fmt_complex

    return fmt_complex(complex(*m["location"]))


def problem_message(label: str, m: dict[str, Any], reference_label: str) -> str:
    """One sentence naming the model, the mode, its location and coupling levels.

    >>> problem_message("vendor.json", {"location": [0.5, 0.0], "stability": "unstable",
    ...     "classification": "hidden", "kind": "unobservable",
    ...     "coupling": {"inputs": 0.36, "outputs": 5.7e-17, "joint": 2e-17}}, "ref.json")
    'vendor.json has an unstable hidden mode at 0.5 (unobservable; input coupling 0.36, output coupling 5.7e-17) that ref.json does not have'
    """
    state = "unstable" if m["stability"] == "unstable" else "marginally stable"
    what = "hidden" if m["classification"] == "hidden" else "nearly hidden"
    c = m["coupling"]
    text = (f"{label} has {'an' if state == 'unstable' else 'a'} {state} {what} mode at "
            f"{_where(m)} ({m['kind']}; input coupling {c['inputs']:.2g}, output coupling "
            f"{c['outputs']:.2g})")
    return text + (f" that {reference_label} does not have" if reference_label else "")


def hidden_mode_problems(reference: ModelModes, others: list[ModelModes], *,
                         accepted_reason: str | None = None,
                         first_index: int = 1) -> list[dict[str, Any]]:
    """The problems of ``others`` against ``reference`` (the report's ``problems`` list).

    Every unstable or marginal hidden / nearly hidden mode of a model that the
    reference does not have (``MODE_MATCH_RTOL``) gives one entry::

        {"kind": "unstable_hidden_mode" | "marginal_hidden_mode",
         "model": label, "model_index": i, "location": [re, im],
         "coupling": {"inputs": x, "outputs": y, "joint": x*y (analysis coordinates)},
         "classification": "hidden" | "nearly_hidden",
         "decoupled_from": "inputs" | "outputs" | "inputs_and_outputs",
         "accepted": bool, "reason": str | None, "message": str}

    Parameters
    ----------
    reference : ModelModes
        With an empty ``label`` and no modes when there is no reference model (every
        unstable hidden mode is then a problem).
    others : list of ModelModes
        In the order of the report's models after the reference.
    accepted_reason : str or None, keyword-only
        When given (non-empty), every problem is marked accepted with this reason.
    first_index : int, keyword-only
        Index in the report's ``models`` list of ``others[0]`` (default 1).

    Returns
    -------
    list of dict
    """
    reason = accepted_reason.strip() if accepted_reason and accepted_reason.strip() else None
    out: list[dict[str, Any]] = []
    for k, other in enumerate(others):
        # a reference in another time domain (compare --discretization) is mapped first
        ref_flagged = [_in_domain_of(m["location"], reference.sample_period, other.sample_period)
                       for m in reference.modes]
        for m in other.modes:
            if not m["unstable"]:
                continue
            if any(_same_mode(m["location"], loc) for loc in ref_flagged):
                continue
            out.append({
                "kind": "unstable_hidden_mode" if m["stability"] == "unstable" else "marginal_hidden_mode",
                "model": other.label,
                "model_index": first_index + k,
                "location": list(m["location"]),
                "coupling": dict(m["coupling"]),
                "classification": m["classification"],
                "decoupled_from": _SIDE.get(m["kind"] or "", "inputs_and_outputs"),
                "accepted": reason is not None,
                "reason": reason,
                "message": problem_message(other.label, m, reference.label),
            })
    return out


def unaccepted(problems: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """The problems that nobody accepted (these make a gate fail)."""
    return [p for p in problems if not p.get("accepted")]


__all__ = [
    "MODE_MATCH_RTOL",
    "ModelModes",
    "hidden_mode_problems",
    "model_modes",
    "modes_from_comparisons",
    "problem_message",
    "unaccepted",
]
