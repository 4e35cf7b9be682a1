"""The review page: a small FastAPI app over the review queue and the decision store.

Routes (JSON unless noted):

- ``GET /`` the page (HTML), ``GET /static/...`` its stylesheet and script; nothing from elsewhere.
- ``GET /api/session`` reviewer, queue kind, sources and fields for the filters, the shortcuts.
- ``GET /api/next`` the next pair for a reviewer (``reviewer``, ``source``, ``field``, ``skip``).
- ``GET /api/item`` one pair by its ``id``.
- ``POST /api/decisions`` store a decision: 201 with the stored row, 409 with the existing one.
- ``POST /api/undo`` remove one of the reviewer's own decisions: 200, 404 or 409.
- ``GET /api/decisions`` every standing decision.
"""

from __future__ import annotations

import logging
from importlib import resources
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

from ..errors import InputError
from .queue import AUDIT, POSSIBLE, ReviewData, item_payload, load_review_data, next_key, scores_snapshot
from .store import KEY_COLUMNS, DecisionConflict, DecisionStore, NewDecision, NothingToUndo, ordered_pair

log = logging.getLogger(__name__)

SHORTCUTS = [  # key, what it does (shown on the page, handled by review.js)
    ("S", "same person"),
    ("D", "different people"),
    ("L", "decide later"),
    ("U", "undo my last decision"),
    ("N", "write a note (Esc leaves the note)"),
]
# No script, style, image or connection from anywhere but this server; no framing.
CONTENT_POLICY = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; "
                  "connect-src 'self'; form-action 'none'; base-uri 'none'; frame-ancestors 'none'")


def _require_web() -> Any:
    try:
        import fastapi
    except ImportError as exc:  # pragma: no cover - depends on the installed extras
        raise InputError("the review page needs FastAPI and uvicorn",
                         hint='install them with: python3 -m pip install -e ".[review]"') from exc
    return fastapi


class DecisionRequest(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    source_a: str
    record_id_a: str
    source_b: str
    record_id_b: str
    decision: Literal["same", "different", "defer"]
    reviewer: str = Field(min_length=1, max_length=200)
    note: str | None = Field(None, max_length=4000)


class UndoRequest(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    decision_id: int | None = None  # default: the reviewer's most recent standing decision
    reviewer: str = Field(min_length=1, max_length=200)


def _split_id(item_id: str) -> tuple[str, str, str, str]:
    parts = item_id.split("\x1f")
    if len(parts) != 4:
        raise InputError("an item id has four parts", value=item_id, reason="bad_item_id")
    return ordered_pair(*parts)


def create_app(workspace: str | Path, *, reviewer: str = "reviewer", kind: str = POSSIBLE,
               data: ReviewData | None = None, store: DecisionStore | None = None) -> Any:
    """The review app for a workspace (its last run's outputs and its state store)."""
    fastapi = _require_web()
    from fastapi.responses import FileResponse, HTMLResponse, JSONResponse

    if kind not in (POSSIBLE, AUDIT):
        raise InputError(f"unknown queue '{kind}'", value=kind, reason="bad_queue", hint="use possible or audit")
    data = data or load_review_data(workspace)
    store = store or DecisionStore.for_workspace(workspace)
    static = resources.files("integrate.review") / "static"
    app = fastapi.FastAPI(title="integrate review", docs_url=None, redoc_url=None, openapi_url=None)

    @app.middleware("http")
    async def _headers(request: Any, call_next: Any) -> Any:
        response = await call_next(request)
        response.headers["Content-Security-Policy"] = CONTENT_POLICY
        response.headers["X-Content-Type-Options"] = "nosniff"
        response.headers["Referrer-Policy"] = "no-referrer"
        response.headers["Cache-Control"] = "no-store"
        return response

    @app.exception_handler(InputError)
    async def _input_error(_request: Any, exc: InputError) -> Any:
        return JSONResponse(status_code=422, content={"error": exc.as_dict()})

    @app.get("/", response_class=HTMLResponse, response_model=None)
    def page() -> Any:
        return HTMLResponse((static / "page.html").read_text(encoding="utf-8"))

    @app.get("/favicon.ico", status_code=204, response_model=None)
    def no_icon() -> Any:
        return fastapi.Response(status_code=204)

    @app.get("/static/{name}", response_model=None)
    def asset(name: str) -> Any:
        allowed = {"review.css": "text/css", "review.js": "text/javascript"}
        if name not in allowed:
            raise fastapi.HTTPException(status_code=404)
        with resources.as_file(static / name) as path:
            return FileResponse(path, media_type=allowed[name])

    @app.get("/api/session")
    def session() -> dict[str, Any]:
        return {"reviewer": reviewer, "kind": kind, "sources": data.sources, "fields": list(data.fields),
                "as_of": data.as_of, "shortcuts": [{"key": k, "action": a} for k, a in SHORTCUTS]}

    @app.get("/api/next")
    def next_item(reviewer_name: str = fastapi.Query(reviewer, alias="reviewer"), source: str = "",
                  field: str = "", skip: str = "") -> dict[str, Any]:
        key, progress = next_key(data, store, reviewer_name, kind, source=source or None, field=field or None,
                                 skip=_split_id(skip) if skip else None)
        return {"item": item_payload(data, key, kind) if key else None, "progress": progress}

    @app.get("/api/item")
    def item(id: str) -> dict[str, Any]:  # noqa: A002 - the query parameter's name
        key = _split_id(id)
        if key not in data.pairs.index:
            raise fastapi.HTTPException(status_code=404, detail="no such pair in the last run")
        return {"item": item_payload(data, key, kind)}

    @app.post("/api/decisions", status_code=201, response_model=None)
    def decide(body: DecisionRequest) -> Any:
        key = ordered_pair(body.source_a, body.record_id_a, body.source_b, body.record_id_b)
        if key not in data.pairs.index:
            raise fastapi.HTTPException(status_code=404, detail="no such pair in the last run")
        snapshot = scores_snapshot(data, key)
        new = NewDecision(**dict(zip(KEY_COLUMNS, key)), decision=body.decision, reviewer=body.reviewer,
                          note=body.note, origin=kind, **snapshot)
        try:
            row = store.record(new)
        except DecisionConflict as conflict:
            return JSONResponse(status_code=409, content={"detail": str(conflict), "existing": conflict.existing})
        return {"decision": row}

    @app.post("/api/undo", response_model=None)
    def undo(body: UndoRequest) -> Any:
        decision_id = body.decision_id
        if decision_id is None:
            last = store.last_decision_of(body.reviewer)
            if last is None:
                return JSONResponse(status_code=404, content={"detail": f"{body.reviewer} has no decision to undo"})
            decision_id = int(last["id"])
        try:
            row = store.undo(decision_id, body.reviewer)
        except NothingToUndo as gone:
            return JSONResponse(status_code=404, content={"detail": str(gone)})
        except DecisionConflict as conflict:
            return JSONResponse(status_code=409, content={"detail": "the decision is no longer yours to undo",
                                                          "existing": conflict.existing})
        key = ordered_pair(row["source_a"], row["record_id_a"], row["source_b"], row["record_id_b"])
        shown = item_payload(data, key, kind) if key in data.pairs.index else None
        return {"undone": row, "item": shown}

    @app.get("/api/decisions")
    def decisions() -> dict[str, Any]:
        frame = store.decisions()
        return {"decisions": frame.astype(object).where(frame.notna(), None).to_dict("records")}

    return app


def serve(workspace: str | Path, *, host: str = "127.0.0.1", port: int = 8765, reviewer: str = "reviewer",
          kind: str = POSSIBLE, announce: Any = print) -> None:
    """Start the review page and block until interrupted."""
    _require_web()
    import uvicorn

    app = create_app(workspace, reviewer=reviewer, kind=kind)
    config = uvicorn.Config(app, host=host, port=port, log_level="warning", access_log=False)
    server = uvicorn.Server(config)
    shown_host = f"[{host}]" if ":" in host else host
    announce(f"review page: http://{shown_host}:{port}/  (reviewer: {reviewer}; press Ctrl+C to stop)")
    server.run()
