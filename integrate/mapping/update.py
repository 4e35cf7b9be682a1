"""``integrate suggest --update SOURCE``: write the edits drift calls for into the existing mapping file.

The file is edited as a YAML round trip (ruamel), so the user's comments, key order, quoting
and layout stay; every edited line gets a short comment saying what it was. The unified diff
is returned first; nothing is written for a dry run or when the edited file would not validate.

Edits, from ``drift.py``'s proposals: a renamed column's entry moves to its new name (and
``record_id`` / ``record_date`` / ``unit_column`` ... follow it), a unit, currency or date
format changes, a new code joins a value map (respelled codes keep their meaning; a code never
seen before maps to itself with a TODO), a new column is listed as ``ignore`` with a TODO.
"""

from __future__ import annotations

import datetime as dt
import difflib
import io
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ruamel.yaml import YAML
from ruamel.yaml.comments import CommentedMap

from ..errors import InputError, MappingError
from ..sources import read_source
from ..workspace import SourceEntry, Workspace, load_workspace
from .drift import Proposal, source_drift, workspace_rates
from .load import load_source_mapping

_REFERENCES = ("unit_column", "currency_column", "priced_on")  # entry keys naming another column


@dataclass
class MappingUpdate:
    """The proposed new text of one mapping file, its diff, and which proposals it applies."""

    path: Path
    shown: str
    old_text: str
    new_text: str
    applied: list[Proposal] = field(default_factory=list)
    todo: list[Proposal] = field(default_factory=list)  # applied, but a person must finish them
    previous_run: int | None = None

    @property
    def diff(self) -> str:
        return "".join(difflib.unified_diff(self.old_text.splitlines(keepends=True),
                                            self.new_text.splitlines(keepends=True),
                                            fromfile=f"{self.shown} (now)", tofile=f"{self.shown} (proposed)"))

    @property
    def changed(self) -> bool:
        return self.new_text != self.old_text


def _yaml() -> YAML:
    yaml = YAML(typ="rt")
    yaml.preserve_quotes = True
    yaml.width = 4096  # never re-wrap the user's long lines
    yaml.indent(mapping=2, sequence=4, offset=2)
    return yaml


def _set_comment(node: CommentedMap, key: str, text: str) -> None:
    node.ca.items.pop(key, None)
    node.yaml_add_eol_comment(text, key)


def _comment_text(token: Any) -> str:
    """The text of an end-of-line comment token list ('' when there is none)."""
    for part in token or ():
        value = getattr(part, "value", None)
        if isinstance(value, str) and value.strip().startswith("#"):
            return value.strip().splitlines()[0]
    return ""


def _as_map(columns: CommentedMap, column: str) -> CommentedMap:
    """The column's entry as a mapping (a plain 'field_name' entry becomes {field: field_name})."""
    entry = columns[column]
    if isinstance(entry, CommentedMap):
        return entry
    expanded = CommentedMap([("field", entry)])
    columns[column] = expanded
    return expanded


def _rename(doc: CommentedMap, old: str, new: str, note: str) -> None:
    columns = doc["columns"]
    position = list(columns).index(old)
    value = columns[old]
    comment = columns.ca.items.pop(old, None)
    del columns[old]
    columns.insert(position, new, value)
    kept = _comment_text(comment)
    columns.yaml_add_eol_comment(f"{kept}; {note[2:]}" if kept else note, new)
    for key in ("record_id", "record_date"):
        if doc.get(key) == old:
            doc[key] = new
    for entry in columns.values():
        if isinstance(entry, CommentedMap):
            for key in _REFERENCES:
                if entry.get(key) == old:
                    entry[key] = new


def _apply(doc: CommentedMap, p: Proposal, stamp: str) -> bool:
    """Apply one proposal to the YAML document; False when the entry is not where it should be."""
    columns = doc.get("columns")
    if not isinstance(columns, CommentedMap):
        return False
    if p.kind == "new_column":
        if p.column in columns:
            return False
        columns[p.column] = "ignore"
        columns.yaml_add_eol_comment(f"# TODO: new in the export of {stamp}; map it to a field or keep ignore",
                                     p.column)
        return True
    if p.kind == "rename" and p.column not in columns and p.column in (doc.get("record_id"), doc.get("record_date")):
        for key in ("record_id", "record_date"):  # a column named only there, not under 'columns'
            if doc.get(key) == p.column:
                doc[key] = p.value
        return True
    if p.column not in columns:
        return False
    if p.kind == "rename":
        _rename(doc, p.column, str(p.value), f"# was '{p.column}' until {stamp}")
        return True
    entry = _as_map(columns, p.column)
    if p.kind in ("unit", "currency", "format"):
        was = entry.get(p.kind)
        entry[p.kind] = p.value
        _set_comment(entry, p.kind, f"# was {was!r} until {stamp}" if was else f"# set on {stamp}")
        return True
    if p.kind == "add_code":
        values = entry.get("values")
        code, meaning = p.value
        if not isinstance(values, CommentedMap) or code in values:
            return False
        values[code] = meaning if meaning is not None else code
        note = (f"# TODO: new code on {stamp}; give its canonical value" if meaning is None
                else f"# {p.reason}")
        values.yaml_add_eol_comment(note, code)
        return True
    return False


def _find_source(ws: Workspace, name: str) -> SourceEntry:
    for entry in ws.sources:
        if name in (entry.mapping.source, entry.mapping_file.name, entry.mapping_file.stem, str(entry.mapping_file)):
            return entry
    known = ", ".join(e.mapping.source for e in ws.sources)
    raise InputError(f"no source named '{name}' in this workspace", reason="unknown_source",
                     hint=f"sources: {known}")


def propose_update(root: str | Path, source: str, today: dt.date | None = None) -> MappingUpdate:
    """The edited mapping file of ``source`` (not written), from its drift against the last profile.

    Raises:
        InputError: no such source, or no earlier profile to compare with (``no_previous_profile``).
        MappingError: the edited file would not validate (``update_invalid``; nothing is written).
    """
    ws = load_workspace(root)
    entry = _find_source(ws, source)
    shown = ws.display(entry.mapping_file)
    raw = read_source(entry.mapping.read, ws.root, name=entry.mapping.source)
    drift = source_drift(ws, entry, raw, workspace_rates(ws))
    if drift is None:
        raise InputError(f"no earlier profile of source '{entry.mapping.source}' to compare this export with",
                         file=shown, reason="no_previous_profile",
                         hint="run once on last month's export; each run stores the profiles")
    text = entry.mapping_file.read_text(encoding="utf-8")
    yaml = _yaml()
    doc = yaml.load(text)
    stamp = (today or dt.date.today()).isoformat()
    update = MappingUpdate(entry.mapping_file, shown, text, text, previous_run=drift.previous_run)
    order = {"rename": 0, "unit": 1, "currency": 1, "format": 1, "add_code": 2, "new_column": 3}
    for proposal in sorted(drift.proposals, key=lambda p: order[p.kind]):
        if _apply(doc, proposal, stamp):
            (update.todo if proposal.kind == "new_column" or proposal.confidence == 0 else update.applied).append(
                proposal)
    out = io.StringIO()
    yaml.dump(doc, out)
    update.new_text = out.getvalue()
    _validate(update, ws)
    return update


def _validate(update: MappingUpdate, ws: Workspace) -> None:
    with tempfile.TemporaryDirectory() as folder:
        trial = Path(folder) / update.path.name
        trial.write_text(update.new_text, encoding="utf-8")
        try:
            load_source_mapping(trial, ws.canonical, update.shown)
        except InputError as exc:
            raise MappingError(f"the proposed edits would not validate ({exc.message}); nothing written",
                               file=update.shown, reason="update_invalid", hint="edit the file by hand") from exc


def write_update(update: MappingUpdate) -> None:
    """Write the edited text in place of the mapping file (atomically)."""
    from ..outputs.tables import write_text_atomic

    write_text_atomic(update.path, update.new_text)


def proposals_text(update: MappingUpdate) -> list[str]:
    """One line per edit, for the terminal."""
    lines = [f"  {p.kind:<10} {p.column}: {p.reason} (confidence {p.confidence:.2f})" for p in update.applied]
    lines += [f"  TODO {p.kind:<5} {p.column}: {p.reason}" for p in update.todo]
    return lines
