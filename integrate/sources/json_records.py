"""JSON sources: JSON Lines (one object per line) or one JSON array of objects."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources.frame import SourceFile, read_text, text_frame


def read_json_records(path: Path, spec: ReadSpec, src: SourceFile) -> pd.DataFrame:
    """Read JSON Lines or a JSON array; nested objects become dotted columns.

    The layout is taken from the content, whatever ``format`` says: text starting with
    ``[`` is an array, anything else is JSON Lines (blank lines skipped). ``_row`` is
    the line number for JSON Lines and the 1-based element index for an array. Lists
    stay as JSON text; numbers are written as in Excel (``68.0`` -> ``"68"``).

    Raises:
        SourceError: ``bad_json`` with the line (and column) of the malformed text, or
            naming a record that is not an object.
    """
    text = read_text(path, spec.encoding, src)
    is_array = text.lstrip().startswith("[")
    if is_array:
        records = _parse_array(text, src)
        rows = list(range(1, len(records) + 1))
    else:
        records, rows = _parse_lines(text, src)
    flat: list[dict[str, object]] = []
    # JSON has no columnar form: each record already is a Python object, checked and flattened
    for record, row in zip(records, rows):
        if not isinstance(record, dict):
            where = "element" if is_array else "line"
            raise SourceError(
                f"{where} {row} of source '{src.name}' is a JSON {type(record).__name__}, "
                "expected an object",
                file=src.shown,
                line=None if is_array else row,
                value=json.dumps(record)[:80],
                reason="bad_json",
                hint='each record must be a JSON object such as {"id": 1, "name": "..."}',
            )
        flat.append(_flatten(record))
    frame = pd.DataFrame(flat, dtype=object)  # object: ints with gaps must not turn into floats
    return text_frame(frame, rows, src)


def _parse_array(text: str, src: SourceFile) -> list[object]:
    try:
        records = json.loads(text)
    except json.JSONDecodeError as exc:
        raise _bad_json(exc, exc.lineno, src) from exc
    if not isinstance(records, list):  # "[...] trailing" cannot parse, so this is defensive
        raise SourceError(f"source '{src.name}' is not a JSON array", file=src.shown, reason="bad_json")
    return records


def _parse_lines(text: str, src: SourceFile) -> tuple[list[object], list[int]]:
    lines = pd.Series(text.split("\n"), dtype=object)
    filled = lines.str.strip() != ""
    kept = lines[filled]
    rows = (kept.index + 1).tolist()
    # Fast path: all lines as one array, parsed by the C decoder in one call.
    try:
        records = json.loads("[" + ",".join(kept) + "]")
    except json.JSONDecodeError:
        records = None
    if records is not None and len(records) == len(rows):
        return records, rows
    # Slow path, only for a broken file: find the first line that does not parse.
    for row, line in zip(rows, kept):
        try:
            json.loads(line)
        except json.JSONDecodeError as exc:
            raise _bad_json(exc, row, src) from exc
    raise SourceError(  # defensive: every line parses alone, so the joined text should too
        f"source '{src.name}' could not be read as JSON Lines",
        file=src.shown,
        reason="bad_json",
        hint="JSON Lines holds exactly one object per line",
    )


def _bad_json(exc: json.JSONDecodeError, line: int, src: SourceFile) -> SourceError:
    return SourceError(
        f"malformed JSON in source '{src.name}': {exc.msg}",
        file=src.shown,
        line=line,
        column=exc.colno,
        value=exc.doc[max(0, exc.pos - 20) : exc.pos + 20],
        reason="bad_json",
        hint="fix the JSON on that line (a missing quote, comma or brace is typical)",
    )


def _flatten(record: dict[str, object], prefix: str = "") -> dict[str, object]:
    """Nested objects become dotted names: {"name": {"first": "A"}} -> {"name.first": "A"}."""
    out: dict[str, object] = {}
    for key, value in record.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict) and value:
            out.update(_flatten(value, f"{name}."))
        else:
            out[name] = value
    return out
