"""The full-screen terminal review, driven headless by Textual's pilot (the real app, real store)."""

from __future__ import annotations

import asyncio
from pathlib import Path

import pytest

from integrate.review.queue import load_review_data
from integrate.review.store import DecisionStore, load_decisions

textual = pytest.importorskip("textual")
from integrate.review.terminal_screen import TRUST_NOTE, ReviewScreenApp  # noqa: E402


def _screen_text(app: ReviewScreenApp) -> str:
    from textual.widgets import Static

    return "\n".join(str(w.render()) for w in app.query(Static))


def test_single_keys_decide_undo_and_quit(reviewed_ws: Path) -> None:
    data = load_review_data(reviewed_ws)
    store = DecisionStore.for_workspace(reviewed_ws)

    async def drive() -> tuple[ReviewScreenApp, list[str], list[str]]:
        app = ReviewScreenApp(data, store, "tess")
        seen: list[str] = []
        shown: list[str] = []
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            first = app.state.key
            text = _screen_text(app)
            shown.append(text)
            table = app.query_one("#fields")
            assert table.row_count >= 3  # fields side by side
            await pilot.press("s")  # one key, no Enter
            await pilot.pause()
            seen.append(str(app.query_one("#status").render()))
            assert app.state.key != first  # the next pair replaced the first in place
            await pilot.press("d")
            await pilot.pause()
            await pilot.press("u")
            await pilot.pause()
            seen.append(str(app.query_one("#status").render()))
            await pilot.press("n")
            await pilot.press(*"phone shared")
            await pilot.press("enter")
            await pilot.press("l")
            await pilot.pause()
            await pilot.press("q")
        return app, seen, shown

    app, seen, shown = asyncio.run(drive())
    text = shown[0]
    # the same facts as the page: probability, why in the queue, blocking rules, trust ranks
    assert "match probability" in text and "in the queue because" in text
    assert "blocking rules that proposed the pair:" in text
    assert "trust rank" in text and TRUST_NOTE in text
    assert seen[0] == "saved: same" and seen[1].startswith("undone: different")
    assert app.return_value is app.session
    assert app.session.decided == {"same": 1, "different": 0, "defer": 1} and app.session.undone == 1
    stored = load_decisions(reviewed_ws)
    assert stored[["decision", "reviewer", "note"]].fillna("").values.tolist() == [
        ["same", "tess", ""], ["defer", "tess", "phone shared"]]
