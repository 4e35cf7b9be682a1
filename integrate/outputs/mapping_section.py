"""The run report's section on mapping files that changed since the previous run: the diff and its effect."""

from __future__ import annotations

import html
from typing import TYPE_CHECKING

import pandas as pd

if TYPE_CHECKING:
    from ..pipeline import RunResult
    from ..workspace import Workspace


def mapping_changes_section(result: RunResult, ws: Workspace | None) -> str:
    """HTML: for each mapping file that changed since the previous stored run, its diff, and the records
    read differently and entities changed since that run ('' when there is no previous run)."""
    if ws is None:
        return ""
    from ..columns import RECORD_ID, SOURCE
    from ..history_store import mapping_texts, mapping_versions
    from ..ids import money_digits, record_hashes
    from ..mapping_changes import crosswalk_effect, file_changes
    from ..state import StateStore

    store = StateStore.existing(ws.root)
    previous = store.last_run() if store is not None else None
    if store is None or previous is None or previous.run_id == result.run_id:
        return ""
    versions = mapping_versions(ws.root)
    texts = mapping_texts(ws.root, previous.run_id)
    before = {r.path: (r.sha256, texts.get(r.path))
              for r in versions[versions["run_id"] == previous.run_id].itertuples(index=False)}
    now = {path: (sha, (ws.root / path).read_text(encoding="utf-8") if (ws.root / path).is_file() else None)
           for path, sha in result.mapping_hashes.items()}
    changes = file_changes(before, now, f"run {previous.run_id}", "this run")
    title = f"<h3>Mapping files since run {previous.run_id}</h3>"
    if not changes:
        return title + "<p>No mapping file changed since the previous run.</p>"
    current = pd.DataFrame({"source": result.records[SOURCE].astype(str).to_numpy(),
                            "record_id": result.records[RECORD_ID].astype(str).to_numpy(),
                            "record_hash": record_hashes(result.records, list(ws.canonical.fields),
                                                         money_digits(ws.canonical))})
    current = current.merge(result.crosswalk[["source", "record_id", "entity_id"]].astype(str),
                            on=["source", "record_id"], how="left")
    e = crosswalk_effect(store.crosswalk(previous.run_id), current)
    parts = [title, f"<p>{len(changes)} mapping file(s) changed since run {previous.run_id}. With them (and any "
             f"change in the exports), {e.records_read_differently} of {e.records_compared} records are read "
             f"differently, {e.records_added} records are new, {e.records_removed} are gone, and "
             f"{e.entities_changed} entities changed. <code>integrate mappings diff</code> shows the same "
             "between any two runs.</p>"]
    for change in changes:
        body = change.diff if change.diff is not None else "(the earlier text was not recorded)"
        parts.append(f"<details open><summary><code>{html.escape(change.path)}</code>: {change.status}</summary>"
                     f"<pre>{html.escape(body)}</pre></details>")
    return "".join(parts)
