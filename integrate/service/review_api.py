"""Review over HTTP: the queue, a pair with its explanation, decisions, undo, export and import.

The same queue (``review.queue``) and decision store (``review.store``) as the terminal review
and ``integrate review --export/--import``; the review page is a client of these routes. State
changes only in POST: ``GET .../review/next`` looks the next pair up, ``POST .../review/next``
also holds it for the caller for a while so that other reviewers are given other pairs. The
reviewer of a decision is the token's holder.
"""

from __future__ import annotations

import asyncio
import csv
import io
import tempfile
from importlib import resources
from pathlib import Path
from typing import Annotated, Any

import pandas as pd
from fastapi import FastAPI, Query, Request
from fastapi.responses import HTMLResponse, JSONResponse, Response

from ..review.app import SHORTCUTS
from ..review.queue import AUDIT, item_payload, next_key, queue_items, scores_snapshot
from ..review.store import KEY_COLUMNS, DecisionConflict, NewDecision, NothingToUndo, ordered_pair
from ..review.transfer import EXPORT_COLUMNS, import_decisions
from .models import (
    DecisionList,
    DecisionRequest,
    DecisionResponse,
    ErrorBody,
    ImportResult,
    NextRequest,
    NextResponse,
    PairItem,
    QueueResponse,
    ReviewSession,
    UndoRequest,
    UndoResponse,
)
from .queue_cache import QueueState
from .results import plain
from .review_clusters_api import add_cluster_routes, cluster_decision_row, link_entities, undo_target

NOTES = {
    "trust": "Trust rank: how far each source is believed when records disagree (1 = trusted most). It is set in "
             "each source's mapping file ('trust:') and decides which value the merged row keeps; it does not change "
             "the match probability.",
    "queue": "The queue holds the pairs between the two thresholds and every suspicious cluster as a whole (cut "
             "by the run, two records compared as clearly different, or three or more records held by a weak link): "
             "a cluster shows all its records side by side with a proposed split into part A and part B (where "
             "the run cut it, or else at its weakest link), and one "
             "decision (keep together, or split) settles every record in it. Items that settle the most records "
             "come first; among those, the most uncertain.",
    "weights": "Weight (bits): the evidence each field adds for (+) or against (-) the two records being one "
               "person; the total decides the match probability.",
}
ERRORS: dict[int | str, dict[str, Any]] = {c: {"model": ErrorBody} for c in (400, 401, 403, 404, 409, 413, 422)}


def _row(row: dict[str, Any]) -> dict[str, Any]:
    return {k: plain(v) for k, v in row.items()}


def add_review_routes(app: FastAPI, contexts: dict[str, Any], auth: Any, ctx_of: Any, api_error: Any) -> None:
    base = "/api/v1/workspaces/{ws}/review"
    static = resources.files("integrate.review") / "static"

    def item(ctx: Any, key: tuple[str, str, str, str], queue: str) -> dict[str, Any]:
        data = ctx.review_data()
        payload = item_payload(data, key, queue)
        link_entities(ctx, payload["records"])
        standing = ctx.decisions.get(key)
        payload["decision"] = _row(standing) if standing else None
        return payload

    def known(data: Any, key: tuple[str, str, str, str]) -> None:
        if key not in data.pairs.index:
            raise api_error(404, "unknown_pair", "no such candidate pair in the last run")

    # -- the page ---------------------------------------------------------------------------
    @app.get("/review/{ws}", include_in_schema=False)
    def page(ws: str) -> HTMLResponse:
        ctx_of(ws)
        return HTMLResponse((static / "page.html").read_text(encoding="utf-8"))

    @app.get("/static/{name}", include_in_schema=False)
    def asset(name: str) -> Response:
        allowed = {"review.css": "text/css", "review.js": "text/javascript"}
        if name not in allowed:
            raise api_error(404, "not_found", f"no file '{name}'")
        return Response((static / name).read_bytes(), media_type=allowed[name])

    add_cluster_routes(app, auth, ctx_of, api_error, ERRORS)

    @app.get("/favicon.ico", include_in_schema=False)
    def no_icon() -> Response:
        return Response(status_code=204)

    # -- reading ----------------------------------------------------------------------------
    @app.get(f"{base}/session", response_model=ReviewSession, responses=ERRORS, tags=["review"])
    def session(ws: str, request: Request, queue: Annotated[str, Query(pattern="^(possible|audit)$")] = "possible"
                ) -> ReviewSession:
        """Who reviews, the filters (sources, fields), the keys, and the page's explanations."""
        ctx = ctx_of(ws)
        who = auth.check(request, ctx, "reader")
        data = ctx.review_data()
        return ReviewSession(workspace=ctx.name, reviewer=who.name, role=who.role, queue=queue,  # type: ignore[arg-type]
                             sources=data.sources, fields=list(data.fields), trust=data.trust, as_of=data.as_of,
                             shortcuts=[{"key": k, "action": a} for k, a in SHORTCUTS], notes=NOTES)

    def _queue_answer(ctx: Any, queue: str, source: str | None, field: str | None, offset: int, limit: int,
                      state: QueueState | None = None) -> bytes:
        if queue != AUDIT:  # kept in memory and followed decision by decision (queue_cache)
            state = state or ctx.queue_state()
            data = state.data
            progress, shown = state.page(source, field, offset, limit)
            for entry in shown:
                entry["cluster_id"] = data.anchors.get(tuple(entry[c] for c in KEY_COLUMNS))
            possible, weakest = state.possible_links, state.weakest_links
        else:
            data = ctx.review_data()
            items = queue_items(data, ctx.decisions, queue, source=source, field=field)
            decided = int((items["state"] == "decided").sum())
            progress = {"total": len(items), "decided": decided, "deferred": int((items["state"] == "deferred").sum()),
                        "remaining": len(items) - decided}
            shown = [{**_row(r), "cluster_id": None} for r in items.iloc[offset:offset + limit].to_dict("records")]
            possible = weakest = 0
        return QueueResponse(queue=queue, progress=progress, possible_links=possible,  # type: ignore[arg-type]
                             weakest_links=weakest, items=shown).model_dump_json().encode()

    @app.get(f"{base}/queue", response_model=QueueResponse, responses=ERRORS, tags=["review"])
    async def queue(ws: str, request: Request,
                    queue: Annotated[str, Query(pattern="^(possible|audit)$")] = "possible",
                    source: Annotated[str | None, Query(max_length=200)] = None,
                    field: Annotated[str | None, Query(max_length=200)] = None,
                    offset: Annotated[int, Query(ge=0, le=10**9)] = 0,
                    limit: Annotated[int, Query(ge=1, le=1000)] = 100) -> QueueResponse:
        """The queue in review order with each pair's state (open / deferred / decided)."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        state = ctx.fresh_queue_state() if queue != AUDIT else None
        if state is not None and state.reads_cheaply:  # a few array reads: answered on the event loop
            answer = _queue_answer(ctx, queue, source or None, field or None, offset, limit, state)
        else:  # loading a new output set, or reading every decision again: in a thread
            answer = await asyncio.to_thread(_queue_answer, ctx, queue, source or None, field or None, offset, limit)
        return Response(answer, media_type="application/json")  # type: ignore[return-value]

    def _next(ctx: Any, reviewer: str, queue: str, source: str | None, field: str | None,
              skip: tuple[str, str, str, str] | None, claim: bool) -> dict[str, Any]:
        data = ctx.review_data()
        if source and source not in data.sources:
            raise api_error(422, "unknown_source", f"no source named '{source}'", "sources: " + ", ".join(data.sources))
        if field and field not in data.fields:
            raise api_error(422, "unknown_field", f"no field named '{field}'", "fields: " + ", ".join(data.fields))
        key, progress = next_key(data, ctx.decisions, reviewer, queue, source=source, field=field, skip=skip,
                                 claim=claim)
        cluster_id = data.anchors.get(key) if key and queue != AUDIT else None
        return {"item": item(ctx, key, queue) if key else None, "progress": progress,
                "cluster": app.state.cluster_item(ctx, cluster_id) if cluster_id else None}

    @app.get(f"{base}/next", response_model=NextResponse, responses=ERRORS, tags=["review"])
    def peek_next(ws: str, request: Request, queue: Annotated[str, Query(pattern="^(possible|audit)$")] = "possible",
                  source: Annotated[str | None, Query(max_length=200)] = None,
                  field: Annotated[str | None, Query(max_length=200)] = None) -> Any:
        """The pair the caller would be given next (read only: nothing is held)."""
        ctx = ctx_of(ws)
        who = auth.check(request, ctx, "reader")
        return _next(ctx, who.name, queue, source, field, None, claim=False)

    @app.post(f"{base}/next", response_model=NextResponse, responses=ERRORS, tags=["review"])
    def take_next(ws: str, body: NextRequest, request: Request) -> Any:
        """The next pair for the caller, held for them for a few minutes so others get other pairs."""
        ctx = ctx_of(ws)
        who = auth.check(request, ctx, "reviewer")
        skip = ordered_pair(*[getattr(body.skip, c) for c in KEY_COLUMNS]) if body.skip else None
        return _next(ctx, who.name, body.queue, body.source, body.field, skip, claim=True)

    @app.get(f"{base}/pair", response_model=PairItem, responses=ERRORS, tags=["review"])
    def pair(ws: str, request: Request, source_a: Annotated[str, Query(max_length=200)],
             record_id_a: Annotated[str, Query(max_length=200)], source_b: Annotated[str, Query(max_length=200)],
             record_id_b: Annotated[str, Query(max_length=200)],
             queue: Annotated[str, Query(pattern="^(possible|audit)$")] = "possible") -> Any:
        """One pair with its explanation: both records, each field's agreement grade and weight."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        key = ordered_pair(source_a, record_id_a, source_b, record_id_b)
        known(ctx.review_data(), key)
        return item(ctx, key, queue)

    @app.get(f"{base}/decisions", response_model=DecisionList, responses=ERRORS, tags=["review"])
    def decisions(ws: str, request: Request) -> Any:
        """Every standing decision, oldest first."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        frame = ctx.decisions.decisions()
        return {"decisions": [_row(r) for r in frame.to_dict("records")]}

    @app.get(f"{base}/export", responses={**ERRORS, 200: {"content": {"text/csv": {}},
                                                         "description": "every decision, as review --export"}},
             tags=["review"])
    def export(ws: str, request: Request) -> Response:
        """Every standing decision as CSV (the file `integrate review --export` writes)."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        buffer = io.StringIO()
        ctx.decisions.decisions().reindex(columns=EXPORT_COLUMNS).to_csv(buffer, index=False,
                                                                        quoting=csv.QUOTE_MINIMAL)
        return Response(buffer.getvalue(), media_type="text/csv",
                        headers={"Content-Disposition": 'attachment; filename="decisions.csv"'})

    # -- writing ----------------------------------------------------------------------------
    @app.post(f"{base}/decisions", response_model=DecisionResponse, status_code=201, responses=ERRORS,
              tags=["review"])
    async def decide(ws: str, body: DecisionRequest, request: Request) -> Any:
        """Record the caller's decision: 201, or 409 with the decision another reviewer made."""
        ctx = ctx_of(ws)
        who = auth.check(request, ctx, "reviewer")
        data = ctx.fresh_review_data() or await asyncio.to_thread(ctx.review_data)
        key = ordered_pair(body.source_a, body.record_id_a, body.source_b, body.record_id_b)
        known(data, key)
        new = NewDecision(**dict(zip(KEY_COLUMNS, key)), decision=body.decision, reviewer=who.name,
                          note=body.note, origin=body.queue, **scores_snapshot(data, key))
        try:  # stored by the workspace's writer thread, with the decisions that arrive meanwhile
            row = await asyncio.wrap_future(ctx.writer.submit(new))
        except DecisionConflict as conflict:
            raise api_error(409, "already_decided", str(conflict), "the decision that stands is in 'existing'",
                            existing=_row(conflict.existing)) from None
        return JSONResponse(status_code=201, content={"decision": _row(row)})

    @app.post(f"{base}/undo", response_model=UndoResponse, responses=ERRORS, tags=["review"])
    def undo(ws: str, body: UndoRequest, request: Request) -> Any:
        """Remove one of the caller's own decisions (by default their most recent one)."""
        ctx = ctx_of(ws)
        who = auth.check(request, ctx, "reviewer")
        decision_id = undo_target(body.decision_id, ctx.decisions.last_decision_of, who.name, "decision", api_error)
        group_id = ctx.decisions.cluster_decision_of(decision_id)
        try:
            if group_id is not None:  # part of a decision on a whole cluster: all of it goes
                group = ctx.decisions.undo_cluster(group_id, who.name)
                row = next(r for r in group["decisions"] if int(r["id"]) == decision_id)
            else:
                group, row = None, ctx.decisions.undo(decision_id, who.name)
        except NothingToUndo as gone:
            raise api_error(404, "nothing_to_undo", str(gone)) from None
        except DecisionConflict as conflict:
            raise api_error(409, "not_yours", "the decision is not yours to undo",
                            existing=_row(conflict.existing)) from None
        key = ordered_pair(row["source_a"], row["record_id_a"], row["source_b"], row["record_id_b"])
        shown = item(ctx, key, body.queue) if key in ctx.review_data().pairs.index else None
        return {"undone": _row(row), "item": shown,
                "cluster_decision": cluster_decision_row(group) if group is not None else None}

    @app.post(f"{base}/import", response_model=ImportResult, responses=ERRORS, tags=["review"])
    async def import_file(ws: str, request: Request) -> Any:
        """Add the decisions of a CSV file (as `review --export` writes; the request body); nothing is overwritten."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "admin")
        data = bytearray()
        async for chunk in request.stream():
            data.extend(chunk)
        with tempfile.TemporaryDirectory(prefix="integrate-import-") as scratch:
            path = Path(scratch) / "decisions.csv"
            path.write_bytes(bytes(data))
            try:
                summary = await asyncio.to_thread(import_decisions, ctx.decisions, path)
            except UnicodeDecodeError as exc:
                raise api_error(422, "not_utf8", f"the decisions file is not UTF-8 text ({exc.reason} at byte "
                                f"{exc.start})", "save it as UTF-8 CSV") from None
            except (pd.errors.EmptyDataError, pd.errors.ParserError) as exc:
                raise api_error(422, "bad_csv", f"the decisions file is not a readable CSV file: {exc}",
                                "send the file 'integrate review --export' writes") from None
        return {"added": summary.added, "unchanged": summary.unchanged,
                "conflicts": [{"existing": _row(c["existing"]), "imported": _row(c["imported"])}
                              for c in summary.conflicts]}
