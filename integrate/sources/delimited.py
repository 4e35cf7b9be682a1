"""Delimited text files (CSV, TSV, semicolon-separated...)."""

from __future__ import annotations

import csv
import io
import mmap
import re
import warnings
from collections.abc import Iterable, Iterator
from pathlib import Path

import numpy as np
import pandas as pd

from integrate.errors import SourceError
from integrate.mapping.spec import ReadSpec
from integrate.sources.frame import SourceFile, read_text, text_frame
from integrate.sources.limits import ReadLimits, check_columns, over, read_limits

_PANDAS_LINE = re.compile(r"line (\d+)")


def read_delimited(path: Path, spec: ReadSpec, src: SourceFile) -> pd.DataFrame:
    """Read a delimited file; ``_row`` is the physical line where each record starts.

    The header is line 1. Blank lines are skipped but still counted, and a quoted value
    spanning several lines pushes the following records down by as many lines. NUL characters
    inside values are kept (the C parser would cut the value short at one).

    Raises:
        SourceError: ``bad_encoding`` (with the line of the first undecodable byte),
            ``unknown_encoding``, ``bad_csv`` (wrong number of fields, an unclosed quote),
            ``too_many_columns`` or ``cell_too_long`` (see ``sources.limits``).
    """
    limits = read_limits()
    _check_header_width(path, spec, src, limits)
    source: Path | io.StringIO = path
    encoding: str | None = spec.encoding
    stand_in = None
    if _has_nul(path, spec.encoding):
        text = read_text(path, spec.encoding, src)
        stand_in = next(chr(c) for c in range(0xE000, 0xF900) if chr(c) not in text)  # a private-use character
        source, encoding = io.StringIO(text.replace("\x00", stand_in)), None
    raw = _parse(source, encoding, path, spec, src)
    if stand_in is not None:
        raw = _restore_nul(raw, stand_in)
    check_columns(len(raw.columns), limits, src.shown, src.name)
    if over(path.stat().st_size, limits.max_cell_chars):
        _check_cell_length(raw, limits, src)
    return text_frame(raw, _record_lines(raw), src)


def _parse(source: Path | io.StringIO, encoding: str | None, path: Path, spec: ReadSpec,
           src: SourceFile) -> pd.DataFrame:
    # A one-character delimiter uses the fast C parser; a longer one is matched literally.
    one_char = len(spec.delimiter) == 1
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", pd.errors.ParserWarning)
            frame = pd.read_csv(
                source,
                sep=spec.delimiter if one_char else re.escape(spec.delimiter),
                engine="c" if one_char else "python",
                quotechar=spec.quotechar,
                encoding=encoding,
                dtype=str,
                keep_default_na=False,
                skip_blank_lines=False,  # keeps one row per physical line, so rows map to lines
                index_col=False,
            )
        if any(issubclass(w.category, pd.errors.ParserWarning) for w in caught):
            # a row with more fields than the header: pandas drops the extra ones with only a warning
            line, fields, width = _first_long_row(source, encoding or "utf-8", spec)
            raise SourceError(
                f"source '{src.name}' has a row with {fields} fields where the header has {width}; "
                "the extra values would be lost",
                file=src.shown,
                line=line,
                reason="bad_csv",
                hint="check `delimiter` and `quotechar`, and that every row has as many fields as the header "
                "(a value holding the delimiter must be quoted)",
            )
        return frame
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
        raise SourceError(
            f"source '{src.name}' holds no header row (the file is blank)",
            file=src.shown,
            line=1,
            reason="empty_file",
            hint="export the source again; an export with no records still has a header row",
        ) from None
    except (pd.errors.ParserError, csv.Error, ValueError, OverflowError) as exc:
        found = _PANDAS_LINE.search(str(exc))
        raise SourceError(
            f"source '{src.name}' could not be split into fields: {exc}",
            file=src.shown,
            # pandas counts records, not physical lines: exact unless a quoted value spans lines
            line=int(found.group(1)) if found else None,
            reason="bad_csv",
            hint="check `delimiter` and `quotechar` (an unclosed quote runs to the end of the file), and that "
            "every row has as many fields as the header",
        ) from exc


def _first_long_row(source: Path | io.StringIO, encoding: str, spec: ReadSpec) -> tuple[int | None, int, int]:
    """(line, fields, header fields) of the first record with more fields than the header.

    Only called when the parser has warned, so reading the file a second time costs nothing in
    the usual case. A delimiter longer than one character is split literally, without quotes."""
    if isinstance(source, io.StringIO):
        source.seek(0)
        handle: io.TextIOBase = source
    else:
        handle = source.open(encoding=encoding, newline="", errors="replace")
    with handle:
        if len(spec.delimiter) == 1:
            reader = csv.reader(handle, delimiter=spec.delimiter, quotechar=spec.quotechar)

            def starts() -> Iterator[tuple[int, list[str]]]:
                end = 0  # a record starts on the line after the previous one ended
                for row in reader:
                    yield end + 1, row
                    end = reader.line_num
            rows: Iterable[tuple[int, list[str]]] = starts()
        else:
            rows = ((n, line.rstrip("\r\n").split(spec.delimiter)) for n, line in enumerate(handle, start=1))
        width = None
        for line, row in rows:
            if width is None:
                width = len(row)
            elif len(row) > width:
                return line, len(row), width
    return None, 0, width or 0


_WIDE_ENCODINGS = re.compile(r"utf[-_]?(16|32)", re.IGNORECASE)


def _has_nul(path: Path, encoding: str) -> bool:
    """Whether the text holds a NUL character (a NUL byte, in encodings where bytes are characters)."""
    if _WIDE_ENCODINGS.match(encoding.strip()):
        try:
            return "\x00" in path.read_bytes().decode(encoding)
        except (UnicodeDecodeError, LookupError):
            return False  # the parser reports the encoding problem
    with path.open("rb") as handle, mmap.mmap(handle.fileno(), 0, access=mmap.ACCESS_READ) as data:
        return data.find(b"\x00") != -1


def _restore_nul(raw: pd.DataFrame, stand_in: str) -> pd.DataFrame:
    raw.columns = [str(c).replace(stand_in, "\x00") for c in raw.columns]
    for column in raw.columns:
        values = raw[column]
        holds = values.str.contains(stand_in, regex=False).fillna(False).to_numpy(dtype=bool)
        if holds.any():
            raw[column] = values.mask(holds, values.str.replace(stand_in, "\x00", regex=False))
    return raw


def _check_header_width(path: Path, spec: ReadSpec, src: SourceFile, limits: ReadLimits) -> None:
    """Refuse a file with more columns than the limit before parsing it (100,000 columns take minutes)."""
    if limits.max_columns <= 0:
        return
    with path.open("rb") as handle:
        first = handle.readline(64 << 20)
    try:
        text = first.decode(spec.encoding if not _WIDE_ENCODINGS.match(spec.encoding) else "latin-1",
                            errors="ignore")
    except LookupError:
        read_text(path, spec.encoding, src)  # raises unknown_encoding
        raise
    if text.count(spec.delimiter) + 1 <= limits.max_columns:
        return
    # the rough count also counts delimiters inside quotes: split the header line alone to be sure
    # (the csv module, not pandas: pandas takes minutes over a 100,000-name header)
    if len(spec.delimiter) == 1 and not text.count(spec.quotechar) % 2:
        try:
            count = len(next(csv.reader([text.rstrip("\r\n")], delimiter=spec.delimiter,
                                        quotechar=spec.quotechar)))
        except (csv.Error, StopIteration):
            return  # the full parse reports the problem with its line
    else:
        count = text.count(spec.delimiter) + 1
    check_columns(count, limits, src.shown, src.name)


def _check_cell_length(raw: pd.DataFrame, limits: ReadLimits, src: SourceFile) -> None:
    for column in raw.columns:
        lengths = raw[column].str.len()
        if lengths.max(skipna=True) > limits.max_cell_chars:
            at = int(lengths.fillna(0).to_numpy().argmax())
            line = int(_record_lines(raw)[at])
            raise SourceError(
                f"a value of source '{src.name}' is {int(lengths.iloc[at]):,} characters long, more than the "
                f"limit of {limits.max_cell_chars:,}",
                file=src.shown,
                line=line,
                column=str(column),
                reason="cell_too_long",
                hint="check `quotechar` (an unclosed quote swallows the rest of the file), or raise "
                "INTEGRATE_MAX_CELL_CHARS",
            )


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

