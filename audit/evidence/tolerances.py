"""Tolerances a team can state, read from text (standard library only).

Besides the relative tolerance on the peak gain of ``G1 - G2`` (``rtol``), an audit can
state:

* an absolute tolerance ``atol`` on the same difference, in the models' gain units
  (output units per input unit): a difference is within tolerance when it is within
  the larger of ``rtol x reference peak gain`` and ``atol``;
* a band of interest ``[low, high]`` in rad/s: only the peak of the difference inside
  the band decides; the peak outside it is reported;
* per-channel relative tolerances: ``OUT:IN=VALUE`` (one channel) or ``OUT=VALUE`` (every
  input of one output), where ``OUT`` and ``IN`` are 0-based indices, signal names from
  the model documents, or ``*`` (all). When any is given, the decision is made channel by
  channel (``|G1[i, j] - G2[i, j]|`` against each channel's allowance) instead of on
  ``sigma_max`` of the whole difference matrix; later entries override earlier ones.

This module only reads and checks the text; :mod:`audit.verdict.compare` applies the rule.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

from audit.errors import InvalidModelError

__all__ = ["ChannelTolerance", "parse_channel_tolerance", "resolve_channel_tolerances",
           "check_absolute_tolerance", "channel_label"]


@dataclass(frozen=True)
class ChannelTolerance:
    """One stated per-channel relative tolerance, as written (not yet resolved)."""

    output: str
    input: str
    rtol: float

    def text(self) -> str:
        return f"{self.output}:{self.input}={self.rtol:g}"


def _relative(value: object, where: str) -> float:
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise InvalidModelError(f"{where}: got {value!r} but a relative tolerance between 0 and 1 "
                                "was expected", field=where) from None
    if not (0.0 < v < 1.0):
        raise InvalidModelError(f"{where}: got {v!r} but a relative tolerance between 0 and 1 "
                                "(exclusive) was expected", field=where)
    return v


def check_absolute_tolerance(value: object, *, field: str = "atol") -> float:
    """``atol``: a finite number >= 0 (0: no absolute tolerance)."""
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise InvalidModelError(f"{field}: got {value!r} but a number >= 0 in the models' gain "
                                "units was expected", field=field) from None
    if not (math.isfinite(v) and v >= 0.0):
        raise InvalidModelError(f"{field}: got {v!r} but a finite number >= 0 in the models' "
                                "gain units was expected", field=field)
    return v


def parse_channel_tolerance(text: str, *, field: str = "channel rtol") -> ChannelTolerance:
    """Read ``OUT:IN=VALUE`` or ``OUT=VALUE``.

    Examples
    --------
    >>> parse_channel_tolerance("belt_speed:motor_voltage=1e-3")
    ChannelTolerance(output='belt_speed', input='motor_voltage', rtol=0.001)
    >>> parse_channel_tolerance("1=2e-4").input
    '*'
    """
    if not isinstance(text, str) or "=" not in text:
        raise InvalidModelError(f"{field}: got {text!r} but OUT:IN=VALUE or OUT=VALUE was expected "
                                "(OUT, IN: 0-based index, signal name or *)", field=field)
    where, _, value = text.rpartition("=")
    out, sep, inp = where.partition(":")
    out, inp = out.strip(), (inp.strip() if sep else "*")
    if not out or not inp:
        raise InvalidModelError(f"{field}: got {text!r}; the output and the input must not be empty "
                                "(use * for all)", field=field)
    return ChannelTolerance(out, inp, _relative(value.strip(), f"{field} {text!r}"))


def _indices(token: str, count: int, names: Sequence[str] | None, what: str, field: str) -> list[int]:
    if token == "*":
        return list(range(count))
    if token.isdigit():
        k = int(token)
        if k >= count:
            raise InvalidModelError(f"{field}: {what} {k} does not exist (the models have {count} "
                                    f"{what}s, numbered from 0)", field=field)
        return [k]
    hits = [k for k, name in enumerate(names or []) if name == token]
    if len(hits) == 1:
        return hits
    known = ", ".join(repr(n) for n in (names or [])) or "none (the documents name no signals)"
    if not hits:
        raise InvalidModelError(f"{field}: no {what} named {token!r}; known {what} names: {known}; "
                                f"or give a 0-based index", field=field)
    raise InvalidModelError(f"{field}: {len(hits)} {what}s are named {token!r}; give a 0-based "
                            "index instead", field=field)


def resolve_channel_tolerances(
    specs: Sequence[ChannelTolerance],
    *,
    n_outputs: int,
    n_inputs: int,
    output_names: Sequence[str] | None = None,
    input_names: Sequence[str] | None = None,
    field: str = "channel rtol",
) -> tuple[tuple[int, int, float], ...]:
    """``(output, input, rtol)`` for every channel a spec names (later specs win).

    Names are the ``name`` of the reference document's inputs and outputs.

    Raises
    ------
    InvalidModelError
        An index out of range, an unknown or ambiguous name.
    """
    chosen: dict[tuple[int, int], float] = {}
    for spec in specs:
        where = f"{field} {spec.text()!r}"
        for i in _indices(spec.output, n_outputs, output_names, "output", where):
            for j in _indices(spec.input, n_inputs, input_names, "input", where):
                chosen[(i, j)] = spec.rtol
    return tuple((i, j, v) for (i, j), v in sorted(chosen.items()))


def channel_label(output: int, input_: int, output_names: Sequence[str] | None = None,
                  input_names: Sequence[str] | None = None) -> str:
    """``"output 1 (belt_speed) <- input 0 (motor_voltage)"``."""
    def one(kind: str, k: int, names: Sequence[str] | None) -> str:
        return f"{kind} {k} ({names[k]})" if names and k < len(names) and names[k] else f"{kind} {k}"

    return f"{one('output', output, output_names)} <- {one('input', input_, input_names)}"
