"""Claims manifests: a team's declared relations between model files, and their checks.

A claims manifest is a TOML file (TOML v1.0.0, T. Preston-Werner, 2021), by default
``lti-audit.toml`` at the root of a model repository::

    lti_audit_manifest = 1          # optional; the manifest format version
    rtol = 1e-6                     # optional; default tolerance of every claim

    [files]                         # optional; which files `check --against` looks at
    include = ["models/**/*.json"]  # default: *.json *.yaml *.yml *.toml *.npz anywhere
    exclude = ["models/scratch/**"]

    [[claim]]
    name = "speed loop: transfer function and state space"
    models = ["models/speed_tf.json", "models/speed_ss.json"]
    expect = "equivalent"           # or "similar", "different"
    reason = "the state-space model was derived from the identified transfer function"

    [[claim]]
    models = ["models/speed_modal.json"]
    form = "modal"                  # controllable_companion, observable_companion,
                                    # modal, jordan, balanced

    [[claim]]
    models = ["models/speed_zoh_1ms.json"]
    discretization = {method = "zero-order-hold", of = "models/speed_tf.json"}
    rtol = 1e-8

    [[accept_hidden_instability]]   # optional; a team knowingly accepts such a mode
    model = "models/valve_supplier.json"
    location = [0.5, 0.0]           # optional; omitted: every such mode of that model
    reason = "stabilised by the drive's inner current loop (review 2024-117)"

Model paths are relative to the manifest's directory, written with ``/``. Each claim
says exactly one of ``expect``, ``form`` or ``discretization``:

``expect = "equivalent"``
    every model has the transfer function of the first (pairwise against the first,
    :func:`audit.verdict.compare.compare_pair`); at least two models.
``expect = "similar"``
    equivalent, and each pair is equal up to a change of state coordinates: both
    realizations minimal, of equal order, and a transformation ``T`` with
    ``A2 = T A1 T^-1, B2 = T B1, C2 = C1 T^-1`` was found (the ``similarity`` evidence
    of :func:`audit.verdict.compare.compare_pair`, which uses
    :func:`audit.evidence.similarity.similarity_transform_between`). A realization identical to
    the first (entries equal within :data:`IDENTICAL_RTOL`) also counts.
``expect = "different"``
    every model differs from the first beyond the tolerance.
``form = "..."``
    every listed model is in that structured form
    (:func:`audit.forms.catalogue.check_claimed_form`; default tolerance :data:`FORM_RTOL`).
``discretization = {method = ..., of = ..., prewarp_frequency = ...}``
    every listed (discrete-time) model is that discretization of the continuous-time
    model ``of`` (:func:`audit.dynamics.discretization_checks.check_discretization_claim`).

Internal stability is part of "unchanged" (:mod:`audit.structure.internal_stability`): an
``equivalent`` or ``similar`` claim fails when a model has an unstable or marginally
stable hidden or nearly hidden mode that the first model does not have, and
``check --against`` classifies such a file ``changed_internal_stability``, unless an
``[[accept_hidden_instability]]`` entry names the model (and, when given, the mode's
location) with a reason; the reason is printed with the result.

Tolerances: a claim's own ``rtol``, else the caller's default (``--rtol``), else the
manifest's top-level ``rtol``, else :data:`audit.evidence.record.DEFAULT_RTOL` (form claims:
the claim's own ``rtol``, else :data:`FORM_RTOL`).

Each claim ends ``holds``, ``fails``, ``inconclusive`` (the numerical evidence could not
settle the tolerance, or a computation could not be trusted) or ``error`` (a model file
is missing or invalid, or the models cannot be compared as given).

No numerical method is implemented here; the evidence comes from the modules named
above. Validation messages follow :mod:`audit.documents.schema`: they start with the manifest
path and name the claim (number and name) and the field.
"""

from __future__ import annotations

import math
import time
import tomllib
import typing
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, StrictStr, ValidationError, field_validator, model_validator

from audit.dynamics.discretization_methods import DiscretizationMethod, accepted_methods_text, discretization_method
from audit.errors import AuditError, IncompatibleModelsError, InvalidModelError, NumericalTroubleError

__all__ = [
    "DEFAULT_EXCLUDE",
    "DEFAULT_INCLUDE",
    "DEFAULT_MANIFEST_NAME",
    "FORM_RTOL",
    "IDENTICAL_RTOL",
    "Claim",
    "ClaimResult",
    "ClaimsManifest",
    "CoordinateChange",
    "DiscretizationSpec",
    "FileSelection",
    "HiddenInstabilityAcceptance",
    "InvalidManifestError",
    "ManifestFile",
    "accepted_reason",
    "coordinate_change",
    "evaluate_claim",
    "evaluate_claims",
    "glob_matches",
    "internal_stability_problems",
    "problem_sentences",
    "load_claims_manifest",
    "parse_claims_manifest",
]

#: File looked for in the current directory when no manifest is named.
DEFAULT_MANIFEST_NAME = "lti-audit.toml"

#: Files ``check --against`` looks at when the manifest has no ``[files] include``.
#: Patterns without ``/`` match the file name in any directory.
DEFAULT_INCLUDE: tuple[str, ...] = ("*.json", "*.yaml", "*.yml", "*.toml", "*.npz")
DEFAULT_EXCLUDE: tuple[str, ...] = ()

#: Default tolerance of form claims: the default of :func:`audit.forms.catalogue.check_claimed_form`
#: (structural zeros and ones of a form are written exactly, so the pattern tolerance is
#: much tighter than the transfer-function tolerance).
FORM_RTOL = 1e-9

#: Two realizations are "identical" when they have the same shapes and time domain and
#: every matrix agrees entrywise within this fraction of that matrix's largest entry
#: (rounding level; common practice, no source). Used to say "the realization did not
#: change at all" rather than "only the state coordinates changed".
IDENTICAL_RTOL = 1e-14

Expectation = Literal["equivalent", "similar", "different"]
ClaimKind = Literal["equivalent", "similar", "different", "form", "discretization"]
CheckableForm = Literal[
    "controllable_companion", "observable_companion", "modal", "jordan", "balanced"
]
ClaimStatus = Literal["holds", "fails", "inconclusive", "error"]
CoordinateChange = Literal["identical", "similar", "transfer_only"]


class InvalidManifestError(InvalidModelError):
    """A claims manifest is missing, unreadable or invalid (an input error, exit 2).

    A subclass of :class:`audit.errors.InvalidModelError` (so also of ``ValueError``):
    the manifest is input that names model files, and front ends already map that
    error to "invalid input".
    """


# ----------------------------------------------------------------------- globs
def _glob_regex(pattern: str) -> str:
    """Translate a ``/``-separated glob (``*``, ``?``, ``[...]``, ``**``) to a regex."""
    import re

    out = []
    i = 0
    while i < len(pattern):
        c = pattern[i]
        if pattern.startswith("**/", i):
            out.append("(?:[^/]+/)*")
            i += 3
            continue
        if pattern.startswith("**", i):
            out.append(".*")
            i += 2
            continue
        if c == "*":
            out.append("[^/]*")
        elif c == "?":
            out.append("[^/]")
        elif c == "[":
            j = pattern.find("]", i + 1)
            if j == -1:
                out.append(re.escape(c))
            else:
                body = pattern[i + 1:j]
                if body.startswith("!"):
                    body = "^" + body[1:]
                out.append("[" + body.replace("\\", "\\\\") + "]")
                i = j
        else:
            out.append(re.escape(c))
        i += 1
    return "".join(out)


def glob_matches(path: str, pattern: str) -> bool:
    """Whether a ``/``-separated relative ``path`` matches ``pattern``.

    Patterns follow ``.gitignore`` habits: ``*`` and ``?`` stay within one directory
    level, ``**/`` spans any number of directories, a pattern without ``/`` matches the
    file name in any directory, and a pattern with ``/`` (leading, inside or trailing) is
    anchored at the manifest's directory; a trailing ``/`` means everything below.

    Parameters
    ----------
    path : str
        Path relative to the manifest's directory, e.g. ``"models/speed.json"``.
    pattern : str

    Returns
    -------
    bool

    Examples
    --------
    >>> glob_matches("models/a/speed.json", "*.json"), glob_matches("models/a/speed.json", "models/*.json")
    (True, False)
    >>> glob_matches("models/a/speed.json", "models/**/*.json")
    True
    """
    import re

    pat = pattern.strip()
    anchored = "/" in pat
    if pat.startswith("./"):
        pat = pat[2:]
    pat = pat.lstrip("/")
    if pat.endswith("/"):
        pat += "**"
    target = path if anchored else PurePosixPath(path).name
    return re.fullmatch(_glob_regex(pat), target) is not None


# ------------------------------------------------------------------ the manifest
_CONFIG = ConfigDict(extra="forbid", frozen=True)


def _check_relative_path(value: str) -> str:
    text = value.strip()
    if not text:
        raise ValueError("must not be empty (expected a path relative to the manifest)")
    if text.startswith("/") or text.startswith("\\") or (len(text) > 1 and text[1] == ":"):
        raise ValueError(f"got the absolute path {value!r}; expected a path relative to the "
                         "manifest's directory, written with '/'")
    if "\\" in text:
        raise ValueError(f"got {value!r}; write paths with '/' (not '\\')")
    if ".." in text.split("/"):
        raise ValueError(f"got {value!r}; paths must stay inside the manifest's directory "
                         "('..' is not allowed)")
    return text


def _check_rtol(value: float | None) -> float | None:
    if value is None:
        return None
    if not (math.isfinite(value) and 0.0 < value < 1.0):
        raise ValueError(f"got {value!r}, expected a relative tolerance between 0 and 1 "
                         "(exclusive), e.g. 1e-6")
    return value


class FileSelection(BaseModel):
    """Which files `lti-audit check --against REF` compares (glob patterns)."""

    model_config = _CONFIG

    include: list[StrictStr] = Field(
        default_factory=lambda: list(DEFAULT_INCLUDE),
        description="Glob patterns of model files, relative to the manifest. Default: "
        "*.json, *.yaml, *.yml, *.toml, *.npz in any directory (text files only when "
        "they are lti-audit model documents).")
    exclude: list[StrictStr] = Field(
        default_factory=list, description="Glob patterns of files to leave out.")

    @field_validator("include", "exclude")
    @classmethod
    def _patterns(cls, value: list[str]) -> list[str]:
        for i, pat in enumerate(value):
            if not pat.strip():
                raise ValueError(f"pattern [{i}] is empty (expected a glob such as 'models/**/*.json')")
        return value


class DiscretizationSpec(BaseModel):
    """A claimed discretization: the listed models are the 'method' discretization of 'of'."""

    model_config = _CONFIG

    method: DiscretizationMethod = Field(
        description="Discretization method: " + accepted_methods_text() + ".")
    of: StrictStr = Field(description="The continuous-time model, relative to the manifest.")
    prewarp_frequency: float | None = Field(
        default=None, description="Prewarp frequency in rad/s of the bilinear method (optional).")

    @field_validator("method", mode="before")
    @classmethod
    def _method(cls, value: Any) -> Any:
        try:
            return discretization_method(value, field="method")
        except InvalidModelError as exc:  # pydantic wants ValueError with a plain message
            raise ValueError(str(exc).removeprefix("method: ")) from None

    @field_validator("of")
    @classmethod
    def _of(cls, value: str) -> str:
        return _check_relative_path(value)

    @field_validator("prewarp_frequency")
    @classmethod
    def _prewarp(cls, value: float | None) -> float | None:
        if value is not None and not (math.isfinite(value) and value > 0):
            raise ValueError(f"got {value!r}, expected a frequency in rad/s > 0")
        return value


class Claim(BaseModel):
    """One claim about model files (see the module docstring)."""

    model_config = ConfigDict(extra="forbid", frozen=True, json_schema_extra={
        "description": "One claim: exactly one of expect, form, discretization.",
        "oneOf": [{"required": ["expect"]}, {"required": ["form"]},
                  {"required": ["discretization"]}]})

    name: StrictStr | None = Field(default=None, description="Short name shown in reports.")
    models: list[StrictStr] = Field(
        min_length=1, description="Model files, relative to the manifest; the first is the "
        "reference of equivalent / similar / different claims.")
    expect: Expectation | None = Field(
        default=None, description="equivalent, similar (equal up to a change of state "
        "coordinates) or different.")
    form: CheckableForm | None = Field(
        default=None, description="Every listed model is in this structured form.")
    discretization: DiscretizationSpec | None = Field(
        default=None, description="Every listed model is this discretization of 'of'.")
    rtol: float | None = Field(default=None, description="Relative tolerance of this claim.")
    atol: float | None = Field(
        default=None, description="expect claims: absolute tolerance on the difference, in the "
        "models' gain units (output units per input unit); a difference within the larger of "
        "rtol x peak gain and atol passes.")
    band_rad_s: list[float] | None = Field(
        default=None, min_length=2, max_length=2, description="expect claims: band of interest "
        "[low, high] in rad/s; only the difference inside it decides (the rest is reported).")
    channel_rtol: dict[str, float] | None = Field(
        default=None, description="expect claims: relative tolerance per channel, keys 'OUT:IN' "
        "or 'OUT' (0-based index, signal name from the first model's document, or *); the "
        "decision is then made channel by channel.")
    reason: StrictStr = Field(default="", description="Why the claim is expected to hold.")

    @field_validator("models")
    @classmethod
    def _models(cls, value: list[str]) -> list[str]:
        return [_check_relative_path(v) for v in value]

    @field_validator("rtol")
    @classmethod
    def _rtol(cls, value: float | None) -> float | None:
        return _check_rtol(value)

    @field_validator("atol")
    @classmethod
    def _atol(cls, value: float | None) -> float | None:
        if value is not None and not (math.isfinite(value) and value >= 0):
            raise ValueError(f"got {value!r}, expected a finite number >= 0 in the models' gain units")
        return value

    @field_validator("band_rad_s")
    @classmethod
    def _band(cls, value: list[float] | None) -> list[float] | None:
        if value is not None:
            from audit.evidence.band_peak import check_band

            try:
                check_band(value)
            except InvalidModelError as exc:
                raise ValueError(str(exc).removeprefix("band: ")) from None
        return value

    @field_validator("channel_rtol")
    @classmethod
    def _channels(cls, value: dict[str, float] | None) -> dict[str, float] | None:
        if value is not None:
            from audit.evidence.tolerances import parse_channel_tolerance

            for key, v in value.items():
                try:
                    parse_channel_tolerance(f"{key}={v!r}", field="entry")
                except InvalidModelError as exc:
                    raise ValueError(str(exc)) from None
        return value

    def channel_tolerances(self) -> list[Any]:
        """The ``channel_rtol`` entries as :class:`audit.evidence.tolerances.ChannelTolerance`."""
        from audit.evidence.tolerances import parse_channel_tolerance

        return [parse_channel_tolerance(f"{k}={v!r}", field=f"channel_rtol {k!r}")
                for k, v in (self.channel_rtol or {}).items()]

    @model_validator(mode="after")
    def _one_kind(self) -> "Claim":
        given = [k for k in ("expect", "form", "discretization") if getattr(self, k) is not None]
        if len(given) != 1:
            what = "none" if not given else " and ".join(given)
            raise ValueError(f"says {what}; a claim says exactly one of expect, form, "
                             "discretization")
        if self.expect is not None and len(self.models) < 2:
            raise ValueError(f"expect = {self.expect!r} needs at least two models, got "
                             f"{len(self.models)}")
        stated = [k for k in ("atol", "band_rad_s", "channel_rtol") if getattr(self, k) is not None]
        if stated and self.expect is None:
            raise ValueError(f"{', '.join(stated)} apply to expect claims (equivalent, similar, "
                             "different), not to form or discretization claims")
        return self

    def tolerance_words(self) -> str:
        """The tolerances stated beyond rtol, in words ("" when none)."""
        parts = []
        if self.atol:
            parts.append(f"atol {self.atol:g}")
        if self.band_rad_s is not None:
            parts.append(f"band {self.band_rad_s[0]:g} to {self.band_rad_s[1]:g} rad/s")
        for k, v in (self.channel_rtol or {}).items():
            parts.append(f"rtol {v:g} on channel {k}")
        return ", ".join(parts)

    @property
    def kind(self) -> ClaimKind:
        if self.expect is not None:
            return self.expect
        return "form" if self.form is not None else "discretization"

    def describe(self) -> str:
        """The expectation in words, e.g. ``"zero-order-hold discretization of models/c.json"``."""
        if self.expect is not None:
            words = self.tolerance_words()
            return self.expect + (f" ({words})" if words else "")
        if self.form is not None:
            return f"{self.form} form"
        spec = self.discretization
        assert spec is not None
        pw = "" if spec.prewarp_frequency is None else f" (prewarp {spec.prewarp_frequency:g} rad/s)"
        return f"{spec.method}{pw} discretization of {spec.of}"


class HiddenInstabilityAcceptance(BaseModel):
    """An explicit acceptance of an unstable / marginal hidden or nearly hidden mode."""

    model_config = _CONFIG

    model: StrictStr = Field(description="The model file that may have the mode, relative "
                             "to the manifest.")
    location: list[float] | None = Field(
        default=None, min_length=2, max_length=2,
        description="[re, im] of the accepted mode (matched within a relative 1e-6); "
        "omitted: every such mode of the model.")
    reason: StrictStr = Field(description="Why the mode is accepted; printed in the reports.")

    @field_validator("model")
    @classmethod
    def _model(cls, value: str) -> str:
        return _check_relative_path(value)

    @field_validator("reason")
    @classmethod
    def _reason(cls, value: str) -> str:
        if not value.strip():
            raise ValueError("is empty; say why the hidden mode is accepted")
        return value.strip()

    def covers(self, model: str, location: Sequence[float]) -> bool:
        """Whether this acceptance applies to the mode at ``location`` of ``model``."""
        from audit.structure.internal_stability import MODE_MATCH_RTOL

        if PurePosixPath(self.model) != PurePosixPath(model):
            return False
        if self.location is None:
            return True
        z, w = complex(*self.location), complex(*location)
        return abs(z - w) <= MODE_MATCH_RTOL * max(1.0, abs(z))


def accepted_reason(acceptances: Sequence[HiddenInstabilityAcceptance], model: str,
                    location: Sequence[float]) -> str | None:
    """The reason of the first acceptance covering that mode, else None."""
    for acc in acceptances:
        if acc.covers(model, location):
            return acc.reason
    return None


def internal_stability_problems(reference: Any, other: Any, model_path: str,
                                acceptances: Sequence[HiddenInstabilityAcceptance],
                                rank_tol: float | None = None) -> list[dict[str, Any]]:
    """Problems of ``other`` against ``reference`` (:func:`audit.structure.internal_stability.
    hidden_mode_problems`), each accepted when an acceptance covers it."""
    from audit.structure.internal_stability import hidden_mode_problems, model_modes

    ref = model_modes(reference, label=reference.name, rank_tol=rank_tol)
    new = model_modes(other, label=other.name, rank_tol=rank_tol)
    problems = hidden_mode_problems(ref, [new])
    for p in problems:
        why = accepted_reason(acceptances, model_path, p["location"])
        if why is not None:
            p["accepted"], p["reason"] = True, why
    return problems


def problem_sentences(problems: Sequence[dict[str, Any]]) -> str:
    """Plain sentences for an explanation: unaccepted problems, then accepted ones."""
    out = [f"Internal stability changed: {p['message']}." for p in problems if not p["accepted"]]
    out += [f"Accepted: {p['message']} (reason: {p['reason']})." for p in problems if p["accepted"]]
    return " ".join(out)


class ClaimsManifest(BaseModel):
    """An lti-audit claims manifest (TOML), version 1."""

    model_config = ConfigDict(extra="forbid", frozen=True, title="lti-audit claims manifest")

    lti_audit_manifest: Literal[1] = Field(default=1, description="Manifest format version; 1.")
    rtol: float | None = Field(default=None, description="Default relative tolerance of "
                               "every claim and of `check --against` comparisons.")
    files: FileSelection = Field(default_factory=FileSelection,
                                 description="Files compared by `lti-audit check --against`.")
    claims: list[Claim] = Field(default_factory=list, alias="claim",
                                description="The claims, written as [[claim]] tables.")
    accept_hidden_instability: list[HiddenInstabilityAcceptance] = Field(
        default_factory=list,
        description="Unstable or marginal hidden / nearly hidden modes a team accepts "
        "knowingly, each with a reason ([[accept_hidden_instability]] tables).")

    @field_validator("rtol")
    @classmethod
    def _rtol(cls, value: float | None) -> float | None:
        return _check_rtol(value)

    @property
    def include_given(self) -> bool:
        """True when ``[files] include`` was written (matched files must then be models)."""
        return "include" in self.files.model_fields_set


@dataclass(frozen=True)
class ManifestFile:
    """A loaded manifest and where it lives.

    Attributes
    ----------
    path : Path
        The manifest file (``None`` for the built-in defaults).
    directory : Path
        Model paths and globs are relative to this directory.
    content : ClaimsManifest
    """

    path: Path | None
    directory: Path
    content: ClaimsManifest

    @property
    def label(self) -> str:
        return str(self.path) if self.path is not None else "(no manifest)"


def _describe_value(value: Any) -> str:
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, Mapping):
        return "a table"
    if isinstance(value, list):
        return "an array"
    return repr(value)


def _where(loc: Sequence[str | int], data: Any) -> str:
    """``claim #2 ("name"), field expect`` or ``files.include[0]``."""
    from audit.documents.schema import format_path

    parts = list(loc)
    if len(parts) >= 2 and parts[0] == "claim" and isinstance(parts[1], int):
        idx = parts[1]
        name = None
        claims = data.get("claim") if isinstance(data, Mapping) else None
        if isinstance(claims, list) and idx < len(claims) and isinstance(claims[idx], Mapping):
            n = claims[idx].get("name")
            name = n if isinstance(n, str) else None
        head = f"claim #{idx + 1}" + (f" ({name!r})" if name else "")
        rest = [p for p in parts[2:] if not (isinstance(p, str) and p.startswith("function-"))]
        # drop pydantic's union branch labels such as 'literal[...]'
        rest = [p for p in rest if not (isinstance(p, str) and "[" in p)]
        return head + (f", field {format_path(rest)}" if rest else "")
    parts = [p for p in parts if not (isinstance(p, str) and "[" in p)]
    return format_path(parts) if parts else "manifest"


def _problem_lines(exc: ValidationError, data: Any) -> list[str]:
    lines: list[str] = []
    for err in exc.errors():
        loc = tuple(err["loc"])
        kind = err["type"]
        ctx = err.get("ctx") or {}
        value = err.get("input")
        if kind == "missing":
            what = "is required but missing"
        elif kind == "extra_forbidden":
            holder: type[BaseModel] = ClaimsManifest
            if len(loc) >= 3 and loc[0] == "claim":
                holder = DiscretizationSpec if "discretization" in loc[2:-1] else Claim
            elif loc and loc[0] == "files":
                holder = FileSelection
            allowed = [f.alias or k for k, f in holder.model_fields.items()]
            import difflib

            close = difflib.get_close_matches(str(loc[-1]), allowed, 1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            what = f"unknown key (expected one of: {', '.join(allowed)}){hint}"
        elif kind == "literal_error":
            what = f"got {_describe_value(value)}, expected {ctx.get('expected')}"
        elif kind in ("string_type", "float_type", "float_parsing", "list_type",
                      "model_type", "model_attributes_type", "dict_type"):
            want = {"string_type": "a text string", "float_type": "a number",
                    "float_parsing": "a number", "list_type": "an array"}.get(kind, "a table")
            what = f"expected {want}, got {_describe_value(value)}"
        elif kind == "too_short":
            what = f"must list at least {ctx.get('min_length', 1)} entry"
        else:
            what = str(err.get("msg", kind))
            for prefix in ("Value error, ", "Assertion failed, "):
                if what.startswith(prefix):
                    what = what[len(prefix):]
        line = f"{_where(loc, data)}: {what}"
        if line not in lines:
            lines.append(line)
    return lines


def parse_claims_manifest(data: Mapping[str, Any], *, source: str) -> ClaimsManifest:
    """Validate parsed TOML data as a claims manifest.

    Parameters
    ----------
    data : Mapping
        The parsed TOML document.
    source : str
        Where it came from; starts every error message.

    Returns
    -------
    ClaimsManifest

    Raises
    ------
    InvalidManifestError
        One line per problem: ``source: claim #2 ("name"), field expect: got 'same',
        expected 'equivalent', 'similar' or 'different'``.
    """
    if not isinstance(data, Mapping):
        raise InvalidManifestError("is not a claims manifest (expected a TOML table)", source=source)
    try:
        return ClaimsManifest.model_validate(dict(data))
    except ValidationError as exc:
        lines = _problem_lines(exc, data)
    first = lines[0].split(":", 1)[0] if lines else None
    raise InvalidManifestError("\n  ".join(lines), field=first, source=source)


def load_claims_manifest(path: str | Path) -> ManifestFile:
    """Read and validate a claims manifest file.

    Parameters
    ----------
    path : str or Path
        The TOML manifest, e.g. ``lti-audit.toml``.

    Returns
    -------
    ManifestFile
        With ``directory`` the manifest's directory.

    Raises
    ------
    InvalidManifestError
        The file is missing, not UTF-8, has a TOML syntax error, or is not a valid
        manifest; the message starts with the path.

    Examples
    --------
    >>> load_claims_manifest("no/such/lti-audit.toml")
    Traceback (most recent call last):
    ...
    audit.workflows.manifest.InvalidManifestError: no/such/lti-audit.toml: manifest not found
    """
    p = Path(path)
    source = str(path)
    if not p.exists():
        raise InvalidManifestError("manifest not found", source=source)
    if p.is_dir():
        raise InvalidManifestError("is a directory, not a manifest file", source=source)
    from audit.documents.loading import read_input_bytes  # regular files only, size-limited

    try:
        text = read_input_bytes(p, source=source, error=InvalidManifestError,
                                what="a manifest file").decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InvalidManifestError(f"is not UTF-8 text (byte {exc.start} cannot be decoded)",
                                   source=source) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InvalidManifestError(f"TOML syntax error: {exc}", source=source) from None
    except (RecursionError, ValueError) as exc:  # deep nesting, a 5000-digit integer
        raise InvalidManifestError("TOML error: " + ("nesting too deep to read" if isinstance(
            exc, RecursionError) else str(exc).split(";")[0]), source=source) from None
    content = parse_claims_manifest(data, source=source)
    return ManifestFile(p, p.resolve().parent, content)


def default_manifest(directory: str | Path) -> ManifestFile:
    """No manifest: no claims, the default file globs, paths relative to ``directory``."""
    return ManifestFile(None, Path(directory).resolve(), ClaimsManifest())


# ------------------------------------------------------------------- results
def _plain(value: Any) -> Any:
    from audit.evidence.record import to_jsonable

    return to_jsonable(value)


@dataclass(frozen=True)
class ClaimResult:
    """The outcome of one claim.

    Attributes
    ----------
    index : int
        1-based position in the manifest.
    name : str
        The claim's name, or ``"claim #i"``.
    kind : {"equivalent", "similar", "different", "form", "discretization"}
    expected : str
        The expectation in words.
    models : tuple of str
        The model paths as written (relative to the manifest).
    status : {"holds", "fails", "inconclusive", "error"}
    explanation : str
        Plain sentences: why the claim holds or not.
    rtol : float
        The tolerance used.
    reason : str
        The claim's free-text reason.
    peak_relative_difference : float or None
        Largest relative peak difference found (transfer comparisons: the decisive
        ``sup_w sigma_max(G1 - G2)`` relative to the larger peak gain; discretizations:
        the claimed method's relative peak difference). ``None`` for form claims.
    peak_frequency_rad_s : float or None
        Where that peak lies (rad/s).
    diagnosis : dict
        The diagnosis of the first pair that does not behave as claimed
        (:attr:`audit.verdict.compare.PairComparison.diagnosis`), else empty.
    warnings : tuple of str
        E.g. unstable hidden modes found while comparing.
    details : tuple of dict
        One JSON-friendly record per pair (or per model for form / discretization).
    seconds : float
    """

    index: int
    name: str
    kind: ClaimKind
    expected: str
    models: tuple[str, ...]
    status: ClaimStatus
    explanation: str
    rtol: float
    reason: str = ""
    peak_relative_difference: float | None = None
    peak_frequency_rad_s: float | None = None
    diagnosis: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    details: tuple[dict[str, Any], ...] = ()
    seconds: float = 0.0

    def as_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary (floats, lists, strings; complex as [re, im])."""
        return {
            "index": self.index,
            "name": self.name,
            "kind": self.kind,
            "expected": self.expected,
            "models": list(self.models),
            "status": self.status,
            "explanation": self.explanation,
            "rtol": float(self.rtol),
            "reason": self.reason,
            "peak_relative_difference": _plain(self.peak_relative_difference),
            "peak_frequency_rad_s": _plain(self.peak_frequency_rad_s),
            "diagnosis": _plain(self.diagnosis),
            "warnings": list(self.warnings),
            "details": [_plain(d) for d in self.details],
            "seconds": round(float(self.seconds), 6),
        }


# ---------------------------------------------------------- pair helpers
def _identical(r1: Any, r2: Any, *, rtol: float = IDENTICAL_RTOL) -> bool:
    from audit.core.realization import same_time_domain

    if not same_time_domain(r1, r2):
        return False
    for x, y in ((r1.a, r2.a), (r1.b, r2.b), (r1.c, r2.c), (r1.d, r2.d)):
        if x.shape != y.shape:
            return False
        if x.size == 0:
            continue
        scale = max(float(np.abs(x).max()), float(np.abs(y).max()))
        if float(np.abs(x - y).max()) > rtol * scale:
            return False
    return True


def _evidence(pair: Any, key: str) -> Any:
    return next((e for e in pair.evidence if e.key == key), None)


def decisive_peak(pair: Any) -> tuple[float | None, float | None]:
    """(relative peak difference, frequency in rad/s) of a pair's decisive evidence."""
    ev = next((e for e in pair.evidence if e.decisive), None)
    if ev is None or ev.value is None:
        return None, None
    freq = ev.details.get("peak_frequency_rad_s")
    return float(ev.value), (None if freq is None else float(freq))


def coordinate_change(r1: Any, r2: Any, pair: Any) -> tuple[CoordinateChange, str, bool]:
    """How two transfer-equivalent realizations relate.

    Parameters
    ----------
    r1, r2 : Realization
        ``A : (n, n)``, ``B : (n, m)``, ``C : (p, n)``, ``D : (p, m)`` each.
    pair : audit.verdict.compare.PairComparison
        Their comparison (its minimal-order and ``similarity`` evidence are read).

    Returns
    -------
    kind : {"identical", "similar", "transfer_only"}
        ``identical``: same matrices within :data:`IDENTICAL_RTOL`; ``similar``: both
        minimal, equal order, and a ``T`` was found; ``transfer_only``: otherwise.
    sentence : str
        Plain words for reports.
    settled : bool
        False when "similar" cannot be decided: a realization is not minimal (the
        similarity of the minimal parts says nothing about the hidden modes), or both
        are minimal of equal order (so a ``T`` exists in exact arithmetic) but none was
        found numerically.

    Raises
    ------
    None
    """
    if _identical(r1, r2):
        return "identical", "the realization is identical (same matrices)", True
    minimal = [e for e in pair.evidence if e.key.startswith("minimal_order:")]
    if any(e.value is None for e in minimal):
        return ("transfer_only", "the minimal order of a realization could not be computed, so "
                "'only state coordinates changed' is not decided; the transfer function is the "
                "same", False)
    orders = [int(round(float(e.value))) for e in minimal if e.value is not None]
    both_minimal = len(orders) == 2 and orders[0] == r1.order and orders[1] == r2.order
    if r1.order != r2.order:
        return ("transfer_only", f"the order changed ({r1.order} -> {r2.order}); the "
                "transfer function is the same", True)
    if not both_minimal:
        which = [lbl for lbl, r, o in zip(("first", "second"), (r1, r2), orders + [0, 0])
                 if o != r.order]
        hidden = [sorted((complex(*h["location"]) for h in e.details.get("hidden_modes", [])),
                         key=lambda z: (z.real, z.imag)) for e in minimal]
        if len(hidden) == 2 and (len(hidden[0]) != len(hidden[1]) or any(
                abs(a - b) > 1e-6 * max(1.0, abs(a)) for a, b in zip(*hidden))):
            # a change of coordinates keeps every eigenvalue, hidden ones included
            from audit.evidence.record import fmt_complex

            def listed(zs: list[complex]) -> str:
                return ", ".join(fmt_complex(z) for z in zs[:4]) or "none"
            return ("transfer_only", f"the {' and '.join(which) or 'models'} realization(s) are "
                    f"not minimal and their hidden modes differ ({listed(hidden[0])} vs "
                    f"{listed(hidden[1])}); the transfer function is the same", True)
        return ("transfer_only", f"the {' and '.join(which) or 'models'} realization(s) are "
                "not minimal and their hidden modes agree, so only the minimal parts could be "
                "related", False)
    sim = _evidence(pair, "similarity")
    if sim is not None and sim.outcome == "info" and bool(sim.details.get("found")):
        cond = sim.details.get("condition_number")
        cond_txt = f"{float(cond):.3g}" if isinstance(cond, (int, float)) else str(cond)
        return ("similar", f"only the state coordinates changed (a transformation T was "
                f"recovered, cond(T) = {cond_txt})", True)
    note = "" if sim is None else f" ({sim.summary})"
    return ("transfer_only", "both realizations are minimal of equal order but no change "
            f"of state coordinates was recovered numerically{note}", False)


# -------------------------------------------------------------- evaluation
class _Models:
    """Loads each model file once per run; remembers load errors."""

    def __init__(self, directory: Path):
        self.directory = directory
        self._cache: dict[str, Any] = {}

    def get(self, rel: str) -> Any:
        if rel not in self._cache:
            from audit.documents.loading import load_realization

            from audit.reports.safe_output import path_inside

            path = self.directory / rel
            try:
                path = path_inside(self.directory, rel, what=rel)  # no link out of it
                r = load_realization(path)
                self._cache[rel] = r.with_name(rel)
            except AuditError as exc:
                self._cache[rel] = _LoadFailure(str(exc).replace(str(path), rel, 1))
        got = self._cache[rel]
        if isinstance(got, _LoadFailure):
            raise InvalidModelError(got.message)
        return got

    def signal_names(self, rel: str) -> dict[str, list[str] | None]:
        """``{"inputs": [...], "outputs": [...]}``: signal names of a model document."""
        from audit.documents.loading import load_model_document

        self.get(rel)  # raises the load error, if any
        try:
            doc = load_model_document(self.directory / rel)
        except AuditError:
            return {"inputs": None, "outputs": None}
        return {k: [s.name for s in getattr(doc, k)] if getattr(doc, k, None) else None
                for k in ("inputs", "outputs")}


@dataclass(frozen=True)
class _LoadFailure:
    message: str


def _claim_name(claim: Claim, index: int) -> str:
    return claim.name or f"claim #{index}"


def evaluate_claim(
    claim: Claim,
    *,
    index: int,
    directory: str | Path,
    default_rtol: float | None = None,
    escalation_seconds: float | None = None,
    acceptances: Sequence[HiddenInstabilityAcceptance] = (),
    _models: _Models | None = None,
) -> ClaimResult:
    """Check one claim.

    Parameters
    ----------
    claim : Claim
    index : int, keyword-only
        1-based position (for names and messages).
    directory : str or Path, keyword-only
        Model paths are relative to it.
    default_rtol : float or None, keyword-only
        Tolerance when the claim has none (see the module docstring).
    escalation_seconds : float or None, keyword-only
        Extended-precision budget per pair (:class:`audit.verdict.compare.Options`); 0 disables
        it, ``None`` keeps the default.
    acceptances : sequence of HiddenInstabilityAcceptance, keyword-only
        The manifest's ``[[accept_hidden_instability]]`` entries.

    Returns
    -------
    ClaimResult
        ``status == "error"`` (with the message) when a model is missing or invalid or
        the models cannot be compared; ``"inconclusive"`` when a computation raised
        :class:`~audit.errors.NumericalTroubleError`.

    Raises
    ------
    None
        Every :class:`~audit.errors.AuditError` becomes a result.
    """
    from audit.evidence.record import DEFAULT_RTOL

    start = time.perf_counter()
    models = _models or _Models(Path(directory))
    name = _claim_name(claim, index)
    kind = claim.kind
    if kind == "form":
        rtol = claim.rtol if claim.rtol is not None else FORM_RTOL
    else:
        rtol = claim.rtol if claim.rtol is not None else (
            default_rtol if default_rtol is not None else DEFAULT_RTOL)
    base = dict(index=index, name=name, kind=kind, expected=claim.describe(),
                models=tuple(claim.models), rtol=float(rtol), reason=claim.reason)
    try:
        if kind == "form":
            fields = _check_form(claim, models, rtol)
        elif kind == "discretization":
            fields = _check_discretization(claim, models, rtol)
        else:
            fields = _check_relation(claim, models, rtol, escalation_seconds, acceptances)
    except (InvalidModelError, IncompatibleModelsError) as exc:
        fields = {"status": "error", "explanation": str(exc)}
    except NumericalTroubleError as exc:
        fields = {"status": "inconclusive",
                  "explanation": f"a computation could not be trusted: {exc}"}
    return ClaimResult(**base, **fields, seconds=time.perf_counter() - start)  # type: ignore[arg-type]


def _stated_tolerances(claim: Claim, models: _Models, reference: Any) -> dict[str, Any]:
    """The claim's atol, band and channel tolerances as Options fields (channel names
    resolved against the first model's document)."""
    from audit.evidence.tolerances import resolve_channel_tolerances

    out: dict[str, Any] = {}
    if claim.atol is not None:
        out["atol"] = float(claim.atol)
    if claim.band_rad_s is not None:
        out["band"] = (float(claim.band_rad_s[0]), float(claim.band_rad_s[1]))
    if claim.channel_rtol:
        names = models.signal_names(claim.models[0])
        out["channel_rtol"] = resolve_channel_tolerances(
            claim.channel_tolerances(), n_outputs=reference.n_outputs, n_inputs=reference.n_inputs,
            output_names=names.get("outputs"), input_names=names.get("inputs"),
            field=f"channel_rtol of {claim.models[0]}")
    return out


def _check_relation(claim: Claim, models: _Models, rtol: float,
                    escalation_seconds: float | None,
                    acceptances: Sequence[HiddenInstabilityAcceptance] = ()) -> dict[str, Any]:
    from audit.core.realization import check_comparable
    from audit.verdict.compare import Options, compare_pair

    rs = [models.get(p) for p in claim.models]
    for r in rs[1:]:
        check_comparable(rs[0], r)
    opts = Options(rtol=rtol, **_stated_tolerances(claim, models, rs[0])) if escalation_seconds is None else Options(
        rtol=rtol, escalate=escalation_seconds > 0, escalation_seconds=escalation_seconds,
        **_stated_tolerances(claim, models, rs[0]))
    expect = claim.expect
    peak: float | None = None
    freq: float | None = None
    details: list[dict[str, Any]] = []
    warnings: list[str] = []
    verdicts: list[str] = []  # per pair: "holds" / "fails" / "inconclusive"
    sentences: list[str] = []
    diagnosis: dict[str, Any] = {}
    for r in rs[1:]:
        pair = compare_pair(rs[0], r, options=opts)
        value, at = decisive_peak(pair)
        if value is not None and (peak is None or value > peak):
            peak, freq = value, at
        warnings.extend(w for w in pair.warnings if w not in warnings)
        record = pair.as_dict()
        if expect == "different":
            outcome = {"different": "holds", "equivalent": "fails"}.get(pair.verdict, "inconclusive")
            sentence = pair.explanation
        elif pair.verdict != "equivalent":
            outcome = "fails" if pair.verdict == "different" else "inconclusive"
            sentence = pair.explanation
            if pair.verdict == "different" and not diagnosis:
                diagnosis = dict(pair.diagnosis)
        elif expect == "similar":
            kind, words, settled = coordinate_change(rs[0], r, pair)
            record["coordinate_change"] = kind
            if kind in ("identical", "similar"):
                outcome = "holds"
                sentence = f"{r.name} equals {rs[0].name} up to a change of state coordinates: {words}."
            else:
                outcome = "fails" if settled else "inconclusive"
                sentence = (f"{r.name} has the same transfer function as {rs[0].name}, but is "
                            f"not a change of state coordinates of it: {words}." if settled else
                            f"{r.name} has the same transfer function as {rs[0].name}; whether it "
                            f"is a change of state coordinates of it is not decided: {words}.")
        else:
            outcome, sentence = "holds", pair.explanation
        if expect in ("equivalent", "similar"):
            problems = internal_stability_problems(rs[0], r, r.name or "", acceptances)
            if problems:
                record["problems"] = problems
                sentence += " " + problem_sentences(problems)
                if outcome == "holds" and any(not p["accepted"] for p in problems):
                    outcome = "fails"
        verdicts.append(outcome)
        sentences.append(sentence)
        details.append(record)
    status = _combine(verdicts)
    return {"status": status, "explanation": _pick(verdicts, sentences, status),
            "peak_relative_difference": peak, "peak_frequency_rad_s": freq,
            "diagnosis": diagnosis, "warnings": tuple(warnings), "details": tuple(details)}


def _combine(outcomes: Sequence[str]) -> ClaimStatus:
    if "fails" in outcomes:
        return "fails"
    if "inconclusive" in outcomes:
        return "inconclusive"
    return "holds"


def _pick(outcomes: Sequence[str], sentences: Sequence[str], status: str) -> str:
    """The sentences of the pairs that decided the status (all of them if they hold)."""
    chosen = [s for o, s in zip(outcomes, sentences) if o == status]
    return " ".join(chosen)


def _check_form(claim: Claim, models: _Models, rtol: float) -> dict[str, Any]:
    from audit.forms.catalogue import check_claimed_form

    assert claim.form is not None
    outcomes, sentences, details = [], [], []
    worst = 0.0
    for path in claim.models:
        r = models.get(path)
        res = check_claimed_form(r, claim.form, rtol=rtol)
        worst = max(worst, float(res.largest_deviation))
        details.append({"model": path, **res.as_dict()})
        if res.holds:
            outcomes.append("holds")
            variant = f" ({res.variant})" if res.variant else ""
            sentences.append(f"{path} is in {claim.form} form{variant} within rtol={rtol:g}.")
        else:
            outcomes.append("fails")
            devs = "; ".join(res.deviations[:3])
            more = "" if len(res.deviations) <= 3 else f"; and {len(res.deviations) - 3} more"
            sentences.append(f"{path} is not in {claim.form} form: {devs}{more}.")
    status = _combine(outcomes)
    return {"status": status, "explanation": _pick(outcomes, sentences, status),
            "details": tuple(details)}


def _check_discretization(claim: Claim, models: _Models, rtol: float) -> dict[str, Any]:
    from audit.dynamics.discretization_checks import check_discretization_claim

    spec = claim.discretization
    assert spec is not None
    cont = models.get(spec.of)
    outcomes, sentences, details = [], [], []
    peak: float | None = None
    freq: float | None = None
    for path in claim.models:
        disc = models.get(path)
        res = check_discretization_claim(cont, disc, method=spec.method,
                                         prewarp_frequency=spec.prewarp_frequency, rtol=rtol)
        details.append({"model": path, **res.as_dict()})
        if peak is None or res.relative_peak_difference > peak:
            peak = float(res.relative_peak_difference)
            freq = float(res.frequency_of_largest_difference)
        outcomes.append("holds" if res.outcome == "holds" else "fails")
        sentences.append(f"{path}: {res.message}.")
    status = _combine(outcomes)
    return {"status": status, "explanation": _pick(outcomes, sentences, status),
            "peak_relative_difference": peak, "peak_frequency_rad_s": freq,
            "details": tuple(details)}


def evaluate_claims(
    manifest: ManifestFile,
    *,
    rtol: float | None = None,
    escalation_seconds: float | None = None,
) -> tuple[ClaimResult, ...]:
    """Check every claim of a manifest (each model file is loaded once).

    Parameters
    ----------
    manifest : ManifestFile
    rtol : float or None, keyword-only
        Default tolerance for claims without their own (overrides the manifest's
        top-level ``rtol``).
    escalation_seconds : float or None, keyword-only
        See :func:`evaluate_claim`.

    Returns
    -------
    tuple of ClaimResult
        In manifest order.

    Raises
    ------
    None
        Problems with individual claims become ``error`` results.
    """
    models = _Models(manifest.directory)
    default = rtol if rtol is not None else manifest.content.rtol
    return tuple(
        evaluate_claim(c, index=i, directory=manifest.directory, default_rtol=default,
                       escalation_seconds=escalation_seconds,
                       acceptances=manifest.content.accept_hidden_instability, _models=models)
        for i, c in enumerate(manifest.content.claims, start=1)
    )


def claims_manifest_schema() -> dict[str, Any]:
    """JSON Schema of :class:`ClaimsManifest` (for ``schemas/claims-manifest.schema.json``).

    The manifest is TOML; the schema describes the parsed TOML data (TOML tables are
    JSON objects), so editors with TOML schema support can use it.
    """
    return {"$schema": "https://json-schema.org/draft/2020-12/schema",
            **ClaimsManifest.model_json_schema(by_alias=True)}


if typing.TYPE_CHECKING:  # pragma: no cover
    from audit.core.realization import Realization  # noqa: F401
