"""Errors raised on purpose, each pointing at the input that caused it.

``str(err)`` reads like a compiler message: where, what was found, what was expected.
"""

from __future__ import annotations

from collections.abc import Iterable


class IntegrateError(Exception):
    """Base class for every error this package raises on purpose."""


class InputError(IntegrateError):
    """Something in the user's input is wrong; carries where and why.

    Args:
        message: what was found and what was expected.
        file: the file (or table) at fault, as the user named it.
        line: 1-based line in a text file, or row number in a table (header is row 1).
        column: 1-based column in a YAML file, or the column name in a table.
        value: the offending value, quoted in the message.
        reason: a stable code that callers can group by (``unknown_unit``, ``bad_date``...).
        hint: one sentence on how to fix it.
    """

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        line: int | None = None,
        column: int | str | None = None,
        value: object = None,
        reason: str = "bad_input",
        hint: str | None = None,
    ) -> None:
        self.message = message
        self.file = file
        self.line = line
        self.column = column
        self.value = value
        self.reason = reason
        self.hint = hint
        super().__init__(self.__str__())

    def location(self) -> str:
        parts: list[str] = []
        if self.file:
            parts.append(str(self.file))
        if self.line is not None:
            parts.append(str(self.line))
        if self.column is not None and isinstance(self.column, int):
            parts.append(str(self.column))
        where = ":".join(parts)
        if self.column is not None and not isinstance(self.column, int):
            where = f"{where} column '{self.column}'" if where else f"column '{self.column}'"
        return where

    def __str__(self) -> str:
        where = self.location()
        text = f"{where}: {self.message}" if where else self.message
        if self.hint:
            text += f" (hint: {self.hint})"
        return text

    def as_dict(self) -> dict[str, object]:
        return {
            "file": self.file,
            "line": self.line,
            "column": self.column,
            "value": None if self.value is None else str(self.value),
            "reason": self.reason,
            "message": self.message,
            "hint": self.hint,
        }


class MappingError(InputError):
    """A mapping file is wrong."""


class SourceError(InputError):
    """A source file, row or cell cannot be read."""


class ConversionError(InputError):
    """A unit, currency or date conversion failed."""


class ConfigError(IntegrateError):
    """A setting (environment variable, option) has a bad value."""




# pip package that provides a database driver module SQLAlchemy asks for (the packages' own names)
DRIVER_PACKAGES = {
    "psycopg": "psycopg[binary]", "psycopg2": "psycopg2-binary", "pymysql": "PyMySQL", "MySQLdb": "mysqlclient",
    "pyodbc": "pyodbc", "oracledb": "oracledb", "pymssql": "pymssql", "asyncpg": "asyncpg", "pg8000": "pg8000",
}


def missing_driver_error(url_shown: str, exc: ImportError, setting: str = "INTEGRATE_STATE_URL") -> InputError:
    """The database URL needs a driver package that is not installed: name the package to install."""
    module = (getattr(exc, "name", None) or str(exc).rsplit(" ", 1)[-1].strip("'\"")).split(".")[0]
    package = DRIVER_PACKAGES.get(module, module)
    return InputError(
        f"the database driver '{module}' for {url_shown} is not installed",
        file=setting,
        value=module,
        reason="missing_driver",
        hint=f"install it with: python -m pip install '{package}'",
    )


class InputErrors(IntegrateError):
    """Many input errors collected in one pass; shows the first few, then a count."""

    def __init__(self, errors: Iterable[InputError], limit: int = 10) -> None:
        self.errors = list(errors)
        self.limit = limit
        super().__init__(self.__str__())

    def __str__(self) -> str:
        shown = [str(e) for e in self.errors[: self.limit]]
        rest = len(self.errors) - len(shown)
        if rest > 0:
            shown.append(f"... and {rest} more")
        return f"{len(self.errors)} problems found:\n" + "\n".join(f"  {s}" for s in shown)

    def as_records(self) -> list[dict[str, object]]:
        return [e.as_dict() for e in self.errors]
