"""JSON Schema files for the two mapping-file formats, generated from the pydantic models.

Editors that read JSON Schema (through a ``# yaml-language-server: $schema=...`` line at the
top of a mapping file) then complete keys, show each key's description and flag typos while
the file is written. The pydantic models in ``spec.py`` stay the single definition: the
schema files are regenerated with ``integrate schema`` and a test keeps them in step.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from .spec import CanonicalSchema, SourceMapping

JSON_SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"  # what pydantic 2 emits
SCHEMA_FILES = {"canonical": "canonical.schema.json", "source": "source.schema.json"}
SCHEMAS_DIR = "schemas"
# The line an editor reads; the path is relative to the mapping file (mappings/ beside schemas/).
MODELINE = "# yaml-language-server: $schema=../schemas/{file}"


def canonical_schema() -> dict[str, Any]:
    """JSON Schema of ``mappings/canonical.yaml``.

    Example:
        >>> sorted(canonical_schema()["required"])
        ['fields']
    """
    schema = CanonicalSchema.model_json_schema(by_alias=True, mode="validation")
    return _finish(schema, "Canonical schema of an integrate workspace (mappings/canonical.yaml)")


def source_schema(field_names: Sequence[str] = ()) -> dict[str, Any]:
    """JSON Schema of a source mapping file (``mappings/<source>.yaml``).

    Args:
        field_names: the workspace's canonical fields; when given, editors offer them where a
            column names the field it feeds (a name outside the list is still caught by
            ``integrate check``, with a "did you mean" hint).

    Example:
        >>> schema = source_schema(["given_name", "family_name"])
        >>> schema["$defs"]["ColumnMap"]["properties"]["field"]["anyOf"][0]["enum"]
        ['given_name', 'family_name']
    """
    schema = SourceMapping.model_json_schema(by_alias=True, mode="validation")
    if field_names:
        names = list(field_names)
        column_map = schema["$defs"]["ColumnMap"]["properties"]
        column_map["field"]["anyOf"] = [{"enum": names, "type": "string"}, {"type": "null"}]
        entry = schema["properties"]["columns"]["additionalProperties"]
        entry["anyOf"] = [
            {"const": "ignore", "type": "string", "description": "This column is not used."},
            {"enum": names, "type": "string", "description": "The canonical field this column feeds."},
            {"$ref": "#/$defs/ColumnMap"},
        ]
    return _finish(schema, "Source mapping file of an integrate workspace (mappings/<source>.yaml)")


def _finish(schema: dict[str, Any], title: str) -> dict[str, Any]:
    described = {"$schema": JSON_SCHEMA_DIALECT, "title": title}
    if schema.get("description"):
        described["description"] = " ".join(str(schema["description"]).split())
    rest = {k: v for k, v in schema.items() if k not in ("title", "description")}
    return described | rest


def schema_texts(field_names: Sequence[str] = ()) -> dict[str, str]:
    """File name -> JSON text (indented, newline-terminated) of both schema files."""
    schemas = {"canonical": canonical_schema(), "source": source_schema(field_names)}
    return {SCHEMA_FILES[k]: json.dumps(v, indent=2, ensure_ascii=False) + "\n" for k, v in schemas.items()}


def write_schemas(out_dir: Path, field_names: Sequence[str] = ()) -> list[Path]:
    """Write both schema files into ``out_dir`` (atomically); returns their paths."""
    from ..outputs.tables import write_text_atomic

    written: list[Path] = []
    for name, text in schema_texts(field_names).items():
        path = Path(out_dir) / name
        write_text_atomic(path, text)
        written.append(path)
    return written
