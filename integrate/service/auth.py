"""Who is asking: bearer tokens with roles, checked per workspace.

A token belongs to the workspace whose state store holds it (``integrate serve token create
WS``); the review page's session token (``integrate review``) lives only in the server's memory.
Roles are ordered reader < reviewer < admin: a reader reads, a reviewer also records decisions,
an admin also uploads files and starts runs. With ``open_reads`` a request without a token may
read (never write). A decision's reviewer is the token's name, never a name the client sends.
A store's tokens are read all at once and kept for ``REMEMBER`` seconds (a secret not among
them makes the server read them again at once), so a revoked token stops working at most that
long after ``token revoke``.
"""

from __future__ import annotations

import hmac
import time
from typing import Any

from fastapi import Request
from fastapi.security import HTTPBearer

from .models import Principal
from .store import ROLES

bearer = HTTPBearer(auto_error=False, description="a token from `integrate serve token create`")
ANONYMOUS = Principal(name="anonymous", role="anonymous")
REMEMBER = 2.0  # seconds


class AuthError(Exception):
    def __init__(self, status: int, reason: str, message: str, hint: str | None = None) -> None:
        super().__init__(message)
        self.status, self.reason, self.message, self.hint = status, reason, message, hint


def _secret(request: Request) -> str | None:
    header = request.headers.get("authorization", "")
    scheme, _, value = header.partition(" ")
    if scheme.lower() != "bearer" or not value.strip():
        return None
    return value.strip()


class Auth:
    def __init__(self, contexts: dict[str, Any], *, open_reads: bool, session: dict[str, Principal]) -> None:
        self.contexts = contexts
        self.open_reads = open_reads
        self.session = session
        self._known: dict[int, tuple[float, dict[str, Any]]] = {}  # store -> (valid until, tokens by hash)

    def _session(self, secret: str) -> Principal | None:
        for known, who in self.session.items():
            if hmac.compare_digest(known.encode(), secret.encode()):
                return who
        return None

    def identify(self, request: Request, ctx: Any | None) -> Principal | None:
        """The token's holder (in ``ctx``'s store, or any served store when ``ctx`` is None)."""
        secret = _secret(request)
        if secret is None:
            return None
        who = self._session(secret)
        if who is not None:
            return who
        now = time.monotonic()
        hashed = None
        for c in [ctx] if ctx is not None else list(self.contexts.values()):
            hashed = hashed or c.tokens.hash_of(secret)
            known = self._known.get(id(c))
            token = known[1].get(hashed) if known is not None and known[0] > now else None
            if token is None:  # stale, or a token made since: read the store's tokens again
                self._known[id(c)] = (now + REMEMBER, c.tokens.active())
                token = self._known[id(c)][1].get(hashed)
            if token is not None:
                return Principal(name=token.name, role=token.role)
        raise AuthError(401, "bad_token", "the token is unknown or revoked",
                        "make one with: integrate serve token create WORKSPACE --name NAME --role ROLE")

    def check(self, request: Request, ctx: Any | None, role: str) -> Principal:
        """The caller, if allowed ``role`` here; else AuthError (401 without a token, 403 too weak)."""
        who = self.identify(request, ctx)
        if who is None:
            if role == "reader" and self.open_reads:
                return ANONYMOUS
            raise AuthError(401, "no_token", "this needs a token: send 'Authorization: Bearer <token>'",
                            "make one with: integrate serve token create WORKSPACE --name NAME --role ROLE")
        if ROLES.index(who.role) < ROLES.index(role):
            raise AuthError(403, "forbidden", f"a {who.role} token may not do this (it needs {role})")
        return who

    def may_see(self, who: Principal, ctx: Any) -> bool:
        if who.role == "anonymous" or who in self.session.values():
            return True
        return any(t.name == who.name and t.revoked_at is None for t in ctx.tokens.list())


def require(role: str) -> Any:
    """A dependency for routes that are not about one workspace (any served store's token counts)."""

    def dependency(request: Request) -> Principal:
        return request.app.state.auth.check(request, None, role)

    return dependency
