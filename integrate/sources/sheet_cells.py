"""The cells of one worksheet, read from its XML in bulk instead of one Python call per cell.

openpyxl builds each cell in Python (about 20 µs a cell: a 56,000-row sheet of 8 columns takes
~10 s). Here one regular expression splits the sheet's ``<sheetData>`` into row and cell tokens
in C, and values are converted once per distinct text. The result is the grid openpyxl's
read-only ``iter_rows(min_row=1, values_only=True)`` gives, one row per sheet row, and the rules
are openpyxl's: the sheet's ``<dimension>`` bounds rows and columns, a row or cell without
``r`` follows the one before it, a row numbered at or below an earlier one is skipped, the
later of two cells in one place wins, numbers are int or float, date-styled numbers become
datetimes in the workbook's epoch.

Only the layout spreadsheet programs and libraries write is read this way: rows and cells in
the default namespace, each cell holding one ``<v>`` or one inline ``<is><t>`` string, no
formulas, no DTD. For anything else ``read_sheet_grid`` returns ``None`` and the caller reads the
sheet with openpyxl, so values, warnings and errors are openpyxl's either way. The parts of the
sheet outside ``<sheetData>`` (views, margins, extensions...) are still parsed by openpyxl, so a
damaged one fails or warns exactly as before.
"""

from __future__ import annotations

import io
import re
import xml.parsers.expat
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from openpyxl.utils.cell import column_index_from_string
from openpyxl.utils.datetime import from_excel
from openpyxl.worksheet._reader import WorkSheetParser, _cast_number

FAST_MAX_BYTES = 1 << 29  # 512 MiB of sheet XML: larger sheets stream through openpyxl (this holds the text)
_MAX_ROW = 1_048_576  # the last row of a sheet (Excel's limit); a larger number goes the careful way
_MAX_GRID_CELLS = 50_000_000  # rows x columns allocated at most; past that openpyxl streams the rows
_CHUNK_CHARS = 1 << 20  # sheet text tokenised per piece of ~1 M characters, ending after a </row>

_ATTRS = r'(?:\s+[\w:.-]+="[^"<&]*")*'  # further attributes, without entities (those go the careful way)
_CELL = (
    r'<(?P<cell>c)(?:\s+r="(?P<col>[A-Z]{1,3})[1-9]\d*")?(?:\s+s="(?P<s>\d{1,9})")?(?:\s+t="(?P<t>\w+)")?'
    r'(?P<c_more>' + _ATTRS + r')\s*'
    r'(?:/>|>(?:<(?P<v_tag>v)>(?P<v>[^<]*)</v>|<(?P<is_tag>is)><t' + _ATTRS + r'\s*(?:/>|>(?P<text>[^<]*)</t>)</is>)?'
    r'</c\s*>)'
)
_ROW = r'<(?P<row>row)(?:\s+r="(?P<row_r>\d{1,9})")?(?P<row_more>' + _ATTRS + r')\s*(?P<row_end>/?)>'
# cells first (the most frequent token); any other non-blank character is a token of its own, so
# nothing between the tokens is skipped unseen
_TOKEN = re.compile(r'\s*(?:' + _CELL + '|' + _ROW + r'|(?P<row_close></row)\s*>|(?P<other>\S))', re.S)
_GROUPS = {name: number - 1 for name, number in _TOKEN.groupindex.items()}  # findall tuple positions
_RESERVED_CELL_ATTRIBUTE = re.compile(r'(?:^|\s)[rst]=')
_RESERVED_ROW_ATTRIBUTE = re.compile(r'(?:^|\s)r=')
_ENTITY = re.compile(r"&(?:#x([0-9A-Fa-f]+)|#([0-9]+)|(lt|gt|amp|quot|apos));")
_NAMED = {"lt": "<", "gt": ">", "amp": "&", "quot": '"', "apos": "'"}
_TYPES = frozenset({"n", "s", "b", "str", "e", "inlineStr"})  # others (t="d") go the careful way


class _Unhandled(Exception):
    """The sheet holds something this reader leaves to openpyxl."""


@dataclass(frozen=True)
class SheetContext:
    """What openpyxl read from the rest of the workbook that the cells need."""

    shared_strings: Any  # sequence of text
    epoch: Any  # datetime of day 0
    date_styles: Any  # style indices of date formats
    timedelta_styles: Any  # style indices of duration formats
    max_row: int | None  # from <dimension>, as openpyxl read it
    max_col: int | None
    max_columns: int  # the column limit in force (0: none): a wider sheet goes the careful way


def read_sheet_grid(xml_data: bytes | bytearray, context: SheetContext) -> np.ndarray | None:
    """The sheet as a 2-D object array (sheet row 1 first), or ``None`` to read it with openpyxl."""
    if len(xml_data) > FAST_MAX_BYTES or b"<!DOCTYPE" in xml_data or b"<!ENTITY" in xml_data:
        return None
    if not _is_well_formed(xml_data):
        return None
    try:
        text = xml_data.decode("utf-8")
    except UnicodeDecodeError:
        return None
    head = text[:200]
    if head.startswith("<?xml") and re.search(r"encoding=['\"](?!utf-8['\"])", head[: head.find("?>")], re.I):
        return None
    start, end = _sheet_data_span(text)
    if start is None or end is None:
        return None
    rest = (text[:start] + text[end:]).encode("utf-8")
    if "\r" in text:  # XML reads a carriage return as a line feed
        text = text.replace("\r\n", "\n").replace("\r", "\n")
        start, end = _sheet_data_span(text)
        if start is None or end is None:
            return None
    try:
        grid = _grid(_pieces(text, start, end, context), context)
    except _Unhandled:
        return None
    _parse_rest(rest, context)
    return grid


def _is_well_formed(xml_data: bytes | bytearray) -> bool:
    """The check openpyxl's parser (expat, namespaces on) makes, without building anything."""
    parser = xml.parsers.expat.ParserCreate(namespace_separator="}")
    try:
        parser.Parse(xml_data, True)
    except xml.parsers.expat.ExpatError:
        return False
    return True


def _sheet_data_span(text: str) -> tuple[int | None, int | None]:
    """Where the content of the one ``<sheetData>`` element starts and ends."""
    found = list(re.finditer(r"<sheetData\s*(/?)>", text))
    if len(found) != 1 or text.count("sheetData") != (1 if found[0].group(1) else 2):
        return None, None
    opening = found[0]
    if opening.group(1):
        return opening.end(), opening.end()
    closing = text.find("</sheetData>", opening.end())
    return (opening.end(), closing) if closing >= 0 else (None, None)


def _parse_rest(xml_data: bytes, context: SheetContext) -> None:
    """Let openpyxl parse the sheet without its cells: its errors and warnings on the other parts stay."""
    parser = WorkSheetParser(io.BytesIO(xml_data), context.shared_strings, data_only=True, epoch=context.epoch,
                             date_formats=context.date_styles, timedelta_formats=context.timedelta_styles)
    for _ in parser.parse():
        raise _Unhandled  # defensive: the rows were cut out


_CELL_TOKEN, _ROW_OPEN, _ROW_EMPTY, _ROW_CLOSE = range(4)


@dataclass
class _Tokens:
    """The sheet data's tokens in document order, reduced to numbers and cell values."""

    kind: np.ndarray  # int8 per token: _CELL_TOKEN, _ROW_OPEN, _ROW_EMPTY (<row/>) or _ROW_CLOSE
    row_r: np.ndarray  # int64 per row token: its r, 0 when it has none
    column: np.ndarray  # int64 per cell: the column its r names, 0 when it has none
    value: np.ndarray  # object per cell: the value openpyxl gives (None for an empty cell)


def _pieces(text: str, start: int, end: int, context: SheetContext) -> _Tokens:
    """Tokenise the sheet data piece by piece (ending after a ``</row>``), reducing each piece at once.

    The tuples ``findall`` gives take several times the memory of the reduced arrays, so no more
    than one piece's exist at a time.
    """
    parts: list[_Tokens] = []
    cache: dict[str, dict[Any, object]] = {}  # value text (and style) -> value, over the whole sheet
    at = start
    while at < end:
        cut = text.find("</row>", at + _CHUNK_CHARS, end)
        stop = end if cut < 0 else cut + len("</row>")
        found = _TOKEN.findall(text, at, stop)
        escaped = text.find("&", at, stop) >= 0
        parts.append(_reduce(np.array(found, dtype=object).reshape(len(found), len(_GROUPS)), escaped, context,
                             cache))
        at = stop
    if not parts:
        empty = np.empty(0, dtype=np.int64)
        return _Tokens(empty.astype(np.int8), empty, empty, np.empty(0, dtype=object))
    return _Tokens(*(np.concatenate([getattr(p, f) for p in parts]) for f in ("kind", "row_r", "column", "value")))


def _reduce(found: np.ndarray, escaped: bool, context: SheetContext, cache: dict[str, dict[Any, object]]
            ) -> _Tokens:
    def group(name: str, at: np.ndarray) -> np.ndarray:
        return found[at, _GROUPS[name]]

    every = np.arange(len(found))
    if (group("other", every) != "").any():
        raise _Unhandled
    kind = np.full(len(found), _CELL_TOKEN, dtype=np.int8)
    kind[group("row", every) != ""] = _ROW_OPEN
    kind[(kind == _ROW_OPEN) & (group("row_end", every) != "")] = _ROW_EMPTY
    kind[group("row_close", every) != ""] = _ROW_CLOSE
    rows = np.flatnonzero((kind == _ROW_OPEN) | (kind == _ROW_EMPTY))
    cells = np.flatnonzero(kind == _CELL_TOKEN)
    if _has_reserved(group("row_more", rows), _RESERVED_ROW_ATTRIBUTE) or _has_reserved(
            group("c_more", cells), _RESERVED_CELL_ATTRIBUTE):
        raise _Unhandled  # attributes in another order than r, s, t
    letters = group("col", cells)
    column = np.zeros(len(cells), dtype=np.int64)
    named = letters != ""
    if named.any():
        distinct = pd.unique(letters[named])
        lookup = dict(zip(distinct, (column_index_from_string(c) for c in distinct)))
        column[named] = [lookup[c] for c in letters[named]]
    return _Tokens(kind, _to_int(group("row_r", rows)), column, _values(group, cells, escaped, context, cache))


def _grid(tokens: _Tokens, context: SheetContext) -> np.ndarray:
    kind = tokens.kind
    if not len(kind):
        return np.empty((0, 0), dtype=object)
    opens, is_close = kind == _ROW_OPEN, kind == _ROW_CLOSE
    is_row, is_cell = opens | (kind == _ROW_EMPTY), kind == _CELL_TOKEN
    depth = np.cumsum(opens.astype(np.int64) - is_close)  # after each token
    before = depth - opens + is_close
    if depth[-1] != 0 or (before[is_row] != 0).any() or (before[is_close] != 1).any() or (depth[is_cell] != 1).any():
        raise _Unhandled  # a cell outside a row, or rows inside rows: openpyxl's own reading decides
    first_row = np.zeros(len(tokens.row_r), dtype=bool)
    first_row[:1] = True
    row_number = _follow(tokens.row_r != 0, tokens.row_r, first_row)
    cell_row = np.cumsum(is_row)[is_cell] - 1  # the row element (document order) each cell sits in
    first_in_row = np.ones(len(cell_row), dtype=bool)
    first_in_row[1:] = cell_row[1:] != cell_row[:-1]
    column = _follow(tokens.column != 0, tokens.column, first_in_row)
    return _place(row_number, cell_row, column, tokens.value, context)


def _has_reserved(attributes: np.ndarray, reserved: re.Pattern[str]) -> bool:
    more = attributes[attributes != ""]
    return bool(len(more)) and any(reserved.search(a) for a in pd.unique(more))


def _to_int(texts: np.ndarray) -> np.ndarray:
    numbers = np.zeros(len(texts), dtype=np.int64)
    given = texts != ""
    if given.any():
        numbers[given] = pd.to_numeric(pd.Series(texts[given], dtype=object)).to_numpy(dtype=np.int64)
    return numbers


def _follow(given: np.ndarray, numbers: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Numbers where given, else one more than the one before (1 at a start without a number)."""
    anchor = given | starts
    positions = np.arange(len(given))
    last = np.maximum.accumulate(np.where(anchor, positions, 0))
    base = np.where(given, numbers, 1)
    return base[last] + (positions - last)


def _unescape(texts: np.ndarray) -> np.ndarray:
    """XML character and entity references in text (the five predefined entities and &#...;)."""
    out = texts.copy()
    escaped = np.flatnonzero(pd.Series(texts, dtype=object).str.contains("&", regex=False).to_numpy(dtype=bool))
    if len(escaped):
        distinct = pd.unique(texts[escaped])
        lookup = {t: _ENTITY.sub(_replace_entity, t) for t in distinct}
        out[escaped] = [lookup[t] for t in texts[escaped]]
    return out


def _replace_entity(found: re.Match[str]) -> str:
    if found.group(3):
        return _NAMED[found.group(3)]
    return chr(int(found.group(1), 16) if found.group(1) else int(found.group(2)))


def _values(group: Any, cells: np.ndarray, escaped: bool, context: SheetContext,
            cache: dict[str, dict[Any, object]]) -> np.ndarray:
    """Each cell's value as openpyxl gives it (data only), converted once per distinct text."""
    kinds = group("t", cells)
    kinds[kinds == ""] = "n"
    if not set(pd.unique(kinds)) <= _TYPES:
        raise _Unhandled
    has_v = group("v_tag", cells) != ""
    has_is = group("is_tag", cells) != ""
    raw = np.where(has_is, group("text", cells), group("v", cells))
    if escaped:  # the piece holds a '&': some values hold entity references
        raw = _unescape(raw)
    styles = _to_int(group("s", cells))
    values = np.full(len(cells), None, dtype=object)
    inline = (kinds == "inlineStr") & has_is
    values[inline] = raw[inline]
    filled = (kinds != "inlineStr") & has_v & (raw != "")
    for kind in pd.unique(kinds[filled]):
        at = np.flatnonzero(filled & (kinds == kind))
        values[at] = _convert(kind, raw[at], styles[at], context, cache)
    return values


def _convert(kind: str, texts: np.ndarray, styles: np.ndarray, context: SheetContext,
             cache: dict[str, dict[Any, object]]) -> list[object]:
    if kind in ("str", "e"):
        return list(texts)
    # a number's value depends on its cell style (dates); text and booleans on the text alone
    keys = list(zip(texts.tolist(), styles.tolist())) if kind == "n" else texts.tolist()
    lookup = cache.setdefault(kind, {})
    try:
        for key in dict.fromkeys(keys):
            if key in lookup:
                continue
            if kind == "s":
                lookup[key] = context.shared_strings[int(key)]
            elif kind == "b":
                lookup[key] = bool(int(key))
            else:
                text, style = key
                number = _cast_number(text)
                if style in context.date_styles:
                    number = from_excel(number, context.epoch, timedelta=style in context.timedelta_styles)
                lookup[key] = number
    except (ValueError, IndexError, OverflowError, TypeError) as exc:
        raise _Unhandled from exc  # openpyxl fails or warns on this cell: it reads the sheet
    return [lookup[k] for k in keys]


def _place(row_number: np.ndarray, cell_row: np.ndarray, column: np.ndarray, values: np.ndarray,
           context: SheetContext) -> np.ndarray:
    """The grid openpyxl's read-only rows give: gaps filled, rows past the dimension cut."""
    if (row_number > _MAX_ROW).any():
        raise _Unhandled
    count = len(row_number)
    broke = False
    if context.max_row is not None:
        past = np.flatnonzero(row_number > context.max_row)
        if len(past):
            count, broke = int(past[0]), True
    numbers = row_number[:count]
    earlier = np.maximum.accumulate(np.concatenate(([0], numbers[:-1]))) if count else numbers
    kept = numbers > earlier  # a row numbered at or below an earlier one is skipped
    height = int(numbers[kept].max()) if kept.any() else 0
    if broke:
        height = max(height, int(context.max_row or 0))
    in_kept = np.zeros(len(row_number), dtype=bool)
    in_kept[:count] = kept
    chosen = in_kept[cell_row]
    if context.max_col is not None:
        width = int(context.max_col)
        limit = np.full(len(row_number), width)
    else:
        # a row is as wide as its last cell's column; rows without cells are empty
        limit = np.zeros(len(row_number), dtype=np.int64)
        if len(cell_row):
            last = np.flatnonzero(np.append(cell_row[1:] != cell_row[:-1], True))
            limit[cell_row[last]] = column[last]
        width = int(limit[in_kept].max()) if in_kept.any() else 0
    if (context.max_columns and width > context.max_columns) or height * width > _MAX_GRID_CELLS:
        raise _Unhandled  # openpyxl's reading refuses or streams it
    chosen &= column <= limit[cell_row]
    grid = np.full((height, width), None, dtype=object)
    r = row_number[cell_row[chosen]] - 1
    c = column[chosen] - 1
    v = values[chosen]
    # the later of two cells in one place wins, as in openpyxl's row assembly
    place = r * max(width, 1) + c
    last = np.unique(place[::-1], return_index=True)[1]
    pick = len(place) - 1 - last
    grid[r[pick], c[pick]] = v[pick]
    return grid
