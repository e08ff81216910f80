"""Reading and writing model documents; turning documents into realizations.

File formats (chosen by the file name's suffix):

* ``.json`` -- JSON (RFC 8259, T. Bray, 2017). Duplicate keys are rejected (the
  :mod:`json` module would silently keep the last one); ``NaN``/``Infinity`` tokens are
  parsed and then rejected by validation with their field path.
* ``.yaml`` / ``.yml`` -- YAML (Ben-Kiki, Evans, döt Net, "YAML Ain't Markup Language
  version 1.2", 2009) with the 1.2 **core schema** (section 10.3 of revision 1.2.2):
  PyYAML's safe constructors with our own resolver, so ``1:30``, ``yes``, ``0b101``,
  ``1_000`` and dates are strings and ``1e-3`` is a number, as a reader of the file
  expects (PyYAML alone follows YAML 1.1). Duplicate keys are rejected; nesting deeper
  than :data:`MAX_NESTING` levels is refused while composing. One document per file.
* ``.toml`` -- TOML v1.0.0 (T. Preston-Werner, 2021) via :mod:`tomllib`. TOML has no null:
  leave ``sample_period`` out of a TOML file for continuous time.
* ``.npz`` -- a NumPy archive with 2-D arrays ``a``, ``b``, ``c``, ``d`` and an optional
  scalar ``sample_period`` (absent: continuous time); the model name is the file name
  without its suffix. Pickled objects are refused.

Inputs are read only from regular files, below :func:`max_input_bytes` (checked before
reading); the arrays of an ``.npz`` archive below :func:`max_array_bytes` once
decompressed (checked from their headers). No numerical method is implemented here.
Every problem with a file becomes an
:class:`~audit.errors.InvalidModelError` whose message starts with the file name.
"""

from __future__ import annotations

import json
import os
import re
import stat
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from audit.documents.schema import ClaimedForm, ModelDocument, Provenance, validate_model_document
from audit.errors import AuditError, InvalidModelError, NumericalTroubleError
from audit.core.realization import SAMPLE_PERIOD_RTOL, Realization

__all__ = [
    "SUPPORTED_SUFFIXES",
    "document_from_realization",
    "dump_model_document",
    "load_model_document",
    "load_realization",
    "max_array_bytes",
    "max_input_bytes",
    "parse_model_document",
    "read_input_bytes",
    "realization_from_document",
]

SUPPORTED_SUFFIXES: tuple[str, ...] = (".json", ".yaml", ".yml", ".toml", ".npz")

#: Largest input file read (bytes), checked before reading; an order-2000 dense model
#: (the document limit) is about 90 MB of JSON. Environment: ``LTI_AUDIT_MAX_INPUT_BYTES``.
DEFAULT_MAX_INPUT_BYTES = 128 * 1024 * 1024
#: Largest total size of the arrays of an .npz archive once decompressed (bytes), checked
#: from the array headers before any array is read; an order-2000 A is 32 MB.
#: Environment: ``LTI_AUDIT_MAX_ARRAY_BYTES``.
DEFAULT_MAX_ARRAY_BYTES = 64 * 1024 * 1024
MAX_INPUT_BYTES_VARIABLE = "LTI_AUDIT_MAX_INPUT_BYTES"
MAX_ARRAY_BYTES_VARIABLE = "LTI_AUDIT_MAX_ARRAY_BYTES"
_NPZ_ARRAYS = ("a", "b", "c", "d")
_NPZ_SHAPES = {"a": "states x states", "b": "states x inputs", "c": "outputs x states",
               "d": "outputs x inputs"}


# ------------------------------------------------------------------ reading bytes
def _limit(variable: str, default: int) -> int:
    text = os.environ.get(variable)
    if text is None or not text.strip():
        return default
    try:
        value = int(text.strip().replace("_", ""))
    except ValueError:
        raise InvalidModelError(f"environment variable {variable}={text!r}: expected a whole "
                                "number of bytes") from None
    if value <= 0:
        raise InvalidModelError(f"environment variable {variable}={text!r}: expected a "
                                "number of bytes > 0")
    return value


def max_input_bytes() -> int:
    """The input file size limit in bytes (``LTI_AUDIT_MAX_INPUT_BYTES`` or the default)."""
    return _limit(MAX_INPUT_BYTES_VARIABLE, DEFAULT_MAX_INPUT_BYTES)


def max_array_bytes() -> int:
    """The decompressed .npz array limit in bytes (``LTI_AUDIT_MAX_ARRAY_BYTES`` or default)."""
    return _limit(MAX_ARRAY_BYTES_VARIABLE, DEFAULT_MAX_ARRAY_BYTES)


_FILE_KINDS = ((stat.S_ISFIFO, "a FIFO (named pipe)"), (stat.S_ISCHR, "a character device"),
               (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket"))


def _kind(mode: int) -> str:
    return next((name for test, name in _FILE_KINDS if test(mode)), "not a regular file")


def read_input_bytes(path: str | Path, *, source: str | None = None,
                     error: type[AuditError] = InvalidModelError,
                     what: str = "a model file") -> bytes:
    """The bytes of an input file: regular files only, size-limited before reading.

    A FIFO, a device (``/dev/zero``, ``/dev/urandom``), a socket or a directory is
    refused without reading from it (a link to one too); a file above
    :func:`max_input_bytes` is refused from its size, and reading stops there even if
    the file grows meanwhile. The file is opened non-blocking, so a FIFO swapped in
    between the check and the open cannot block.

    Parameters
    ----------
    path : str or Path
    source : str, optional
        Start of error messages (default: the path as given).
    error : AuditError subclass, keyword-only
        Raised with ``source=`` (``InvalidModelError``, or the manifest's error type).
    what : str, keyword-only
        What the file should be, for messages ("a model file").

    Returns
    -------
    bytes

    Raises
    ------
    InvalidModelError (or ``error``)
    """
    source = str(path) if source is None else source
    limit = max_input_bytes()

    def fail(message: str) -> AuditError:
        return error(message, source=source)  # type: ignore[call-arg]

    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise fail("file not found") from None
    except OSError as exc:
        raise fail(f"cannot be read ({exc.strerror or exc})") from None
    if stat.S_ISDIR(st.st_mode):
        raise fail(f"is a directory, not {what}")
    if not stat.S_ISREG(st.st_mode):
        raise fail(f"is {_kind(st.st_mode)}, not {what}; lti-audit reads regular files only")
    if st.st_size > limit:
        raise fail(f"is {st.st_size} bytes, above the input size limit of {limit} bytes "
                   f"(set {MAX_INPUT_BYTES_VARIABLE} to change it)")
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0)
                     | getattr(os, "O_CLOEXEC", 0))
    except OSError as exc:
        raise fail(f"cannot be read ({exc.strerror or exc})") from None
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):
            raise fail(f"is not a regular file, not {what}")
        chunks = []
        total = 0
        while total <= limit:
            chunk = os.read(fd, min(1 << 20, limit + 1 - total))
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
    except OSError as exc:
        raise fail(f"cannot be read ({exc.strerror or exc})") from None
    finally:
        os.close(fd)
    if total > limit:
        raise fail(f"is more than {limit} bytes, above the input size limit "
                   f"(set {MAX_INPUT_BYTES_VARIABLE} to change it)")
    return b"".join(chunks)


# ------------------------------------------------------------------------ parsers
def _no_duplicate_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise ValueError(f"duplicate key {key!r} in one object")
        out[key] = value
    return out


#: Deepest nesting of lists and mappings read from YAML (checked while composing).
MAX_NESTING = 64

_TOO_DEEP = ("{fmt} nesting is too deep to read (lists or objects nested about a thousand "
             "levels or more); a model document nests at most 5 levels")


def _int_digits_message(exc: Exception) -> str:
    text = str(exc)
    if "integer string conversion" in text:  # CPython's limit on int(str) (4300 digits)
        return "an integer with thousands of digits is not a number lti-audit reads"
    return text


def _parse_json(text: str, source: str) -> Any:
    try:
        return json.loads(text, object_pairs_hook=_no_duplicate_keys)
    except json.JSONDecodeError as exc:
        raise InvalidModelError(
            f"JSON syntax error at line {exc.lineno}, column {exc.colno}: {exc.msg}",
            source=source) from None
    except RecursionError:
        raise InvalidModelError(_TOO_DEEP.format(fmt="JSON"), source=source) from None
    except ValueError as exc:  # duplicate key (no position available from the hook)
        raise InvalidModelError(f"invalid JSON: {_int_digits_message(exc)}",
                                source=source) from None


class _CoreSchemaResolver(yaml.resolver.BaseResolver):
    """Implicit tags of the YAML 1.2 core schema (YAML 1.2.2, section 10.3.2).

    Only these plain scalars are not strings: null (``null``, ``Null``, ``NULL``, ``~``,
    empty), booleans (``true``/``True``/``TRUE``, ``false``/...), integers (decimal,
    ``0o`` octal, ``0x`` hexadecimal) and floats (decimal with optional exponent,
    ``.inf``, ``.nan``). YAML 1.1's extras -- base-60 numbers (``1:30``), ``yes``/``no``/
    ``on``/``off``, ``_`` digit separators, leading-zero octal, timestamps, merge keys --
    stay strings, so a value means what a reader of the file sees.
    """


for _tag, _pattern, _first in (
    ("tag:yaml.org,2002:null", r"^(?:~|null|Null|NULL|)$", ["~", "n", "N", ""]),
    ("tag:yaml.org,2002:bool", r"^(?:true|True|TRUE|false|False|FALSE)$", list("tTfF")),
    ("tag:yaml.org,2002:int", r"^(?:[-+]?[0-9]+|0o[0-7]+|0x[0-9a-fA-F]+)$",
     list("-+0123456789")),
    ("tag:yaml.org,2002:float",
     r"^(?:[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?"
     r"|[-+]?\.(?:inf|Inf|INF)|\.(?:nan|NaN|NAN))$", list("-+0123456789.")),
):
    _CoreSchemaResolver.add_implicit_resolver(_tag, re.compile(_pattern), _first)


class _StrictYamlLoader(yaml.reader.Reader, yaml.scanner.Scanner, yaml.parser.Parser,
                        yaml.composer.Composer, yaml.constructor.SafeConstructor,
                        _CoreSchemaResolver):
    """Safe loader with YAML 1.2 core-schema scalars; rejects duplicate keys."""

    def compose_node(self, parent: Any, index: Any) -> Any:
        # A model document nests a few levels; stop deep nesting before the recursive
        # composer spends seconds and the interpreter's stack on it.
        self._depth = getattr(self, "_depth", 0) + 1
        try:
            if self._depth > MAX_NESTING:
                raise yaml.composer.ComposerError(
                    None, None, f"nesting deeper than {MAX_NESTING} levels (a model document "
                    "nests at most 5)", self.peek_event().start_mark)
            return super().compose_node(parent, index)
        finally:
            self._depth -= 1

    def __init__(self, stream: str) -> None:
        yaml.reader.Reader.__init__(self, stream)
        yaml.scanner.Scanner.__init__(self)
        yaml.parser.Parser.__init__(self)
        yaml.composer.Composer.__init__(self)
        yaml.constructor.SafeConstructor.__init__(self)
        _CoreSchemaResolver.__init__(self)


def _construct_mapping_no_duplicates(loader: _StrictYamlLoader, node: yaml.MappingNode) -> Any:
    seen: set[Any] = set()
    for key_node, _ in node.value:
        key = loader.construct_object(key_node, deep=True)
        try:
            duplicate = key in seen
        except TypeError:  # unhashable key; the base constructor reports it
            break
        if duplicate:
            raise yaml.constructor.ConstructorError(
                None, None, f"duplicate key {key!r}", key_node.start_mark)
        seen.add(key)
    return loader.construct_mapping(node, deep=True)


def _construct_core_int(loader: _StrictYamlLoader, node: yaml.ScalarNode) -> int:
    text = str(loader.construct_scalar(node))
    digits = text.lstrip("+-")
    if len(digits) > 400:  # a double holds about 1e308; CPython refuses int(str) > 4300
        raise yaml.constructor.ConstructorError(
            None, None, f"an integer with {len(digits)} digits is too large for a "
            "double-precision number", node.start_mark)
    sign = -1 if text.startswith("-") else 1
    if digits.startswith("0o"):
        return sign * int(digits[2:], 8)
    if digits.startswith("0x"):
        return sign * int(digits[2:], 16)
    return int(text, 10)


_StrictYamlLoader.add_constructor(
    yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_mapping_no_duplicates)
_StrictYamlLoader.add_constructor("tag:yaml.org,2002:int", _construct_core_int)


def _parse_yaml(text: str, source: str) -> Any:
    try:
        return yaml.load(text, Loader=_StrictYamlLoader)  # noqa: S506 - safe loader subclass
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        what = ", ".join(x for x in (exc.context, exc.problem) if x) or "invalid YAML"
        kind = "error" if isinstance(exc, yaml.constructor.ConstructorError) else "syntax error"
        raise InvalidModelError(f"YAML {kind}{where}: {what}", source=source) from None
    except yaml.YAMLError as exc:
        raise InvalidModelError(f"YAML error: {exc}", source=source) from None
    except RecursionError:
        raise InvalidModelError(_TOO_DEEP.format(fmt="YAML"), source=source) from None
    except (ValueError, OverflowError) as exc:
        raise InvalidModelError(f"YAML error: {_int_digits_message(exc)}",
                                source=source) from None


def _parse_toml(text: str, source: str) -> Any:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        # The message carries "(at line L, column C)".
        raise InvalidModelError(f"TOML syntax error: {exc}", source=source) from None
    except RecursionError:
        raise InvalidModelError(_TOO_DEEP.format(fmt="TOML"), source=source) from None
    except ValueError as exc:  # e.g. an integer beyond CPython's digit limit
        raise InvalidModelError(f"TOML error: {_int_digits_message(exc)}",
                                source=source) from None
    if "lti_model" in data and "sample_period" not in data:
        data["sample_period"] = None  # TOML has no null: absent means continuous time
    return data


def _npz_array_bytes(archive: Any, names: set[str], source: str) -> None:
    """Refuse arrays whose decompressed size (from their .npy headers) is above the limit.

    Only the header of each member is decompressed (NumPy ``.npy`` format, versions 1 to
    3: magic, version, header dictionary with ``shape`` and ``descr``).
    """
    limit = max_array_bytes()
    total = 0
    for key in sorted(names):
        try:
            with archive.zip.open(f"{key}.npy") as member:
                version = np.lib.format.read_magic(member)
                read_header = (np.lib.format.read_array_header_1_0 if version == (1, 0)
                               else np.lib.format.read_array_header_2_0)
                shape, _, dtype = read_header(member)
        except Exception as exc:  # noqa: BLE001 - any malformed member is bad input
            raise InvalidModelError(f"array {key!r} has an unreadable header ({exc})",
                                    field=key, source=source) from None
        if dtype.hasobject:
            raise InvalidModelError(f"array {key!r} holds Python objects; pickled arrays "
                                    "are refused (a, b, c, d hold real numbers)",
                                    field=key, source=source)
        count = 1
        for k in shape:
            count *= int(k)
        total += count * dtype.itemsize
        if total > limit:
            raise InvalidModelError(
                f"array {key!r} has shape {tuple(shape)} ({count * dtype.itemsize} bytes "
                f"decompressed); the arrays exceed the limit of {limit} bytes (set "
                f"{MAX_ARRAY_BYTES_VARIABLE} to change it)", field=key, source=source)


def _read_npz(path: Path, source: str) -> dict[str, Any]:
    import io
    import zipfile

    raw = read_input_bytes(path, source=source)
    try:
        archive = np.load(io.BytesIO(raw), allow_pickle=False)
    except (OSError, ValueError, EOFError, zipfile.BadZipFile) as exc:
        raise InvalidModelError(f"is not a readable .npz archive ({exc})", source=source) from None
    if not isinstance(archive, np.lib.npyio.NpzFile):
        raise InvalidModelError("is a single .npy array, not an .npz archive with arrays "
                                "a, b, c, d", source=source)
    with archive:
        names = set(archive.files)
        from audit.documents.sparse import is_sparse_npz, sparse_npz_document

        if is_sparse_npz(names):  # triplet arrays a_rows, a_cols, ... (audit.documents.sparse)
            _npz_array_bytes(archive, names, source)
            return sparse_npz_document(archive, names, path.stem, source)
        missing = [k for k in _NPZ_ARRAYS if k not in names]
        if missing:
            upper = [k for k in missing if k.upper() in names]
            hint = " (array names are lower case: a, b, c, d)" if upper else ""
            raise InvalidModelError(
                f"arrays {', '.join(repr(k) for k in missing)} missing; an .npz model needs "
                f"arrays 'a', 'b', 'c', 'd' and optionally 'sample_period'{hint}",
                field=missing[0], source=source)
        unknown = sorted(names - set(_NPZ_ARRAYS) - {"sample_period"})
        if unknown:
            raise InvalidModelError(
                f"unexpected array(s) {', '.join(repr(k) for k in unknown)}; an .npz model "
                "holds only 'a', 'b', 'c', 'd' and optionally 'sample_period'",
                field=unknown[0], source=source)
        _npz_array_bytes(archive, names, source)
        state_space: dict[str, Any] = {}
        for key in _NPZ_ARRAYS:
            try:
                arr = archive[key]
            except (ValueError, OSError, EOFError, zipfile.BadZipFile) as exc:
                # object arrays need pickle, which is refused; truncated members
                raise InvalidModelError(f"array {key!r} cannot be read without pickle ({exc})",
                                        field=key, source=source) from None
            if arr.dtype.kind not in "iuf":
                raise InvalidModelError(
                    f"array {key!r} has dtype {arr.dtype} but must hold real numbers "
                    f"({_NPZ_SHAPES[key]})", field=key, source=source)
            if arr.size == 0:
                arr = arr.reshape(arr.shape[0] if arr.ndim == 2 else 0, 0)
            elif arr.ndim != 2:
                raise InvalidModelError(
                    f"array {key!r} has shape {arr.shape} but must be 2-D "
                    f"({_NPZ_SHAPES[key]})", field=key, source=source)
            state_space[key] = arr.astype(float).tolist()
        sample_period: Any = None
        if "sample_period" in names:
            try:
                sp = archive["sample_period"]
            except (ValueError, OSError, EOFError, zipfile.BadZipFile) as exc:
                raise InvalidModelError(f"array 'sample_period' cannot be read ({exc})",
                                        field="sample_period", source=source) from None
            if sp.size != 1 or sp.dtype.kind not in "iuf":
                raise InvalidModelError(
                    f"array 'sample_period' must be one real number of seconds > 0 (got "
                    f"shape {sp.shape}, dtype {sp.dtype}); leave it out for continuous time",
                    field="sample_period", source=source)
            sample_period = float(sp.reshape(()).item())
    return {"lti_model": 1, "name": path.stem, "sample_period": sample_period,
            "state_space": state_space}


# -------------------------------------------------------------------- public API
def parse_model_document(data: Mapping[str, Any], *, source: str) -> ModelDocument:
    """Validate parsed data (a mapping from JSON/YAML/TOML) as a model document.

    Parameters
    ----------
    data : Mapping
        The parsed document.
    source : str
        Where it came from (file name, "request body", ...); starts the error message.

    Returns
    -------
    ModelDocument

    Raises
    ------
    InvalidModelError
        One line per problem, most relevant first (see
        :func:`audit.documents.schema.validate_model_document`).
    """
    return validate_model_document(data, source=source)


def load_model_document(path: str | Path) -> ModelDocument:
    """Read and validate a model document file (.json, .yaml, .yml, .toml or .npz).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    ModelDocument

    Raises
    ------
    InvalidModelError
        The file is missing, not a regular file (FIFO, device, directory), above the size
        limits (:func:`max_input_bytes`, :func:`max_array_bytes`), unreadable, not UTF-8,
        has an unsupported suffix, nests too deeply, has a syntax error (with line and column when the parser gives them), is not a model
        document, or is an invalid one. The message starts with the file name.

    Examples
    --------
    >>> load_model_document("no/such/file.json")
    Traceback (most recent call last):
    ...
    audit.errors.InvalidModelError: no/such/file.json: file not found
    """
    p = Path(path)
    source = str(path)
    suffix = p.suffix.lower()
    if p.is_dir():
        raise InvalidModelError("is a directory, not a model file (expected a .json, .yaml, "
                                ".yml, .toml or .npz file)", source=source)
    if suffix not in SUPPORTED_SUFFIXES:
        raise InvalidModelError(
            f"unsupported file type {p.suffix or '(no suffix)'!r}; expected one of "
            f"{', '.join(SUPPORTED_SUFFIXES)}", source=source)
    if suffix == ".npz":
        data: Any = _read_npz(p, source)
    else:
        raw = read_input_bytes(p, source=source)
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise InvalidModelError(
                f"is not UTF-8 text (byte {exc.start} cannot be decoded)", source=source
            ) from None
        if suffix == ".json":
            data = _parse_json(text, source)
        elif suffix == ".toml":
            data = _parse_toml(text, source)
        else:
            data = _parse_yaml(text, source)
    return parse_model_document(data, source=source)


def _strip_leading_zeros(coefficients: list[float]) -> list[float]:
    # Written leading zeros of a numerator ("[0, 0, 1]") carry no information; exact
    # comparison tests what was written, not a computed value.
    k = 0
    while k < len(coefficients) - 1 and coefficients[k] == 0.0:
        k += 1
    return coefficients[k:]


def realization_from_document(doc: ModelDocument) -> Realization:
    """The state-space realization a document describes.

    State space is taken as written. Transfer functions and zeros-poles-gain are
    converted by :mod:`audit.core.from_transfer_function` and
    :mod:`audit.core.from_zeros_poles_gain` (imported here, lazily):
    ``realization_from_transfer_function(numerator, denominator, sample_period)`` with
    nested lists ``[out][in][coeffs]`` (numerator leading zeros removed), and
    ``realization_from_zeros_poles_gain(zeros, poles, gain, sample_period)`` with nested
    lists ``[out][in]`` of Python complex numbers and a (p, m) float gain array.

    Parameters
    ----------
    doc : ModelDocument

    Returns
    -------
    Realization
        ``a : (n, n)``, ``b : (n, m)``, ``c : (p, n)``, ``d : (p, m)``, with the
        document's sample period and ``name``.

    Raises
    ------
    NumericalTroubleError
        The conversion failed or returned a realization of the wrong size or domain.
    InvalidModelError
        Re-raised from the conversion for models it cannot represent.
    """
    if doc.state_space is not None:
        ss = doc.state_space
        p, m, n = doc.n_outputs, doc.n_inputs, ss.order
        if n == 0:
            a, b, c = np.zeros((0, 0)), np.zeros((0, m)), np.zeros((p, 0))
        else:
            a, b, c = np.array(ss.a), np.array(ss.b), np.array(ss.c)
        return Realization.from_arrays(a, b, c, np.array(ss.d), doc.sample_period,
                                       name=doc.name)
    if doc.sparse_state_space is not None:
        from audit.documents.schema import MAX_ORDER
        from audit.documents.sparse import sparse_realization_from_document

        if doc.sparse_state_space.order > MAX_ORDER:
            raise InvalidModelError(
                f"sparse_state_space: {doc.sparse_state_space.order} states, above the dense "
                f"limit MAX_ORDER = {MAX_ORDER}; only 'lti-audit compare' handles sparse "
                "models this large (sampled sparse route)", field="sparse_state_space",
                source=doc.name)
        return sparse_realization_from_document(doc).to_dense()
    # lazy: the numeric conversions are another module's job
    from audit.core import from_transfer_function, from_zeros_poles_gain

    what = doc.representation.replace("_", " ")
    try:
        if doc.transfer_function is not None:
            tf = doc.transfer_function
            numerator = [[_strip_leading_zeros(list(ch)) for ch in row] for row in tf.numerator]
            denominator = [[list(ch) for ch in row] for row in tf.denominator]
            result = from_transfer_function.realization_from_transfer_function(
                numerator, denominator, doc.sample_period)
        else:
            factored = doc.zeros_poles_gain
            assert factored is not None
            zeros = [[[complex(re, im) for re, im in ch] for ch in row] for row in factored.zeros]
            poles = [[[complex(re, im) for re, im in ch] for ch in row] for row in factored.poles]
            gain = np.array(factored.gain, dtype=float)
            result = from_zeros_poles_gain.realization_from_zeros_poles_gain(
                zeros, poles, gain, doc.sample_period)
    except AuditError:
        raise
    except (ArithmeticError, ValueError, np.linalg.LinAlgError) as exc:
        raise NumericalTroubleError(
            f"{doc.name}: converting the {what} to state space failed: {exc}") from exc
    if not isinstance(result, Realization):
        raise NumericalTroubleError(
            f"{doc.name}: converting the {what} returned {type(result).__name__}, "
            "not a Realization")
    if (result.n_outputs, result.n_inputs) != (doc.n_outputs, doc.n_inputs):
        raise NumericalTroubleError(
            f"{doc.name}: converting the {what} gave {result.n_outputs} output(s) x "
            f"{result.n_inputs} input(s) but the document has {doc.n_outputs} x "
            f"{doc.n_inputs}")
    same_domain = (
        (result.sample_period is None and doc.sample_period is None)
        or (result.sample_period is not None and doc.sample_period is not None
            and abs(result.sample_period - doc.sample_period)
            <= SAMPLE_PERIOD_RTOL * doc.sample_period)
    )
    if not same_domain:
        raise NumericalTroubleError(
            f"{doc.name}: converting the {what} changed the sample period from "
            f"{doc.sample_period} to {result.sample_period}")
    return result.with_name(doc.name)


def load_realization(path: str | Path) -> Realization:
    """Load a model file and return its realization, named after the document.

    Parameters
    ----------
    path : str or Path
        A .json, .yaml, .yml, .toml or .npz model file.

    Returns
    -------
    Realization
        ``name`` is the document's name (for .npz: the file name without suffix).

    Raises
    ------
    InvalidModelError
        See :func:`load_model_document`.
    NumericalTroubleError
        See :func:`realization_from_document`.
    """
    doc = load_model_document(path)
    r = realization_from_document(doc)
    return r if r.name else r.with_name(Path(path).stem)


def document_from_realization(
    r: Realization,
    *,
    name: str,
    claimed_form: ClaimedForm | None = None,
    provenance: Provenance | Mapping[str, Any] | None = None,
    certificate: Mapping[str, Any] | None = None,
    signals: Mapping[str, Any] | None = None,
) -> ModelDocument:
    """A state-space model document holding a realization's matrices.

    Parameters
    ----------
    r : Realization
        ``a : (n, n)``, ``b : (n, m)``, ``c : (p, n)``, ``d : (p, m)``.
    name : str
        Document name (non-empty).
    claimed_form : str, optional
        One of :data:`audit.documents.schema.CLAIMED_FORMS`.
    provenance : Provenance or mapping with keys ``source``, ``notes``, optional
    certificate : mapping, optional
        A :class:`audit.documents.schema.Certificate` as a mapping (written by ``convert``).
    signals : mapping, optional
        ``inputs`` / ``outputs`` lists to carry over from a source document.

    Returns
    -------
    ModelDocument

    Raises
    ------
    InvalidModelError
        If the name, claimed form or provenance is invalid, or the order exceeds
        :data:`audit.documents.schema.MAX_ORDER`.
    """
    prov: Any = provenance.model_dump() if isinstance(provenance, Provenance) else provenance
    data: dict[str, Any] = {
        "lti_model": 1,
        "name": name,
        "sample_period": r.sample_period,
        "state_space": {"a": r.a.tolist(), "b": r.b.tolist(), "c": r.c.tolist(),
                        "d": r.d.tolist()},
    }
    if claimed_form is not None:
        data["claimed_form"] = claimed_form
    if certificate is not None:
        data["certificate"] = dict(certificate)
    for key in ("inputs", "outputs"):
        if signals is not None and signals.get(key) is not None:
            data[key] = signals[key]
    if prov is not None:
        data["provenance"] = dict(prov) if isinstance(prov, Mapping) else prov
    return validate_model_document(data, source=f"model {name!r}" if name else "model")


def _render_json(value: Any, indent: int = 0) -> str:
    """JSON with one matrix row per line (floats written with repr: lossless)."""
    compact = json.dumps(value, allow_nan=False, ensure_ascii=False)
    flat_list = isinstance(value, list) and not any(isinstance(x, (list, dict)) for x in value)
    if not isinstance(value, (list, dict)) or flat_list or len(compact) + indent <= 88:
        return compact
    pad = " " * (indent + 2)
    if isinstance(value, dict):
        items = [f"{pad}{json.dumps(k, ensure_ascii=False)}: {_render_json(v, indent + 2)}"
                 for k, v in value.items()]
        return "{\n" + ",\n".join(items) + "\n" + " " * indent + "}"
    items = [pad + _render_json(v, indent + 2) for v in value]
    return "[\n" + ",\n".join(items) + "\n" + " " * indent + "]"


def render_model_document(doc: ModelDocument) -> str:
    """The JSON text of a model document, as :func:`dump_model_document` writes it.

    Keys in schema order, ``sample_period`` always explicit (``null`` = continuous),
    one matrix row per line, floats written losslessly.
    """
    payload = doc.model_dump(mode="json", exclude_none=True)
    payload["sample_period"] = doc.sample_period  # always explicit (null = continuous)
    ordered = {k: payload[k] for k in ModelDocument.model_fields if k in payload}
    return _render_json(ordered) + "\n"


def dump_model_document(doc: ModelDocument, path: str | Path, *,
                        overwrite: bool = False) -> Path:
    """Write a model document as JSON, atomically, under the tool's output rule.

    See :func:`audit.reports.safe_output.write_output_file`: the text goes to a temporary file
    in the target directory, is flushed to disk, and then takes the target name
    (``os.link`` when not overwriting, so an existing file is never clobbered even by a
    concurrent writer; ``os.replace`` otherwise); a symbolic link is never written
    through. Floats are written with ``repr``, so loading the file gives back the same
    numbers bit for bit.

    Parameters
    ----------
    doc : ModelDocument
    path : str or Path
        Target file (conventionally ``.json``).
    overwrite : bool, keyword-only
        Replace an existing file. Default ``False``.

    Returns
    -------
    Path
        The written file.

    Raises
    ------
    FileExistsError
        ``path`` exists and ``overwrite`` is false.
    audit.reports.safe_output.OutputRefusedError
        ``path`` is a link or a directory, or its folder is missing or not writable.
    """
    from audit.reports.safe_output import write_output_file

    target = Path(path)
    if not overwrite and os.path.lexists(target):
        raise FileExistsError(f"{target}: already exists; pass overwrite=True to replace it")
    return write_output_file(target, render_model_document(doc), overwrite=overwrite,
                             flag="overwrite=True")
