"""Reading and writing model documents; turning documents into realizations.

File formats (chosen by the file name's suffix):

* ``.json`` -- JSON (RFC 8259, T. Bray, 2017). Duplicate keys are rejected (the
  :mod:`json` module would silently keep the last one); ``NaN``/``Infinity`` tokens are
  parsed and then rejected by validation with their field path.
* ``.yaml`` / ``.yml`` -- YAML (Ben-Kiki, Evans, döt Net, "YAML Ain't Markup Language
  version 1.2", 2009), read with PyYAML's safe loader plus two fixes: duplicate keys are
  rejected, and exponent floats without a dot (``1e-3``) are numbers, as in YAML 1.2
  (PyYAML follows YAML 1.1 and would read them as strings). One document per file.
* ``.toml`` -- TOML v1.0.0 (T. Preston-Werner, 2021) via :mod:`tomllib`. TOML has no null:
  leave ``sample_period`` out of a TOML file for continuous time.
* ``.npz`` -- a NumPy archive with 2-D arrays ``a``, ``b``, ``c``, ``d`` and an optional
  scalar ``sample_period`` (absent: continuous time); the model name is the file name
  without its suffix. Pickled objects are refused.

No numerical method is implemented here. Every problem with a file becomes an
:class:`~audit.errors.InvalidModelError` whose message starts with the file name.
"""

from __future__ import annotations

import json
import os
import re
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import yaml

from .documents import ClaimedForm, ModelDocument, Provenance, validate_model_document
from .errors import AuditError, InvalidModelError, NumericalTroubleError
from .realization import SAMPLE_PERIOD_RTOL, Realization

__all__ = [
    "SUPPORTED_SUFFIXES",
    "document_from_realization",
    "dump_model_document",
    "load_model_document",
    "load_realization",
    "parse_model_document",
    "realization_from_document",
]

SUPPORTED_SUFFIXES: tuple[str, ...] = (".json", ".yaml", ".yml", ".toml", ".npz")
_NPZ_ARRAYS = ("a", "b", "c", "d")
_NPZ_SHAPES = {"a": "states x states", "b": "states x inputs", "c": "outputs x states",
               "d": "outputs x inputs"}


# ------------------------------------------------------------------------ parsers
def _no_duplicate_keys(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in pairs:
        if key in out:
            raise ValueError(f"duplicate key {key!r} in one object")
        out[key] = value
    return out


def _parse_json(text: str, source: str) -> Any:
    try:
        return json.loads(text, object_pairs_hook=_no_duplicate_keys)
    except json.JSONDecodeError as exc:
        raise InvalidModelError(
            f"JSON syntax error at line {exc.lineno}, column {exc.colno}: {exc.msg}",
            source=source) from None
    except ValueError as exc:  # duplicate key (no position available from the hook)
        raise InvalidModelError(f"invalid JSON: {exc}", source=source) from None


class _StrictYamlLoader(yaml.SafeLoader):
    """Safe loader; rejects duplicate keys; reads ``1e-3`` as a float (YAML 1.2)."""


def _construct_mapping_no_duplicates(loader: _StrictYamlLoader, node: yaml.MappingNode) -> Any:
    loader.flatten_mapping(node)
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


_StrictYamlLoader.add_constructor(
    yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_mapping_no_duplicates)
# YAML 1.2 core-schema floats with an exponent but no dot, e.g. 1e-3, -2E+5.
_StrictYamlLoader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"^[-+]?[0-9][0-9_]*(?:\.[0-9_]*)?[eE][-+]?[0-9]+$"),
    list("-+0123456789"),
)


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


def _parse_toml(text: str, source: str) -> Any:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        # The message carries "(at line L, column C)".
        raise InvalidModelError(f"TOML syntax error: {exc}", source=source) from None
    if "lti_model" in data and "sample_period" not in data:
        data["sample_period"] = None  # TOML has no null: absent means continuous time
    return data


def _read_npz(path: Path, source: str) -> dict[str, Any]:
    try:
        archive = np.load(path, allow_pickle=False)
    except (OSError, ValueError, EOFError) as exc:
        raise InvalidModelError(f"is not a readable .npz archive ({exc})", source=source) from None
    if not isinstance(archive, np.lib.npyio.NpzFile):
        raise InvalidModelError("is a single .npy array, not an .npz archive with arrays "
                                "a, b, c, d", source=source)
    with archive:
        names = set(archive.files)
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
        state_space: dict[str, Any] = {}
        for key in _NPZ_ARRAYS:
            try:
                arr = archive[key]
            except ValueError as exc:  # object arrays need pickle, which is refused
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
            except ValueError as exc:
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
        :func:`audit.documents.validate_model_document`).
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
        The file is missing, unreadable, not UTF-8, has an unsupported suffix, has a
        syntax error (with line and column when the parser gives them), is not a model
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
    if suffix not in SUPPORTED_SUFFIXES:
        raise InvalidModelError(
            f"unsupported file type {p.suffix or '(no suffix)'!r}; expected one of "
            f"{', '.join(SUPPORTED_SUFFIXES)}", source=source)
    if not p.exists():
        raise InvalidModelError("file not found", source=source)
    if p.is_dir():
        raise InvalidModelError("is a directory, not a model file", source=source)
    if suffix == ".npz":
        data: Any = _read_npz(p, source)
    else:
        try:
            raw = p.read_bytes()
        except OSError as exc:
            raise InvalidModelError(f"cannot be read ({exc.strerror or exc})",
                                    source=source) from None
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
    converted by :mod:`audit.conversions` (imported here, lazily):
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
    from . import conversions  # lazy: the numeric conversions are another module's job

    what = doc.representation.replace("_", " ")
    try:
        if doc.transfer_function is not None:
            tf = doc.transfer_function
            numerator = [[_strip_leading_zeros(list(ch)) for ch in row] for row in tf.numerator]
            denominator = [[list(ch) for ch in row] for row in tf.denominator]
            result = conversions.realization_from_transfer_function(
                numerator, denominator, doc.sample_period)
        else:
            factored = doc.zeros_poles_gain
            assert factored is not None
            zeros = [[[complex(re, im) for re, im in ch] for ch in row] for row in factored.zeros]
            poles = [[[complex(re, im) for re, im in ch] for ch in row] for row in factored.poles]
            gain = np.array(factored.gain, dtype=float)
            result = conversions.realization_from_zeros_poles_gain(
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
        One of :data:`audit.documents.CLAIMED_FORMS`.
    provenance : Provenance or mapping with keys ``source``, ``notes``, optional
    certificate : mapping, optional
        A :class:`audit.documents.Certificate` as a mapping (written by ``convert``).
    signals : mapping, optional
        ``inputs`` / ``outputs`` lists to carry over from a source document.

    Returns
    -------
    ModelDocument

    Raises
    ------
    InvalidModelError
        If the name, claimed form or provenance is invalid, or the order exceeds
        :data:`audit.documents.MAX_ORDER`.
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

    See :func:`audit.safe_output.write_output_file`: the text goes to a temporary file
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
    audit.safe_output.OutputRefusedError
        ``path`` is a link or a directory, or its folder is missing or not writable.
    """
    from .safe_output import write_output_file

    target = Path(path)
    if not overwrite and os.path.lexists(target):
        raise FileExistsError(f"{target}: already exists; pass overwrite=True to replace it")
    return write_output_file(target, render_model_document(doc), overwrite=overwrite,
                             flag="overwrite=True")
