"""Entity and record look-ups answered again from the bytes their route made, before the framework's routing.

The entity and crosswalk routes (``app.get_entity``, ``app.entity_of_record``) turn an answer into
JSON once per output set and keep the bytes in ``OutputSet.answers``. Most of the cost of asking
again is then the framework's: matching the route, parsing parameters, running dependencies. This
layer sits inside the Host/Origin/size guard (and CORS, when configured) and answers a GET for
``/api/v1/workspaces/{ws}/entities/{entity_id}`` or ``.../records/{source}/{record_id}`` directly when
the current output set is known without asking anything (``ResultsCache.fresh``), the answer is
already there and the caller's token allows reading (checked by the same ``Auth.check``). Every
other request, and any of these that does not meet all three, goes to the routes, which answer it
as before (first look-up, a reloaded output set, 404, 401/403).
"""

from __future__ import annotations

from typing import Any

from starlette.requests import Request

from .auth import AuthError

PREFIX = ("", "api", "v1", "workspaces")


class CachedAnswers:
    """ASGI middleware: see the module docstring."""

    def __init__(self, app: Any, *, contexts: dict[str, Any], auth: Any) -> None:
        self.app = app
        self.contexts = contexts
        self.auth = auth

    def _answer(self, scope: dict[str, Any]) -> bytes | None:
        parts = scope["path"].split("/")
        if tuple(parts[:4]) != PREFIX:
            return None
        if len(parts) == 7 and parts[5] == "entities":
            key: tuple[str, ...] = ("entity", parts[6])
        elif len(parts) == 8 and parts[5] == "records":
            key = ("record", parts[6], parts[7])
        else:
            return None
        ctx = self.contexts.get(parts[4])
        outputs = ctx.results.fresh() if ctx is not None else None
        answer = outputs.answers.get(key) if outputs is not None else None
        if answer is None:
            return None
        try:
            self.auth.check(Request(scope), ctx, "reader")
        except AuthError:
            return None  # the route gives the same refusal, with its error body
        return answer

    async def __call__(self, scope: dict[str, Any], receive: Any, send: Any) -> None:
        answer = self._answer(scope) if scope["type"] == "http" and scope["method"] == "GET" else None
        if answer is None:
            await self.app(scope, receive, send)
            return
        headers = [(b"content-length", str(len(answer)).encode()), (b"content-type", b"application/json")]
        await send({"type": "http.response.start", "status": 200, "headers": headers})
        await send({"type": "http.response.body", "body": answer})
