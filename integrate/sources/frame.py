"""The text frame every reader returns: source columns as pandas "string", plus ``_row``.

Readers differ in how they find records; they agree on how a cell becomes text, so that a
value looks the same whichever format it came from (``45.0`` -> ``"45"``, a midnight
datetime -> ``"2024-05-01"``, ``True`` -> ``"true"``, a list -> its JSON text).
"""

from __future__ import annotations

import datetime as dt
import decimal
import json
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pandas as pd

from integrate.columns import ROW
from integrate.errors import SourceError


@dataclass(frozen=True)
class SourceFile:
    """Where a reader reads from, and how to name it in messages."""

    path: str  # resolved location (file path, or a database URL)
    shown: str  # the path or URL as the user wrote it
    name: str  # the source's short name


class ReadFailure(NamedTuple):
    """A cell the reader could not turn into a value (left empty, listed in ``failures.csv``)."""

    row: int  # the record's ``_row``
    column: str
    value: str
    reason: str
    message: str


_FAILURES = "read_failures"  # key in DataFrame.attrs; a tuple, so pandas can copy and compare it


def attach_failures(frame: pd.DataFrame, failures: Sequence[ReadFailure]) -> None:
    """Note the cells a reader could not read on the frame it returns."""
    frame.attrs[_FAILURES] = tuple(frame.attrs.get(_FAILURES, ())) + tuple(failures)


def read_failures(frame: pd.DataFrame) -> list[ReadFailure]:
    """The cells the reader of ``frame`` could not read."""
    return [ReadFailure(*f) for f in frame.attrs.get(_FAILURES, ())]


def read_text(path: Path, encoding: str, src: SourceFile) -> str:
    """The whole file as text (a UTF-8 byte-order mark is dropped).

    Raises:
        SourceError: ``bad_encoding`` naming the line of the first byte that does not
            decode, or ``unknown_encoding``.
    """
    data = path.read_bytes()
    try:
        text = data.decode(encoding)
    except LookupError as exc:
        raise SourceError(
            f"unknown encoding '{encoding}' for source '{src.name}'",
            file=src.shown,
            value=encoding,
            reason="unknown_encoding",
            hint="set `encoding` to a Python codec name such as utf-8, cp1252 or latin-1",
        ) from exc
    except UnicodeDecodeError as exc:
        raise SourceError(
            f"source '{src.name}' is not valid {encoding} "
            f"(byte {data[exc.start:exc.start + 1]!r} cannot be decoded)",
            file=src.shown,
            line=data.count(b"\n", 0, exc.start) + 1,
            value=encoding,
            reason="bad_encoding",
            hint="set `encoding` in the mapping's read section to the file's encoding "
            "(often cp1252 or latin-1)",
        ) from exc
    return text.removeprefix("\ufeff")


def number_text(value: float | int) -> str:
    """Text of a number without a spurious ``.0``: 45.0 -> "45", 172.5 -> "172.5"."""
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    number = float(value)
    if math.isfinite(number) and number.is_integer():
        return str(int(number))
    return repr(number)  # shortest text that reads back as the same float


def datetime_text(value: dt.datetime | dt.date | dt.time) -> str:
    """ISO 8601 text; a datetime at midnight keeps only its date."""
    if isinstance(value, dt.datetime):
        if value.tzinfo is None and value.time() == dt.time(0, 0):
            return value.date().isoformat()
        return value.isoformat(timespec="seconds" if value.microsecond == 0 else "microseconds")
    if isinstance(value, dt.time):
        return value.isoformat(timespec="seconds" if value.microsecond == 0 else "microseconds")
    return value.isoformat()


def cell_text(value: object) -> str:
    """Text of one hashable cell value (called once per distinct value)."""
    if isinstance(value, str):
        return value
    if isinstance(value, (bool, np.bool_, int, np.integer, float, np.floating)):
        return number_text(value)  # type: ignore[arg-type]
    if isinstance(value, pd.Timestamp):
        return datetime_text(value.to_pydatetime())
    if isinstance(value, (dt.datetime, dt.date, dt.time)):
        return datetime_text(value)
    if isinstance(value, decimal.Decimal):
        return str(value)
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace")
    return str(value)


def _container_text(value: object) -> str:
    """JSON text of a list or mapping cell."""
    if isinstance(value, np.ndarray):
        value = value.tolist()
    return json.dumps(value, ensure_ascii=False, default=str)


_CONTAINERS = (list, dict, tuple, np.ndarray)


def cells_to_text(values: pd.Series) -> pd.Series:
    """Every cell as text (pandas "string"); missing and blank cells become <NA>.

    Text is computed once per distinct (type, value): values are grouped by Python type
    first, because ``1 == 1.0 == True`` would otherwise merge into one distinct value.
    """
    dtype = values.dtype
    if isinstance(dtype, pd.StringDtype):
        return blank_to_na(values.copy())
    if pd.api.types.is_bool_dtype(dtype):
        return values.map({True: "true", False: "false"}).astype("string")
    if pd.api.types.is_integer_dtype(dtype):
        return values.astype("string")
    if pd.api.types.is_float_dtype(dtype):
        distinct = values.dropna().drop_duplicates()
        return values.map(dict(zip(distinct, (number_text(v) for v in distinct)))).astype("string")
    if isinstance(dtype, np.dtype) and dtype.kind == "M":  # naive datetime64, any unit
        return _datetimes_to_text(values)
    if pd.api.types.infer_dtype(values, skipna=True) == "string":  # all text already (one C pass)
        return blank_to_na(values.astype("string"))
    cells = values.astype(object).to_numpy()
    texts = np.full(len(cells), None, dtype=object)
    positions = np.flatnonzero(pd.notna(cells))
    kinds = pd.Series(cells[positions], dtype=object).map(type)  # one pass; few groups
    for kind in pd.unique(kinds):
        at = positions[(kinds == kind).to_numpy()]
        group = pd.Series(cells[at], dtype=object)
        if issubclass(kind, _CONTAINERS):
            # lists cannot be hashed, so no distinct-value pass: JSON sources only, and rare
            texts[at] = group.map(_container_text).to_numpy()
        else:
            distinct = group.drop_duplicates()  # pd.unique would merge "a" and "a\x00"
            lookup = dict(zip(distinct, (cell_text(v) for v in distinct)))
            texts[at] = group.map(lookup).to_numpy()
    out = pd.Series(texts, index=values.index, dtype="string", name=values.name)
    return blank_to_na(out)


def _datetimes_to_text(values: pd.Series) -> pd.Series:
    """Naive datetimes as ISO text (vectorised over distinct values); midnight keeps only the date."""
    distinct = values.dropna().drop_duplicates()
    text = distinct.dt.strftime("%Y-%m-%dT%H:%M:%S")
    fraction = (distinct.dt.microsecond != 0).to_numpy()
    if fraction.any():
        text = text.mask(fraction, distinct.dt.strftime("%Y-%m-%dT%H:%M:%S.%f"))
    midnight = (distinct == distinct.dt.normalize()).to_numpy()
    text = text.mask(midnight, distinct.dt.strftime("%Y-%m-%d"))
    return values.map(dict(zip(distinct, text))).astype("string")


def blank_to_na(values: pd.Series) -> pd.Series:
    """Empty and whitespace-only text becomes <NA>; other text is kept as it is."""
    blank = values.str.strip().eq("").fillna(False).astype(bool)
    return values.mask(blank)


def unique_names(names: Sequence[str]) -> list[str]:
    """Column names made unique the way pandas does for CSV headers (``a``, ``a.1``...)."""
    seen: dict[str, int] = {}
    taken = set(names)
    out: list[str] = []
    for name in names:
        if name not in seen:
            seen[name] = 0
            out.append(name)
            continue
        count = seen[name]
        while True:
            count += 1
            candidate = f"{name}.{count}"
            if candidate not in taken:
                break
        seen[name] = count
        taken.add(candidate)
        out.append(candidate)
    return out


def text_frame(columns: pd.DataFrame, rows: Sequence[int] | np.ndarray, src: SourceFile) -> pd.DataFrame:
    """The reader's result: text columns plus ``_row``, without records that hold no value.

    Args:
        columns: one column per source column, any dtypes, in file order.
        rows: the ``_row`` number of each record, aligned with ``columns``.
        src: where the records came from (for messages).

    Raises:
        SourceError: a source column is itself called ``_row``.
    """
    from integrate.sources.limits import check_columns, read_limits

    check_columns(columns.shape[1], read_limits(), src.shown, src.name)  # before converting each column
    names = [str(c) for c in columns.columns]
    if ROW in names:
        raise SourceError(
            f"source '{src.name}' has a column named '{ROW}', a name kept for row numbers",
            file=src.shown,
            column=ROW,
            reason="reserved_column",
            hint=f"rename the '{ROW}' column in the export",
        )
    data = {
        name: cells_to_text(columns.iloc[:, i].reset_index(drop=True)) for i, name in enumerate(names)
    }
    frame = pd.DataFrame(data, index=pd.RangeIndex(len(columns)))
    frame[ROW] = np.asarray(rows, dtype=np.int64)
    if names:
        # blank lines and empty sheet rows are not records; _row keeps the file's numbering
        has_value = frame[names].notna().any(axis=1)
        frame = frame[has_value].reset_index(drop=True)
    return frame
