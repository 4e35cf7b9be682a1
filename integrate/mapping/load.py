"""Load mapping files from YAML, keeping line and column marks for error messages."""

from __future__ import annotations

import difflib
import hashlib
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError
from ruamel.yaml import YAML
from ruamel.yaml.comments import CommentedMap, CommentedSeq
from ruamel.yaml.error import MarkedYAMLError

from ..errors import InputErrors, MappingError
from .spec import CanonicalSchema, SourceMapping

Model = TypeVar("Model", bound=BaseModel)


def _plain(node: Any) -> Any:
    """ruamel's commented containers -> plain dicts/lists (keeps scalars)."""
    if isinstance(node, dict):
        return {str(k): _plain(v) for k, v in node.items()}
    if isinstance(node, list):
        return [_plain(v) for v in node]
    return node


def _position(root: Any, loc: tuple[Any, ...]) -> tuple[int | None, int | None, str]:
    """Line and column (1-based) of the deepest node of ``loc`` present in the YAML."""
    node = root
    line: int | None = None
    column: int | None = None
    path: list[str] = []
    for part in loc:
        if isinstance(node, CommentedMap) and part in node:
            try:
                key_line, key_col = node.lc.key(part)
                line, column = key_line + 1, key_col + 1
            except (KeyError, TypeError, AttributeError):
                pass
            node = node[part]
            path.append(str(part))
        elif isinstance(node, CommentedSeq) and isinstance(part, int) and part < len(node):
            try:
                item_line, item_col = node.lc.item(part)
                line, column = item_line + 1, item_col + 1
            except (KeyError, TypeError, AttributeError):
                pass
            node = node[part]
            path.append(str(part))
        else:
            # pydantic adds union-branch labels (e.g. 'ColumnMap', 'str') to locations: skip them
            continue
    if line is None and isinstance(root, CommentedMap):
        line, column = 1, 1
    return line, column, ".".join(path)


def read_yaml(path: Path, display: str | None = None) -> Any:
    """Parse one YAML file, raising MappingError with the position of a syntax error.

    ``display`` is the file's name in messages (default: the path as given).
    """
    shown = display or str(path)
    if not path.exists():
        raise MappingError("mapping file not found", file=shown, reason="missing_file")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise MappingError(
            "mapping file is not UTF-8 text", file=shown, reason="bad_encoding"
        ) from exc
    yaml = YAML(typ="rt")
    try:
        return yaml.load(text)
    except MarkedYAMLError as exc:
        mark = exc.problem_mark
        raise MappingError(
            f"YAML syntax error: {exc.problem}",
            file=shown,
            line=mark.line + 1 if mark else None,
            column=mark.column + 1 if mark else None,
            reason="bad_yaml",
        ) from exc


def _hint_for(loc: tuple[Any, ...], error_type: str, model: type[BaseModel]) -> str | None:
    if error_type == "extra_forbidden" and loc:
        known = _known_keys(model, loc[:-1])
        close = difflib.get_close_matches(str(loc[-1]), known, n=1)
        if close:
            return f"did you mean '{close[0]}'?"
        if known:
            return "allowed keys: " + ", ".join(sorted(known))
    return None


def _known_keys(model: type[BaseModel], parent: tuple[Any, ...]) -> list[str]:
    """Names accepted at a location (walks nested pydantic models by field name)."""
    current: Any = model
    for part in parent:
        fields = getattr(current, "model_fields", None)
        if fields is None:
            return []
        if part in fields:
            annotation = fields[part].annotation
            current = _model_in(annotation)
        elif isinstance(part, str) and part[:1].isupper():
            continue
        # else: a dict key (e.g. a field name) or list index; the value's model is the current one
    fields = getattr(current, "model_fields", None)
    if not fields:
        return []
    return [f.alias or name for name, f in fields.items()]


def _model_in(annotation: Any) -> Any:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in getattr(annotation, "__args__", ()) or ():
        found = _model_in(arg)
        if found is not None:
            return found
    return None


def validate_model(model: type[Model], data: Any, root: Any, file: str) -> Model:
    """Validate plain data against a model; every problem becomes a positioned MappingError."""
    try:
        return model.model_validate(data)
    except ValidationError as exc:
        problems: list[MappingError] = []
        for err in exc.errors():
            loc = tuple(err["loc"])
            line, column, dotted = _position(root, loc)
            key = dotted or "(top level)"
            message = f"{key}: {err['msg']}"
            if err["type"] not in ("missing",) and "input" in err and not isinstance(
                err["input"], (dict, list)
            ):
                message += f" (found {err['input']!r})"
            problems.append(
                MappingError(
                    message,
                    file=file,
                    line=line,
                    column=column,
                    value=err.get("input") if not isinstance(err.get("input"), (dict, list)) else None,
                    reason=err["type"],
                    hint=_hint_for(loc, err["type"], model),
                )
            )
        if len(problems) == 1:
            raise problems[0] from exc
        raise InputErrors(problems) from exc


def file_hash(path: Path) -> str:
    """SHA-256 of a file's bytes, hex."""
    return hashlib.sha256(path.read_bytes()).hexdigest()


def load_canonical(path: Path, display: str | None = None) -> CanonicalSchema:
    """Load and validate ``canonical.yaml``."""
    name = display or str(path)
    root = read_yaml(path, name)
    if not isinstance(root, dict):
        raise MappingError("expected a mapping of settings and 'fields'", file=name, line=1, column=1,
                           reason="bad_structure")
    return validate_model(CanonicalSchema, _plain(root), root, name)


def load_source_mapping(path: Path, canonical: CanonicalSchema, display: str | None = None) -> SourceMapping:
    """Load a source mapping and check it against the canonical schema (all problems at once)."""
    name = display or str(path)
    root = read_yaml(path, name)
    if not isinstance(root, dict):
        raise MappingError("expected a mapping with 'source', 'read' and 'columns'", file=name, line=1,
                           column=1, reason="bad_structure")
    mapping = validate_model(SourceMapping, _plain(root), root, name)
    problems: list[MappingError] = []
    known = list(canonical.fields)
    for column, entry in mapping.column_maps().items():
        for target in entry.targets():
            if target not in canonical.fields:
                line, col, _ = _position(root, ("columns", column))
                close = difflib.get_close_matches(target, known, n=1)
                problems.append(
                    MappingError(
                        f"column '{column}' feeds unknown canonical field '{target}'",
                        file=name, line=line, column=col, value=target, reason="unknown_field",
                        hint=f"did you mean '{close[0]}'?" if close else "canonical fields: " + ", ".join(known),
                    )
                )
                continue
            ftype = canonical.fields[target].type
            if ftype == "quantity" and not (entry.unit or entry.unit_column):
                line, col, _ = _position(root, ("columns", column))
                problems.append(MappingError(
                    f"column '{column}' feeds quantity field '{target}' but gives no 'unit' or 'unit_column'",
                    file=name, line=line, column=col, reason="missing_unit",
                    hint=f"add e.g. 'unit: {canonical.fields[target].unit}'"))
            if ftype == "money" and not (entry.currency or entry.currency_column):
                line, col, _ = _position(root, ("columns", column))
                problems.append(MappingError(
                    f"column '{column}' feeds money field '{target}' but gives no 'currency' or 'currency_column'",
                    file=name, line=line, column=col, reason="missing_currency",
                    hint=f"add e.g. 'currency: {canonical.base_currency}'"))
    if problems:
        if len(problems) == 1:
            raise problems[0]
        raise InputErrors(problems)
    return mapping


def locate_in(root: Any, *loc: Any) -> tuple[int | None, int | None]:
    """Line and column of a key path in YAML already read with ``read_yaml``."""
    line, column, _ = _position(root, loc)
    return line, column


def position_of(path: Path, *loc: Any) -> tuple[int | None, int | None]:
    """Line and column of a key path in a YAML file (for errors found after loading)."""
    try:
        root = read_yaml(path)
    except MappingError:
        return None, None
    line, column, _ = _position(root, loc)
    return line, column
