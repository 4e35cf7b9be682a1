"""The run: every stage in order, from source files to outputs and the run report.

read sources -> apply mappings -> standardise -> block -> compare -> score -> cluster -> resolve
-> write outputs + report. Each stage lives in its own module; this module only passes data along.
"""

from __future__ import annotations

import datetime as dt
import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .block import BlockingReport
from .cluster import Split, cluster_table, near_certain_pairs_cut, splits_frame
from .columns import RECORD_ID, SOURCE
from .compare import grade_name
from .errors import InputError, InputErrors
from .evaluate import Evaluation, evaluate, hard_negatives, read_crosswalk_file
from .ids import ChangeSummary, assign_stable_ids, canonical_order, money_digits, record_hashes
from .incremental import (
    REFIT_SHARE,
    Carried,
    IncrementalSummary,
    plan,
    prepared_for,
    read_carry,
    resolve_changed,
    reuse_for,
    settings_fingerprint,
    settled,
    source_states,
    write_carry,
)
from .killpoints import reached
from .mapping.apply import FAILURE_COLUMNS, MappedSource, apply_mapping
from .mapping.checks import no_records_text
from .mapping.money import RatesTable
from .mapping.rates_layout import load_workspace_rates
from .matching import MatchResult, match_records
from .outputs.missing import run_missing_values
from .resolve import check_orders, resolve, source_pair_conflicts
from .score import ScoreModel
from .sources import add_read_failures, read_source
from .state import NewRun, RunHistory, RunLock, StateStore, file_hash, input_hashes
from .workspace import Workspace, load_workspace

if TYPE_CHECKING:
    from .history_store import SourceProfiles
    from .review.apply import ReviewSummary

log = logging.getLogger(__name__)

# Stage names in order, as shown by progress displays.
STAGES = ("read", "map", "standardise", "block", "compare", "score", "cluster", "resolve", "write")

Progress = Callable[[str], None]


@dataclass
class RunResult:
    """Everything a run produced; the same frames are written to the output folder."""

    merged: pd.DataFrame
    crosswalk: pd.DataFrame
    provenance: pd.DataFrame
    pairs: pd.DataFrame
    failures: pd.DataFrame
    records: pd.DataFrame
    blocking: BlockingReport
    model: ScoreModel
    source_counts: dict[str, int]
    unmapped: dict[str, list[str]]
    mapping_hashes: dict[str, str]
    timings: dict[str, float]
    started: dt.datetime
    output_dir: Path | None = None  # the stable output folder (its files link to the current run's)
    report_path: Path | None = None
    run_dir: Path | None = None  # the run's own folder, out/runs/run-N: one complete set
    warnings: list[str] = field(default_factory=list)
    review: ReviewSummary | None = None  # decisions applied, model re-estimated, audit precision
    splits: list[Split] = field(default_factory=list)  # cuts clustering made (constraints, chaining guard)
    clusters: pd.DataFrame | None = None  # one row per entity: records, sources, weakest link, ...
    changes: ChangeSummary | None = None  # against the previous run in the state store
    entity_changes: pd.DataFrame | None = None  # per entity that is not unchanged: what changed
    conflict_pairs: pd.DataFrame | None = None  # entities with conflicting values, per field and source pair
    run_id: int | None = None  # the run's number in the state store (when written)
    quality: RunQuality | None = None  # against the schema's 'truth' crosswalk, when one is given
    missing: pd.DataFrame | None = None  # per field: missing before / after merging (outputs/missing.py)
    incremental: IncrementalSummary | None = None  # what an incremental run reused (incremental.py)
    near_certain_cut: int = 0  # compared pairs at probability >= 0.99 that ended in two entities (goal: 0)


@dataclass
class RunQuality:
    """How the run compares with a known-true crosswalk."""

    evaluation: Evaluation
    hard_negatives: pd.DataFrame
    truth_file: str


def _quiet(_: str) -> None:
    return None


def judge_against_truth(ws: Workspace, records: pd.DataFrame, match: MatchResult, crosswalk: pd.DataFrame
                        ) -> RunQuality | None:
    """Precision / recall and the hard non-matches, when the schema names a true crosswalk."""
    if not ws.canonical.truth:
        return None
    path = ws.root / ws.canonical.truth
    truth = read_crosswalk_file(path)
    evaluation = evaluate(crosswalk, truth, match.pairs, records, match.blocking.all_pairs, match.copy_of)
    types = {n: f.type for n, f in ws.canonical.fields.items() if f.is_compared()}
    names = [n for n, t in types.items() if t == "person_name"]
    hard = pd.DataFrame(columns=["kind", "candidate pairs", "wrongly merged"])
    if len(names) >= 2:
        contact = [n for n, t in types.items() if t in ("email", "phone", "postcode", "text")]
        hard = hard_negatives(records, match.prepared, match.pairs, match.entities["entity_id"].to_numpy(), truth,
                              given=names[0], family=names[1], contact=contact)
    return RunQuality(evaluation, hard, ws.display(path))


def read_and_map(ws: Workspace, progress: Progress = _quiet,
                 on_read: Callable[[Any, pd.DataFrame], None] | None = None,
                 reuse: Callable[[Any], MappedSource | None] | None = None
                 ) -> tuple[pd.DataFrame, list[MappedSource]]:
    """Read every source and map it to canonical columns; all input problems are raised together.

    ``on_read`` is called with each source entry and its frame as read (the run profiles it there);
    ``reuse`` may give a source's mapped records without reading it (an incremental run, for an
    export unchanged since the last run).
    """
    rates: RatesTable | None = None
    if ws.canonical.rates:
        rates_path = ws.root / ws.canonical.rates
        if not rates_path.exists():
            raise InputError("currency-rates file not found", file=ws.display(rates_path), reason="missing_file",
                             hint="check 'rates:' in mappings/canonical.yaml")
        rates = load_workspace_rates(ws.canonical, rates_path, ws.display(rates_path))
    mapped: list[MappedSource] = []
    problems: list[InputError] = []
    progress("read")
    for entry in ws.sources:
        mapping = entry.mapping
        data_path = entry.data_path(ws.root)
        data_file = ws.display(data_path) if data_path else str(mapping.read.url)
        same = reuse(entry) if reuse is not None else None
        if same is not None:
            mapped.append(same)
            continue
        try:
            raw = read_source(mapping.read, ws.root, name=mapping.source)
            if on_read is not None:
                on_read(entry, raw)
            mapped.append(add_read_failures(apply_mapping(raw, mapping, ws.canonical, rates, data_file=data_file,
                                                          mapping_file=ws.display(entry.mapping_file),
                                                          mapping_path=entry.mapping_file), raw, data_file))
        except InputErrors as many:
            problems.extend(many.errors)
        except InputError as one:
            if one.file and not Path(one.file).is_absolute() and data_path is not None and one.file == str(data_path):
                one.file = data_file
            problems.append(one)
    if problems:
        raise problems[0] if len(problems) == 1 else InputErrors(problems)
    progress("map")
    if mapped and all(m.frame.empty for m in mapped):
        raise InputError("no source has any records (each file holds a header row only)",
                         file=ws.display(ws.root / "mappings"), reason="no_records",
                         hint="check that the exports are complete")
    records = pd.concat([m.frame for m in mapped], ignore_index=True)
    return records, mapped


def crosswalk_frame(records: pd.DataFrame, match: MatchResult) -> pd.DataFrame:
    return pd.DataFrame({
        "source": records[SOURCE].astype(str).to_numpy(),
        "record_id": records[RECORD_ID].astype(str).to_numpy(),
        "entity_id": match.entities["entity_id"].to_numpy(),
        "link_strength": match.entities["link_strength"].round(6).to_numpy(),
    }).sort_values(["entity_id", "source", "record_id"], kind="mergesort").reset_index(drop=True)


def _labels(codes: np.ndarray, names: list[str]) -> pd.Categorical:
    """A categorical of ``names[code]``; equal names (if any) become one category."""
    categories, position = np.unique(np.asarray(names, dtype=object), return_inverse=True)
    return pd.Categorical.from_codes(position.reshape(-1)[codes], categories=list(categories))


def pairs_frame(records: pd.DataFrame, match: MatchResult, types: dict[str, str]) -> pd.DataFrame:
    """Candidate pairs with record keys, readable grades, weights, probability and decision."""
    p = match.pairs
    i, j = p["i"].to_numpy(), p["j"].to_numpy()
    names = match.blocking.rules
    masks = p["rules"].to_numpy()
    distinct, inverse = np.unique(masks, return_inverse=True)  # names built once per distinct mask
    rule_names = [",".join(n for b, n in enumerate(names) if (int(m) >> b) & 1) for m in distinct.tolist()]
    # text columns of a few distinct values are categorical: millions of pairs hold a handful of
    # rule sets and grade names, and Parquet stores them as a dictionary without converting each
    out = pd.DataFrame({
        "source_a": records[SOURCE].to_numpy()[i], "record_id_a": records[RECORD_ID].to_numpy()[i],
        "source_b": records[SOURCE].to_numpy()[j], "record_id_b": records[RECORD_ID].to_numpy()[j],
        "blocking_rules": _labels(inverse.reshape(-1), rule_names),
    })
    for f, ftype in types.items():
        codes, levels = pd.factorize(p["g_" + f].to_numpy())
        out["grade_" + f] = _labels(codes, [grade_name(ftype, int(c)) for c in levels])
    for column in p.columns:
        if column.startswith("w_"):
            out["weight_" + column[2:]] = p[column].round(3).to_numpy()
        elif column.startswith("tf_"):
            out["value_frequency_" + column[3:]] = p[column].round(3).to_numpy()
    out["weight"] = p["weight"].round(3).to_numpy()
    if "prior_weight" in p:
        out["prior_weight"] = p["prior_weight"].round(3).to_numpy()
    out["probability"] = p["probability"].to_numpy()
    out["decision"] = p["decision"].to_numpy()
    return out


def run_pipeline(workspace: str | Path | Workspace = ".", *, progress: Progress = _quiet,
                 write: bool = True, output_dir: str | Path | None = None, keep_runs: int | None = None,
                 engine: str = "local", scheduler: str | None = None, incremental: bool = False,
                 refit: bool = False, model: ScoreModel | None = None) -> RunResult:
    """Run every stage on a workspace and (by default) write the outputs and the run report.

    Args:
        workspace: workspace folder (holding ``mappings/``) or a loaded Workspace.
        progress: called with each stage name as it starts.
        write: write tables and the report; ``False`` only computes.
        output_dir: overrides the schema's ``output`` folder.
        keep_runs: run folders to keep in the output folder (default ``INTEGRATE_KEEP_RUNS`` or 3).
        engine: where blocking, comparison and scoring run: ``"local"`` (this process) or
            ``"dask"`` (a dask.distributed cluster; same outputs; see ``integrate.engine``).
        scheduler: with ``engine="dask"``, a running cluster's scheduler address (default: a
            LocalCluster of two worker processes started for this run).
        incremental: build on the last run: records unchanged since then keep their standard
            values and their candidate pairs' grades, only new and changed ones are standardised
            and compared, and the last run's model scores the pairs (see ``integrate.incremental``;
            a full run where the last run left nothing to build on or the schema changed).
        refit: with ``incremental``, re-estimate the model instead of keeping the last run's.
        model: score with this model instead of estimating one (e.g. ``result.model`` of an
            earlier run, to compare runs with the model held fixed).

    Raises:
        InputError / InputErrors: a mapping file, source file or value is wrong; nothing is written.
        RunLocked: another run of the workspace is in progress (nothing is read or written).
    """
    ws = workspace if isinstance(workspace, Workspace) else load_workspace(workspace)
    options = {"engine": engine, "scheduler": scheduler, "incremental": incremental, "refit": refit, "model": model}
    if not write:
        return _run(ws, progress, write=False, output_dir=None, keep_runs=None, **options)
    from .outputs.publish import recover

    store = StateStore.for_workspace(ws.root)
    with RunLock(store):
        out_dir = Path(output_dir) if output_dir else ws.output_dir
        runs = store.runs()
        found = recover(out_dir, ws.reports_dir, [r.output_dir or "" for r in runs],
                        {r.output_dir: r.report for r in runs if r.output_dir and r.report})
        if found:
            log.info("cleaned up after an interrupted run: %d temporary files, %d unrecorded run folders removed%s",
                     len(found.temporary_files), len(found.discarded_folders),
                     f", current set switched to {found.switched_to}" if found.switched_to else "")
        return _run(ws, progress, write=True, output_dir=out_dir, keep_runs=keep_runs, **options)


def incremental_settings(ws: Workspace, regions: dict[str, str | None]) -> str:
    """The fingerprint that stored standard values and grades are valid for."""
    return settings_fingerprint(ws.mapping_hashes()[ws.display(ws.canonical_file)], regions)


def _last_carry(history: RunHistory, fingerprint: str, engine: str) -> tuple[Carried | None, list[str]]:
    """What the last run left for an incremental run, or None and a warning saying why not."""
    previous = history.previous
    if engine != "local":
        return None, [f"incremental runs use the local engine; this run on '{engine}' ran in full"]
    if previous is None:
        return None, ["no earlier run to build on: this incremental run ran in full"]
    found, why = read_carry(previous.output_dir, previous.run_id, fingerprint)
    if found is None:
        return None, [f"incremental run not possible ({why}): ran in full"]
    return found, []


def _source_states(ws: Workspace, inputs: dict[str, str | None]) -> dict[str, dict[str, object]]:
    rates = file_hash(ws.root / ws.canonical.rates) if ws.canonical.rates and (ws.root / ws.canonical.rates).is_file() \
        else None
    entries = [(e, ws.display(e.data_path(ws.root)) if e.data_path(ws.root) is not None else None) for e in ws.sources]
    return source_states(inputs, ws.mapping_hashes(), rates, entries, ws.display)


def _build_on_last_run(ws: Workspace, records: pd.DataFrame, regions: dict[str, str | None], found: Carried,
                       refit: bool, model: ScoreModel | None, not_read: list[str]) -> dict[str, Any]:
    """What an incremental run takes from the last one: standard values, reusable grades, model."""
    the_plan = plan(records, ws.canonical, found)
    prepared = prepared_for(records, ws.canonical, regions, found, the_plan)
    summary = IncrementalSummary(found.run_id, the_plan.unchanged, the_plan.new, the_plan.changed,
                                 the_plan.removed, sources_not_read=not_read)
    if model is None and not refit and the_plan.share_new() <= REFIT_SHARE:
        model = found.model
    else:
        summary.model = "given" if model is not None else "re-estimated"
    return {"prepared": prepared, "model": model, "summary": summary, "found": found, "plan": the_plan,
            "reuse": lambda full, copy_of: reuse_for(found, the_plan, full, copy_of, ws.canonical)}


def _run(ws: Workspace, progress: Progress, *, write: bool, output_dir: Path | None, keep_runs: int | None,
         engine: str = "local", scheduler: str | None = None, incremental: bool = False, refit: bool = False,
         model: ScoreModel | None = None) -> RunResult:
    started = dt.datetime.now(dt.UTC).replace(microsecond=0)
    timings: dict[str, float] = {}
    clock = [time.perf_counter(), ""]

    def tick(stage: str) -> None:
        now = time.perf_counter()
        if clock[1]:
            timings[str(clock[1])] = timings.get(str(clock[1]), 0.0) + now - float(clock[0])
        clock[0], clock[1] = now, stage
        reached("stage:" + stage)
        progress(stage)

    tick.count = getattr(progress, "count", None)  # type: ignore[attr-defined]  # counts inside a stage

    check_orders(ws.canonical, [e.mapping.source for e in ws.sources], ws.display(ws.canonical_file))
    inputs = input_hashes(ws) if write else {}
    from .history_store import SourceProfiles  # column profiles for drift checks, taken as each source is read

    profiles = SourceProfiles(ws) if write else None
    regions = {e.mapping.source: e.mapping.region for e in ws.sources}
    history = RunHistory.load(ws.root, create=write)
    fingerprint = incremental_settings(ws, regions)
    found, notes = _last_carry(history, fingerprint, engine) if incremental else (None, [])
    states = _source_states(ws, inputs) if write else {}
    not_read: list[str] = []

    def unchanged_source(entry: Any) -> MappedSource | None:
        """An export, mapping and rates table as the last run had them: its mapped records, not read again."""
        same = found.mapped_source(entry.mapping.source, states[entry.mapping.source]) if found and states else None
        if same is not None:
            not_read.append(same.name)
        return same

    records, mapped = read_and_map(ws, tick, on_read=profiles, reuse=unchanged_source if found else None)
    for m in mapped:
        if m.name in states:
            states[m.name].update(columns={c: str(t) for c, t in m.frame.dtypes.items()}, unmapped=m.unmapped_columns)
    records = canonical_order(records)  # nothing downstream may depend on the order of rows in the files
    # reviewers' decisions (state store) are applied on every run, whatever the scores say
    from .review.apply import decision_constraints, summarise_review

    decided = decision_constraints(ws.root, records)
    from .engine import open_engine

    carried: dict[str, Any] = {"model": model}
    if found is not None:
        tick("standardise")
        carried = _build_on_last_run(ws, records, regions, found, refit, model, not_read)
    with open_engine(engine, scheduler) as runner:
        match = match_records(records, ws.canonical, regions=regions, progress=tick, must_link=decided.must_link,
                              cannot_link=decided.cannot_link, estimator=decided.estimator,
                              one_per_person=[e.mapping.source for e in ws.sources if e.mapping.one_per_person],
                              engine=runner, prepared=carried.get("prepared"), reuse=carried.get("reuse"),
                              model=carried.get("model"))
    summary = carried.get("summary")
    if found is not None:
        found.after_matching()
    if summary is not None and match.reuse is not None:
        summary.pairs_reused, summary.pairs_compared = match.reuse.reused, match.reuse.compared
        summary.stored_pairs_dropped = match.reuse.dropped
    # stable IDs: each cluster keeps the previous run's ID of the entity it shares most records with
    current = pd.DataFrame({"source": records[SOURCE].astype(str).to_numpy(),
                            "record_id": records[RECORD_ID].astype(str).to_numpy(),
                            "cluster": match.entities["entity_id"].to_numpy(),
                            "record_hash": record_hashes(records, list(ws.canonical.fields),
                                                         money_digits(ws.canonical))})
    stable, changes, entity_changes = assign_stable_ids(current, history.previous_crosswalk, history.issued,
                                                        history.previous_run_id)
    match.entities["entity_id"] = stable.to_numpy()
    tick("resolve")
    if summary is not None:  # an incremental run: entities exactly as the last run left them keep their rows
        stands = settled(carried["found"], carried["plan"], match.entities["entity_id"])
        merged, provenance, summary.entities_resolved = resolve_changed(
            records, match.entities["entity_id"], ws.canonical, match.prepared, carried["found"], stands)
        summary.entities_kept = len(merged) - summary.entities_resolved
    else:
        merged, provenance = resolve(records, match.entities["entity_id"], ws.canonical, match.prepared)
    conflict_pairs = source_pair_conflicts(records, match.entities["entity_id"], ws.canonical, match.prepared)
    crosswalk = crosswalk_frame(records, match)
    types = {c[2:]: ws.canonical.fields[c[2:]].type for c in match.pairs.columns if c.startswith("g_")}
    pairs = pairs_frame(records, match, types)
    thresholds = {"link": ws.canonical.thresholds.link, "review": ws.canonical.thresholds.review}
    review = summarise_review(ws.root, decided, match.pairs, thresholds, types)
    failures = pd.concat([m.failures for m in mapped], ignore_index=True) if mapped else pd.DataFrame(
        columns=FAILURE_COLUMNS)
    result = RunResult(
        merged=merged, crosswalk=crosswalk, provenance=provenance, pairs=pairs, failures=failures,
        records=records, blocking=match.blocking, model=match.model,
        source_counts={m.name: len(m.frame) for m in mapped},
        unmapped={m.name: m.unmapped_columns for m in mapped if m.unmapped_columns},
        mapping_hashes=ws.mapping_hashes(), timings=timings, started=started,
        warnings=list(match.model.warnings), review=review, splits=match.splits,
        clusters=cluster_table(match.entities, records), changes=changes, entity_changes=entity_changes,
        conflict_pairs=conflict_pairs, quality=judge_against_truth(ws, records, match, crosswalk),
        incremental=summary, near_certain_cut=near_certain_pairs_cut(match.pairs, match.entities["entity_id"]),
    )
    result.warnings += notes
    result.warnings += [no_records_text(m.name) for m in mapped if m.frame.empty]
    result.missing = run_missing_values(result, list(ws.canonical.fields))
    for name, columns in result.unmapped.items():
        result.warnings.append(f"source '{name}': columns not mentioned in its mapping: {', '.join(columns)}")
    if write and history.store is not None and output_dir is not None:
        tick("write")
        _publish(result, ws, history.store, output_dir, keep_runs, NewRun(
            started_at=started.isoformat().replace("+00:00", "Z"), mapping_hashes=result.mapping_hashes,
            crosswalk=current.assign(entity_id=stable.to_numpy()).drop(columns="cluster"),
            input_hashes=inputs, summary=changes.as_dict(), changes=entity_changes), {
            "merged": (merged, ("csv", "parquet")),
            "crosswalk": (crosswalk, ("csv", "parquet")),
            "provenance": (provenance, ("csv", "parquet")),
            "pairs": (pairs, ("parquet",)),
            "records": (records, ("parquet",)),  # canonical records, for the review page
            "clusters": (result.clusters, ("csv", "parquet")),
            "splits": (splits_frame(match.splits, records), ("csv",)),
            "changes": (entity_changes, ("csv",)),
            "missing": (result.missing, ("csv",)),
            "failures": (failures.astype({c: "string" for c in failures.columns}), ("csv",)),
        }, profiles, carry=lambda folder: write_carry(folder, records, match.prepared, match.pairs, match.copy_of,
                                                      match.model, ws.canonical, fingerprint,
                                                      match.entities["entity_id"], states, failures))
    tick("done")
    return result


def _publish(result: RunResult, ws: Workspace, store: StateStore, out_dir: Path, keep_runs: int | None,
             run: NewRun, tables: dict[str, tuple[pd.DataFrame, tuple[str, ...]]],
             profiles: SourceProfiles | None = None, carry: Callable[[Path], None] | None = None) -> None:
    """Write the set into a new run folder, record it, then switch the pointer (see outputs/publish.py)."""
    from .outputs import publish
    from .outputs.report import render_report
    from .outputs.tables import write_tables

    run_id = store.next_run_id()  # ours alone: the run lock is held
    result.run_id, result.output_dir = run_id, out_dir
    result.report_path = ws.reports_dir / f"run-{result.started.strftime('%Y%m%dT%H%M%SZ')}.html"
    partial = publish.start_run_folder(out_dir, run_id)
    write_tables(partial, tables)
    if carry is not None:
        carry(partial)  # what the next incremental run builds on (incremental.py)
    publish.write_report_file(partial, render_report(result, ws))
    result.run_dir = publish.seal_run_folder(partial, run_id, run.started_at)
    run.run_id, run.output_dir = run_id, str(result.run_dir.resolve())
    run.report = str(result.report_path.resolve())
    store.record_run(run)  # the commit point: from here on the new set is the current one
    from .history_store import record_inputs  # column profiles and mapping texts, for drift checks

    record_inputs(ws, run_id, result.mapping_hashes, profiles)
    publish.switch_current(out_dir, result.run_dir)
    publish.publish_report(ws.reports_dir, result.report_path, out_dir)
    publish.prune(out_dir, publish.keep_runs(keep_runs))
