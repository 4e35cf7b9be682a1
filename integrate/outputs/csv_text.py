"""CSV text of a frame made a column at a time with arrow kernels: the bytes pandas' ``to_csv`` writes.

pandas passes every row through Python's csv module, which at a million rows is most of a run's
write time. Here each column is turned into text once (numbers formatted as pandas formats them),
a cell is put in quotes where the csv module would quote it (``QUOTE_MINIMAL``: it holds the
delimiter, the quote character or a character of the line ending; quotes inside are doubled),
and the cells of each row are joined by arrow. ``tests/test_csv_text.py`` compares the output
with ``to_csv`` byte for byte.

Handled column types: text (object columns holding only ``str``, pandas strings), NumPy integers,
floats and booleans. For a frame with any other column, or fewer than two columns (the csv
module quotes a row that is one empty cell), ``text_columns`` returns None and the caller writes
the frame with pandas.
"""

from __future__ import annotations

import csv
import io
import os
from collections.abc import Callable, Iterable
from typing import BinaryIO

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

ROWS_PER_BLOCK = 200_000  # rows joined at a time: bounds the memory the text of one block takes

_REGEX_ESCAPES = {"\n": r"\n", "\r": r"\r", "\\": r"\\", "]": r"\]", "^": r"\^", "-": r"\-"}


def text_array(series: pd.Series) -> pa.Array | pa.ChunkedArray | None:
    """A text column as an arrow string array (missing values null); None if it holds anything but text."""
    dtype = series.dtype
    try:
        if dtype == np.dtype(object):
            if pd.api.types.infer_dtype(series, skipna=True) not in ("string", "empty"):
                return None
            return pa.array(series.to_numpy(), type=pa.string(), from_pandas=True)
        if isinstance(dtype, pd.StringDtype):
            if dtype.storage == "python":
                return pa.array(np.asarray(series.array), type=pa.string(), from_pandas=True)
            return pa.array(series.array).cast(pa.string())
    except (pa.ArrowInvalid, pa.ArrowTypeError):
        return None  # e.g. a lone surrogate: let pandas raise its own error about it
    return None


def _number_text(series: pd.Series) -> pa.Array | None:
    """Numbers as pandas' CSV writer prints them (NumPy's ``astype(str)``; missing floats empty)."""
    values = series.to_numpy()
    if values.dtype.kind == "b":
        return pc.if_else(pa.array(values), "True", "False")
    if values.dtype.kind in "iu":
        return pc.cast(pa.array(values), pa.string())
    if values.dtype.kind == "f":
        if values.dtype.itemsize in (2, 4, 8):  # each distinct number printed once; told apart by
            codes, bits = pd.factorize(values.view(f"i{values.dtype.itemsize}"))  # bits: -0.0 keeps its sign
            text = pa.array(bits.view(values.dtype).astype(str)).take(pa.array(codes))
        else:
            text = pa.array(values.astype(str))
        return pc.if_else(pa.array(np.isnan(values)), pa.scalar(None, pa.string()), text)
    return None


TextArrays = dict[str, "pa.Array | pa.ChunkedArray | None"]


def text_arrays(frame: pd.DataFrame) -> TextArrays:
    """``text_array`` of each text column: made once, for both the CSV and the Parquet file of a table."""
    return {c: text_array(frame[c]) for c in frame.columns
            if frame[c].dtype == np.dtype(object) or isinstance(frame[c].dtype, pd.StringDtype)}


def text_columns(frame: pd.DataFrame, known: TextArrays | None = None
                 ) -> dict[str, pa.Array | pa.ChunkedArray] | None:
    """Each column of ``frame`` as arrow text (missing values null), or None when one can't be rendered here.

    ``known``: text arrays already made of these very columns (``text_arrays``).
    """
    if frame.shape[1] < 2 or not frame.columns.is_unique:
        return None
    known = known or {}
    out: dict[str, pa.Array | pa.ChunkedArray] = {}
    for column in frame.columns:
        series = frame[column]
        is_numpy = isinstance(series.dtype, np.dtype) and series.dtype.kind in "biuf"
        if is_numpy:
            text = _number_text(series)
        else:
            text = known[column] if column in known else text_array(series)
        if text is None:
            return None
        out[column] = text
    return out


def _quoted_where_needed(text: pa.Array, specials: str) -> pa.Array:
    pattern = "[" + "".join(_REGEX_ESCAPES.get(c, c) for c in specials) + "]"
    needs = pc.match_substring_regex(text, pattern)
    if not pc.any(needs).as_py():
        return text
    quote, empty = pa.scalar('"', text.type), pa.scalar("", text.type)
    quoted = pc.binary_join_element_wise(quote, pc.replace_substring(text, '"', '""'), quote, empty)
    return pc.if_else(needs, quoted, text)


def write_text_columns(header: Iterable[object], columns: list[pa.Array | pa.ChunkedArray], handle: BinaryIO,
                       lineterminator: str = os.linesep,
                       prepare: Callable[[int, pa.Array], pa.Array] | None = None) -> None:
    """Write a header row and the rows of ``columns`` (text, null = empty cell) as CSV to a binary handle.

    The dialect is the one pandas' ``to_csv`` uses by default: ``,`` between cells, ``"`` around
    a cell holding ``,``, ``"`` or a line-ending character, quotes doubled, ``lineterminator``
    after each row. Cells holding a carriage return must not be given here when lines end in
    ``\\n`` (the csv module leaves such a cell unquoted; see ``tables.write_csv``).

    ``prepare(i, cells)``, if given, changes a block of column ``i``'s cells before they are
    quoted (formula cells get their quote there). Columns are taken a block of rows at a time,
    so no copy of a whole column is made.
    """
    head = io.StringIO()
    csv.writer(head, lineterminator=lineterminator).writerow(list(header))
    handle.write(head.getvalue().encode("utf-8"))
    specials = ',"' + "".join(sorted(set(lineterminator)))
    rows = len(columns[0]) if columns else 0
    for start in range(0, rows, ROWS_PER_BLOCK):
        cells = []
        for i, column in enumerate(columns):
            block = column.slice(start, ROWS_PER_BLOCK)
            if isinstance(block, pa.ChunkedArray):
                block = block.combine_chunks()
            block = block.cast(pa.large_string())  # 64-bit offsets: the joined rows may pass 2 GB
            if prepare is not None:
                block = prepare(i, block)
            cells.append(_quoted_where_needed(pc.fill_null(block, ""), specials))
        lines = pc.binary_join_element_wise(*cells, pa.scalar(",", pa.large_string()))
        lines = pc.binary_join_element_wise(lines, pa.scalar("", pa.large_string()),
                                            pa.scalar(lineterminator, pa.large_string()))
        for chunk in (lines.chunks if isinstance(lines, pa.ChunkedArray) else [lines]):
            _write_string_data(chunk, handle)


def _write_string_data(lines: pa.Array, handle: BinaryIO) -> None:
    """The bytes of a null-free large-string array, one after another, straight from its data buffer."""
    if len(lines) == 0:
        return
    _, offsets, data = lines.buffers()
    bounds = np.frombuffer(offsets, dtype=np.int64)[lines.offset: lines.offset + len(lines) + 1]
    handle.write(memoryview(data)[int(bounds[0]): int(bounds[-1])])
