"""Guards in front of every request: Host header, Origin on writes, request size, JSON errors.

- Host: a request whose ``Host`` is not the address the server is bound to (or, on loopback,
  ``localhost``/``127.0.0.1``/``[::1]``) is refused with 421, so a page on another site whose name
  was pointed at 127.0.0.1 (DNS rebinding) gets nothing.
- Origin: a write (any method but GET/HEAD/OPTIONS) carrying an ``Origin`` other than the server's
  own (or one the operator allowed with ``--cors-origin``) is refused with 403.
- Size: a body over the limit is refused with 413, by its ``Content-Length`` or, streamed, as
  soon as it passes the limit.
- Headers: every response gets a Content-Security-Policy (unless the route set its own), nosniff,
  no referrer and no caching.
"""

from __future__ import annotations

import ipaddress
import json
from collections.abc import Awaitable, Callable
from typing import Any

Scope = dict[str, Any]
Receive = Callable[[], Awaitable[dict[str, Any]]]
Send = Callable[[dict[str, Any]], Awaitable[None]]
SAFE_METHODS = {"GET", "HEAD", "OPTIONS"}
LOOPBACK_NAMES = ("localhost", "127.0.0.1", "[::1]")


def is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def allowed_hosts(host: str, port: int) -> set[str]:
    """``Host`` header values that name this server."""
    shown = f"[{host}]" if ":" in host and not host.startswith("[") else host
    names = {shown}
    if is_loopback(host):
        names.update(LOOPBACK_NAMES)
    return {n for name in names for n in (name, f"{name}:{port}")}


async def send_json(send: Send, status: int, body: dict[str, Any]) -> None:
    payload = json.dumps(body).encode("utf-8")
    await send({"type": "http.response.start", "status": status,
                "headers": [(b"content-type", b"application/json"), (b"content-length", str(len(payload)).encode()),
                            (b"cache-control", b"no-store"), (b"x-content-type-options", b"nosniff")]})
    await send({"type": "http.response.body", "body": payload})


def error(reason: str, message: str, hint: str | None = None) -> dict[str, Any]:
    return {"error": {"reason": reason, "message": message, "hint": hint}, "errors": []}


class Guard:
    """ASGI middleware applying the checks of the module docstring."""

    def __init__(self, app: Any, *, hosts: set[str], origins: set[str], json_limit: int, upload_limit: int,
                 content_policy: str, upload_prefix: str = "/api/v1/workspaces/") -> None:
        self.app = app
        self.extra_headers = [(b"x-content-type-options", b"nosniff"), (b"referrer-policy", b"no-referrer")]
        self.defaults = [(b"content-security-policy", content_policy.encode()), (b"cache-control", b"no-store")]
        self.hosts = hosts
        self.origins = origins
        self.json_limit = json_limit
        self.upload_limit = upload_limit
        self.upload_prefix = upload_prefix

    def _limit(self, path: str) -> int:
        uploads = path.startswith(self.upload_prefix) and (path.endswith("/file") or "/mappings/" in path
                                                           or path.endswith("/review/import"))
        return self.upload_limit + 64 * 1024 if uploads else self.json_limit  # room for multipart framing

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        headers = {k.decode("latin-1").lower(): v.decode("latin-1") for k, v in scope.get("headers", [])}
        host = headers.get("host", "")
        if host.lower() not in self.hosts:
            await send_json(send, 421, error("bad_host", f"this server does not answer to host '{host[:100]}'",
                                             "use the address the server printed when it started"))
            return
        method = scope.get("method", "GET")
        origin = headers.get("origin")
        if method not in SAFE_METHODS and origin is not None and origin not in self.origins:
            await send_json(send, 403, error("foreign_origin", f"writes from origin '{origin[:100]}' are refused",
                                             "send requests from the server's own pages or a script"))
            return
        limit = self._limit(scope.get("path", ""))
        declared = headers.get("content-length")
        if declared is not None and (not declared.isdigit() or int(declared) > limit):
            await send_json(send, 413, error("too_large", f"the request body is over the limit of {limit} bytes"))
            return
        seen = 0
        started = False

        async def counted_receive() -> dict[str, Any]:
            nonlocal seen
            message = await receive()
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > limit:
                    raise BodyTooLarge(limit)
            return message

        async def tracked_send(message: dict[str, Any]) -> None:
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
                headers = list(message.get("headers", []))
                names = {k.lower() for k, _ in headers}
                headers += [h for h in self.defaults if h[0] not in names]
                headers += [h for h in self.extra_headers if h[0] not in names]
                message = {**message, "headers": headers}
            await send(message)

        try:
            await self.app(scope, counted_receive, tracked_send)
        except BodyTooLarge as big:
            if not started:
                await send_json(send, 413, error("too_large", f"the request body is over the limit of {big.limit} "
                                                              "bytes"))


class BodyTooLarge(Exception):
    def __init__(self, limit: int) -> None:
        super().__init__(limit)
        self.limit = limit
