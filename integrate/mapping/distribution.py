"""Numbers after conversion: plausible ranges, distributions across sources, and linked duplicates.

A mislabelled unit or currency converts without a single failure, so it can only be seen in
the numbers: a source whose values sit a constant factor away from the other sources', or
records of the same entity that disagree by that factor. When a known factor (``factors.py``)
explains the gap, the finding names it.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..columns import ROW, SOURCE
from .factors import Explanation, closest, format_factor, ratio_text, undo_text
from .findings import Finding, rows_text
from .spec import CanonicalSchema

MIN_VALUES = 20  # values a source needs before its distribution is compared (common practice)
MIN_LINKED = 10  # linked entities two sources need before their values are compared
QUANTILES = np.linspace(0.1, 0.9, 9)  # deciles compared between distributions
FITS = 0.05  # a factor explains a gap when, divided out, deciles agree within ~5 % (median |log|)
STRONG = math.log(1.5)  # medians further apart than x1.5 disagree strongly, factor or not
AGREE = math.log(1.02)  # linked values within 2 % count as the same value

Locate = Callable[[str, str], tuple[str | None, int | None, int | None]]  # (source, column) -> file, line, col


@dataclass(frozen=True)
class NumericFeed:
    """Which column of a source feeds a numeric field, and what could explain a constant gap."""

    source: str
    field: str
    column: str
    explanations: list[Explanation]


def numeric_fields(canonical: CanonicalSchema) -> list[str]:
    return [name for name, spec in canonical.fields.items() if spec.type in ("quantity", "money")]


def _in_range(values: np.ndarray, bounds: tuple[float, float] | None) -> float:
    if bounds is None or len(values) == 0:
        return float("nan")
    return float(np.mean((values >= bounds[0]) & (values <= bounds[1])))


def _positive(frame: pd.DataFrame, source: str, name: str) -> np.ndarray:
    values = frame.loc[frame[SOURCE] == source, name].to_numpy(dtype="float64")
    return values[np.isfinite(values) & (values > 0)]


def compare_distributions(records: pd.DataFrame, canonical: CanonicalSchema, feeds: list[NumericFeed],
                          locate: Locate) -> list[Finding]:
    """Compare each source's distribution of every numeric field with the other sources' together.

    A source is flagged when a known factor, divided out, lines its deciles up with the others'
    (and, where the field has a plausible range, brings more of its values into it), or when its
    median is more than 1.5 times off with no known factor to explain it.
    """
    findings: list[Finding] = []
    by_field: dict[str, list[NumericFeed]] = {}
    for feed in feeds:
        by_field.setdefault(feed.field, []).append(feed)
    for name, group in by_field.items():
        spec = canonical.fields[name]
        values = {f.source: _positive(records, f.source, name) for f in group}
        usable = [f for f in group if len(values[f.source]) >= MIN_VALUES]
        if len(usable) < 2:
            continue
        unit = spec.unit or canonical.base_currency
        for feed in usable:
            mine = values[feed.source]
            others = np.concatenate([values[f.source] for f in usable if f.source != feed.source])
            shift = np.log(np.quantile(mine, QUANTILES)) - np.log(np.quantile(others, QUANTILES))
            gap = float(np.median(np.abs(shift)))
            ratio = float(np.median(mine) / np.median(others))
            fitting = [e for e in feed.explanations if float(np.median(np.abs(shift - math.log(e.factor)))) <= FITS]
            best = min(fitting, key=lambda e: abs(math.log(ratio / e.factor)), default=None)
            if best is not None and gap > 2 * FITS and _blames(mine, best.factor, spec.range):
                file, line, col = locate(feed.source, feed.column)
                repaired = _in_range(mine / best.factor, spec.range)
                in_range = "" if math.isnan(repaired) else (
                    f"; {undo_text(best.factor)}, {repaired:.0%} of them fall in the plausible range "
                    f"[{spec.range[0]:g}, {spec.range[1]:g}] {unit}" if spec.range else "")
                findings.append(Finding(
                    "warning", "distribution_factor",
                    f"'{name}' from source '{feed.source}' (column '{feed.column}') is {ratio_text(ratio)} "
                    f"the other sources' (median {np.median(mine):.4g} vs {np.median(others):.4g} {unit}): "
                    f"{best.describe()}?{in_range}",
                    file, line, col, feed.source,
                    hint="check the unit or currency this column declares in the mapping file"))
            elif (spec.type != "money"  # departments charge different amounts: only a known factor is a finding
                  and abs(math.log(ratio)) > STRONG and (spec.range is None or _in_range(mine, spec.range) < 0.9)):
                file, line, col = locate(feed.source, feed.column)
                findings.append(Finding(
                    "warning", "distribution_differs",
                    f"'{name}' from source '{feed.source}' (column '{feed.column}') differs strongly from the other "
                    f"sources' (median {np.median(mine):.4g} vs {np.median(others):.4g} {unit}, ratio "
                    f"{format_factor(ratio)}); no known unit or currency factor explains it",
                    file, line, col, feed.source,
                    hint="check that this column means the same as the field's meaning says"))
    return findings


def _blames(values: np.ndarray, factor: float, bounds: tuple[float, float] | None) -> bool:
    """Without a range, any fitting factor is reported; with one, only if dividing it out helps."""
    if bounds is None:
        return True
    return _in_range(values / factor, bounds) > _in_range(values, bounds) + 0.2


def compare_linked(records: pd.DataFrame, entity_ids: pd.Series, canonical: CanonicalSchema,
                   feeds: list[NumericFeed], locate: Locate) -> list[Finding]:
    """Where records of one entity from two sources disagree by a known factor most of the time, say so.

    Fields resolved by ``sum`` are skipped: their records are separate amounts, not one value.
    """
    findings: list[Finding] = []
    lookup = {(f.source, f.field): f for f in feeds}
    entity = pd.Series(entity_ids.to_numpy(), index=records.index)
    for name in numeric_fields(canonical):
        spec = canonical.fields[name]
        if spec.resolve == "sum":
            continue
        long = pd.DataFrame({"entity": entity, "source": records[SOURCE], "value": records[name]})
        long = long[long["entity"].notna() & (long["value"] > 0)]
        per = long.groupby(["entity", "source"], sort=False)["value"].median().reset_index()
        pairs = per.merge(per, on="entity", suffixes=("_a", "_b"))
        pairs = pairs[pairs["source_a"] < pairs["source_b"]]
        pairs = pairs.assign(log_ratio=np.log(pairs["value_a"] / pairs["value_b"]))
        for (a, b), group in pairs.groupby(["source_a", "source_b"], sort=True):
            logs = group["log_ratio"].to_numpy()
            if len(logs) < MIN_LINKED or np.mean(np.abs(logs) < AGREE) >= 0.5:
                continue
            candidates: list[tuple[Explanation, str]] = []
            if (a, name) in lookup:
                candidates += [(e, a) for e in lookup[(a, name)].explanations]
            if (b, name) in lookup:
                candidates += [(Explanation(1 / e.factor, e.cause), b) for e in lookup[(b, name)].explanations]
            best = closest(float(np.exp(np.median(logs))), [e for e, _ in candidates], tolerance=0.03)
            if best is None:
                continue
            share = float(np.mean(np.abs(logs - math.log(best.factor)) < math.log(1.03)))
            if share < 0.5:
                continue
            fitting = [(e, s) for e, s in candidates if math.isclose(e.factor, best.factor, rel_tol=0.03)]
            culprits = sorted({s for _, s in fitting})
            blamed = _blame_by_range(records, name, culprits, best.factor, a, spec.range) or culprits
            source = blamed[0] if len(blamed) == 1 else a
            best = next(e for e, s in fitting if s == source)  # the blamed source's own explanation
            feed = lookup.get((source, name))
            file, line, col = locate(source, feed.column) if feed else (None, None, None)
            who = f"source '{blamed[0]}' looks mislabelled" if len(blamed) == 1 else "one of them is mislabelled"
            findings.append(Finding(
                "warning", "linked_factor",
                f"'{name}': records of the same entity in '{a}' and '{b}' disagree systematically; "
                f"'{a}' is {ratio_text(best.factor)} '{b}' in {share:.0%} of {len(logs)} linked "
                f"entities: {best.describe()}; {who}",
                file, line, col, source,
                hint="check the unit or currency the column declares in the mapping file"))
    return findings


def _blame_by_range(records: pd.DataFrame, name: str, culprits: list[str], factor: float, a: str,
                    bounds: tuple[float, float] | None) -> list[str]:
    """The culprits whose values become more plausible once repaired (source a divides, b multiplies)."""
    if bounds is None or len(culprits) < 2:
        return []
    kept = []
    for source in culprits:
        values = _positive(records, source, name)
        repaired = values / factor if source == a else values * factor
        if _in_range(repaired, bounds) > _in_range(values, bounds) + 0.2:
            kept.append(source)
    return kept


def range_findings(records: pd.DataFrame, canonical: CanonicalSchema, feeds: list[NumericFeed],
                   data_files: dict[str, str]) -> list[Finding]:
    """Values outside a field's plausible ``range``, per source: the rows, and a factor that would fix most."""
    findings: list[Finding] = []
    for feed in feeds:
        spec = canonical.fields[feed.field]
        if spec.range is None:
            continue
        low, high = spec.range
        mine = records[records[SOURCE] == feed.source]
        values = mine[feed.field]
        outside = values.notna() & ~values.between(low, high)
        if not outside.any():
            continue
        bad = values[outside].to_numpy(dtype="float64")
        rows = mine.loc[outside, ROW]
        unit = spec.unit or canonical.base_currency
        shown = ", ".join(f"{v:.4g}" for v in bad[:5])
        hint = None
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):  # huge values: inf, out of range
            repairs = [(float(np.mean((bad / e.factor >= low) & (bad / e.factor <= high))), e)
                       for e in feed.explanations]
        share, best = max(repairs, key=lambda r: r[0], default=(0.0, None))
        if best is not None and share >= 0.5:
            hint = (f"{share:.0%} of them fall in range {undo_text(best.factor)}: "
                    f"{best.cause}, in those rows?")
        findings.append(Finding(
            "warning", "out_of_range",
            f"{len(bad)} value(s) of '{feed.field}' outside its plausible range [{low:g}, {high:g}] {unit} "
            f"({rows_text(rows)}; e.g. {shown} {unit} after conversion)",
            data_files.get(feed.source), int(rows.iloc[0]), feed.column, feed.source,
            hint=hint or "fix the values in the source, or widen 'range' in canonical.yaml if they are real"))
    return findings
