"""Reviewing in a terminal, for a server without a browser: ``integrate review --terminal``.

Same queue, same decisions, same store as the review page. On a terminal it is a full-screen
view that redraws in place and takes single keys (``review.terminal_screen``); with answers piped
in (standard input or output not a terminal) it reads answers line by line.
"""

from __future__ import annotations

import re
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from .diff import caret_line
from .queue import POSSIBLE, ReviewData, item_payload, next_key, scores_snapshot
from .store import KEY_COLUMNS, DecisionConflict, DecisionStore, NewDecision, NothingToUndo, ordered_pair

PROMPT = "[s] same person  [d] different people  [l] later  [u] undo  [n] note  [q] quit > "
ANSWERS = {"s": "same", "d": "different", "l": "defer"}
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")


def printable(text: str) -> str:
    r"""A value with control characters shown as escapes, so a value cannot drive the terminal.

    Example:
        >>> printable("Ann\x1b[2J")
        'Ann\\x1b[2J'
    """
    return _CONTROL.sub(lambda m: f"\\x{ord(m.group()):02x}", text)


@dataclass
class TerminalSession:
    decided: dict[str, int] = field(default_factory=lambda: {"same": 0, "different": 0, "defer": 0})
    conflicts: int = 0
    undone: int = 0


def render_item(item: dict[str, Any], progress: dict[str, int]) -> list[str]:
    """The lines that show one pair."""
    a, b = item["records"]
    lines = [
        "",
        f"== {progress['decided']} decided, {progress['remaining']} remaining (of {progress['total']}) ==",
        f"match probability {100 * item['probability']:.1f} %, total weight {item['weight']:.2f} bits "
        f"({item['run_decision']})" + (f"; {item['reason']}" if item.get("reason") not in (None, "", "possible link")
                                       else ""),
        f"A: {printable(a['source'])} {printable(a['record_id'])} (as of {a['as_of']})",
        f"B: {printable(b['source'])} {printable(b['record_id'])} (as of {b['as_of']})",
    ]
    for f in item["fields"]:
        if not f["a"] and not f["b"]:
            continue
        about = f["grade"] if f["compared"] else "not compared"
        if f["weight"] is not None:
            about += f", {f['weight']:+.2f} bits"
        if f["weight_note"]:
            about += f", {f['weight_note']}"
        lines.append(f"  {f['name']} ({about})")
        for letter, text, parts in (("A", f["a"], f["a_parts"]), ("B", f["b"], f["b_parts"])):
            shown = printable(text) if text else "(empty)"
            lines.append(f"    {letter}  {shown}")
            if text and f["a"] and f["b"]:
                carets = caret_line([(printable(t), c) for t, c in parts])
                if carets:
                    lines.append(f"       {carets}")
    return lines


def review_in_terminal(data: ReviewData, store: DecisionStore, reviewer: str, *, kind: str = POSSIBLE,
                       source: str | None = None, field_name: str | None = None,
                       read: Callable[[str], str] = input, write: Callable[[str], None] = print) -> TerminalSession:
    """Show pairs one at a time and store the answers until the queue is empty, 'q', or end of input.

    On a terminal (and with the default ``read``) the full-screen view runs instead."""
    if read is input and write is print and sys.stdin.isatty() and sys.stdout.isatty():
        try:
            from .terminal_screen import review_full_screen
        except ImportError:  # Textual not installed (the 'review' extra): the line mode still works
            write("(full-screen view needs the 'review' extra: pip install 'integrate[review]'; line mode)")
        else:
            return review_full_screen(data, store, reviewer, kind=kind, source=source, field_name=field_name)
    session = TerminalSession()
    undo_stack: list[int] = []
    again: tuple[str, str, str, str] | None = None  # a pair to show next (after an undo)
    skip: tuple[str, str, str, str] | None = None
    note: str | None = None
    while True:
        key, progress = next_key(data, store, reviewer, kind, source=source, field=field_name, skip=skip)
        if again is not None:
            key, again = again, None
        if key is None:
            write("Nothing left to review in this queue.")
            return session
        item = item_payload(data, key, kind)
        for line in render_item(item, progress):
            write(line)
        while True:
            try:
                answer = read(PROMPT).strip().lower()
            except EOFError:
                write("")
                return session
            if answer == "q":
                return session
            if answer == "n":
                try:
                    note = read("note: ").strip() or None
                except EOFError:
                    return session
                continue
            if answer == "u":
                if not undo_stack:
                    write("nothing to undo in this session")
                    continue
                try:
                    row = store.undo(undo_stack.pop(), reviewer)
                except (NothingToUndo, DecisionConflict) as problem:
                    write(f"could not undo: {problem}")
                    continue
                session.undone += 1
                session.decided[row["decision"]] -= 1
                write(f"undone: {row['decision']} for {row['source_a']} {row['record_id_a']} ~ "
                      f"{row['source_b']} {row['record_id_b']}")
                again = ordered_pair(*(row[c] for c in KEY_COLUMNS))
                break
            if answer not in ANSWERS:
                write("please answer s, d, l, u, n or q")
                continue
            decision = ANSWERS[answer]
            new = NewDecision(**dict(zip(KEY_COLUMNS, key)), decision=decision, reviewer=reviewer, note=note,
                              origin=kind, **scores_snapshot(data, key))
            note = None
            try:
                row = store.record(new)
            except DecisionConflict as conflict:
                session.conflicts += 1
                write(f"not saved: {conflict}")
                break
            undo_stack.append(int(row["id"]))
            session.decided[decision] += 1
            skip = key if decision == "defer" else None
            write(f"saved: {decision}")
            break
