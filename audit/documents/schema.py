"""Model documents: the typed, validated form of a user's model file.

A model document *describes* one LTI model; it computes nothing. It is turned into a
:class:`audit.core.realization.Realization` by :func:`audit.documents.loading.realization_from_document`.

No numerical method is implemented here. The document is JSON data (T. Bray, "The
JavaScript Object Notation (JSON) Data Interchange Format", RFC 8259, 2017) and its
published schema follows JSON Schema draft 2020-12 (A. Wright, H. Andrews, B. Hutton,
G. Dennis, "JSON Schema: A Media Type for Describing JSON Documents", 2020).

Layout (see ``DESIGN.md``, "The model document")::

    {
      "lti_model": 1,
      "name": "conveyor drive, speed loop",
      "sample_period": null,           # required: null = continuous, seconds > 0 = discrete
      "state_space": {"a": [[...]], "b": [[...]], "c": [[...]], "d": [[...]]},
      # or "transfer_function": {"numerator": [[[...]]], "denominator": [[[...]]]}
      # or "zeros_poles_gain": {"zeros": [[[[re, im], ...]]], "poles": ..., "gain": [[...]]}
      "inputs": [{"name": "motor_voltage", "unit": "V"}],     # optional
      "outputs": [...], "states": [...],                      # optional
      "claimed_form": null,                                   # optional
      "provenance": {"source": "...", "notes": "..."}         # optional
    }

Conventions fixed here:

* Matrices are lists of rows. ``B`` is states x inputs, ``C`` outputs x states, ``D``
  outputs x inputs. ``D`` must have at least one row and one column: its shape fixes the
  number of inputs and outputs.
* **Order 0** (a pure gain) is written with an empty ``a``; ``b`` and ``c`` must then be
  empty too. Every natural spelling of an empty matrix is accepted: ``[]``, ``[[]]``, or
  a list of empty rows such as ``[[], []]``. In particular what
  :meth:`numpy.ndarray.tolist` writes for shapes (0, 0), (0, m) and (p, 0) -- ``[]``,
  ``[]`` and ``[[], ..., []]`` -- is accepted, and is what the writer produces.
* Transfer functions are indexed ``[output][input]``; coefficients are in descending
  powers of s (or z). Leading zeros of a numerator are allowed (``[0, 0, 1]``); the
  leading coefficient of a denominator must be non-zero. Only proper models are accepted.
* Zeros and poles are lists of ``[re, im]`` pairs, one list per ``[output][input]``
  channel; non-real values must come in complex-conjugate pairs (within
  :data:`CONJUGATE_RTOL`). ``gain`` is an outputs x inputs matrix of reals.
* Numbers must be JSON numbers: strings, booleans, NaN and infinities are rejected.
  (Python's :mod:`json` module accepts the non-standard ``NaN``/``Infinity`` tokens; they
  are rejected here, with the field path.)
* Size limit: :data:`MAX_ORDER` states (for a transfer function, the sum of the denominator
  degrees; for zeros-poles-gain, the number of poles).

Validation reports one line per problem, ``field.path[i][j]: what is wrong (what was
expected)``, most relevant problem first; :func:`validate_model_document` turns them into
one :class:`~audit.errors.InvalidModelError`.
"""

from __future__ import annotations

import difflib
import json
import math
import typing
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Annotated, Any, Literal

import numpy as np
from pydantic import (
    BaseModel,
    AfterValidator,
    BeforeValidator,
    ConfigDict,
    Field,
    ModelWrapValidatorHandler,
    StrictStr,
    ValidationError,
    field_validator,
    model_validator,
)

from audit.errors import InvalidModelError
from audit.documents.sparse import SparseStateSpace

__all__ = [
    "CLAIMED_FORMS",
    "CONJUGATE_RTOL",
    "MAX_MAGNITUDE",
    "MAX_NAME_LENGTH",
    "MAX_NOTE_LENGTH",
    "MAX_ORDER",
    "MAX_UNIT_LENGTH",
    "MIN_MAGNITUDE",
    "MIN_SAMPLE_PERIOD",
    "REPRESENTATIONS",
    "ClaimedForm",
    "DocumentProblem",
    "ModelDocument",
    "Provenance",
    "Signal",
    "StateSpace",
    "TransferFunction",
    "ZerosPolesGain",
    "format_path",
    "problems_from_validation_error",
    "validate_model_document",
]

#: Largest accepted model: number of states (state space), sum of denominator degrees
#: (transfer function) or number of poles (zeros-poles-gain). Dense O(n^3) evidence on
#: larger models takes minutes and their JSON is hundreds of megabytes.
MAX_ORDER = 2000

#: Two written zeros/poles z1, z2 are complex-conjugate partners when
#: ``|z1 - conj(z2)| <= CONJUGATE_RTOL * max(|z1|, |z2|)``; a value is real when
#: ``|im| <= CONJUGATE_RTOL * |z|``. Common practice, no source: values written with the
#: same decimal digits agree exactly; 1e-9 tolerates a last-digit rounding difference.
CONJUGATE_RTOL = 1e-9

#: Text limits (characters). Names, units and notes are plain text: every front end and
#: both databases (SQLite, PostgreSQL) accept what the schema accepts. NUL characters and
#: unpaired UTF-16 surrogates (which no UTF-8 store can hold) are refused everywhere.
MAX_NAME_LENGTH = 200
MAX_UNIT_LENGTH = 50
MAX_NOTE_LENGTH = 10_000

#: Magnitude range of non-zero state-space entries and zeros/poles/gains: the evidence
#: multiplies two entries (Gramians, norms, similarity checks), and products of two
#: values in [1e-150, 1e150] stay inside the double range (about 1e-308 to 1e308).
#: Common practice, no source; values beyond it are refused with this reason (rescale
#: the units of the states, inputs or outputs).
MIN_MAGNITUDE = 1e-150
MAX_MAGNITUDE = 1e150
#: Sample periods below this (seconds) are refused: no sampled-data system runs faster
#: than a picosecond, and pi/T, log(z)/T overflow for periods near the double limit.
MIN_SAMPLE_PERIOD = 1e-12
#: Subnormal doubles (non-zero, below 2.2250738585072014e-308) have lost precision; they
#: are refused in every representation (write 0, or rescale).
SMALLEST_NORMAL = float(np.finfo(float).tiny)

#: At most this many problems are listed in one error message; the rest are counted.
MAX_LISTED_PROBLEMS = 20

REPRESENTATIONS: tuple[str, ...] = ("state_space", "transfer_function", "zeros_poles_gain",
                                   "sparse_state_space")

ClaimedForm = Literal[
    "controllable_companion",
    "observable_companion",
    "modal",
    "jordan",
    "balanced",
    "kalman",
    "staircase",
]
CLAIMED_FORMS: tuple[str, ...] = typing.get_args(ClaimedForm)

Loc = tuple[str | int, ...]


# --------------------------------------------------------------------------- problems
@dataclass(frozen=True)
class DocumentProblem:
    """One problem found in a model document.

    Attributes
    ----------
    loc : tuple of str and int
        Field path, e.g. ``("state_space", "c")`` or ``("transfer_function", 1, 0)``.
    message : str
        What is wrong and what was expected (no field path).
    rank : int
        Relevance, lower first: 0 document level (not a model, representation count),
        1 structure (missing/unknown keys, wrong container types), 2 values (NaN,
        strings for numbers), 3 consistency (shapes, degrees, counts).
    """

    loc: Loc
    message: str
    rank: int = 3

    @property
    def path(self) -> str:
        """The field path as written in messages (``state_space.a[1][2]``)."""
        return format_path(self.loc)

    def line(self) -> str:
        """``path: message`` (or just the message for a document-level problem)."""
        return f"{self.path}: {self.message}" if self.loc else self.message

    def as_dict(self) -> dict[str, Any]:
        return {"path": self.path, "message": self.message, "rank": self.rank}


class _Problems(ValueError):
    """Carrier of located problems through pydantic (internal)."""

    def __init__(self, problems: Sequence[DocumentProblem]):
        super().__init__("; ".join(p.line() for p in problems))
        self.problems = list(problems)


def _fail(loc: Loc, message: str, rank: int = 3) -> _Problems:
    return _Problems([DocumentProblem(loc, message, rank)])


def format_path(loc: Sequence[str | int]) -> str:
    """Render a field path: keys dotted, list indices in brackets.

    >>> format_path(("state_space", "a", 1, 2))
    'state_space.a[1][2]'
    >>> format_path(("transfer_function", 1, 0))
    'transfer_function[1][0]'
    """
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out


def _describe(value: Any) -> str:
    """A short, JSON-flavoured description of a value for messages."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "NaN"
        if math.isinf(value):
            return "Infinity" if value > 0 else "-Infinity"
        return repr(value)
    if isinstance(value, int):
        text = str(value)
        return text if len(text) <= 40 else f"a {len(text)}-digit integer"
    if isinstance(value, str):
        text = value if len(value) <= 40 else value[:37] + "..."
        return f"the string {json.dumps(text)}"
    if isinstance(value, Mapping):
        return "an object"
    if isinstance(value, (list, tuple)):
        return "an empty list" if not value else f"a list of {len(value)} item(s)"
    return f"a value of type {type(value).__name__}"


def _plural(k: int, noun: str) -> str:
    return f"{k} {noun}" if k == 1 else f"{k} {noun}s"


# ------------------------------------------------------------- structural pre-checks
def _matrix_structure(value: Any) -> Any:
    """Before-validator for matrices: a list of rows, all rows lists of equal length."""
    if not isinstance(value, list):
        return value  # pydantic reports "expected a list"
    for i, row in enumerate(value):
        if not isinstance(row, list):
            raise _fail(
                (),
                f"expected a matrix written as a list of rows, e.g. [[1.0, 2.0]]; "
                f"row {i} is {_describe(row)}, not a list",
                1,
            )
    lengths = [len(row) for row in value]
    if lengths and min(lengths) != max(lengths):
        first = lengths[0]
        bad = next(i for i, k in enumerate(lengths) if k != first)
        raise _fail(
            (),
            f"ragged rows: row 0 has {first} {'entry' if first == 1 else 'entries'} "
            f"but row {bad} has {lengths[bad]} (every row of a matrix must have the same "
            "length)",
            1,
        )
    return value


def _channel_table_structure(value: Any) -> Any:
    """Before-validator for [output][input] tables: a non-empty list of equal-length rows."""
    if not isinstance(value, list):
        return value
    if not value:
        raise _fail(
            (),
            "is empty; expected one row per output, each with one entry per input, "
            "indexed [output][input]",
            1,
        )
    for i, row in enumerate(value):
        if not isinstance(row, list):
            raise _fail(
                (),
                f"expected a table indexed [output][input]; row {i} is {_describe(row)}, "
                "not a list",
                1,
            )
    lengths = [len(row) for row in value]
    if min(lengths) == 0:
        raise _fail((min(range(len(value)), key=lambda i: lengths[i]),),
                    "is empty; each output row needs one entry per input", 1)
    if min(lengths) != max(lengths):
        bad = next(i for i, k in enumerate(lengths) if k != lengths[0])
        raise _fail(
            (),
            f"ragged rows: row 0 has {lengths[0]} input entries but row {bad} has "
            f"{lengths[bad]} (every output row must have one entry per input)",
            1,
        )
    return value


def _plain_text(value: str) -> str:
    """After-validator of every text field: no NUL, no unpaired surrogate."""
    if "\x00" in value:
        raise _fail((), "contains a NUL character (\\u0000), which text fields cannot hold", 2)
    try:
        value.encode("utf-8")
    except UnicodeEncodeError:
        raise _fail((), "contains an unpaired UTF-16 surrogate (\\ud800-\\udfff), which is "
                        "not text", 2) from None
    return value


def _text(max_length: int, *, min_length: int = 0) -> Any:
    return Annotated[StrictStr, Field(min_length=min_length, max_length=max_length),
                     AfterValidator(_plain_text)]


NameText = _text(MAX_NAME_LENGTH, min_length=1)
UnitText = _text(MAX_UNIT_LENGTH)
NoteText = _text(MAX_NOTE_LENGTH)


# Strict: no str -> float coercion, no bool; allow_inf_nan=False rejects NaN/inf.
Number = Annotated[float, Field(strict=True, allow_inf_nan=False)]
Matrix = Annotated[list[list[Number]], BeforeValidator(_matrix_structure)]
ComplexPair = Annotated[
    list[Number],
    Field(min_length=2, max_length=2, description="A complex number as [re, im]."),
]
CoefficientTable = Annotated[list[list[list[Number]]], BeforeValidator(_channel_table_structure)]
ComplexTable = Annotated[list[list[list[ComplexPair]]], BeforeValidator(_channel_table_structure)]


def _magnitude_problem(loc: Loc, values: Any, *, bounded: bool) -> DocumentProblem | None:
    """The first value of a nested list outside the accepted magnitudes, or None.

    Subnormal non-zero values are always refused; with ``bounded`` also non-zero values
    outside [:data:`MIN_MAGNITUDE`, :data:`MAX_MAGNITUDE`].
    """
    arr = np.asarray(values, dtype=float)
    if arr.size == 0:
        return None
    mag = np.abs(arr)
    low = MIN_MAGNITUDE if bounded else SMALLEST_NORMAL
    bad = (mag != 0.0) & ((mag < low) | (mag > (MAX_MAGNITUDE if bounded else np.inf)))
    if not bad.any():
        return None
    index = tuple(int(k) for k in np.unravel_index(int(np.argmax(bad)), arr.shape))
    value = float(arr[index])
    if abs(value) < SMALLEST_NORMAL:
        why = ("is a subnormal number (below 2.2e-308, where doubles lose precision); write "
               "0 or rescale the model")
    elif abs(value) < MIN_MAGNITUDE:
        why = (f"is below {MIN_MAGNITUDE:g} in magnitude (accepted: 0 or {MIN_MAGNITUDE:g} to "
               f"{MAX_MAGNITUDE:g}, so that products of two entries stay within double "
               "range); write 0 or rescale the model's units")
    else:
        why = (f"is above {MAX_MAGNITUDE:g} in magnitude (accepted: 0 or {MIN_MAGNITUDE:g} to "
               f"{MAX_MAGNITUDE:g}, so that products of two entries stay within double "
               "range); rescale the model's units")
    return DocumentProblem(loc + index, f"{value!r} {why}", 2)


def _shape(m: Sequence[Sequence[Any]]) -> tuple[int, int]:
    rows = len(m)
    return rows, (len(m[0]) if rows else 0)


def _is_empty(m: Sequence[Sequence[Any]]) -> bool:
    r, c = _shape(m)
    return r == 0 or c == 0


_BASE_CONFIG = ConfigDict(extra="forbid", frozen=True)


def _config(description: str, **extra: Any) -> ConfigDict:
    # Unknown keys are rejected; the schema gets a short description instead of the
    # numpydoc class docstring.
    return ConfigDict(
        extra="forbid", frozen=True, json_schema_extra={"description": description}, **extra
    )


# ------------------------------------------------------------------------- sub-models
class Signal(BaseModel):
    """A named input, output or state, with an optional unit."""

    model_config = _BASE_CONFIG

    name: NameText = Field(description="Signal name, e.g. 'belt_speed'.")
    unit: UnitText | None = Field(default=None, description="Unit, e.g. 'm/s'.")


class Provenance(BaseModel):
    """Where the model came from (free text)."""

    model_config = _BASE_CONFIG

    source: NoteText | None = Field(default=None, description="Origin of the model.")
    notes: NoteText | None = Field(default=None, description="Free-text notes.")


class Certificate(BaseModel):
    """Audit of a produced realization against its source (written by ``lti-audit convert``).

    Records the evidence that the new matrices describe the same system as the source
    document, so that a reader of the converted file can see how far to trust it.
    """

    model_config = _BASE_CONFIG

    source: NoteText = Field(description="Path of the source model document as given.")
    source_sha256: NameText = Field(description="SHA-256 of the source file's bytes.")
    conversion: NameText = Field(description="Form produced, e.g. 'modal'.")
    verdict: Literal["equivalent", "different", "inconclusive"] = Field(
        description="Verdict of the audit of the new realization against the source.")
    relative_error: float | None = Field(
        description="Relative peak gain of (source - new) over all frequencies.")
    tolerance: float = Field(description="Relative tolerance of that audit.")
    transform_condition: float | None = Field(
        description="Condition number of the state transformation (null for forms "
        "reached by reduction).")
    largest_eigenvalue_condition: float | None = Field(
        default=None, description="Largest eigenvalue condition number of the new A.")
    warnings: list[NoteText] = Field(default_factory=list,
                                      description="Numerical warnings of the conversion.")
    lti_audit_version: NameText = Field(description="Version of lti-audit that wrote it.")


class StateSpace(BaseModel):
    """State-space matrices ``x' = A x + B u``, ``y = C x + D u`` (or ``x[k+1] = ...``).

    Parameters
    ----------
    a : (n, n) list of rows
    b : (n, m) list of rows
    c : (p, n) list of rows
    d : (p, m) list of rows, p >= 1 and m >= 1
        For order 0 (n = 0) write ``a``, ``b`` and ``c`` as empty matrices (see the
        module docstring); ``d`` then fixes the input and output counts.

    Raises
    ------
    pydantic.ValidationError
        Carrying located problems; use :func:`validate_model_document` to get an
        :class:`~audit.errors.InvalidModelError` instead.
    """

    model_config = _config(
        "State-space matrices x' = A x + B u, y = C x + D u (lists of rows). Order 0: a, "
        "b and c empty ([]); d (outputs x inputs, never empty) fixes the input and "
        "output counts."
    )

    a: Matrix = Field(description="A: states x states, list of rows ([] for order 0).")
    b: Matrix = Field(description="B: states x inputs, list of rows ([] for order 0).")
    c: Matrix = Field(description="C: outputs x states, list of rows ([] for order 0).")
    d: Matrix = Field(description="D: outputs x inputs, list of rows (never empty).")

    @model_validator(mode="before")
    @classmethod
    def _size_limit(cls, data: Any) -> Any:
        # Checked before the entries are validated, so an oversize model is rejected fast.
        if isinstance(data, Mapping):
            a = data.get("a")
            if isinstance(a, list) and len(a) > MAX_ORDER:
                raise _fail(
                    ("a",),
                    f"has {len(a)} rows (states), above the limit MAX_ORDER = {MAX_ORDER} "
                    "states",
                    0,
                )
        return data

    @model_validator(mode="after")
    def _shapes(self) -> "StateSpace":
        problems: list[DocumentProblem] = []
        ra, ca = _shape(self.a)
        n: int | None
        if _is_empty(self.a):
            n = 0
        elif ra != ca:
            problems.append(DocumentProblem(
                ("a",), f"is {ra}x{ca} but must be square (states x states)"))
            n = None
        else:
            n = ra
        p: int | None
        m: int | None
        rd, cd = _shape(self.d)
        if _is_empty(self.d):
            problems.append(DocumentProblem(
                ("d",),
                "is empty but must be outputs x inputs with at least one output and one "
                "input (write [[0.0]] for one input, one output and no feedthrough)"))
            p = m = None
        else:
            p, m = rd, cd
        if n == 0:
            for key in ("b", "c"):
                mat = getattr(self, key)
                if not _is_empty(mat):
                    r, c = _shape(mat)
                    problems.append(DocumentProblem(
                        (key,),
                        f"is {r}x{c} but A is empty (order 0, a pure gain); write [] for "
                        f"{key.upper()}"))
        elif n is not None:
            rb, cb = _shape(self.b)
            if rb != n:
                problems.append(DocumentProblem(
                    ("b",),
                    f"has {_plural(rb, 'row')} but A is {n}x{n} (B must be states x inputs)"))
            elif m is not None and cb != m:
                problems.append(DocumentProblem(
                    ("b",),
                    f"has {_plural(cb, 'column')} but D has {_plural(m, 'column')} "
                    "(B must be states x inputs, D outputs x inputs)"))
            rc, cc = _shape(self.c)
            if cc != n or rc == 0:
                problems.append(DocumentProblem(
                    ("c",),
                    f"has {_plural(cc, 'column')} but A is {n}x{n} "
                    "(C must be outputs x states)"))
            elif p is not None and rc != p:
                problems.append(DocumentProblem(
                    ("c",),
                    f"has {_plural(rc, 'row')} but D has {_plural(p, 'row')} "
                    "(C must be outputs x states, D outputs x inputs)"))
        if not problems:
            for key in ("a", "b", "c", "d"):
                mat = getattr(self, key)
                found = None if _is_empty(mat) else _magnitude_problem((key,), mat, bounded=True)
                if found is not None:
                    problems.append(found)
        if problems:
            raise _Problems(problems)
        return self

    @property
    def order(self) -> int:
        """Number of states n (0 for a pure gain)."""
        return 0 if _is_empty(self.a) else len(self.a)


def _numerator_degree(coefficients: Sequence[float]) -> int:
    """Degree after dropping leading zeros written in the document (0 for all zeros).

    Exact comparison with 0 is deliberate: it tests what was *written* ("0" or "0.0"),
    not the result of a computation.
    """
    for k, value in enumerate(coefficients):
        if value != 0.0:
            return len(coefficients) - 1 - k
    return 0


def _rounding_level_excess(num: Sequence[float], den: Sequence[float]) -> bool:
    """True when the numerator's coefficients beyond the denominator degree are rounding
    residue (a state-space-to-transfer-function conversion of a model without
    feedthrough leaves them near 1e-16 relative): such a channel is audited, with a
    warning and the residue's effect bounded (see
    :func:`audit.core.stored_evaluation.is_rounding_improper`)."""
    from audit.core.stored_evaluation import is_rounding_improper

    return is_rounding_improper(np.asarray(num, dtype=float), np.asarray(den, dtype=float))


def _table_shape_problems(
    tables: Sequence[tuple[str, Sequence[Sequence[Any]]]],
) -> list[DocumentProblem]:
    """All [output][input] tables must have the shape of the first one."""
    (ref_key, ref), *rest = tables
    ref_shape = _shape(ref)
    problems = []
    for key, tab in rest:
        shape = _shape(tab)
        if shape != ref_shape:
            problems.append(DocumentProblem(
                (key,),
                f"is {shape[0]}x{shape[1]} (outputs x inputs) but {ref_key} is "
                f"{ref_shape[0]}x{ref_shape[1]}; both are indexed [output][input]"))
    return problems


class TransferFunction(BaseModel):
    """Transfer-function matrix, one numerator/denominator pair per channel.

    Parameters
    ----------
    numerator : (p, m) table of coefficient lists
        ``numerator[i][j]`` holds the coefficients of channel output i / input j in
        descending powers of s (or z). Leading zeros are allowed.
    denominator : (p, m) table of coefficient lists
        Same indexing; the leading coefficient must be non-zero.

    Raises
    ------
    pydantic.ValidationError
        Carrying located problems (empty or improper channels, zero leading denominator
        coefficient, shape mismatch, size above :data:`MAX_ORDER`).
    """

    model_config = _config(
        "Transfer-function matrix indexed [output][input]; coefficients in descending "
        "powers of s (or z). Proper models only; the leading denominator coefficient "
        "must be non-zero."
    )

    numerator: CoefficientTable = Field(
        description="[output][input] -> coefficients, descending powers of s (or z).")
    denominator: CoefficientTable = Field(
        description="[output][input] -> coefficients, descending powers; leading one non-zero.")

    @model_validator(mode="after")
    def _channels(self) -> "TransferFunction":
        problems = _table_shape_problems(
            [("numerator", self.numerator), ("denominator", self.denominator)])
        if problems:
            raise _Problems(problems)
        total_degree = 0
        for i, (num_row, den_row) in enumerate(zip(self.numerator, self.denominator)):
            for j, (num, den) in enumerate(zip(num_row, den_row)):
                if not num:
                    problems.append(DocumentProblem(
                        ("numerator", i, j),
                        "is empty (write [0.0] for a channel with no transmission)"))
                if not den:
                    problems.append(DocumentProblem(
                        ("denominator", i, j),
                        "is empty (a denominator needs at least one non-zero coefficient)"))
                    continue
                if all(v == 0.0 for v in den):
                    problems.append(DocumentProblem(
                        ("denominator", i, j),
                        "all coefficients are 0 (the denominator must not be the zero "
                        "polynomial)"))
                    continue
                if den[0] == 0.0:  # a written zero, see _numerator_degree
                    problems.append(DocumentProblem(
                        ("denominator", i, j),
                        "leading coefficient is 0 (the highest power must have a non-zero "
                        "coefficient)"))
                    continue
                for key, coefficients in (("numerator", num), ("denominator", den)):
                    found = _magnitude_problem((key, i, j), coefficients, bounded=False)
                    if found is not None:
                        problems.append(found)
                den_degree = len(den) - 1
                total_degree += den_degree
                if num:
                    num_degree = _numerator_degree(num)
                    if num_degree > den_degree and not _rounding_level_excess(num, den):
                        problems.append(DocumentProblem(
                            (i, j),
                            f"improper (numerator degree {num_degree} > denominator degree "
                            f"{den_degree}); lti-audit handles proper models only"))
        if total_degree > MAX_ORDER:
            problems.append(DocumentProblem(
                ("denominator",),
                f"degrees sum to {total_degree}, above the limit MAX_ORDER = {MAX_ORDER} "
                "states", 0))
        if problems:
            raise _Problems(problems)
        return self


def _unpaired_index(values: Sequence[Sequence[float]], rtol: float) -> int | None:
    """Index of the first non-real value without a complex-conjugate partner, or None."""
    z = np.array([complex(re, im) for re, im in values], dtype=complex)
    if z.size == 0:
        return None
    mag = np.abs(z)
    nonreal = np.abs(z.imag) > rtol * mag
    used = np.zeros(z.size, dtype=bool)
    for k in np.flatnonzero(nonreal):
        if used[k]:
            continue
        dist = np.abs(z - np.conj(z[k]))
        ok = nonreal & ~used & (dist <= rtol * np.maximum(mag, mag[k]))
        ok[k] = False
        if not ok.any():
            return int(k)
        partner = int(np.flatnonzero(ok)[np.argmin(dist[ok])])
        used[k] = used[partner] = True
    return None


class ZerosPolesGain(BaseModel):
    """Zeros, poles and gain of each channel.

    Parameters
    ----------
    zeros : (p, m) table of lists of [re, im] pairs
    poles : (p, m) table of lists of [re, im] pairs
    gain : (p, m) matrix of reals
        Channel (i, j) is ``gain[i][j] * prod(s - zeros) / prod(s - poles)``.

    Raises
    ------
    pydantic.ValidationError
        Carrying located problems (shape mismatch, unpaired complex values, more zeros
        than poles, size above :data:`MAX_ORDER`).
    """

    model_config = _config(
        "Zeros and poles per [output][input] channel as [re, im] pairs (complex values "
        "in conjugate pairs); gain an outputs x inputs matrix. Proper models only."
    )

    zeros: ComplexTable = Field(description="[output][input] -> list of [re, im] zeros.")
    poles: ComplexTable = Field(description="[output][input] -> list of [re, im] poles.")
    gain: Matrix = Field(description="[output][input] -> real gain.")

    @model_validator(mode="after")
    def _channels(self) -> "ZerosPolesGain":
        problems = _table_shape_problems(
            [("zeros", self.zeros), ("poles", self.poles), ("gain", self.gain)])
        if problems:
            raise _Problems(problems)
        total_poles = 0
        for i, (zrow, prow, grow) in enumerate(zip(self.zeros, self.poles, self.gain)):
            for j, (zs, ps, g) in enumerate(zip(zrow, prow, grow)):
                total_poles += len(ps)
                for key, values in (("zeros", zs), ("poles", ps)):
                    k = _unpaired_index(values, CONJUGATE_RTOL)
                    if k is not None:
                        re, im = values[k]
                        problems.append(DocumentProblem(
                            (key, i, j, k),
                            f"[{re!r}, {im!r}] has no complex-conjugate partner "
                            f"[{re!r}, {-im!r}] (a real system's complex {key} come in "
                            "conjugate pairs)"))
                for key, values in (("zeros", zs), ("poles", ps)):
                    found = _magnitude_problem((key, i, j), values, bounded=True)
                    if found is not None:
                        problems.append(found)
                found = _magnitude_problem(("gain", i), [g], bounded=True)
                if found is not None:
                    problems.append(DocumentProblem(("gain", i, j), found.message, 2))
                if g != 0.0 and len(zs) > len(ps):  # a written zero gain: no transmission
                    problems.append(DocumentProblem(
                        (i, j),
                        f"improper ({len(zs)} zeros > {len(ps)} poles); lti-audit handles "
                        "proper models only"))
        if total_poles > MAX_ORDER:
            problems.append(DocumentProblem(
                ("poles",),
                f"{total_poles} poles in all, above the limit MAX_ORDER = {MAX_ORDER} "
                "states", 0))
        if problems:
            raise _Problems(problems)
        return self


# --------------------------------------------------------------------- the document
def _model_document_schema_extra(schema: dict[str, Any]) -> None:
    schema["description"] = (
        "One linear time-invariant model (lti-audit model document, version 1). Exactly "
        "one of state_space, transfer_function, zeros_poles_gain is given. "
        "sample_period: null for continuous time, seconds > 0 for discrete time."
    )
    # JSON Schema for "exactly one representation is given (and not null)".
    schema["oneOf"] = [
        {"required": [key], "properties": {key: {"type": "object"}}}
        for key in REPRESENTATIONS
    ]


class ModelDocument(BaseModel):
    """An lti-audit model document (version 1); see the module docstring for the layout.

    Build one with :func:`validate_model_document` (or
    :func:`audit.documents.loading.load_model_document` from a file) to get an
    :class:`~audit.errors.InvalidModelError` with readable messages on bad input.

    Raises
    ------
    pydantic.ValidationError
        When constructed directly from bad data; its single error carries the located
        problems (see :func:`problems_from_validation_error`).

    Examples
    --------
    >>> doc = validate_model_document({
    ...     "lti_model": 1, "name": "heated-enclosure zone", "sample_period": None,
    ...     "state_space": {"a": [[-0.1]], "b": [[0.5]], "c": [[1.0]], "d": [[0.0]]}})
    >>> doc.representation, doc.n_inputs, doc.n_outputs, doc.is_discrete
    ('state_space', 1, 1, False)
    """

    model_config = ConfigDict(
        extra="forbid", frozen=True, title="lti-audit model document",
        json_schema_extra=_model_document_schema_extra,
    )

    lti_model: Literal[1] = Field(description="Document format version; must be 1.")
    name: NameText = Field(description="Human-readable model name (plain text, at most "
                                        f"{MAX_NAME_LENGTH} characters).")
    sample_period: Annotated[float, Field(gt=0, strict=True, allow_inf_nan=False)] | None = (
        Field(description="null for continuous time; the sample period in seconds (> 0) "
                          "for discrete time. Required.")
    )
    state_space: StateSpace | None = Field(default=None, description="State-space matrices.")
    transfer_function: TransferFunction | None = Field(
        default=None, description="Transfer-function matrix.")
    zeros_poles_gain: ZerosPolesGain | None = Field(
        default=None, description="Zeros, poles and gain per channel.")
    sparse_state_space: SparseStateSpace | None = Field(
        default=None, description="State-space matrices in coordinate-triplet form "
        "(large sparse models; see audit.documents.sparse).")
    inputs: list[Signal] | None = Field(default=None, description="One entry per input.")
    outputs: list[Signal] | None = Field(default=None, description="One entry per output.")
    states: list[Signal] | None = Field(
        default=None, description="One entry per state (state_space only).")
    claimed_form: ClaimedForm | None = Field(
        default=None, description="Structural form the state-space matrices claim to have.")
    provenance: Provenance | None = Field(default=None, description="Origin, free text.")
    certificate: Certificate | None = Field(
        default=None, description="Audit of these matrices against the model they were "
        "converted from (written by lti-audit convert).")

    # ----------------------------------------------------------- field validators
    @field_validator("lti_model", mode="before")
    @classmethod
    def _version(cls, value: Any) -> Any:
        if isinstance(value, bool) or not isinstance(value, int) or value != 1:
            raise _fail((), f"must be 1 (the document version this lti-audit reads), got "
                            f"{_describe(value)}", 0)
        return value

    @field_validator("sample_period", mode="before")
    @classmethod
    def _period(cls, value: Any) -> Any:
        if value is None:
            return value
        seconds = math.nan
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            try:
                seconds = float(value)
            except OverflowError:  # an integer beyond the double range
                seconds = math.inf
        if not (math.isfinite(seconds) and seconds > 0):
            raise _fail((), "must be a number of seconds > 0, or null for continuous time "
                            f"(got {_describe(value)})", 2)
        if seconds < MIN_SAMPLE_PERIOD:
            raise _fail((), f"{seconds!r} s is below the smallest accepted sample period "
                            f"{MIN_SAMPLE_PERIOD:g} s (a picosecond); write the model in a "
                            "slower time unit", 2)
        return seconds

    # ------------------------------------------------------------ whole document
    @model_validator(mode="wrap")
    @classmethod
    def _whole(cls, data: Any, handler: ModelWrapValidatorHandler["ModelDocument"]) -> Any:
        if isinstance(data, ModelDocument):
            return handler(data)
        if not isinstance(data, Mapping):
            raise _fail((), "is not an lti-audit model document (expected a mapping with an "
                            f"'lti_model' key, got {_describe(data)})", 0)
        if "lti_model" not in data:
            raise _fail((), "is not an lti-audit model document (no 'lti_model' key)", 0)
        problems: list[DocumentProblem] = []
        given = [key for key in REPRESENTATIONS if data.get(key) is not None]
        if not given:
            hint = ""
            unknown = [str(k) for k in data if k not in cls.model_fields]
            close = [k for k in unknown if difflib.get_close_matches(k, REPRESENTATIONS, 1)]
            if close:
                hint = f" (unknown key {close[0]!r} looks like a misspelling)"
            problems.append(DocumentProblem(
                (), "no model given: expected exactly one of 'state_space', "
                    f"'transfer_function' or 'zeros_poles_gain'{hint}", 0))
        elif len(given) > 1:
            problems.append(DocumentProblem(
                (), f"{len(given)} representations given ({', '.join(given)}); a document "
                    "holds exactly one of 'state_space', 'transfer_function' or "
                    "'zeros_poles_gain'", 0))
        try:
            doc = handler(data)
        except ValidationError as exc:
            raise _Problems(problems + problems_from_validation_error(exc)) from None
        if problems:
            raise _Problems(problems)
        problems = doc._cross_field_problems()
        if problems:
            raise _Problems(problems)
        return doc

    def _cross_field_problems(self) -> list[DocumentProblem]:
        problems: list[DocumentProblem] = []
        counts: list[tuple[str, list[Signal] | None, int, str]] = [
            ("inputs", self.inputs, self.n_inputs, "input"),
            ("outputs", self.outputs, self.n_outputs, "output"),
        ]
        if self.state_space is not None:
            counts.append(("states", self.states, self.state_space.order, "state"))
        elif self.sparse_state_space is not None:
            counts.append(("states", self.states, self.sparse_state_space.order, "state"))
        elif self.states is not None:
            problems.append(DocumentProblem(
                ("states",), f"state names are only meaningful for a state_space model, but "
                             f"this document gives a {self.representation}"))
        for key, signals, expected, noun in counts:
            if signals is None:
                continue
            if len(signals) != expected:
                problems.append(DocumentProblem(
                    (key,), f"{_plural(len(signals), 'name')} given but the model has "
                            f"{_plural(expected, noun)}"))
            seen: dict[str, int] = {}
            for k, sig in enumerate(signals):
                if sig.name in seen:
                    problems.append(DocumentProblem(
                        (key, k, "name"), f"{sig.name!r} is already used by {key}"
                                          f"[{seen[sig.name]}] (names must be unique)"))
                seen.setdefault(sig.name, k)
        if self.claimed_form is not None and self.state_space is None:
            problems.append(DocumentProblem(
                ("claimed_form",), f"{self.claimed_form!r} describes state-space matrices, "
                                   f"but this document gives a {self.representation}"))
        return problems

    # ---------------------------------------------------------------- properties
    @property
    def representation(self) -> Literal["state_space", "transfer_function", "zeros_poles_gain",
                                        "sparse_state_space"]:
        """Which of the four representations the document uses."""
        if self.state_space is not None:
            return "state_space"
        if self.sparse_state_space is not None:
            return "sparse_state_space"
        if self.transfer_function is not None:
            return "transfer_function"
        return "zeros_poles_gain"

    def _io_shape(self) -> tuple[int, int]:
        if self.state_space is not None:
            return _shape(self.state_space.d)
        if self.sparse_state_space is not None:
            return self.sparse_state_space.io_shape
        if self.transfer_function is not None:
            return _shape(self.transfer_function.denominator)
        assert self.zeros_poles_gain is not None
        return _shape(self.zeros_poles_gain.gain)

    @property
    def n_outputs(self) -> int:
        """Number of outputs p."""
        return self._io_shape()[0]

    @property
    def n_inputs(self) -> int:
        """Number of inputs m."""
        return self._io_shape()[1]

    @property
    def is_discrete(self) -> bool:
        return self.sample_period is not None

    @property
    def stated_order(self) -> int:
        """The number of states the document states, before any conversion.

        State space: the order; transfer function: the sum of the denominator degrees;
        zeros-poles-gain: the number of poles. A conversion never yields more states, so
        size limits are checked on this number first.
        """
        if self.state_space is not None:
            return self.state_space.order
        if self.sparse_state_space is not None:
            return self.sparse_state_space.order
        if self.transfer_function is not None:
            return sum(len(den) - 1 for row in self.transfer_function.denominator for den in row)
        assert self.zeros_poles_gain is not None
        return sum(len(ps) for row in self.zeros_poles_gain.poles for ps in row)


# ------------------------------------------------------------- error translation
def _model_at(loc: Sequence[str | int]) -> type[BaseModel] | None:
    """The pydantic model class that holds the keys at ``loc`` (list indices skipped)."""
    cls: type[BaseModel] = ModelDocument
    for part in loc:
        if isinstance(part, int):
            continue
        info = cls.model_fields.get(part)
        if info is None:
            return None
        found = _find_model(info.annotation)
        if found is None:
            return None
        cls = found
    return cls


def _find_model(annotation: Any) -> type[BaseModel] | None:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in typing.get_args(annotation):
        found = _find_model(arg)
        if found is not None:
            return found
    return None


_MISSING_HINTS = {  # keyed by field path
    "sample_period": "write null for continuous time or the sample period in seconds",
    "name": "give the model a human-readable name",
    "state_space.d": "D is outputs x inputs; write [[0.0]] for no feedthrough",
}


def _translate(err: Mapping[str, Any]) -> list[DocumentProblem]:
    kind = err["type"]
    loc: Loc = tuple(err["loc"])
    value = err.get("input")
    ctx = err.get("ctx") or {}
    carried = ctx.get("error")
    if isinstance(carried, _Problems):
        return [DocumentProblem(loc + p.loc, p.message, p.rank) for p in carried.problems]
    if kind == "missing":
        hint = _MISSING_HINTS.get(format_path(loc))
        return [DocumentProblem(loc, "is required but missing" + (f" ({hint})" if hint else ""), 1)]
    if kind == "extra_forbidden":
        holder = _model_at(loc[:-1])
        allowed = list(holder.model_fields) if holder is not None else []
        key = str(loc[-1])
        close = difflib.get_close_matches(key, allowed, 1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        return [DocumentProblem(
            loc, f"unknown key (expected one of: {', '.join(allowed)}){hint}", 1)]
    if kind in ("float_type", "float_parsing", "int_type"):
        if isinstance(value, int) and not isinstance(value, bool):
            return [DocumentProblem(loc, f"a {len(str(abs(value)))}-digit integer is too large "
                                         "for a double-precision number", 2)]
        return [DocumentProblem(loc, f"expected a number, got {_describe(value)}", 2)]
    if kind == "finite_number":
        what = "NaN" if isinstance(value, float) and math.isnan(value) else "infinity"
        return [DocumentProblem(loc, f"{what} is not allowed", 2)]
    if kind == "list_type":
        if len(loc) == 5 and loc[0] == "zeros_poles_gain" and loc[1] in ("zeros", "poles"):
            return [DocumentProblem(
                loc, f"expected a complex number as an [re, im] pair, got {_describe(value)}"
                     " (write [-2.0, 0.0] for the real value -2)", 1)]
        if len(loc) == 4 and loc[0] == "transfer_function":
            return [DocumentProblem(
                loc, f"expected a list of coefficients (descending powers), got "
                     f"{_describe(value)}", 1)]
        return [DocumentProblem(loc, f"expected a list, got {_describe(value)}", 1)]
    if kind in ("model_type", "model_attributes_type", "dict_type"):
        return [DocumentProblem(loc, f"expected an object (keys and values), got "
                                     f"{_describe(value)}", 1)]
    if kind == "string_type":
        return [DocumentProblem(loc, f"expected a text string, got {_describe(value)}", 1)]
    if kind == "string_too_short":
        return [DocumentProblem(loc, "must not be empty", 2)]
    if kind == "string_too_long":
        return [DocumentProblem(loc, f"is {len(value) if isinstance(value, str) else '?'} "
                                     f"characters long, above the limit of "
                                     f"{ctx.get('max_length')} characters", 2)]
    if kind == "literal_error":
        return [DocumentProblem(loc, f"expected {ctx.get('expected')}, got "
                                     f"{_describe(value)}", 2)]
    if kind in ("too_short", "too_long"):
        return [DocumentProblem(
            loc, f"expected a complex number as an [re, im] pair, got {_describe(value)} "
                 "(write [-2.0, 0.0] for the real value -2)", 1)]
    message = str(err.get("msg", kind))
    for prefix in ("Value error, ", "Assertion failed, "):
        if message.startswith(prefix):
            message = message[len(prefix):]
    return [DocumentProblem(loc, message, 3)]


def problems_from_validation_error(exc: ValidationError) -> list[DocumentProblem]:
    """Located, readable problems from a pydantic error, most relevant first.

    Parameters
    ----------
    exc : pydantic.ValidationError
        Raised while validating a :class:`ModelDocument` (or one of its parts).

    Returns
    -------
    list of DocumentProblem
        Duplicates removed; stably sorted by :attr:`DocumentProblem.rank`.
    """
    problems: list[DocumentProblem] = []
    seen: set[tuple[Loc, str]] = set()
    for err in exc.errors():
        for prob in _translate(err):
            if (prob.loc, prob.message) not in seen:
                seen.add((prob.loc, prob.message))
                problems.append(prob)
    problems.sort(key=lambda p: p.rank)
    return problems


def validate_model_document(data: Any, *, source: str | None = None) -> ModelDocument:
    """Validate a mapping (parsed JSON/YAML/TOML) as a :class:`ModelDocument`.

    Parameters
    ----------
    data : Mapping
        The parsed document.
    source : str, optional
        Where the data came from (a file name); prefixed to the error message.

    Returns
    -------
    ModelDocument

    Raises
    ------
    InvalidModelError
        One line per problem (``field.path: what is wrong (expected ...)``), the most
        relevant first; at most :data:`MAX_LISTED_PROBLEMS` lines. ``field`` is set to
        the first problem's path.
    """
    try:
        return ModelDocument.model_validate(data)
    except ValidationError as exc:
        problems = problems_from_validation_error(exc)
    if not problems:  # pragma: no cover - pydantic always reports at least one error
        problems = [DocumentProblem((), "is not a valid model document", 0)]
    lines = [p.line() for p in problems[:MAX_LISTED_PROBLEMS]]
    if len(problems) > MAX_LISTED_PROBLEMS:
        lines.append(f"... and {len(problems) - MAX_LISTED_PROBLEMS} more problem(s)")
    message = "\n  ".join(lines)
    raise InvalidModelError(message, field=problems[0].path or None, source=source)
