"""``integrate check``: everything that can be known about a workspace without matching anyone.

Validates every mapping file, reads every source, converts every value, and reports what a run
would stop on (errors) and what deserves a look before trusting the result (warnings): unmapped
columns, values that cannot be read (with their rows), values outside a field's plausible range,
names that contradict the declared unit or currency, distributions that disagree across sources
by a known factor, and redundant columns. With a previous run's crosswalk, records of the same
entity are compared across sources too.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..columns import RECORD_ID, ROW, SOURCE
from ..errors import InputError, InputErrors, MappingError
from ..sources import add_read_failures, read_source
from ..workspace import CANONICAL_FILE, MAPPINGS_DIR, SourceEntry, Workspace
from .apply import FATAL_REASONS, MappedSource, apply_mapping
from .distribution import NumericFeed, compare_distributions, compare_linked, numeric_fields, range_findings
from .drift import drift_findings
from .factors import explanations_for
from .findings import LEVELS, CheckReport, Finding, rows_text
from .load import load_canonical, load_source_mapping, locate_in, position_of, read_yaml
from .meanings import field_meanings, meaning_findings
from .money import RatesTable
from .rates_layout import load_workspace_rates
from .redundancy import redundant_columns
from .spec import CanonicalSchema

CROSSWALK_FILE = "crosswalk.csv"
NO_RECORDS_HINT = "check that the export is complete; a source with no records adds nothing to the run"


def no_records_text(source: str) -> str:
    return f"source '{source}' has no records (a header row only, or only blank rows)"


@dataclass
class _Loaded:
    """The workspace as far as it loads: a schema, the mapping files that validate, the rates."""

    workspace: Workspace
    rates: RatesTable | None


def _errors_of(exc: InputError | InputErrors) -> list[InputError]:
    return list(exc.errors) if isinstance(exc, InputErrors) else [exc]


def _load(root: Path, report: CheckReport) -> _Loaded | None:
    """Load every mapping file on its own, so that one broken file does not hide the others."""
    folder = root / MAPPINGS_DIR
    canonical_file = folder / CANONICAL_FILE
    if not canonical_file.exists():
        report.add([Finding("error", "not_a_workspace", f"no {MAPPINGS_DIR}/{CANONICAL_FILE} in '{root}'",
                            str(canonical_file), hint="pass the folder that holds mappings/canonical.yaml")])
        return None
    ws = Workspace(root, CanonicalSchema(fields={}), canonical_file)
    try:
        canonical = load_canonical(canonical_file, ws.display(canonical_file))
    except (InputError, InputErrors) as exc:
        report.add(Finding.from_error(e) for e in _errors_of(exc))
        return None
    ws.canonical = canonical
    seen: dict[str, Path] = {}
    for path in sorted(folder.glob("*.yaml")):
        if path.name == CANONICAL_FILE:
            continue
        try:
            mapping = load_source_mapping(path, canonical, ws.display(path))
        except (InputError, InputErrors) as exc:
            report.add(Finding.from_error(e) for e in _errors_of(exc))
            continue
        if mapping.source in seen:
            report.add([Finding("error", "duplicate_source",
                                f"source name '{mapping.source}' is already used by {ws.display(seen[mapping.source])}",
                                ws.display(path), *position_of(path, "source"), hint="give each source its own name")])
            continue
        seen[mapping.source] = path
        ws.sources.append(SourceEntry(mapping, path))
    if not ws.sources and not report.of_level("error"):
        report.add([Finding("error", "no_sources", f"no source mapping files in {ws.display(folder)}",
                            ws.display(folder), hint="add one <source>.yaml per export beside canonical.yaml")])
    rates = None
    if canonical.rates:
        try:
            rates = load_workspace_rates(canonical, root / canonical.rates, canonical.rates)
        except InputError as exc:
            exc.file = canonical.rates
            report.add([Finding.from_error(exc)])
    return _Loaded(ws, rates)


class _Locator:
    """(source, column) -> (mapping file, line, column) of the column's entry; '' is the canonical schema."""

    def __init__(self, ws: Workspace) -> None:
        self.ws = ws
        self.files = {e.mapping.source: e.mapping_file for e in ws.sources}
        self.roots: dict[Path, object] = {}  # each file parsed once, however many findings point into it

    def _at(self, path: Path, *loc: str) -> tuple[int | None, int | None]:
        if path not in self.roots:
            try:
                self.roots[path] = read_yaml(path)
            except MappingError:
                self.roots[path] = None
        root = self.roots[path]
        return (None, None) if root is None else locate_in(root, *loc)

    def __call__(self, source: str, column: str) -> tuple[str | None, int | None, int | None]:
        if not source:
            path = self.ws.canonical_file
            return (self.ws.display(path), *self._at(path, "fields", column))
        path = self.files.get(source)
        if path is None:
            return None, None, None
        line, col = self._at(path, "columns", column)
        if line is None:
            line, col = self._at(path, "columns")
        return self.ws.display(path), line, col


def _failure_findings(mapped: MappedSource) -> list[Finding]:
    """Cell failures a run would leave empty, grouped by column and reason (fatal ones come as problems)."""
    failures = mapped.failures[~mapped.failures["reason"].isin(FATAL_REASONS)]
    found: list[Finding] = []
    for (column, reason), group in failures.groupby(["column", "reason"], sort=False):
        first = group.iloc[0]
        found.append(Finding(
            "warning", str(reason),
            f"{len(group)} value(s) cannot be read and will be left empty ({rows_text(group['row'])}); "
            f"e.g. {first['message']}",
            str(first["file"]), int(first["row"]), str(column), mapped.name,
            hint="fix the values, or the column's format / unit / currency in the mapping file"))
    return found


def _redundancy_findings(raw: pd.DataFrame, entry: SourceEntry, locate: _Locator) -> list[Finding]:
    maps = entry.mapping.column_maps()
    used = {c for c, m in maps.items() if not m.ignore}
    found: list[Finding] = []
    for pair in redundant_columns(raw):
        both_used = pair.first in used and pair.second in used
        file, line, col = locate(entry.mapping.source, pair.second if pair.second in maps else pair.first)
        found.append(Finding(
            "warning" if both_used else "note", f"redundant_{pair.kind}",
            f"columns '{pair.first}' and '{pair.second}' of '{entry.mapping.source}' say the same thing "
            f"({pair.detail})",
            file, line, col, entry.mapping.source,
            hint="map one of them and mark the other `ignore`" if both_used else "nothing to do if one is ignored"))
    return found


def _numeric_feeds(loaded: _Loaded) -> list[NumericFeed]:
    canonical = loaded.workspace.canonical
    numeric = set(numeric_fields(canonical))
    feeds: list[NumericFeed] = []
    for entry in loaded.workspace.sources:
        done: set[str] = set()
        for column, cmap in entry.mapping.column_maps().items():
            if cmap.field in numeric and cmap.field not in done:
                done.add(cmap.field)
                spec = canonical.fields[cmap.field]
                feeds.append(NumericFeed(entry.mapping.source, cmap.field, column,
                                         explanations_for(spec, cmap, canonical.base_currency, loaded.rates)))
    return feeds


def _entity_ids(records: pd.DataFrame, crosswalk: pd.DataFrame) -> pd.Series:
    keys = crosswalk.astype({"source": str, "record_id": str}).drop_duplicates(["source", "record_id"])
    joined = records[[SOURCE, RECORD_ID]].astype(str).merge(
        keys, left_on=[SOURCE, RECORD_ID], right_on=["source", "record_id"], how="left")
    return pd.Series(joined["entity_id"].to_numpy(), index=records.index)


def check_workspace(root: str | Path = ".", *, crosswalk: pd.DataFrame | None = None,
                    use_last_run: bool = True) -> CheckReport:
    """Check a workspace's mapping files and sources without running the match.

    Args:
        root: the workspace folder.
        crosswalk: entity IDs (``source, record_id, entity_id``) to compare linked records with;
            by default the last run's ``crosswalk.csv`` in the output folder, when there is one.
        use_last_run: look for that file (``False``: compare distributions only).

    Returns:
        A CheckReport; ``exit_code()`` is 0 when clean, 1 with warnings only, 2 with errors.
    """
    root = Path(root)
    report = CheckReport()
    loaded = _load(root, report)
    if loaded is None:
        return report
    ws, canonical = loaded.workspace, loaded.workspace.canonical
    locate = _Locator(ws)
    report.meanings = field_meanings(canonical, [e.mapping for e in ws.sources])
    report.add(meaning_findings(canonical, [e.mapping for e in ws.sources], locate))
    frames: list[pd.DataFrame] = []
    raws: dict[str, pd.DataFrame] = {}  # as read, for the comparison with last month's profiles (drift.py)
    data_files: dict[str, str] = {}
    for entry in ws.sources:
        mapping = entry.mapping
        data_path = entry.data_path(root)
        data_file = ws.display(data_path) if data_path else str(mapping.read.url)
        data_files[mapping.source] = data_file
        try:
            raw = read_source(mapping.read, root, name=mapping.source)
        except (InputError, InputErrors) as exc:
            report.add(Finding.from_error(e, mapping.source) for e in _errors_of(exc))
            continue
        mapped = apply_mapping(raw, mapping, canonical, loaded.rates, data_file=data_file,
                               mapping_file=ws.display(entry.mapping_file), mapping_path=entry.mapping_file,
                               on_error="collect")
        mapped = add_read_failures(mapped, raw, data_file)
        report.records[mapping.source] = len(mapped.frame)
        if mapped.frame.empty:
            report.add([Finding("warning", "no_records", no_records_text(mapping.source), data_file,
                                source=mapping.source, hint=NO_RECORDS_HINT)])
        raws[mapping.source] = raw
        report.add(Finding.from_error(e, mapping.source) for e in mapped.problems)
        if mapped.unmapped_columns:
            file, line, col = locate(mapping.source, "")
            report.add([Finding(
                "warning", "unmapped_column",
                f"columns of {data_file} not mentioned in the mapping: "
                + ", ".join(repr(c) for c in mapped.unmapped_columns),
                file, line, col, mapping.source,
                hint="map each to a canonical field, or list it as `<column>: ignore`")])
        report.add(_failure_findings(mapped))
        report.add(_redundancy_findings(raw, entry, locate))
        frames.append(mapped.frame)
    if frames:
        records = pd.concat(frames, ignore_index=True)
        feeds = [f for f in _numeric_feeds(loaded) if f.source in report.records]
        report.add(range_findings(records, canonical, feeds, data_files))
        report.add(birth_date_findings(records, canonical, data_files, _Locator(ws)))
        report.add(compare_distributions(records, canonical, feeds, locate))
        from ..outputs.publish import current_output_folder  # the last run's folder, wherever --out put it

        crosswalk_path = current_output_folder(ws.root, default=ws.output_dir) / CROSSWALK_FILE
        if crosswalk is None and use_last_run and crosswalk_path.is_file():
            crosswalk = _read_crosswalk(crosswalk_path, report)
            report.linked_from = ws.display(crosswalk_path) if crosswalk is not None else None
        if crosswalk is not None:
            report.linked_from = report.linked_from or "the given crosswalk"
            report.add(compare_linked(records, _entity_ids(records, crosswalk), canonical, feeds, locate))
    report.add(drift_findings(ws, raws, loaded.rates))
    report.findings.sort(key=lambda f: LEVELS.index(f.level))
    return report


def _read_crosswalk(path: Path, report: CheckReport) -> pd.DataFrame | None:
    frame = pd.read_csv(path, dtype=str)
    if not {"source", "record_id", "entity_id"} <= set(frame.columns):
        report.add([Finding.from_error(MappingError(
            "crosswalk has no source, record_id, entity_id columns; linked records not compared",
            file=str(path), line=1, reason="bad_crosswalk"), level="note")])
        return None
    return frame


def run_value_findings(records: pd.DataFrame, ws: Workspace, crosswalk: pd.DataFrame | None = None) -> list[Finding]:
    """Out-of-range values, distributions across sources and (with a crosswalk) linked records, on a run's records.

    The run report shows these beside the meanings table; ``check`` computes the same before a run.
    """
    rates = None
    if ws.canonical.rates and (ws.root / ws.canonical.rates).is_file():
        rates = load_workspace_rates(ws.canonical, ws.root / ws.canonical.rates)
    loaded = _Loaded(ws, rates)
    locate = _Locator(ws)
    present = set(records[SOURCE].unique()) if SOURCE in records else set()
    feeds = [f for f in _numeric_feeds(loaded) if f.source in present]
    data_files = {}
    for entry in ws.sources:
        path = entry.data_path(ws.root)
        data_files[entry.mapping.source] = ws.display(path) if path else str(entry.mapping.read.url)
    found = range_findings(records, ws.canonical, feeds, data_files)
    found += compare_distributions(records, ws.canonical, feeds, locate)
    if crosswalk is not None:
        found += compare_linked(records, _entity_ids(records, crosswalk), ws.canonical, feeds, locate)
    return found


OLDEST_AGE = 130  # years: no one alive is older (the oldest verified age is 122, common practice)


def birth_date_findings(records: pd.DataFrame, canonical: CanonicalSchema, data_files: dict[str, str],
                        locate: _Locator, today: dt.date | None = None) -> list[Finding]:
    """Birth dates in the future or more than 130 years back, per source and field, with their rows.

    A field is a birth date when its name or meaning says 'birth'. Dates are ISO 8601 text after
    mapping (``1987-03-04``, or a year alone).
    """
    today = today or dt.datetime.now(dt.UTC).date()
    found: list[Finding] = []
    for name, spec in canonical.fields.items():
        if spec.type != "date" or "birth" not in f"{name} {spec.meaning}".lower() or name not in records:
            continue
        text = records[name].astype("string")
        year = pd.to_numeric(text.str.slice(0, 4), errors="coerce")
        full = pd.to_datetime(text.where(text.str.len() >= 10).str.slice(0, 10), errors="coerce", format="%Y-%m-%d")
        future = (full > pd.Timestamp(today)) | (year > today.year)
        old = year < today.year - OLDEST_AGE
        for label, bad in (("in the future", future.fillna(False)), (f"more than {OLDEST_AGE} years ago",
                                                                     old.fillna(False))):
            for source, group in records[bad.to_numpy(dtype=bool)].groupby(SOURCE, sort=True):
                shown = ", ".join(str(v) for v in group[name].head(3))
                found.append(Finding(
                    "warning", "implausible_birth_date",
                    f"{len(group)} value(s) of '{name}' are {label} ({rows_text(group[ROW])}; e.g. {shown})",
                    data_files.get(str(source)), int(group[ROW].iloc[0]), None, str(source),
                    hint="check the values and the column's date format (a two-digit year read in the wrong "
                    "century looks like this)"))
    return found
