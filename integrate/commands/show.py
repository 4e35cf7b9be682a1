"""``integrate show ENTITY_ID``: one entity's full story from the last run's outputs.

Prints the merged row, the member records side by side, and for each field the chosen value,
the record it came from, the rule and why.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from ..errors import InputError

CHOSEN_MARK = " ◀"  # marks the member value the rule chose


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser("show", help="an entity's merged row, its member records and why each value won")
    cmd.add_argument("entity_id", help="entity ID, as in merged.csv or crosswalk.csv")
    cmd.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    cmd.add_argument("--out", help="output folder to read (default: the last run's, else the schema's 'output')")
    cmd.set_defaults(func=main)


def output_folder(workspace: str | Path, out: str | None) -> Path:
    """The folder holding the outputs to read: ``out``, else the last recorded run's, else the schema's."""
    from ..outputs.publish import current_output_folder

    return current_output_folder(workspace, out)


def _read(folder: Path, name: str, entity_id: str | None = None, record_ids: list[str] | None = None
          ) -> pd.DataFrame:
    path = folder / f"{name}.parquet"
    if not path.exists():
        raise InputError(f"no {name}.parquet in the output folder", file=str(folder), reason="missing_file",
                         hint="run `integrate run` first, or point --out at a run's output folder")
    filters: list[tuple[str, str, object]] = []
    if entity_id is not None:
        filters.append(("entity_id", "==", entity_id))
    if record_ids is not None:
        filters.append(("_record_id", "in", record_ids))
    return pd.read_parquet(path, filters=filters or None)


def _not_found(entity_id: str, workspace: str | Path, folder: Path) -> InputError:
    from ..state import StateStore

    hint = "entity IDs are listed in crosswalk.csv and merged.csv"
    store = StateStore.existing(workspace)
    last = store.last_run() if store is not None else None
    if store is not None and last is not None:
        changes = store.changes(last.run_id)
        later = changes[changes["related_ids"].fillna("").str.split().map(lambda ids: entity_id in ids)]
        if len(later):
            # a merged or split entity: its records now belong to these entities
            hint = "its records are now in: " + ", ".join(
                f"{row.entity_id} ({row.change})" for row in later.itertuples() if row.entity_id != entity_id)
    return InputError(f"entity '{entity_id}' is not in the last run's merged table",
                      file=str(folder / "merged.parquet"), value=entity_id, reason="unknown_entity", hint=hint)


def entity_story(entity_id: str, folder: Path) -> dict[str, pd.DataFrame] | None:
    """The merged row, members, provenance and cluster figures of one entity (None if it is not there)."""
    merged = _read(folder, "merged", entity_id)
    if merged.empty:
        return None
    crosswalk = _read(folder, "crosswalk", entity_id)
    provenance = _read(folder, "provenance", entity_id)
    records = _read(folder, "records", record_ids=sorted(set(crosswalk["record_id"])))
    members = crosswalk.merge(records, left_on=["source", "record_id"], right_on=["_source", "_record_id"],
                              how="left").sort_values(["source", "record_id"], kind="mergesort")
    clusters_path = folder / "clusters.parquet"
    clusters = _read(folder, "clusters", entity_id) if clusters_path.exists() else pd.DataFrame()
    return {"merged": merged, "members": members.reset_index(drop=True), "provenance": provenance,
            "cluster": clusters}


def _text(value: object) -> str:
    if value is None or (isinstance(value, float) and pd.isna(value)) or value is pd.NA:
        return ""
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def main(args: argparse.Namespace) -> int:
    from rich.console import Console
    from rich.table import Table

    folder = output_folder(args.workspace, args.out)
    story = entity_story(args.entity_id, folder)
    if story is None:
        raise _not_found(args.entity_id, args.workspace, folder)
    members, provenance, cluster = story["members"], story["provenance"], story["cluster"]
    console = Console()
    sources = sorted(set(members["source"]))
    headline = f"Entity {args.entity_id}: {len(members)} records from {len(sources)} sources ({', '.join(sources)})"
    if len(cluster):
        row = cluster.iloc[0]
        weakest = "" if pd.isna(row["weakest_link"]) else f"; weakest link {row['weakest_link']:.4f}"
        cut = f"; cut by {row['cut_by']}" if row["cut_by"] else ""
        headline += weakest + cut
    console.print(headline)
    why = Table(title="Merged row: each field's value, where it came from and why", show_lines=True)
    for column in ("field", "merged value", "from", "rule", "why"):
        why.add_column(column, style="bold" if column == "field" else None, overflow="fold")
    for prov in provenance.itertuples(index=False):  # one row per canonical field (a handful)
        origin = f"{prov.source}:{prov.record_id}" if prov.source else ("every value" if prov.value else "")
        reason = prov.why + ("; the values conflict" if prov.conflict else "")
        why.add_row(prov.field, prov.value, origin, prov.rule, reason)
    console.print(why)
    side = Table(title="Member records side by side", show_lines=True)
    side.add_column("field", style="bold", overflow="fold")
    for source, record_id, strength in zip(members["source"], members["record_id"], members["link_strength"]):
        side.add_column(f"{source}\n{record_id}\n(link {strength:.3f})", overflow="fold")
    for prov in provenance.itertuples(index=False):
        cells = []
        for member in members.itertuples(index=False):
            value = _text(getattr(member, prov.field, None))
            chosen = member.source == prov.source and member.record_id == prov.record_id
            cells.append(value + (CHOSEN_MARK if chosen and value else ""))
        side.add_row(prov.field, *cells)
    console.print(side)
    console.print(f"{CHOSEN_MARK.strip()} marks the record each value came from; sum and mean use every value.")
    return 0
