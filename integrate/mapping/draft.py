"""The text of a drafted mapping file: how to read the export, and one commented entry per column.

The draft is written as text (not dumped from a model) so that every decision can carry its
confidence, reasons and TODOs as YAML comments beside it.
"""

from __future__ import annotations

import csv
import datetime as dt
import json
import re
import sqlite3
from pathlib import Path
from typing import TYPE_CHECKING

from ..errors import InputError
from .schema_export import MODELINE, SCHEMA_FILES
from .spec import ReadSpec

if TYPE_CHECKING:
    from .suggest import ColumnSuggestion

_FORMATS = {".csv": "csv", ".tsv": "csv", ".txt": "csv", ".xlsx": "excel", ".xlsm": "excel", ".json": "json",
            ".jsonl": "jsonl", ".ndjson": "jsonl", ".parquet": "parquet", ".sqlite": "sqlite", ".db": "sqlite",
            ".sqlite3": "sqlite"}
_PLAIN_KEY = re.compile(r"[A-Za-z_][A-Za-z0-9_ .()\-/]*")
_YAML_WORDS = frozenset({"yes", "no", "on", "off", "true", "false", "null", "y", "n", "~"})


def source_name(path: Path, name: str | None) -> str:
    """A source name (lower_snake_case) from --name or the file name.

    Example:
        >>> source_name(Path("exports/Paddle School 2026.csv"), None)
        'paddle_school_2026'
    """
    text = name or path.stem
    slug = re.sub(r"[^a-z0-9]+", "_", text.lower()).strip("_")
    if not slug or not slug[0].isalpha():
        slug = f"source_{slug}".rstrip("_")
    return slug


def _relative(path: Path, root: Path) -> str:
    try:
        return path.resolve().relative_to(root.resolve()).as_posix()
    except ValueError:
        return str(path.resolve())


def draft_read_spec(path: Path, root: Path) -> ReadSpec:
    """How to read the export, from its extension and (for text files) its first lines.

    Raises:
        InputError: ``missing_file``, or ``unknown_format`` for an extension no reader handles.
    """
    if not path.is_file():
        raise InputError("export not found", file=str(path), reason="missing_file",
                         hint="give the path of the file to draft a mapping for")
    kind = _FORMATS.get(path.suffix.lower())
    if kind is None:
        raise InputError(f"no reader for '{path.suffix}' files", file=str(path), reason="unknown_format",
                         hint="readers: " + ", ".join(sorted(set(_FORMATS))))
    options: dict[str, object] = {"format": kind, "path": _relative(path, root)}
    if kind == "csv":
        head = path.read_bytes()[:65536]
        try:
            sample = head.decode("utf-8")
        except UnicodeDecodeError as exc:
            # a multi-byte character cut at the end of the sample is still UTF-8
            sample = head[: exc.start].decode("utf-8") if exc.start > len(head) - 4 else None
            if sample is None:
                options["encoding"] = "cp1252"
                sample = head.decode("cp1252", errors="replace")
        try:
            options["delimiter"] = csv.Sniffer().sniff(sample.split("\n", 1)[0], delimiters=",;\t|").delimiter
        except csv.Error:
            options["delimiter"] = "\t" if path.suffix.lower() == ".tsv" else ","
    if kind == "sqlite":
        with sqlite3.connect(f"file:{path}?mode=ro", uri=True) as con:
            tables = [r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table' ORDER BY name")]
        if not tables:
            raise InputError("the database has no tables", file=str(path), reason="missing_table")
        options["table"] = tables[0]
    return ReadSpec(**options)


def _key(text: str) -> str:
    plain = _PLAIN_KEY.fullmatch(text) and text.strip() == text and text.lower() not in _YAML_WORDS
    return text if plain else json.dumps(text, ensure_ascii=False)


def _value(value: object) -> str:
    if isinstance(value, (dict, list, tuple)):
        return json.dumps(value, ensure_ascii=False)  # a JSON flow collection is YAML too
    if isinstance(value, (int, float)):
        return str(value)
    text = str(value)
    if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", text) and text.lower() not in _YAML_WORDS:
        return text
    return json.dumps(text, ensure_ascii=False)


def _comment(text: str, indent: str) -> list[str]:
    return [f"{indent}# {line}" for line in text.splitlines()]


def _read_lines(spec: ReadSpec) -> list[str]:
    lines = ["read:", f"  format: {spec.format}", f"  path: {_value(spec.path)}"]
    if spec.format == "csv":
        lines += [f"  encoding: {_value(spec.encoding)}", f"  delimiter: {json.dumps(spec.delimiter)}"]
    if spec.table:
        lines.append(f"  table: {_value(spec.table)}")
    return lines


def render_mapping(source: str, spec: ReadSpec, as_of: dt.date, columns: list[ColumnSuggestion],
                   shown_file: str, record_date: str | None = None) -> str:
    """The draft mapping file's text (``record_date``: the column that dates each record, if any)."""
    record_id = next(s for s in columns if s.role == "record_id")
    out = [MODELINE.format(file=SCHEMA_FILES["source"]),
           f"# Drafted by `integrate suggest` from {shown_file}. Check every TODO, then run `integrate check`.",
           f"source: {source}", *_read_lines(spec),
           f"record_id: {_key(record_id.column)}   # {'; '.join(record_id.reasons + record_id.todos)}",
           f"as_of: {as_of.isoformat()}   # TODO: the date the export was taken (the file's date is used)",
           "trust: 5   # TODO: trust rank against the other sources (1 = most trusted)",
           *([f"record_date: {_key(record_date)}   # TODO: confirm it dates each record (the newest wins "
              "'most_recent'; contact details differing between records years apart count less)"]
             if record_date else []),
           "columns:"]
    for s in columns:
        out += _comment(f"{s.column!r}: {s.profile.summary()}", "  ")
        if s.role == "record_id":
            out.append(f"  {_key(s.column)}: ignore   # the record ID")
            continue
        if s.role == "ignore":
            out += _comment("TODO: " + "; ".join(s.todos), "  ")
            out.append(f"  {_key(s.column)}: ignore")
            continue
        why = f"confidence {s.confidence:.2f}: " + "; ".join(s.reasons)
        if s.alternatives:
            why += "; also possible: " + ", ".join(f"{n} ({c:.2f})" for n, c in s.alternatives)
        out += _comment(why, "  ")
        out += _comment("".join(f"TODO: {t}\n" for t in s.todos), "  ")
        if s.role == "split":
            out += [f"  {_key(s.column)}:", f"    split: {json.dumps(s.options['split'])}"]
        elif s.role == "address":
            out += [f"  {_key(s.column)}:"] + [f"    {k}: {_value(v)}" for k, v in s.options.items()]
        elif s.role == "names":
            out += [f"  {_key(s.column)}:", "    name_format: auto"]
            if "name_fields" in s.options:
                out.append(f"    name_fields: [{', '.join(map(str, s.options['name_fields']))}]")
        elif s.options:
            out += [f"  {_key(s.column)}:", f"    field: {s.field}"]
            out += [f"    {k}: {_value(v)}" for k, v in s.options.items()]
        else:
            out.append(f"  {_key(s.column)}: {s.field}")
    return "\n".join(out) + "\n"
