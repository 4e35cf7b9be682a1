"""Read one source into a frame of text: every source column as pandas "string", plus ``_row``.

Readers keep values as the file holds them (as text; blank cells become <NA>) and leave
parsing to the mapping stage. ``_row`` (int64) says where each record sits in its file:

- csv: the physical line where the record starts (header = line 1, first record = line 2);
- excel: the sheet row (header row = 1 when the table starts at the top);
- json lines: the line number; json array: the 1-based element index;
- parquet, sqlite, sql: the 1-based row index.

Records holding no value at all (blank lines, empty sheet rows) are left out; the
numbering of the others is unchanged.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pandas as pd
import sqlalchemy as sa

from integrate.errors import SourceError
from integrate.mapping.apply import FAILURE_COLUMNS, MappedSource
from integrate.mapping.spec import ReadSpec
from integrate.sources.columnar import read_parquet
from integrate.sources.database import read_database, read_sqlite
from integrate.sources.delimited import read_delimited
from integrate.sources.frame import SourceFile, read_failures
from integrate.sources.json_records import read_json_records
from integrate.sources.limits import over, read_limits, time_limit
from integrate.sources.workbook import read_workbook

__all__ = ["read_source", "add_read_failures"]

_FileReader = Callable[[Path, ReadSpec, SourceFile], pd.DataFrame]

_FILE_READERS: dict[str, _FileReader] = {
    "csv": read_delimited,
    "excel": read_workbook,
    "json": read_json_records,
    "jsonl": read_json_records,
    "parquet": read_parquet,
    "sqlite": read_sqlite,
}


def read_source(spec: ReadSpec, root: Path, *, name: str) -> pd.DataFrame:
    """Read the source ``spec`` describes; a relative path is taken from ``root``.

    Args:
        spec: the mapping file's ``read`` section.
        root: the workspace folder.
        name: the source's short name, used in messages.

    Returns:
        One pandas "string" column per source column plus the int64 column ``_row``.

    Raises:
        SourceError: the file is missing (``missing_file``) or cannot be read; ``reason``
            says why (``bad_encoding``, ``missing_sheet``, ``bad_json``, ``missing_table``...).

    Example:
        >>> import tempfile
        >>> with tempfile.TemporaryDirectory() as folder:
        ...     _ = Path(folder, "people.csv").write_text("id,height\\n1,172.5\\n\\n2, \\n")
        ...     frame = read_source(ReadSpec(format="csv", path="people.csv"), Path(folder), name="demo")
        >>> frame
          id height  _row
        0  1  172.5     2
        1  2   <NA>     4
    """
    if spec.format == "sql":
        url = spec.url or ""
        return read_database(spec, SourceFile(path=url, shown=_shown_url(url), name=name))
    shown = spec.path or ""
    path = Path(root) / shown
    if not path.is_file():
        raise SourceError(
            f"file of source '{name}' not found" + (" (it is a folder)" if path.is_dir() else ""),
            file=shown,
            value=str(path),
            reason="missing_file",
            hint=f"check `path` in the mapping's read section; a relative path starts at {root}",
        )
    limits = read_limits()
    try:
        size = path.stat().st_size
        with path.open("rb"):
            pass  # unreadable (permissions) shows here, with a clear message
    except OSError as exc:
        raise SourceError(
            f"file of source '{name}' cannot be opened: {exc.strerror or exc}",
            file=shown,
            reason="unreadable_file",
            hint="check the file's permissions",
        ) from exc
    if size == 0:
        raise SourceError(
            f"file of source '{name}' is empty (0 bytes)",
            file=shown,
            reason="empty_file",
            hint="export the source again; an export with no records still has a header row",
        )
    if over(size, limits.max_bytes):
        raise SourceError(
            f"file of source '{name}' is {size:,} bytes, more than the limit of {limits.max_bytes:,}",
            file=shown,
            reason="file_too_large",
            hint="check the file; raise INTEGRATE_MAX_SOURCE_BYTES if the export really is this large",
        )
    with time_limit(limits, shown, name):
        return _FILE_READERS[spec.format](path, spec, SourceFile(path=str(path), shown=shown, name=name))


def add_read_failures(mapped: MappedSource, raw: pd.DataFrame, data_file: str) -> MappedSource:
    """Put the cells the reader could not read among the mapped source's failures (``failures.csv``)."""
    lost = read_failures(raw)
    if not lost:
        return mapped
    part = pd.DataFrame({
        "source": mapped.name,
        "file": data_file,
        "row": [f.row for f in lost],
        "column": [f.column for f in lost],
        "value": [f.value for f in lost],
        "reason": [f.reason for f in lost],
        "message": [f.message for f in lost],
    }, columns=FAILURE_COLUMNS)
    frames = [f for f in (part, mapped.failures) if not f.empty]
    mapped.failures = pd.concat(frames, ignore_index=True) if len(frames) > 1 else part
    return mapped


def _shown_url(url: str) -> str:
    """The URL with its password hidden, for messages."""
    try:
        return sa.make_url(url).render_as_string(hide_password=True)
    except sa.exc.ArgumentError:
        return url
