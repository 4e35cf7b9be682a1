"""Review of a suspicious cluster as a whole over HTTP: the cluster, one decision on it, its undo.

A cluster decision is stored through the same decision store as pair decisions, as the pairwise
decisions that make the next run reproduce it (``review.clusters``); undoing it removes all of them
in one transaction, and so does undoing any one of them through ``POST .../review/undo``.
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import FastAPI, Path, Request
from fastapi.responses import JSONResponse

from ..review.clusters import BadSplit
from ..review.queue import cluster_item, decide_cluster
from ..review.store import DecisionConflict, NothingToUndo
from .models import (
    ClusterDecisionRequest,
    ClusterDecisionResponse,
    ClusterItem,
    ClusterUndoRequest,
    ClusterUndoResponse,
)
from .results import plain


def link_entities(ctx: Any, records: list[dict[str, Any]]) -> None:
    """Each shown record's entity in the last run's outputs (None where unknown or unreadable)."""
    try:
        outputs = ctx.results.get()
    except Exception:  # noqa: BLE001 - the links to entities are extra; the records show without them
        outputs = None
    for record in records:
        hit = outputs.entity_of_record(record["source"], record["record_id"]) if outputs is not None else None
        record["entity_id"] = hit["entity_id"] if hit else None


def undo_target(given: int | None, last_of: Any, who: str, what: str, api_error: Any) -> int:
    """The decision an undo request names, or the caller's most recent one (404 when none)."""
    if given is not None:
        return given
    last = last_of(who)
    if last is None:
        raise api_error(404, "nothing_to_undo", f"{who} has no {what} to undo")
    return int(last["id"])

ClusterId = Annotated[str, Path(min_length=1, max_length=200, pattern=r"^[A-Za-z0-9_.+-]+$")]


def _row(row: dict[str, Any]) -> dict[str, Any]:
    return {k: (plain(v) if k not in ("parts", "decisions") else v) for k, v in row.items()}


def cluster_decision_row(group: dict[str, Any]) -> dict[str, Any]:
    """A stored cluster decision as the API shows it (its pairwise decisions as decision rows)."""
    return {**_row(group), "decisions": [{k: plain(v) for k, v in r.items()} for r in group.get("decisions", [])]}


def _bad(api_error: Any, reason: str, message: str, hint: str, value: str | None = None) -> Exception:
    """A 422 naming the request field at fault (``part_a``)."""
    detail = {"reason": reason, "message": message, "column": "part_a", "value": value, "hint": hint}
    return api_error(422, reason, message, hint, errors=[detail])


def add_cluster_routes(app: FastAPI, auth: Any, ctx_of: Any, api_error: Any, errors: dict[int | str, Any]) -> None:
    base = "/api/v1/workspaces/{ws}/review/clusters"

    def shown(ctx: Any, cluster_id: str) -> dict[str, Any]:
        data = ctx.review_data()
        if cluster_id not in data.cases:
            raise api_error(404, "unknown_cluster", f"no suspicious cluster '{cluster_id}' in the last run",
                            "the queue (GET .../review/queue) names each cluster by its cluster_id")
        payload = cluster_item(data, ctx.decisions, cluster_id)
        link_entities(ctx, payload["records"])
        if payload["decision"] is not None:
            payload["decision"] = cluster_decision_row(payload["decision"])
        return payload

    app.state.cluster_item = shown  # the pair routes show a cluster item in /next and after an undo

    @app.get(f"{base}/{{cluster_id}}", response_model=ClusterItem, responses=errors, tags=["review"])
    def cluster(ws: str, cluster_id: ClusterId, request: Request) -> Any:
        """A suspicious cluster as a whole: its records side by side, its pairs, the proposed split."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        return shown(ctx, cluster_id)

    @app.post(f"{base}/{{cluster_id}}/decision", response_model=ClusterDecisionResponse, status_code=201,
              responses=errors, tags=["review"])
    def decide(ws: str, cluster_id: ClusterId, body: ClusterDecisionRequest, request: Request) -> Any:
        """One decision on the whole cluster ('keep together' or 'split', as proposed or with the caller's
        part A), stored as the pairwise decisions that make the next run reproduce it: 201, or 409 when
        another reviewer decided one of those pairs otherwise (then nothing is stored)."""
        ctx = ctx_of(ws)
        who = auth.check(request, ctx, "reviewer")
        shown(ctx, cluster_id)  # 404 for an unknown cluster
        part_a = None if body.part_a is None else [(r.source, r.record_id) for r in body.part_a]
        if body.choice == "keep together" and part_a is not None:
            raise _bad(api_error, "part_a_with_keep", "part_a is for a split, not for 'keep together'",
                       "leave part_a out, or choose 'split'")
        try:
            group = decide_cluster(ctx.review_data(), ctx.decisions, cluster_id, body.choice, who.name,
                                   part_a=part_a, note=body.note)
        except BadSplit as bad:
            raise _bad(api_error, "bad_split", str(bad), "part_a lists records of this cluster, and not all of them",
                       bad.value or None) from None
        except DecisionConflict as conflict:
            raise api_error(409, "already_decided", str(conflict), "the decision that stands is in 'existing'",
                            existing={k: plain(v) for k, v in conflict.existing.items()}) from None
        return JSONResponse(status_code=201, content={"cluster_decision": cluster_decision_row(group)})

    @app.post(f"{base}/undo", response_model=ClusterUndoResponse, responses=errors, tags=["review"])
    def undo(ws: str, body: ClusterUndoRequest, request: Request) -> Any:
        """Remove one of the caller's cluster decisions (by default their most recent one) with every
        pairwise decision it stored."""
        ctx = ctx_of(ws)
        who = auth.check(request, ctx, "reviewer")
        group_id = undo_target(body.cluster_decision_id, ctx.decisions.last_cluster_decision_of, who.name,
                               "cluster decision", api_error)
        try:
            group = ctx.decisions.undo_cluster(group_id, who.name)
        except NothingToUndo as gone:
            raise api_error(404, "nothing_to_undo", str(gone)) from None
        except DecisionConflict:
            raise api_error(409, "not_yours", "the cluster decision is not yours to undo") from None
        again = shown(ctx, group["cluster_id"]) if group["cluster_id"] in ctx.review_data().cases else None
        return {"undone": cluster_decision_row(group), "cluster": again}
