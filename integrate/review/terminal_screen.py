"""The full-screen terminal review (``integrate review --terminal`` on a terminal).

One pair at a time on a screen that redraws in place; single keys, no Enter: ``s`` same person,
``d`` different people, ``l`` later, ``u`` undo, ``n`` note, ``q`` quit. It shows what the review
page shows: the match probability and weight, why the pair is in the queue, the blocking rules
that proposed it, each record's source with its trust rank (1 = the most trusted source, whose
values win under the ``trust`` rule) and every field side by side with its agreement grade and
weight. Same queue, same decisions, same store as the page. Built on Textual.

Values from the records are shown as plain text (never as markup) with control characters escaped.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from rich.text import Text
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.widgets import DataTable, Footer, Header, Input, Static

from .queue import POSSIBLE, ReviewData, item_payload, next_key, scores_snapshot
from .store import KEY_COLUMNS, DecisionConflict, DecisionStore, NewDecision, NothingToUndo, ordered_pair
from .terminal import ANSWERS, TerminalSession, printable

TRUST_NOTE = "trust rank: 1 is the most trusted source; under the 'trust' rule its values win"


@dataclass
class _State:
    key: tuple[str, str, str, str] | None = None
    again: tuple[str, str, str, str] | None = None
    skip: tuple[str, str, str, str] | None = None
    note: str | None = None
    undo_stack: list[int] = field(default_factory=list)


class ReviewScreenApp(App[TerminalSession]):
    """The review queue on one screen; returns the session's counts when it quits."""

    TITLE = "integrate review"
    CSS = """
    #pair { height: auto; padding: 0 1; }
    #records { height: auto; padding: 0 1; }
    #fields { height: 1fr; }
    #status { height: 1; padding: 0 1; background: $boost; }
    #note { display: none; }
    #note.open { display: block; }
    """
    BINDINGS = [
        Binding("s", "decide('same')", "same person"),
        Binding("d", "decide('different')", "different people"),
        Binding("l", "decide('defer')", "later"),
        Binding("u", "undo", "undo"),
        Binding("n", "note", "note"),
        Binding("q", "quit_review", "quit"),
    ]

    def __init__(self, data: ReviewData, store: DecisionStore, reviewer: str, *, kind: str = POSSIBLE,
                 source: str | None = None, field_name: str | None = None) -> None:
        super().__init__()
        self.data, self.store, self.reviewer, self.kind = data, store, reviewer, kind
        self.source, self.field_name = source, field_name
        self.session = TerminalSession()
        self.state = _State()
        self.item: dict[str, Any] | None = None

    def compose(self) -> ComposeResult:
        yield Header(show_clock=False)
        with Vertical():
            yield Static(id="pair")
            yield Static(id="records")
            yield DataTable(id="fields", zebra_stripes=True, cursor_type="row")
            yield Input(placeholder="note for the next decision, Enter to keep it, Esc to drop it", id="note")
            yield Static(id="status")
        yield Footer()

    def on_mount(self) -> None:
        table = self.query_one("#fields", DataTable)
        table.add_columns("field", "record A", "record B", "grade", "weight (bits)")
        self._show_next()

    # -- showing -------------------------------------------------------------------------------
    def _status(self, text: str) -> None:
        self.query_one("#status", Static).update(Text(text))

    def _show_next(self) -> None:
        s = self.state
        key, progress = next_key(self.data, self.store, self.reviewer, self.kind, source=self.source,
                                 field=self.field_name, skip=s.skip)
        if s.again is not None:
            key, s.again = s.again, None
        s.key = key
        table = self.query_one("#fields", DataTable)
        table.clear()
        if key is None:
            self.item = None
            self.query_one("#pair", Static).update(Text("Nothing left to review in this queue. Press q to quit."))
            self.query_one("#records", Static).update("")
            return
        item = self.item = item_payload(self.data, key, self.kind)
        self.sub_title = (f"{progress['decided']:,} decided, {progress['remaining']:,} remaining "
                          f"(of {progress['total']:,})")
        reason = item.get("reason") or "possible link"
        pair = Text()
        pair.append(f"match probability {100 * item['probability']:.1f} %", style="bold")
        pair.append(f"   total weight {item['weight']:+.2f} bits   run decision: {item['run_decision']}\n")
        pair.append(f"in the queue because: {printable(str(reason))}\n")
        pair.append(f"blocking rules that proposed the pair: {printable(item['blocking_rules']) or '(none)'}")
        self.query_one("#pair", Static).update(pair)
        records = Text()
        for letter, rec in zip("AB", item["records"]):
            trust = rec.get("trust")
            records.append(f"{letter}: ", style="bold")
            records.append(f"{printable(str(rec['source']))} {printable(str(rec['record_id']))}")
            records.append(f"  (trust rank {trust if trust is not None else '?'}, as of {rec['as_of'] or '?'})\n")
        records.append(TRUST_NOTE, style="dim")
        self.query_one("#records", Static).update(records)
        for f in item["fields"]:
            if not f["a"] and not f["b"]:
                continue
            grade = f["grade"] if f["compared"] else "not compared"
            weight = "" if f["weight"] is None else f"{f['weight']:+.2f}"
            if f["weight_note"]:
                weight = f"{weight} ({f['weight_note']})".strip()
            table.add_row(Text(f["name"]), Text(printable(f["a"]) or "(empty)"),
                          Text(printable(f["b"]) or "(empty)"), Text(str(grade)), Text(weight))

    # -- actions ------------------------------------------------------------------------------
    def action_decide(self, decision: str) -> None:
        s = self.state
        if s.key is None or decision not in ANSWERS.values():
            return
        new = NewDecision(**dict(zip(KEY_COLUMNS, s.key)), decision=decision, reviewer=self.reviewer,
                          note=s.note, origin=self.kind, **scores_snapshot(self.data, s.key))
        s.note = None
        try:
            row = self.store.record(new)
        except DecisionConflict as conflict:
            self.session.conflicts += 1
            self._status(f"not saved: {conflict}")
            self._show_next()
            return
        s.undo_stack.append(int(row["id"]))
        self.session.decided[decision] += 1
        s.skip = s.key if decision == "defer" else None
        self._show_next()
        self._status(f"saved: {decision}")

    def action_undo(self) -> None:
        s = self.state
        if not s.undo_stack:
            self._status("nothing to undo in this session")
            return
        try:
            row = self.store.undo(s.undo_stack.pop(), self.reviewer)
        except (NothingToUndo, DecisionConflict) as problem:
            self._status(f"could not undo: {problem}")
            return
        self.session.undone += 1
        self.session.decided[row["decision"]] -= 1
        s.again = ordered_pair(*(row[c] for c in KEY_COLUMNS))
        s.skip = None
        self._show_next()
        self._status(f"undone: {row['decision']} for {row['source_a']} {row['record_id_a']} ~ "
                     f"{row['source_b']} {row['record_id_b']}")

    def action_note(self) -> None:
        box = self.query_one("#note", Input)
        box.add_class("open")
        box.focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.state.note = event.value.strip() or None
        event.input.value = ""
        event.input.remove_class("open")
        self.query_one("#fields", DataTable).focus()
        self._status(f"note kept for the next decision: {self.state.note}" if self.state.note else "no note")

    def key_escape(self) -> None:
        box = self.query_one("#note", Input)
        if box.has_class("open"):
            box.value = ""
            box.remove_class("open")
            self.query_one("#fields", DataTable).focus()

    def action_quit_review(self) -> None:
        self.exit(self.session)


def review_full_screen(data: ReviewData, store: DecisionStore, reviewer: str, *, kind: str = POSSIBLE,
                       source: str | None = None, field_name: str | None = None) -> TerminalSession:
    """Run the full-screen review until the reviewer quits; returns what they decided."""
    app = ReviewScreenApp(data, store, reviewer, kind=kind, source=source, field_name=field_name)
    return app.run() or app.session
