"""Spreadsheet-formula injection: text cells that a spreadsheet would run as a formula get a quote.

A value such as ``=HYPERLINK("http://…")`` or ``@SUM(…)`` in an export would be run by a
spreadsheet program opening our CSV or Excel file. Following OWASP's CSV-injection guidance, a
text cell beginning with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return is written with a
single quote in front (``'=1+2``), which spreadsheets show as text.

Only text cells are touched: numbers in numeric columns (a negative amount) are numbers, not
formulas. A text cell that is a plain signed number or an E.164 phone (``-12.50``, ``+447700900123``)
can call no function and is left as it is (our own choice, so that phones stay in E.164).

Machine consumers that want the raw values set ``INTEGRATE_SAFE_CELLS=0`` (see README).
"""

from __future__ import annotations

import os
import re

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from .csv_text import text_array

SAFE_CELLS_ENV = "INTEGRATE_SAFE_CELLS"
TRIGGERS = ("=", "+", "-", "@", "\t", "\r")  # OWASP CSV injection: characters that start a formula
_PLAIN_NUMBER = re.compile(r"[+-]?\d+(?:[.,]\d+)?")
_PLAIN_ASCII_NUMBER = r"^[+-]?[0-9]+(?:[.,][0-9]+)?$"  # the same on ASCII text, for arrow (RE2: $ ends the text)


def guard_enabled() -> bool:
    """False only when ``INTEGRATE_SAFE_CELLS`` is 0 / false / no / off."""
    return os.environ.get(SAFE_CELLS_ENV, "1").strip().lower() not in ("0", "false", "no", "off")


def needs_quote(value: object) -> bool:
    return (isinstance(value, str) and value.startswith(TRIGGERS)
            and _PLAIN_NUMBER.fullmatch(value) is None)


def neutralise_value(value: object) -> object:
    return "'" + value if needs_quote(value) else value  # type: ignore[operator]


def neutralise_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` with every dangerous text cell quoted (the frame itself if none is)."""
    if not guard_enabled():
        return frame
    out: pd.DataFrame | None = None
    for column in frame.columns:
        series = frame[column]
        if not is_text(series):
            continue  # numbers, dates and booleans are written as values, never run
        risky = quote_mask(series)
        if not risky.any():
            continue
        if out is None:
            out = frame.copy(deep=False)
        fixed = series.astype(object).copy()
        fixed[risky] = "'" + fixed[risky].astype(str)
        out[column] = fixed
    return frame if out is None else out


def quote_mask(series: pd.Series) -> np.ndarray:
    """Which cells of a text column need the quote (``needs_quote``), one vectorised pass over the column."""
    text = text_array(series)
    if text is None:  # text mixed with other values: each distinct value is looked at once
        codes, distinct = pd.factorize(series)
        quote = np.array([needs_quote(v) for v in distinct], dtype=bool)
        risky = np.zeros(len(series), dtype=bool)
        risky[codes >= 0] = quote[codes[codes >= 0]]
        return risky
    return quote_cells(text)


def quote_cells(text: pa.Array | pa.ChunkedArray) -> np.ndarray:
    """``needs_quote`` for every cell of an arrow string array (a null cell needs none).

    A cell starting with a trigger needs the quote unless it is a plain number. On ASCII text the
    arrow regex below decides that exactly as ``_PLAIN_NUMBER`` does; a non-ASCII cell might hold
    digits of another script (``\\d`` in Python's ``re``), so those few are decided by ``needs_quote``.
    """
    if isinstance(text, pa.ChunkedArray):
        text = text.cast(pa.large_string()).combine_chunks()
    raw = text.view(pa.large_binary() if pa.types.is_large_string(text.type) else pa.binary())
    first = pc.is_in(pc.binary_slice(raw, 0, 1), value_set=pa.array([t.encode() for t in TRIGGERS], raw.type))
    at = np.flatnonzero(np.asarray(pc.fill_null(first, False), dtype=bool))
    mask = np.zeros(len(text), dtype=bool)
    if not len(at):
        return mask
    starting = text.take(pa.array(at))  # the cells starting with a trigger: phones, signed numbers, formulas
    quote = ~np.asarray(pc.match_substring_regex(starting, _PLAIN_ASCII_NUMBER), dtype=bool)
    unsure = np.flatnonzero(quote & ~np.asarray(pc.string_is_ascii(starting), dtype=bool))
    if len(unsure):  # non-ASCII ones: few, checked one by one
        quote[unsure] = [needs_quote(v) for v in starting.take(pa.array(unsure)).to_pylist()]
    mask[at] = quote
    return mask


def neutralise_cells(text: pa.Array) -> pa.Array:
    """An arrow string array with every dangerous cell quoted, as ``neutralise_frame`` does to a column."""
    mask = quote_cells(text)
    if not mask.any():
        return text
    picked = pa.array(mask)
    quoted = pc.binary_join_element_wise(pa.scalar("'", text.type), text.filter(picked), pa.scalar("", text.type))
    return pc.replace_with_mask(text, picked, quoted)


def is_text(series: pd.Series) -> bool:
    return series.dtype == object or isinstance(series.dtype, pd.StringDtype)


def any_text_holds(frame: pd.DataFrame, needle: str) -> bool:
    """Whether any text cell of ``frame`` holds the character ``needle`` (one arrow search per column)."""
    for column in frame.columns:
        series = frame[column]
        if not is_text(series):
            continue
        text = text_array(series)
        if text is None:  # text mixed with other values
            distinct = [v for v in pd.unique(series.dropna()) if isinstance(v, str)]
            if needle in "\x00".join(distinct):  # one search over the joined text (a NUL never matches)
                return True
        elif pc.any(pc.match_substring(text, needle)).as_py():
            return True
    return False
