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

SAFE_CELLS_ENV = "INTEGRATE_SAFE_CELLS"
TRIGGERS = ("=", "+", "-", "@", "\t", "\r")  # OWASP CSV injection: characters that start a formula
_PLAIN_NUMBER = re.compile(r"[+-]?\d+(?:[.,]\d+)?")


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
        codes, distinct = pd.factorize(series)  # each distinct value is looked at once
        quote = np.array([needs_quote(v) for v in distinct], dtype=bool)
        if not quote.any():
            continue
        risky = np.zeros(len(series), dtype=bool)
        risky[codes >= 0] = quote[codes[codes >= 0]]
        if out is None:
            out = frame.copy(deep=False)
        fixed = series.astype(object).copy()
        fixed[risky] = "'" + fixed[risky].astype(str)
        out[column] = fixed
    return frame if out is None else out


def is_text(series: pd.Series) -> bool:
    return series.dtype == object or isinstance(series.dtype, pd.StringDtype)


def any_text_holds(frame: pd.DataFrame, needle: str) -> bool:
    """Whether any text cell of ``frame`` holds the character ``needle`` (each distinct value looked at once)."""
    for column in frame.columns:
        if is_text(frame[column]):
            distinct = [v for v in pd.unique(frame[column].dropna()) if isinstance(v, str)]
            if needle in "\x00".join(distinct):  # one search over the joined text (a NUL never matches)
                return True
    return False
