"""Size and time limits for reading one source, so that a hostile or broken file fails fast.

Each limit has a default sized far above real department exports and can be changed with an
environment variable (a whole number; 0 turns the limit off):

- ``INTEGRATE_MAX_SOURCE_BYTES``: largest source file read (default 4 GB);
- ``INTEGRATE_MAX_COLUMNS``: most columns in one source (default 10,000; a person table has tens);
- ``INTEGRATE_MAX_CELL_CHARS``: longest value in one cell (default 1,000,000 characters);
- ``INTEGRATE_MAX_XLSX_BYTES``: largest uncompressed sheet inside a workbook (default 4 GB);
- ``INTEGRATE_READ_SECONDS``: longest time one source may take to read (default 1,800 s).
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
from collections.abc import Iterator
from dataclasses import dataclass

from integrate.errors import ConfigError, SourceError


@dataclass(frozen=True)
class ReadLimits:
    max_bytes: int = 4_000_000_000
    max_columns: int = 10_000
    max_cell_chars: int = 1_000_000
    max_xlsx_bytes: int = 4_000_000_000
    seconds: int = 1_800


_VARIABLES = {
    "max_bytes": "INTEGRATE_MAX_SOURCE_BYTES",
    "max_columns": "INTEGRATE_MAX_COLUMNS",
    "max_cell_chars": "INTEGRATE_MAX_CELL_CHARS",
    "max_xlsx_bytes": "INTEGRATE_MAX_XLSX_BYTES",
    "seconds": "INTEGRATE_READ_SECONDS",
}


def read_limits() -> ReadLimits:
    """The limits in force: defaults, overridden by environment variables."""
    values: dict[str, int] = {}
    for name, variable in _VARIABLES.items():
        text = os.environ.get(variable, "").strip().replace("_", "")
        if not text:
            continue
        if not text.isdigit():
            raise ConfigError(f"{variable} must be a whole number (0 for no limit), not {text!r}")
        values[name] = int(text)
    return ReadLimits(**values)


def over(value: int, limit: int) -> bool:
    """Whether ``value`` breaks ``limit`` (0 means no limit)."""
    return limit > 0 and value > limit


def check_columns(count: int, limits: ReadLimits, shown: str, name: str) -> None:
    if over(count, limits.max_columns):
        raise SourceError(
            f"source '{name}' has {count:,} columns, more than the limit of {limits.max_columns:,}",
            file=shown,
            reason="too_many_columns",
            hint="check `delimiter` (a wrong one can split a row into thousands of fields), or raise "
            "INTEGRATE_MAX_COLUMNS if the export really is this wide",
        )


class _Timeout(BaseException):
    """Raised by the alarm inside the reader; BaseException so no reader's ``except Exception`` eats it."""


@contextlib.contextmanager
def time_limit(limits: ReadLimits, shown: str, name: str) -> Iterator[None]:
    """Stop a read that takes longer than ``limits.seconds`` (main thread only: signals need it).

    Other threads (a server) rely on the size limits alone.
    """
    usable = limits.seconds > 0 and threading.current_thread() is threading.main_thread() and hasattr(
        signal, "setitimer")
    if not usable or signal.getitimer(signal.ITIMER_REAL)[0] > 0:  # a caller's own alarm is running: keep it
        yield
        return

    def alarm(_signum: int, _frame: object) -> None:
        raise _Timeout

    previous = signal.signal(signal.SIGALRM, alarm)
    signal.setitimer(signal.ITIMER_REAL, limits.seconds)
    try:
        yield
    except _Timeout:
        raise SourceError(
            f"reading source '{name}' took longer than {limits.seconds:,} s and was stopped",
            file=shown,
            reason="read_timeout",
            hint="check that the file is what the mapping says it is; raise INTEGRATE_READ_SECONDS for a "
            "very large export",
        ) from None
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
