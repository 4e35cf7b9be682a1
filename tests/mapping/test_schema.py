"""The JSON Schema files: in step with the pydantic models, and accepting exactly what the loader accepts."""

from __future__ import annotations

import datetime as dt
import json
import subprocess
import sys
from pathlib import Path
from typing import Any

import jsonschema
import pytest
from ruamel.yaml import YAML

from integrate.mapping.load import load_canonical
from integrate.mapping.schema_export import MODELINE, SCHEMA_FILES, schema_texts

REPO = Path(__file__).resolve().parents[2]
MAPPINGS = REPO / "mappings"
SCHEMAS = REPO / "schemas"


def _demo_fields() -> list[str]:
    return list(load_canonical(MAPPINGS / "canonical.yaml").fields)


def _as_json(node: Any) -> Any:
    """YAML data as an editor's JSON view sees it (dates are text)."""
    if isinstance(node, dict):
        return {str(k): _as_json(v) for k, v in node.items()}
    if isinstance(node, list):
        return [_as_json(v) for v in node]
    if isinstance(node, (dt.date, dt.datetime)):
        return node.isoformat()
    return node


def _yaml(path: Path) -> Any:
    return _as_json(YAML(typ="safe").load(path.read_text(encoding="utf-8")))


def _schema(kind: str) -> dict[str, Any]:
    return json.loads((SCHEMAS / SCHEMA_FILES[kind]).read_text(encoding="utf-8"))


def test_committed_schema_files_are_up_to_date() -> None:
    expected = schema_texts(_demo_fields())
    for name, text in expected.items():
        committed = (SCHEMAS / name).read_text(encoding="utf-8")
        assert committed == text, f"schemas/{name} is stale: run `python -m integrate schema`"


@pytest.mark.parametrize("kind", ["canonical", "source"])
def test_schema_is_valid_json_schema(kind: str) -> None:
    schema = _schema(kind)
    # the dialect pydantic 2 generates (JSON Schema draft 2020-12)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)


def test_demo_mapping_files_validate_and_point_at_their_schema() -> None:
    for path in sorted(MAPPINGS.glob("*.yaml")):
        kind = "canonical" if path.name == "canonical.yaml" else "source"
        first_line = path.read_text(encoding="utf-8").splitlines()[0]
        assert first_line == MODELINE.format(file=SCHEMA_FILES[kind]), path.name
        target = (path.parent / first_line.split("$schema=", 1)[1]).resolve()
        assert target.is_file(), target
        jsonschema.validate(_yaml(path), _schema(kind), cls=jsonschema.Draft202012Validator)


def test_schema_rejects_a_misspelt_key_and_an_unknown_field() -> None:
    data = _yaml(MAPPINGS / "webshop.yaml")
    validator = jsonschema.Draft202012Validator(_schema("source"))
    typo = dict(data, record_idd=data["record_id"])
    assert any("record_idd" in e.message for e in validator.iter_errors(typo))
    unknown = dict(data, columns=dict(data["columns"], first_name="given_nmae"))
    assert list(validator.iter_errors(unknown)), "an unknown canonical field should not validate"
    ignored = dict(data, columns=dict(data["columns"], first_name="ignore"))
    assert not list(validator.iter_errors(ignored))


def test_schema_command_writes_the_committed_files(tmp_path: Path) -> None:
    out = tmp_path / "schemas"
    proc = subprocess.run([sys.executable, "-m", "integrate", "schema", str(REPO), "--out", str(out)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    for name in SCHEMA_FILES.values():
        assert (out / name).read_text(encoding="utf-8") == (SCHEMAS / name).read_text(encoding="utf-8")
