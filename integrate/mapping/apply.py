"""Turn one source frame into canonical columns: renames, splits, value maps, dates, units, money."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal, TypeVar

import pandas as pd

from ..columns import RECORD_DATE, RECORD_ID, ROW, SOURCE, TRUST
from ..errors import ConversionError, InputError, InputErrors, MappingError
from ..phone_numbers import is_country, to_e164
from ..text_normalise import map_distinct
from .addresses import split_addresses
from .dates import parse_dates
from .money import FINE_DIGITS, RatesTable, convert_money, is_currency, parse_amounts
from .names import split_names
from .numbers import to_plain_numbers
from .slips import UNIT_FIXES, describe, fix_slips
from .spec import CanonicalSchema, ColumnMap, SourceMapping
from .units import check_compatible, convert_quantity, resolve_unit
from .unreadable import unreadable_problems

FAILURE_COLUMNS = ["source", "file", "row", "column", "value", "reason", "message"]

# Failure reasons that stop a run: they mean the mapping or a reference table is wrong, not one cell.
FATAL_REASONS = frozenset(
    {"unknown_unit", "unknown_currency", "missing_rate", "needs_format", "ambiguous_date", "unmapped_value"}
)


OnError = Literal["raise", "collect"]
_T = TypeVar("_T")


@dataclass
class MappedSource:
    """A source in canonical form plus the cell-level problems found on the way.

    ``problems`` holds the errors that stop a run; it is filled only with ``on_error="collect"``
    (with ``"raise"`` they are raised instead).
    """

    name: str
    frame: pd.DataFrame
    failures: pd.DataFrame
    unmapped_columns: list[str] = field(default_factory=list)
    problems: list[InputError] = field(default_factory=list)


def canonical_dtype(ftype: str) -> str:
    return "float64" if ftype in ("quantity", "money") else "string"


def empty_canonical(canonical: CanonicalSchema) -> pd.DataFrame:
    columns = {
        SOURCE: pd.Series(dtype="string"),
        RECORD_ID: pd.Series(dtype="string"),
        ROW: pd.Series(dtype="int64"),
        TRUST: pd.Series(dtype="int64"),
        RECORD_DATE: pd.Series(dtype="string"),
    }
    for name, spec in canonical.fields.items():
        columns[name] = pd.Series(dtype=canonical_dtype(spec.type))
    return pd.DataFrame(columns)


class _Collector:
    """Gathers failures frames from the converters and tags them with file, row and column."""

    def __init__(self, source: str, file: str, rows: pd.Series) -> None:
        self.source, self.file, self.rows = source, file, rows
        self.parts: list[pd.DataFrame] = []

    def add(self, failures: pd.DataFrame, column: str) -> None:
        if failures is None or failures.empty:
            return
        part = pd.DataFrame(
            {
                "source": self.source,
                "file": self.file,
                "row": self.rows.loc[failures["index"]].to_numpy(),
                "column": column,
                "value": failures["value"].astype("string").to_numpy(),
                "reason": failures["reason"].to_numpy(),
                "message": failures["message"].to_numpy(),
            }
        )
        self.parts.append(part)

    def frame(self) -> pd.DataFrame:
        if not self.parts:
            return pd.DataFrame({c: pd.Series(dtype="object") for c in FAILURE_COLUMNS})
        return pd.concat(self.parts, ignore_index=True)


class _Positions:
    """Line and column of keys in a mapping file, read once (the file on disk, whatever its display name)."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.root: object = None

    def at(self, *loc: str) -> tuple[int | None, int | None]:
        from .load import locate_in, read_yaml

        if self.root is None:
            try:
                self.root = read_yaml(self.path)
            except MappingError:
                return None, None
        return locate_in(self.root, *loc)


def _mapping_error(mapping_file: str, column: str, message: str, reason: str, hint: str | None = None,
                   line: int | None = None, col: int | None = None) -> MappingError:
    return MappingError(f"column '{column}': {message}", file=mapping_file, line=line, column=col,
                        reason=reason, hint=hint)


def check_columns(
    raw: pd.DataFrame, mapping: SourceMapping, data_file: str, mapping_file: str, mapping_path: Path | None = None
) -> list[str]:
    """Raise for mapped columns missing from the data; return columns the mapping does not mention."""
    problems, unmapped = column_problems(raw, mapping, data_file, mapping_file, mapping_path)
    if problems:
        raise problems[0] if len(problems) == 1 else InputErrors(problems)
    return unmapped


def column_problems(
    raw: pd.DataFrame, mapping: SourceMapping, data_file: str, mapping_file: str, mapping_path: Path | None = None
) -> tuple[list[InputError], list[str]]:
    """One error per mapped column missing from the data, and the columns the mapping does not mention.

    ``mapping_file`` is the name shown in messages; ``mapping_path`` the file to find lines in
    (default: ``mapping_file`` itself).
    """
    present = set(raw.columns) - {ROW}
    maps = mapping.column_maps()
    needed = set(maps) | {mapping.record_id}
    if mapping.record_date:
        needed.add(mapping.record_date)
    for entry in maps.values():
        needed.update(c for c in (entry.unit_column, entry.currency_column, entry.priced_on) if c)
    missing = sorted(needed - present)
    problems: list[InputError] = []
    if missing:
        positions = _Positions(mapping_path or Path(mapping_file))
        for column in missing:
            line, col = positions.at("columns", column)
            if line is None:
                line, col = positions.at("record_id")
            problems.append(
                MappingError(
                    f"mapped column '{column}' is not in {data_file}",
                    file=mapping_file, line=line, column=col, value=column, reason="missing_column",
                    hint="columns in the data: " + ", ".join(sorted(present)),
                )
            )
    return problems, sorted(present - needed)


def apply_mapping(
    raw: pd.DataFrame,
    mapping: SourceMapping,
    canonical: CanonicalSchema,
    rates: RatesTable | None,
    *,
    data_file: str,
    mapping_file: str,
    mapping_path: Path | None = None,
    on_error: OnError = "raise",
) -> MappedSource:
    """Source frame (text columns + ``_row``) -> canonical frame with meta columns.

    Cell-level problems (a bad date in one row) become rows of ``failures`` and the cell is left
    empty. Problems that mean the mapping or the rates table is wrong raise ``InputErrors``, or
    with ``on_error="collect"`` are gathered in ``problems`` (the columns concerned are left
    empty) so that a check can report everything in one pass. ``mapping_file`` is the mapping
    file's name in messages, ``mapping_path`` where it is on disk (default: ``mapping_file``).
    """
    problems: list[InputError] = []

    def attempt(fallback: _T, action: Callable[..., _T], *args: object) -> _T:
        try:
            return action(*args)
        except InputErrors as many:
            if on_error == "raise":
                raise
            problems.extend(many.errors)
        except InputError as one:
            if on_error == "raise":
                raise
            problems.append(one)
        return fallback

    positions = _Positions(mapping_path or Path(mapping_file))
    missing, unmapped = column_problems(raw, mapping, data_file, mapping_file, positions.path)
    if missing and on_error == "raise":
        raise missing[0] if len(missing) == 1 else InputErrors(missing)
    problems.extend(missing)
    raw = raw.reset_index(drop=True)
    absent = [str(p.value) for p in missing]
    read_later = _columns_read(mapping)
    absent = [c for c in absent if c in read_later]  # an ignored column is never read: no need to add it
    if absent:  # one concat, not one insert per column (quadratic with thousands of absent columns)
        blank = pd.DataFrame({c: pd.Series(pd.NA, index=raw.index, dtype="string") for c in absent})
        raw = pd.concat([raw, blank], axis=1)
    rows = raw[ROW]
    collect = _Collector(mapping.source, data_file, rows)
    out = empty_canonical(canonical).reindex(range(len(raw)))
    out[SOURCE] = pd.array([mapping.source] * len(raw), dtype="string")
    out[RECORD_ID] = raw[mapping.record_id].astype("string").str.strip()
    out[ROW] = rows.astype("int64").to_numpy()
    out[TRUST] = mapping.trust
    if mapping.record_id not in absent:
        attempt(None, _check_record_ids, out, data_file, mapping)

    record_dates = pd.Series(pd.array([mapping.as_of.isoformat()] * len(raw), dtype="string"))
    if mapping.record_date:
        date_column = mapping.record_date
        parsed = attempt(None, _parse_date_column, raw, date_column, mapping, mapping_file, collect,
                         positions)
        if parsed is not None:
            record_dates = parsed.fillna(mapping.as_of.isoformat()).astype("string")
    out[RECORD_DATE] = record_dates.to_numpy()

    for column, entry in mapping.column_maps().items():
        if entry.ignore:
            continue
        values = raw[column].astype("string")
        if entry.values is not None:
            values = attempt(_drop_unmapped(values, entry), _apply_value_map, values, entry, column, data_file,
                             rows)
        if entry.address_format and entry.address_fields:
            parts, failed = split_addresses(values, entry.address_format)
            for part, target in entry.address_fields.items():
                _fill(out, target, parts[part])
            _cell_failures(collect, values, failed, column, "address_not_split",
                           f"is not an address in the layout '{entry.address_format}'")
            continue
        if entry.name_format:
            given, family, failed = split_names(values)
            _fill(out, entry.name_fields[0], given)
            _fill(out, entry.name_fields[1], family)
            _cell_failures(collect, values, failed, column, "name_not_split",
                           "is not a name in a layout name_format 'auto' reads")
            continue
        if entry.split:
            parts = values.str.strip().str.extract(entry.split)
            for target in entry.targets():
                _fill(out, target, parts[target].astype("string").str.strip().replace("", pd.NA))
            continue
        assert entry.field is not None
        target = entry.field
        converted = attempt(None, _convert, values, entry, column, target, raw, mapping, canonical, rates,
                            collect, mapping_file, positions)
        if converted is not None and entry.fix_unit_slips:
            if canonical.fields[target].range is None or canonical.fields[target].type != "quantity":
                line, col = positions.at("columns", column)
                attempt(None, _raise, _mapping_error(
                    mapping_file, column, f"'fix_unit_slips' needs a quantity field with a 'range' ('{target}' has "
                    "none)", "needs_range", "add 'range: [low, high]' to the field in canonical.yaml", line, col))
            else:
                converted = _fix_unit_slips(out, converted, entry, target, canonical)
        if converted is not None:
            _fill(out, target, converted)

    failures = collect.frame()
    fatal = failures[failures["reason"].isin(FATAL_REASONS)]
    if not fatal.empty:
        if on_error == "raise":
            raise _fatal_errors(fatal)
        problems.extend(_fatal_errors(fatal).errors)
    limit = mapping.max_unreadable if mapping.max_unreadable is not None else canonical.max_unreadable
    too_many = unreadable_problems(raw, failures[~failures["reason"].isin(FATAL_REASONS)], mapping, data_file,
                                   limit)
    if too_many:
        if on_error == "raise":
            raise too_many[0] if len(too_many) == 1 else InputErrors(too_many)
        problems.extend(too_many)
    return MappedSource(mapping.source, out, failures, unmapped, problems)


def _columns_read(mapping: SourceMapping) -> set[str]:
    """Source columns apply_mapping reads: the record ID and date, and what non-ignored entries use."""
    used = {mapping.record_id} | ({mapping.record_date} if mapping.record_date else set())
    for column, entry in mapping.column_maps().items():
        if not entry.ignore:
            used.add(column)
            used.update(c for c in (entry.unit_column, entry.currency_column, entry.priced_on) if c)
    return used


def _parse_date_column(raw: pd.DataFrame, column: str, mapping: SourceMapping, mapping_file: str,
                       collect: _Collector, positions: _Positions) -> pd.Series:
    """Parse a date column with the format its entry gives; a bad format points at the mapping file."""
    entry = mapping.column_maps().get(column)
    fmt, pivot = (entry.format, entry.pivot) if entry else (None, None)
    try:
        parsed, failures = parse_dates(raw[column], fmt, two_digit_pivot=pivot)
    except ConversionError as exc:
        line, col = positions.at("columns", column)
        if line is None:
            line, col = positions.at("record_date")
        raise _mapping_error(mapping_file, column, exc.message, exc.reason, exc.hint, line, col) from exc
    collect.add(failures, column)
    return parsed


def _drop_unmapped(values: pd.Series, entry: ColumnMap) -> pd.Series:
    """Values through the value map, values not in it left empty (used when collecting problems)."""
    assert entry.values is not None
    return values.str.strip().map(entry.values).astype("string")


def _check_record_ids(out: pd.DataFrame, data_file: str, mapping: SourceMapping) -> None:
    ids = out[RECORD_ID]
    missing = ids.isna()
    if missing.any():
        row = int(out.loc[missing.idxmax(), ROW])
        raise InputError(
            f"record ID is empty in {int(missing.sum())} rows", file=data_file, line=row,
            column=mapping.record_id, reason="missing_record_id",
            hint="every record needs an ID that is unique within its source",
        )
    dup = ids.duplicated(keep=False)
    if dup.any():
        first = out.loc[dup, [RECORD_ID, ROW]].head(3)
        shown = ", ".join(f"'{r}' (row {n})" for r, n in first.itertuples(index=False))
        raise InputError(
            f"record ID is not unique: {int(dup.sum())} rows share an ID, e.g. {shown}",
            file=data_file, line=int(first[ROW].iloc[0]), column=mapping.record_id,
            reason="duplicate_record_id", hint="choose a column that identifies each row",
        )


def _fill(out: pd.DataFrame, target: str, values: pd.Series) -> None:
    """Several columns may feed one field: the first non-empty value wins (in mapping order)."""
    values = values.reset_index(drop=True)
    if out[target].isna().all():
        out[target] = values.astype(out[target].dtype)
    else:
        out[target] = out[target].fillna(values.astype(out[target].dtype))


def _apply_value_map(values: pd.Series, entry: ColumnMap, column: str, data_file: str,
                     rows: pd.Series) -> pd.Series:
    assert entry.values is not None
    stripped = values.str.strip()
    known = stripped.isna() | stripped.isin(list(entry.values))
    if not known.all():
        counts = stripped[~known].value_counts()
        listed = ", ".join(f"'{v}' ({n})" for v, n in counts.head(10).items())
        first_row = int(rows[(~known).to_numpy()].iloc[0])
        raise InputError(
            f"values not in the value map: {listed}", file=data_file, line=first_row, column=column,
            value=counts.index[0], reason="unmapped_value",
            hint="add them to the column's 'values' map (map a value to null to drop it)",
        )
    return stripped.map(entry.values).astype("string")


def _convert(values: pd.Series, entry: ColumnMap, column: str, target: str, raw: pd.DataFrame,
             mapping: SourceMapping, canonical: CanonicalSchema, rates: RatesTable | None,
             collect: _Collector, mapping_file: str, positions: _Positions) -> pd.Series:
    spec = canonical.fields[target]
    line, col = positions.at("columns", column)
    if spec.type == "date":
        return _parse_date_column(raw.assign(**{column: values}), column, mapping, mapping_file, collect, positions)
    if spec.type in ("quantity", "money"):
        values = _in_plain_numbers(values, entry.number_format or mapping.number_format, collect, column)
    if spec.type == "quantity":
        assert spec.unit is not None
        if entry.unit:
            try:
                check_compatible(entry.unit, spec.unit)  # quotes the unit as the mapping file spells it
                unit = resolve_unit(entry.unit)
            except ConversionError as exc:
                raise _mapping_error(mapping_file, column, exc.message, exc.reason, exc.hint, line, col) from exc
            converted, failures = convert_quantity(values, unit, spec.unit)
        else:
            assert entry.unit_column is not None
            converted, failures = convert_quantity(values, raw[entry.unit_column], spec.unit)
        collect.add(failures, column)
        return converted
    if spec.type == "money":
        amounts, failures = parse_amounts(values)
        collect.add(failures, column)
        if entry.currency and not is_currency(entry.currency):
            raise _mapping_error(mapping_file, column, f"'{entry.currency}' is not an ISO 4217 currency code",
                                 "unknown_currency", "use a three-letter code such as EUR, GBP, USD", line, col)
        currencies: str | pd.Series
        if entry.currency_column:
            currencies = raw[entry.currency_column].astype("string").str.strip().str.upper()
            if entry.currency:  # the fallback for blank currency cells
                currencies = currencies.replace("", pd.NA).fillna(entry.currency.strip().upper())
        else:
            assert entry.currency is not None
            currencies = entry.currency.strip().upper()
        if entry.priced_on:
            dates = _parse_date_column(raw, entry.priced_on, mapping, mapping_file, collect, positions)
            dates = dates.fillna(mapping.as_of.isoformat())
        else:
            dates = mapping.as_of
        needs_rates = not (isinstance(currencies, str) and currencies == canonical.base_currency)
        if needs_rates and rates is None:
            raise _mapping_error(
                mapping_file, column, f"converting to {canonical.base_currency} needs a rates table",
                "missing_rates", "set 'rates:' in canonical.yaml to a dated rates CSV", line, col)
        converted, failures = convert_money(amounts, currencies, dates, canonical.base_currency, rates,
                                            max_age_days=canonical.rate_max_age_days, extra_digits=FINE_DIGITS)
        if entry.currency_column and not failures.empty:  # name the column the code came from
            unknown = failures["reason"] == "unknown_currency"
            failures.loc[unknown, "message"] = (f"currency column '{entry.currency_column}': "
                                                + failures.loc[unknown, "message"].astype(str))
        collect.add(failures, column)
        return converted
    if spec.type == "email":
        from ..standardise import check_emails

        valid, failures = check_emails(values)  # '=1+2' or '<script>' are failures, not addresses
        collect.add(failures, column)
        return valid
    if spec.type == "phone" and entry.country:
        plans = canonical.calling_code_plans()
        if not is_country(entry.country, plans):
            raise _mapping_error(mapping_file, column, f"phone country '{entry.country}' is not known",
                                 "unknown_country", "use an ISO 3166 code ('DE'), a calling code ('+49'), or "
                                 "declare the calling code under 'calling_codes:' in canonical.yaml", line, col)
        text = values.str.strip().replace("", pd.NA)
        return map_distinct(text, lambda v: to_e164(v, entry.country, plans)).astype("string")
    return values.str.strip().replace("", pd.NA).astype("string")


def _raise(error: InputError) -> None:
    raise error


def _fix_unit_slips(out: pd.DataFrame, converted: pd.Series, entry: ColumnMap, target: str,
                    canonical: CanonicalSchema) -> pd.Series:
    """Rows written in another unit reconverted; each named in the records' UNIT_FIXES column."""
    spec = canonical.fields[target]
    assert entry.unit and spec.unit and spec.range
    declared = resolve_unit(entry.unit)
    fixed, units = fix_slips(converted.reset_index(drop=True), declared, resolve_unit(spec.unit), spec.range)
    if units.notna().any():
        notes = describe(target, declared, units)
        previous = out[UNIT_FIXES] if UNIT_FIXES in out else pd.Series(pd.NA, index=out.index, dtype="string")
        out[UNIT_FIXES] = previous.where(notes.isna(), previous.fillna("").str.cat(notes, sep="; ").str.lstrip("; "))
    return fixed


def _cell_failures(collect: _Collector, values: pd.Series, failed: pd.Series, column: str, reason: str,
                   message: str) -> None:
    if failed.any():
        shown = values[failed].astype(str)
        collect.add(pd.DataFrame({"index": shown.index, "value": shown.to_numpy(), "reason": reason,
                                  "message": ("'" + shown + "' " + message).to_numpy()}), column)


def _in_plain_numbers(values: pd.Series, fmt: str | None, collect: _Collector, column: str) -> pd.Series:
    """Number texts in a local format rewritten to plain 1234.56; values not in the format become failures."""
    if fmt is None:
        return values
    plain = to_plain_numbers(values, fmt)
    bad = plain.str.startswith("<unreadable: ").fillna(False).astype(bool)
    if bad.any():
        shown = values[bad].astype(str)
        collect.add(pd.DataFrame({"index": shown.index, "value": shown.to_numpy(), "reason": "bad_number",
                                  "message": ("'" + shown + f"' is not a number written as {fmt}").to_numpy()}),
                    column)
    return plain.mask(bad, pd.NA)


_FATAL_HINTS = {
    "unknown_currency": "currency codes are the three letters of ISO 4217 (EUR, GBP, USD...); fix the value "
                        "or map the column's codes with 'values'",
}


def _fatal_errors(fatal: pd.DataFrame) -> InputErrors:
    problems: list[InputError] = []
    for (reason, column), group in fatal.groupby(["reason", "column"], sort=False):
        first = group.iloc[0]
        rows = ", ".join(str(r) for r in group["row"].head(5))
        more = f" and {len(group) - 5} more" if len(group) > 5 else ""
        problems.append(
            ConversionError(
                f"{first['message']} ({len(group)} rows: {rows}{more})",
                file=str(first["file"]), line=int(first["row"]), column=str(column),
                value=first["value"], reason=str(reason), hint=_FATAL_HINTS.get(str(reason)),
            )
        )
    return InputErrors(problems)


