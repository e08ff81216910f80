"""Export the published JSON Schemas under ``schemas/`` from the pydantic models.

Usage::

    python -m audit.documents.schema_export            # (re)write every registered schema file
    python -m audit.documents.schema_export --check    # exit 1 and name the files that are stale

Schemas are registered in :data:`SCHEMAS` as ``{file name: callable returning the
schema}``; to publish another one (say ``report.schema.json``), add an entry. Files are
written with sorted keys, two-space indentation and a trailing newline, so they diff
cleanly. The schemas follow JSON Schema draft 2020-12 (A. Wright, H. Andrews, B. Hutton,
G. Dennis, "JSON Schema: A Media Type for Describing JSON Documents", 2020); no numerical
method is implemented here.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from audit.documents.schema import ModelDocument

__all__ = [
    "SCHEMAS",
    "default_schema_directory",
    "main",
    "model_document_schema",
    "outdated_schemas",
    "render_schema",
    "write_schemas",
]

JSON_SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"


def model_document_schema() -> dict[str, Any]:
    """JSON Schema of :class:`audit.documents.schema.ModelDocument` (with ``$schema``)."""
    return {"$schema": JSON_SCHEMA_DIALECT, **ModelDocument.model_json_schema()}


def compare_report_schema() -> dict[str, Any]:
    """JSON Schema of the ``lti-audit compare --format json`` report."""
    from audit.reports.shapes import CompareReport

    return {"$schema": JSON_SCHEMA_DIALECT, **CompareReport.model_json_schema()}


def inspect_report_schema() -> dict[str, Any]:
    """JSON Schema of the ``lti-audit inspect --format json`` report."""
    from audit.reports.shapes import InspectReport

    return {"$schema": JSON_SCHEMA_DIALECT, **InspectReport.model_json_schema()}


def claims_manifest_schema() -> dict[str, Any]:
    """JSON Schema of the claims manifest ``lti-audit.toml`` (the parsed TOML data)."""
    from audit.workflows.manifest import claims_manifest_schema as build

    return build()


#: Registered schemas: file name under ``schemas/`` -> callable returning the schema.
SCHEMAS: dict[str, Callable[[], dict[str, Any]]] = {
    "model-document.schema.json": model_document_schema,
    "compare-report.schema.json": compare_report_schema,
    "inspect-report.schema.json": inspect_report_schema,
    "claims-manifest.schema.json": claims_manifest_schema,
}


def render_schema(schema: dict[str, Any]) -> str:
    """The exact text written for a schema: sorted keys, indent 2, trailing newline."""
    return json.dumps(schema, sort_keys=True, indent=2, ensure_ascii=False) + "\n"


def default_schema_directory() -> Path:
    """``schemas/`` at the repository root (next to the ``audit`` package)."""
    return Path(__file__).resolve().parents[2] / "schemas"


def write_schemas(directory: str | Path | None = None) -> list[Path]:
    """Write every registered schema; return the paths written.

    Parameters
    ----------
    directory : str or Path, optional
        Target directory (created if missing); default :func:`default_schema_directory`.

    Returns
    -------
    list of Path

    Raises
    ------
    OSError
        The directory cannot be created or written.
    """
    target = Path(directory) if directory is not None else default_schema_directory()
    target.mkdir(parents=True, exist_ok=True)
    written = []
    for filename, build in SCHEMAS.items():
        path = target / filename
        path.write_text(render_schema(build()), encoding="utf-8")
        written.append(path)
    return written


def outdated_schemas(directory: str | Path | None = None) -> list[str]:
    """File names of registered schemas that are missing or differ from the code.

    Parameters
    ----------
    directory : str or Path, optional
        Default :func:`default_schema_directory`.

    Returns
    -------
    list of str
        Empty when every schema file is in sync.

    Raises
    ------
    OSError
        A schema file exists but cannot be read.
    """
    target = Path(directory) if directory is not None else default_schema_directory()
    stale = []
    for filename, build in SCHEMAS.items():
        path = target / filename
        if not path.is_file() or path.read_text(encoding="utf-8") != render_schema(build()):
            stale.append(filename)
    return stale


def main(argv: Sequence[str] | None = None) -> int:
    """Command-line entry point; returns the exit status (0 ok, 1 stale with --check)."""
    parser = argparse.ArgumentParser(
        prog="python -m audit.documents.schema_export",
        description="Write (or check) the JSON Schemas published under schemas/.")
    parser.add_argument("--check", action="store_true",
                        help="do not write; exit 1 and name the files that are out of date")
    parser.add_argument("--directory", type=Path, default=None,
                        help="schema directory (default: schemas/ at the repository root)")
    args = parser.parse_args(argv)
    directory = args.directory if args.directory is not None else default_schema_directory()
    if args.check:
        stale = outdated_schemas(directory)
        for filename in stale:
            print(f"out of date: {directory / filename} "
                  "(run: python -m audit.documents.schema_export)", file=sys.stderr)
        return 1 if stale else 0
    for path in write_schemas(directory):
        print(f"wrote {path}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
