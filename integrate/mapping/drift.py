"""Drift between this month's export and the last one: findings for ``check``, edits for ``suggest --update``.

Each source is compared with the last stored profile of another data file of it
(``history_store.previous_profile``). What is found:

- a mapped column that vanished (error) and a new column (warning); when a new column's name and
  values resemble a vanished one, a rename is proposed with a confidence;
- codes in a value-mapped column that its value map does not cover (error above
  ``CODE_ERROR_SHARE`` of the column's values, else a warning), with the codes and their counts;
- a numeric column whose quantiles all moved by one known factor (a unit, a currency rate, a
  prefix slip: the factor logic of ``factors.py``, over time instead of across sources);
- a date column that its format no longer reads while another day/month order does;
- a share of empty values that jumped, an identifier that stopped being unique.

Every finding points at the mapping entry it concerns (file:line).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import pandas as pd
import pint
from rapidfuzz import fuzz

from ..columns import ROW
from ..errors import ConversionError
from ..workspace import SourceEntry, Workspace
from .dates import parse_dates
from .factors import Explanation, closest, format_factor, ratio_text, typical_rates
from .findings import Finding
from .load import position_of
from .money import RatesTable, load_rates
from .snapshot import snapshot_source
from .spec import ColumnMap

RENAME_MIN_CONFIDENCE = 0.6  # below this a vanished and a new column are reported apart, no rename proposed
NAME_WEIGHT = 0.35  # share of the name's similarity in a rename's confidence (the rest: the values)
CODE_ERROR_SHARE = 0.01  # uncovered codes on more than 1 % of a column's values: error (fewer: warning)
SHIFT_MIN = 0.05  # a median moving by less than 5 % is month-to-month noise, not a factor
SHIFT_SPREAD = 0.05  # quartiles and median must move by the same factor within 5 %
EMPTY_JUMP = 0.2  # share of empty values up by 20 points or more
DATE_READS = 0.98  # a format "reads" a column when it parses at least 98 % of its values

# Units a quantity column may switch to (pint names and how mapping files write them; common practice).
_UNIT_SYMBOLS = {"millimeter": "mm", "centimeter": "cm", "meter": "m", "inch": "in", "foot": "ft",
                 "gram": "g", "kilogram": "kg", "pound": "lb", "stone": "st", "ounce": "oz"}

ProposalKind = Literal["rename", "unit", "currency", "format", "add_code", "new_column"]


@dataclass(frozen=True)
class Proposal:
    """One edit to a mapping file: what to change, on which column entry, how sure, and why."""

    kind: ProposalKind
    column: str  # the column's key in the mapping file (the old name, for a rename)
    value: Any  # new name / unit / currency code / date format / (code, canonical value) / new column
    confidence: float
    reason: str


@dataclass
class SourceDrift:
    """What changed in one source since its last profile."""

    source: str
    mapping_file: Path
    previous_run: int | None
    findings: list[Finding] = field(default_factory=list)
    proposals: list[Proposal] = field(default_factory=list)


# ---------------------------------------------------------------- similarity of two columns

def _normal_name(name: str) -> str:
    spaced = pd.Series([name]).str.replace(r"([a-z])([A-Z])", r"\1 \2", regex=True).iloc[0]
    return " ".join("".join(ch if ch.isalnum() else " " for ch in spaced.lower()).split())


def name_similarity(old: str, new: str, field_name: str | None = None) -> float:
    """How alike two column names are (0-1), also against the canonical field the old one fed.

    Example:
        >>> round(name_similarity("height_in", "Height (in)"), 2)
        1.0
    """
    names = [_normal_name(old)] + ([_normal_name(field_name)] if field_name else [])
    new_n = _normal_name(new)
    return max(fuzz.token_set_ratio(n, new_n) / 100 for n in names)


def _overlap(a: dict[str, float], b: dict[str, float]) -> float:
    return sum(min(v, b.get(k, 0.0)) for k, v in a.items())


def _top_shares(profile: dict[str, Any]) -> dict[str, float]:
    present = profile["count"] - profile["empty"]
    return {v: n / present for v, n in profile.get("top", [])} if present else {}


def profile_similarity(a: dict[str, Any], b: dict[str, Any]) -> float:
    """How alike two column profiles are (0-1): kind, shapes, common values, emptiness, lengths, numbers."""
    empty_a, empty_b = a["empty"] / max(a["count"], 1), b["empty"] / max(b["count"], 1)
    parts: list[tuple[float, float]] = [(1.0, float(a["kind"] == b["kind"] and bool(a["kind"]))),
                                        (1.0, _overlap(a.get("shapes", {}), b.get("shapes", {}))),
                                        (2.0, _overlap(_top_shares(a), _top_shares(b))),
                                        (1.0, 1 - abs(empty_a - empty_b))]
    la, lb = a.get("length", {}).get("mean"), b.get("length", {}).get("mean")
    if la and lb:
        parts.append((1.0, 1 - abs(la - lb) / max(la, lb)))
    qa, qb = a.get("quantiles", {}).get("q50"), b.get("quantiles", {}).get("q50")
    if qa and qb and qa > 0 and qb > 0:
        parts.append((1.0, math.exp(-abs(math.log(qa / qb)))))
    return sum(w * s for w, s in parts) / sum(w for w, _ in parts)


# ---------------------------------------------------------------- the comparisons

class _Context:
    """One source under comparison: its mapping, both profiles, and where its entries are."""

    def __init__(self, ws: Workspace, entry: SourceEntry, raw: pd.DataFrame, old: dict[str, dict[str, Any]],
                 rates: RatesTable | None) -> None:
        self.ws, self.entry, self.raw, self.old, self.rates = ws, entry, raw, old, rates
        self.mapping = entry.mapping
        self.maps = self.mapping.column_maps()
        self.new = snapshot_source(raw, self.mapping, unmentioned=True)
        self.file = ws.display(entry.mapping_file)
        self.out = SourceDrift(self.mapping.source, entry.mapping_file, None)

    def where(self, column: str | None) -> tuple[int | None, int | None]:
        path = self.entry.mapping_file
        line, col = position_of(path, "columns", column) if column else (None, None)
        return (line, col) if line is not None else position_of(path, "columns")

    def find(self, level: Literal["error", "warning", "note"], code: str, message: str, column: str | None,
             hint: str | None = None) -> None:
        line, col = self.where(column)
        self.out.findings.append(Finding(level, code, message, self.file, line, col, self.mapping.source, hint))

    def field_type(self, cmap: ColumnMap) -> str | None:
        spec = self.ws.canonical.fields.get(cmap.field or "")
        return spec.type if spec else None


def _columns(ctx: _Context) -> None:
    """Vanished mapped columns, new columns, and the renames that explain both."""
    present = set(ctx.new)
    needed = [c for c, m in ctx.maps.items() if not m.ignore]
    needed += [c for c in (ctx.mapping.record_id, ctx.mapping.record_date) if c and c not in needed]
    vanished = [c for c in needed if c not in present]
    new = [c for c in ctx.new if c not in ctx.maps and c not in ctx.old]
    scored = []
    for v in vanished:
        for n in new:
            name = name_similarity(v, n, ctx.maps[v].field if v in ctx.maps else None)
            values = profile_similarity(ctx.old[v], ctx.new[n]) if v in ctx.old else 0.0
            scored.append((NAME_WEIGHT * name + (1 - NAME_WEIGHT) * values, v, n, name, values))
    renamed: dict[str, tuple[str, float, float, float]] = {}
    taken: set[str] = set()
    for confidence, v, n, name, values in sorted(scored, reverse=True):
        if confidence >= RENAME_MIN_CONFIDENCE and v not in renamed and n not in taken:
            renamed[v] = (n, confidence, name, values)
            taken.add(n)
    for v in vanished:
        if v in renamed:
            n, confidence, name, values = renamed[v]
            reason = (f"column '{v}' seems renamed to '{n}' (confidence {confidence:.2f}: names {name:.2f} alike, "
                      f"values {values:.2f} alike)")
            ctx.out.proposals.append(Proposal("rename", v, n, confidence, reason))
            ctx.find("error", "column_vanished", f"mapped column '{v}' is gone from this export; {reason}", v,
                     hint=f"rename the entry to '{n}' (integrate suggest --update {ctx.mapping.source})")
        else:
            ctx.find("error", "column_vanished", f"mapped column '{v}' is gone from this export "
                     "and no new column resembles it", v, hint="map another column or remove the entry")
    for n in new:
        if n in taken:
            continue
        ctx.out.proposals.append(Proposal("new_column", n, "ignore", 1.0, f"column '{n}' is new in this export"))
        ctx.find("warning", "column_new", f"column '{n}' is new in this export ({ctx.new[n]['kind']}, "
                 f"{ctx.new[n]['distinct']} distinct values)", None,
                 hint="map it to a canonical field, or list it as `ignore`")


def _codes(ctx: _Context) -> None:
    """Values of value-mapped columns that the value map does not cover."""
    for column, cmap in ctx.maps.items():
        if cmap.values is None or column not in ctx.raw:
            continue
        text = ctx.raw[column].astype("string").str.strip()
        present = text[text.notna() & text.ne("")]
        uncovered = present[~present.isin(list(cmap.values))].value_counts()
        if uncovered.empty:
            continue
        share = uncovered.sum() / len(present)
        listed = ", ".join(f"'{c}' ({n})" for c, n in uncovered.head(10).items())
        level = "error" if share > CODE_ERROR_SHARE else "warning"
        old_counts = dict(map(tuple, ctx.old.get(column, {}).get("top", [])))
        gone = [c for c in cmap.values if old_counts.get(c, 0) > 0 and not (present == c).any()]
        for code, count in uncovered.items():
            if len(uncovered) == 1 and len(gone) == 1:
                # one code replaced by another of about the same frequency: the same meaning, respelled
                was = int(old_counts[gone[0]])
                confidence = round(0.5 + 0.4 * min(count, was) / max(count, was), 2)
                ctx.out.proposals.append(Proposal("add_code", column, (code, cmap.values[gone[0]]), confidence,
                                                  f"'{code}' ({count}) replaces '{gone[0]}' ({was} last time)"))
            else:
                ctx.out.proposals.append(Proposal("add_code", column, (code, None), 0.0,
                                                  f"new code '{code}' seen {count} times: give its canonical value"))
        ctx.find(level, "codes_not_in_value_map",
                 f"{uncovered.sum()} value(s) of '{column}' ({share:.1%}) are codes its value map does not cover: "
                 f"{listed}", column, hint="add each code to the column's 'values' (map it to null to drop it)")


def _unit_size(unit: str, other: str) -> float:
    from .units import resolve_unit, unit_registry

    return float(unit_registry().Quantity(1.0, resolve_unit(unit)).to(resolve_unit(other)).magnitude)


def _unit_candidates(declared: str) -> list[tuple[Explanation, str]]:
    out = []
    for pint_name, symbol in _UNIT_SYMBOLS.items():
        try:
            k = _unit_size(declared, pint_name)  # numbers in `symbol` are k times numbers in `declared`
        except (ConversionError, pint.DimensionalityError):
            continue
        if abs(math.log(k)) > 1e-9:
            out.append((Explanation(k, f"the values are now in {symbol}, not {declared}"), symbol))
    return out


def _ratio(old: dict[str, float], new: dict[str, float]) -> float | None:
    """The one factor by which quartiles and median all moved, if they moved alike."""
    ratios = [new[q] / old[q] for q in ("q25", "q50", "q75") if old.get(q) and new.get(q) and old[q] > 0 < new[q]]
    if len(ratios) < 3 or max(ratios) / min(ratios) > 1 + SHIFT_SPREAD:
        return None
    return ratios[1]


def _numbers(ctx: _Context) -> None:
    """Numeric columns whose distribution moved by a known factor since last month."""
    typical = typical_rates(ctx.rates, ctx.ws.canonical.base_currency)
    for column, cmap in ctx.maps.items():
        ftype = ctx.field_type(cmap)
        old, new = ctx.old.get(column), ctx.new.get(column)
        if ftype not in ("quantity", "money") or old is None or new is None or cmap.unit_column \
                or cmap.currency_column or "quantiles" not in old or "quantiles" not in new:
            continue
        ratio = _ratio(old["quantiles"], new["quantiles"])
        if ratio is None or abs(math.log(ratio)) < math.log1p(SHIFT_MIN):
            continue
        was = old["declared"]
        candidates: list[tuple[Explanation, str | None]]
        if ftype == "quantity" and cmap.unit:
            try:
                expected = _unit_size(was.get("unit") or cmap.unit, cmap.unit)
            except (ConversionError, pint.DimensionalityError):
                expected = 1.0
            candidates = _unit_candidates(cmap.unit)
        elif ftype == "money" and cmap.currency and cmap.currency.upper() in typical:
            now = cmap.currency.upper()
            before = (was.get("currency") or now).upper()
            expected = typical[before] / typical[now] if before in typical else 1.0
            candidates = [(Explanation(typical[now] / rate, f"the amounts are now in {code}, not {now}"), code)
                          for code, rate in typical.items() if code != now]
        else:
            continue
        residual = ratio / expected
        if abs(math.log(residual)) < math.log1p(SHIFT_MIN):
            continue  # the declared unit or currency changed with the values
        candidates.append((Explanation(100.0, "a factor of 100 (e.g. amounts in minor units)"), None))
        candidates.append((Explanation(1000.0, "a prefix slip or thousands"), None))
        candidates += [(Explanation(1 / e.factor, e.cause), None) for e, _ in list(candidates) if _ is None]
        best = closest(residual, [e for e, _ in candidates])
        if best is None:
            continue
        target = next(v for e, v in candidates if e is best)
        key = "unit" if ftype == "quantity" else "currency"
        message = (f"the values of '{column}' are {ratio_text(residual)} last month's (run {ctx.out.previous_run}): "
                   f"{best.describe()}")
        if target is not None:
            ctx.out.proposals.append(Proposal(key, column, target, 0.8, message))
        ctx.find("warning", "unit_switched" if key == "unit" else "currency_switched", message, column,
                 hint=f"set '{key}: {target}'" if target else f"check the export (factor {format_factor(best.factor)})")


def _swap_day_month(fmt: str) -> str:
    return fmt.replace("%d", "\x00").replace("%m", "%d").replace("\x00", "%m")


def _dates(ctx: _Context) -> None:
    """Date columns their format no longer reads, while another layout (often day and month swapped) does."""
    for column, cmap in ctx.maps.items():
        fmt = cmap.format
        if ctx.field_type(cmap) != "date" or not fmt or fmt in ("iso", "excel", "year") or column not in ctx.raw:
            continue
        text = ctx.raw[column].astype("string").str.strip()
        distinct = pd.Series(text[text.notna() & text.ne("")].unique(), dtype="string")
        if distinct.empty:
            continue
        reads_now = float(parse_dates(distinct, fmt, two_digit_pivot=cmap.pivot)[0].notna().mean())
        reads_before = ctx.old.get(column, {}).get("date_formats", {}).get(fmt, 1.0)
        if reads_now >= DATE_READS or reads_before < DATE_READS:
            continue
        swapped = _swap_day_month(fmt)
        layouts = ctx.new[column].get("date_formats", {})
        if swapped != fmt:
            layouts = {**layouts, swapped: float(parse_dates(distinct, swapped, two_digit_pivot=cmap.pivot)[0]
                                                 .notna().mean())}
        better = [g for g, s in sorted(layouts.items(), key=lambda kv: (kv[0] != swapped, -kv[1]))
                  if s >= DATE_READS and g != fmt and g != "iso"]
        if not better:
            continue
        order = "day and month now come the other way round" if better[0] == swapped else "the layout changed"
        message = (f"'{column}' no longer reads as {fmt!r} ({reads_now:.0%} of distinct values, "
                   f"{reads_before:.0%} last month) but reads as {better[0]!r}: {order}")
        ctx.out.proposals.append(Proposal("format", column, better[0], 0.9 if better[0] == swapped else 0.7, message))
        ctx.find("error", "date_order_changed", message, column, hint=f"set 'format: \"{better[0]}\"'")


def _empties_and_identifiers(ctx: _Context) -> None:
    identifiers = {ctx.mapping.record_id} | {c for c, m in ctx.maps.items() if ctx.field_type(m) == "identifier"}
    for column, cmap in ctx.maps.items():
        old, new = ctx.old.get(column), ctx.new.get(column)
        if cmap.ignore and column not in identifiers or old is None or new is None:
            continue
        before, now = old["empty"] / max(old["count"], 1), new["empty"] / max(new["count"], 1)
        if now - before >= EMPTY_JUMP:
            ctx.find("warning", "empty_share_jump", f"'{column}' is empty in {now:.0%} of rows, against "
                     f"{before:.0%} last month", column, hint="check the export: a column left blank or mis-split?")
    for column in sorted(identifiers):
        old, new = ctx.old.get(column), ctx.new.get(column)
        if old is None or new is None or not old.get("unique") or new.get("unique"):
            continue
        values = ctx.raw[column].astype("string").str.strip()
        repeated = values[values.duplicated(keep=False) & values.notna()]
        shown = ", ".join(repr(v) for v in repeated.drop_duplicates().head(3))
        ctx.find("error" if column == ctx.mapping.record_id else "warning", "identifier_not_unique",
                 f"'{column}' was unique last month; now {len(repeated)} rows share a value (e.g. {shown})"
                 if len(repeated) else f"'{column}' was unique last month; now some rows have none", column,
                 hint="check the export for repeated or missing rows")


def source_drift(ws: Workspace, entry: SourceEntry, raw: pd.DataFrame, rates: RatesTable | None = None
                 ) -> SourceDrift | None:
    """Compare one source as read now with its last profile; None when there is no earlier profile."""
    from ..history_store import previous_profile
    from .load import file_hash

    path = entry.data_path(ws.root)
    stored = previous_profile(ws.root, entry.mapping.source, file_hash(path) if path and path.is_file() else None)
    if stored is None:
        return None
    ctx = _Context(ws, entry, raw.drop(columns=[ROW], errors="ignore"), stored.columns, rates)
    ctx.out.previous_run = stored.run_id
    for step in (_columns, _codes, _numbers, _dates, _empties_and_identifiers):
        step(ctx)
    return ctx.out


def workspace_rates(ws: Workspace) -> RatesTable | None:
    path = ws.root / ws.canonical.rates if ws.canonical.rates else None
    return load_rates(path) if path is not None and path.is_file() else None


def drift_findings(ws: Workspace, raws: dict[str, pd.DataFrame], rates: RatesTable | None) -> list[Finding]:
    """Every source's drift findings (``check`` calls this with the frames it read)."""
    found: list[Finding] = []
    for entry in ws.sources:
        raw = raws.get(entry.mapping.source)
        drift = source_drift(ws, entry, raw, rates) if raw is not None else None
        if drift is not None:
            found += drift.findings
    return found
