"""JSON sources: JSON Lines (one object per line) or one JSON array of objects."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources.frame import SourceFile, read_text, text_frame
from integrate.sources.limits import check_columns, read_limits


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
    _check_depth(text, src, extra=1 if is_array else 0)
    if is_array:
        records = _parse_array(text, src)
        rows = list(range(1, len(records) + 1))
    else:
        records, rows = _parse_lines(text, src)
    if records and isinstance(records[0], dict):  # refuse a record wider than the column limit before the frame
        check_columns(len(records[0]), read_limits(), src.shown, src.name)
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
    except (json.JSONDecodeError, RecursionError):
        records = None
    if records is not None and len(records) == len(rows):
        return records, rows
    # Slow path, only for a broken file: find the first line that does not parse.
    for row, line in zip(rows, kept):
        try:
            json.loads(line)
        except json.JSONDecodeError as exc:
            raise _bad_json(exc, row, src) from exc
        except RecursionError as exc:
            raise _too_deep(row, src) from exc
    raise SourceError(  # defensive: every line parses alone, so the joined text should too
        f"source '{src.name}' could not be read as JSON Lines",
        file=src.shown,
        reason="bad_json",
        hint="JSON Lines holds exactly one object per line",
    )


MAX_DEPTH = 64  # objects and lists nested deeper than this are refused (real exports nest 2 or 3)


def _check_depth(text: str, src: SourceFile, extra: int) -> None:
    """Refuse records nested more than MAX_DEPTH levels, naming the line, before anything recurses.

    Brackets are counted over the raw bytes (a cheap filter that also counts brackets inside
    strings); only lines it flags are parsed and measured exactly.
    """
    data = text.encode("utf-8", errors="surrogatepass")
    codes = np.frombuffer(data, dtype=np.uint8)
    step = np.isin(codes, (ord("["), ord("{"))).astype(np.int32) - np.isin(codes, (ord("]"), ord("}")))
    if not len(step):
        return
    depth = np.cumsum(step)
    limit = MAX_DEPTH + extra
    if int(depth.max()) <= limit:
        return
    if extra:  # one JSON array: measure the whole document
        _measure(text, 1, src, limit)
        return
    starts = np.flatnonzero(codes == ord("\n")) + 1
    lines = np.unique(np.searchsorted(starts, np.flatnonzero(depth > limit), side="right"))
    all_lines = text.split("\n")
    for index in lines[:20]:  # a broken bracket early on can flag every later line: measure a few
        _measure(all_lines[int(index)], int(index) + 1, src, limit)


def _measure(text: str, line: int, src: SourceFile, limit: int) -> None:
    try:
        value = json.loads(text)
    except json.JSONDecodeError:
        return  # reported as malformed JSON by the parser, with its position
    except RecursionError as exc:
        raise _too_deep(line, src) from exc
    stack: list[tuple[object, int]] = [(value, 1)]
    while stack:
        node, level = stack.pop()
        if isinstance(node, (dict, list)):
            if level > limit:
                raise _too_deep(line, src)
            children = node.values() if isinstance(node, dict) else node
            stack.extend((child, level + 1) for child in children if isinstance(child, (dict, list)))


def _too_deep(line: int, src: SourceFile) -> SourceError:
    return SourceError(
        f"a record of source '{src.name}' is nested more than {MAX_DEPTH} levels deep",
        file=src.shown,
        line=line,
        reason="too_deep",
        hint="export the records flat (one object per line, nested at most a few levels)",
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
