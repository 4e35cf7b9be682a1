"""Delimited text files (CSV, TSV, semicolon-separated...)."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources.frame import SourceFile, read_text, text_frame

_PANDAS_LINE = re.compile(r"line (\d+)")


def read_delimited(path: Path, spec: ReadSpec, src: SourceFile) -> pd.DataFrame:
    """Read a delimited file; ``_row`` is the physical line where each record starts.

    The header is line 1. Blank lines are skipped but still counted, and a quoted value
    spanning several lines pushes the following records down by as many lines.

    Raises:
        SourceError: ``bad_encoding`` (with the line of the first undecodable byte),
            ``unknown_encoding``, or ``bad_csv`` (wrong number of fields).
    """
    # A one-character delimiter uses the fast C parser; a longer one is matched literally.
    one_char = len(spec.delimiter) == 1
    try:
        raw = pd.read_csv(
            path,
            sep=spec.delimiter if one_char else re.escape(spec.delimiter),
            engine="c" if one_char else "python",
            quotechar=spec.quotechar,
            encoding=spec.encoding,
            dtype=str,
            keep_default_na=False,
            skip_blank_lines=False,  # keeps one row per physical line, so rows map to lines
            index_col=False,
        )
    except UnicodeDecodeError as exc:
        read_text(path, spec.encoding, src)  # raises with the line of the first bad byte
        raise SourceError(
            f"source '{src.name}' is not valid {spec.encoding}: {exc}",
            file=src.shown,
            value=spec.encoding,
            reason="bad_encoding",
            hint="set `encoding` in the mapping's read section to the file's encoding",
        ) from exc
    except LookupError:
        read_text(path, spec.encoding, src)  # raises unknown_encoding
        raise
    except pd.errors.EmptyDataError:
        return text_frame(pd.DataFrame(), np.empty(0, dtype=np.int64), src)
    except pd.errors.ParserError as exc:
        found = _PANDAS_LINE.search(str(exc))
        raise SourceError(
            f"source '{src.name}' could not be split into fields: {exc}",
            file=src.shown,
            # pandas counts records, not physical lines: exact unless a quoted value spans lines
            line=int(found.group(1)) if found else None,
            reason="bad_csv",
            hint="check `delimiter` and `quotechar`, and that every row has as many fields as the header",
        ) from exc
    return text_frame(raw, _record_lines(raw), src)


def _record_lines(raw: pd.DataFrame) -> np.ndarray:
    """Physical line on which each record starts (header = line 1)."""
    header_lines = 1 + sum(str(name).count("\n") for name in raw.columns)
    lines = np.arange(len(raw), dtype=np.int64) + header_lines + 1
    if len(raw) and len(raw.columns):
        breaks = sum(raw[c].str.count("\n").fillna(0).to_numpy(dtype=np.int64) for c in raw.columns)
        if np.any(breaks):
            # each record starts below the extra lines of every quoted value before it
            lines = lines + np.concatenate(([0], np.cumsum(breaks)[:-1]))
    return lines

