"""Load mapping files from YAML, keeping line and column marks for error messages."""

from __future__ import annotations

import difflib
import hashlib
import os
import re
from pathlib import Path
from typing import Any, TypeVar

import numpy as np
from pydantic import BaseModel, ValidationError
from ruamel.yaml import YAML
from ruamel.yaml.comments import CommentedMap, CommentedSeq
from ruamel.yaml.error import MarkedYAMLError, YAMLError

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


# Limits on a mapping file, so that a hostile or broken file fails fast with a clear message.
MAX_MAPPING_BYTES = 20_000_000  # 100,000 column entries take about 3 MB
MAX_NODES = 2_000_000  # values after aliases are expanded (a "billion laughs" file has ~10^9)
MAX_DEPTH = 64  # nesting of mappings and lists; real mapping files use 4 or 5

# Characters YAML 1.2 allows in a stream (section 5.1): tab, LF, CR, printable ASCII, NEL and the
# printable Unicode planes. Anything else (NUL, BEL, DEL, U+FFFF...) is refused by the parser.
_NOT_PRINTABLE = re.compile("[^\t\n\r\x20-\x7e\x85\xa0-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")

_CACHE: dict[tuple[str, str], Any] = {}  # (path, sha-256 of the bytes) -> parsed YAML
_CACHE_SIZE = 16


def _limit_from_env(name: str, default: int) -> int:
    text = os.environ.get(name, "").strip()
    return int(text) if text.isdigit() else default


def read_yaml(path: Path, display: str | None = None) -> Any:
    """Parse one YAML file, raising MappingError with the position of a syntax error.

    ``display`` is the file's name in messages (default: the path as given). The parsed result is
    kept (keyed by the file's content), so that finding the line of many keys parses the file once.

    Raises:
        MappingError: ``missing_file``, ``not_a_file`` (a folder), ``unreadable_file``,
            ``file_too_large``, ``bad_encoding``, ``control_character``, ``bad_yaml``,
            ``too_deep`` or ``alias_bomb``; each names the file and, where known, line and column.
    """
    shown = display or str(path)
    if not path.exists():
        raise MappingError("mapping file not found", file=shown, reason="missing_file")
    if not path.is_file():
        raise MappingError("mapping file is a folder, not a file", file=shown, reason="not_a_file",
                           hint="point at a .yaml file")
    limit = _limit_from_env("INTEGRATE_MAX_MAPPING_BYTES", MAX_MAPPING_BYTES)
    try:
        size = path.stat().st_size
        if size > limit:
            raise MappingError(f"mapping file is {size:,} bytes, more than the limit of {limit:,}", file=shown,
                               reason="file_too_large",
                               hint="a mapping file is a few kilobytes; raise INTEGRATE_MAX_MAPPING_BYTES if this "
                               "one is meant to be so large")
        data = path.read_bytes()
    except OSError as exc:
        raise MappingError(f"mapping file cannot be read: {exc.strerror or exc}", file=shown,
                           reason="unreadable_file", hint="check the file's permissions") from exc
    key = (str(path.resolve()), hashlib.sha256(data).hexdigest())
    if key in _CACHE:
        return _CACHE[key]
    root = _parse(data, shown)
    if len(_CACHE) >= _CACHE_SIZE:
        _CACHE.pop(next(iter(_CACHE)))
    _CACHE[key] = root
    return root


def _line_col(text: str, offset: int) -> tuple[int, int]:
    line = text.count("\n", 0, offset) + 1
    return line, offset - (text.rfind("\n", 0, offset) + 1) + 1


def _parse(data: bytes, shown: str) -> Any:
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise MappingError(
            f"mapping file is not UTF-8 text (byte {data[exc.start:exc.start + 1]!r} cannot be decoded)",
            file=shown, line=line, reason="bad_encoding", hint="save the file as UTF-8") from exc
    text = text.removeprefix("\ufeff")
    bad = _NOT_PRINTABLE.search(text)
    if bad:
        line, column = _line_col(text, bad.start())
        raise MappingError(f"mapping file holds the control character U+{ord(bad.group()):04X}", file=shown,
                           line=line, column=column, value=repr(bad.group()), reason="control_character",
                           hint="remove it; mapping files are plain text (tabs and line breaks only)")
    _check_flow_depth(data, shown)
    yaml = YAML(typ="rt")
    try:
        root = yaml.load(text)
    except MarkedYAMLError as exc:
        mark = exc.problem_mark
        raise MappingError(
            f"YAML syntax error: {exc.problem}",
            file=shown,
            line=mark.line + 1 if mark else None,
            column=mark.column + 1 if mark else None,
            reason="bad_yaml",
            hint="check the indentation and quoting on that line",
        ) from exc
    except YAMLError as exc:  # reader and emitter errors carry no mark
        raise MappingError(f"YAML cannot be read: {exc}", file=shown, reason="bad_yaml") from exc
    except RecursionError as exc:
        raise MappingError(f"mapping file is nested too deeply (more than {MAX_DEPTH} levels)", file=shown,
                           reason="too_deep", hint="a mapping file needs only a few levels of nesting") from exc
    _check_size(root, shown)
    return root


def _check_flow_depth(data: bytes, shown: str) -> None:
    """Refuse ``[[[[...`` or ``{{{{...`` nested past MAX_DEPTH before the (recursive) parser sees it.

    Brackets inside quoted text are counted too; a real mapping file never has dozens of them
    open at once, so this only over-counts files that are refused anyway.
    """
    codes = np.frombuffer(data, dtype=np.uint8)
    step = np.isin(codes, (ord("["), ord("{"))).astype(np.int32) - np.isin(codes, (ord("]"), ord("}")))
    if not len(step):
        return
    depth = np.cumsum(step)
    if int(depth.max()) > MAX_DEPTH:
        offset = int(np.argmax(depth > MAX_DEPTH))
        line = data.count(b"\n", 0, offset) + 1
        raise MappingError(f"mapping file is nested more than {MAX_DEPTH} levels deep", file=shown, line=line,
                           reason="too_deep", hint="a mapping file needs only a few levels of nesting")


def _check_size(root: Any, shown: str) -> None:
    """Refuse nesting deeper than MAX_DEPTH and aliases that expand past MAX_NODES values.

    Aliases are shared objects after parsing, so the expanded size is counted once per object
    (memoised), in time linear in the file, before anything walks the expanded tree.
    """
    sizes: dict[int, int] = {}
    open_nodes: set[int] = set()
    limit = _limit_from_env("INTEGRATE_MAX_MAPPING_NODES", MAX_NODES)

    def size(node: Any, depth: int) -> int:
        if not isinstance(node, (dict, list)):
            return 1
        known = sizes.get(id(node))
        if known is not None:
            return known
        if depth > MAX_DEPTH:
            line = getattr(getattr(node, "lc", None), "line", None)
            raise MappingError(f"mapping file is nested more than {MAX_DEPTH} levels deep", file=shown,
                               line=None if line is None else line + 1, reason="too_deep",
                               hint="a mapping file needs only a few levels of nesting")
        if id(node) in open_nodes:
            raise MappingError("mapping file holds an alias inside its own anchor (a loop)", file=shown,
                               reason="alias_loop", hint="an alias '*name' must refer to a value defined before it")
        open_nodes.add(id(node))
        children = list(node.keys()) + list(node.values()) if isinstance(node, dict) else node
        total = 1 + sum(size(child, depth + 1) for child in children)
        if total > limit:
            raise MappingError(f"mapping file expands to more than {limit:,} values (aliases repeating aliases)",
                               file=shown, reason="alias_bomb",
                               hint="write the values out instead of nesting '*' aliases")
        open_nodes.discard(id(node))
        sizes[id(node)] = total
        return total

    size(root, 0)


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
