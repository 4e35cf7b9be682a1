"""The review page: the service's review routes (``integrate.service.review_api``) for one workspace.

``integrate review`` starts the same app as ``integrate serve`` for one workspace, with one
session token that lives only in this server's memory; the page's address carries it after
``#token=`` (the fragment never leaves the browser in a request), and the page sends it as a
bearer token with every call. Decisions are recorded under the reviewer the session was started
for. The page itself (``static/``) loads nothing from elsewhere and runs no inline script
(Content-Security-Policy below); every record value is put on it as text.
"""

from __future__ import annotations

import secrets
import sys
from pathlib import Path
from typing import Any

from ..errors import InputError
from .queue import AUDIT, POSSIBLE

SHORTCUTS = [  # key, what it does (shown on the page, handled by review.js)
    ("S", "same person"),
    ("D", "different people"),
    ("L", "decide later"),
    ("K", "keep a cluster together (a cluster shown as a whole)"),
    ("P", "split a cluster as proposed (or as you set the parts)"),
    ("U", "undo my last decision"),
    ("N", "write a note (Esc leaves the note)"),
]
# No script, style, image or connection from anywhere but this server; no framing.
CONTENT_POLICY = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; "
                  "connect-src 'self'; form-action 'none'; base-uri 'none'; frame-ancestors 'none'")


def _require_web() -> Any:
    try:
        import fastapi
        import uvicorn  # noqa: F401
    except ImportError as exc:  # pragma: no cover - depends on the installed extras
        raise InputError("the review page needs FastAPI and uvicorn",
                         hint='install them with: python3 -m pip install -e ".[review]"') from exc
    return fastapi


def create_app(workspace: str | Path, *, reviewer: str = "reviewer", kind: str = POSSIBLE, host: str = "127.0.0.1",
               port: int = 8765) -> Any:
    """The service app for one workspace with a session token for ``reviewer``.

    ``app.state.page_path`` and ``app.state.page_token`` make the page's address (``page_url``).
    """
    _require_web()
    from ..service.app import create_app as service_app
    from ..service.models import Principal

    if kind not in (POSSIBLE, AUDIT):
        raise InputError(f"unknown queue '{kind}'", value=kind, reason="bad_queue", hint="use possible or audit")
    token = secrets.token_urlsafe(32)
    app = service_app([workspace], host=host, port=port,
                      session_tokens={token: Principal(name=reviewer, role="reviewer")})
    name = next(iter(app.state.contexts))
    app.state.page_path = f"/review/{name}" + ("?queue=audit" if kind == AUDIT else "")
    app.state.page_token = token
    return app


def page_url(app: Any, base: str) -> str:
    """The page's address with the session token in the fragment."""
    return f"{base}{app.state.page_path}#token={app.state.page_token}"


def serve(workspace: str | Path, *, host: str = "127.0.0.1", port: int = 8765, reviewer: str = "reviewer",
          kind: str = POSSIBLE, announce: Any = print) -> None:
    """Start the review page and block until interrupted (the port is bound before the address is shown)."""
    _require_web()
    from ..service.security import is_loopback
    from ..service.server import bind, run, shown_url

    sock = bind(host, port)
    try:
        app = create_app(workspace, reviewer=reviewer, kind=kind, host=host, port=port)
    except BaseException:
        sock.close()
        raise
    if not is_loopback(host):
        print(f"warning: the review page listens on {host}: anyone who can reach it and has the page's address "
              "(with its token) can record decisions as " + reviewer, file=sys.stderr)
    announce(f"review page: {page_url(app, shown_url(host, port))}  (reviewer: {reviewer}; press Ctrl+C to stop)")
    sys.stdout.flush()
    run(app, sock)
