"""``integrate serve``: the HTTP service over workspaces; ``serve token ...`` and ``serve openapi``.

    integrate serve WS [WS...] [--host H] [--port P] [--open-reads] [--max-upload-mb N] [--cors-origin URL]
    integrate serve token create WS --name NAME --role reader|reviewer|admin
    integrate serve token list WS
    integrate serve token revoke WS TOKEN_ID
    integrate serve openapi [--out docs/openapi.json]
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from ..errors import InputError

DEFAULT_PORT = 8000


def port_number(text: str) -> int:
    """An argparse type: a TCP port (argparse turns the error into a usage message and exit 2)."""
    try:
        port = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a port number (use 1-65535)") from None
    if not 1 <= port <= 65535:
        raise argparse.ArgumentTypeError(f"{port} is not a TCP port (use 1-65535)")
    return port


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser("serve", help="serve workspaces over HTTP (runs, results, review); tokens; OpenAPI",
                         description="Serve workspaces over HTTP. Also: 'integrate serve token create|list|revoke WS' "
                                     "and 'integrate serve openapi [--out FILE]'.")
    cmd.add_argument("workspace", nargs="+", help="workspace folder(s) to serve (or 'token' / 'openapi', see above)")
    cmd.add_argument("--host", default="127.0.0.1",
                     help="address to listen on (default 127.0.0.1; another one needs tokens in every workspace)")
    cmd.add_argument("--port", type=port_number, default=DEFAULT_PORT, help=f"port (default {DEFAULT_PORT})")
    cmd.add_argument("--open-reads", action="store_true", help="let requests without a token read (never write)")
    cmd.add_argument("--max-upload-mb", type=int, default=200, help="largest upload accepted, in MB (default 200)")
    cmd.add_argument("--cors-origin", action="append", default=[], metavar="URL",
                     help="allow pages from this origin to call the API (repeatable; default: none)")
    cmd.add_argument("--name", help="token create: whose token (also the reviewer name of their decisions)")
    cmd.add_argument("--role", choices=("reader", "reviewer", "admin"), default="reader",
                     help="token create: reader reads; reviewer also decides; admin also uploads and runs")
    cmd.add_argument("--out", help="openapi: where to write the document (default docs/openapi.json)")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    first, rest = args.workspace[0], args.workspace[1:]
    if first == "token":
        return _token(rest, args)
    if first == "openapi":
        return _openapi(args.out or "docs/openapi.json")
    return _serve(args)


def _token(rest: list[str], args: argparse.Namespace) -> int:
    from ..service.store import TokenStore
    from ..workspace import load_workspace

    if len(rest) < 2 or rest[0] not in ("create", "list", "revoke"):
        raise InputError("usage: integrate serve token create|list|revoke WORKSPACE [TOKEN_ID]", reason="bad_option",
                         hint="e.g. integrate serve token create . --name ana --role reviewer")
    action, ws = rest[0], load_workspace(rest[1]).root
    tokens = TokenStore.for_workspace(ws)
    if action == "create":
        if not args.name:
            raise InputError("token create needs --name", reason="bad_option", hint="--name ana --role reviewer")
        made = tokens.create(args.name, args.role)
        print(made.secret)
        print(f"token {made.token_id} for {made.name} ({made.role}); shown once, stored only as a hash",
              file=sys.stderr)
        return 0
    if action == "list":
        for t in tokens.list():
            state = f"revoked {t.revoked_at}" if t.revoked_at else "active"
            print(f"{t.token_id:>4}  {t.name:<20} {t.role:<9} created {t.created_at}  {state}")
        return 0
    if len(rest) < 3 or not rest[2].isdigit():
        raise InputError("token revoke needs the token's number (see 'integrate serve token list WS')",
                         reason="bad_option")
    if not tokens.revoke(int(rest[2])):
        raise InputError(f"no active token {rest[2]}", value=rest[2], reason="unknown_token",
                         hint="see 'integrate serve token list WS'")
    print(f"revoked token {rest[2]}")
    return 0


def openapi_document() -> dict:
    """The service's OpenAPI document (built over a throw-away demo-free workspace stand-in)."""
    from fastapi.openapi.utils import get_openapi

    from ..service.app import create_app

    app = create_app([])
    return get_openapi(title=app.title, version=app.version, description=app.description, routes=app.routes)


def _openapi(out: str) -> int:
    from ..outputs.tables import write_text_atomic

    write_text_atomic(Path(out), json.dumps(openapi_document(), indent=1, sort_keys=True) + "\n")
    print(f"wrote {out}")
    return 0


def _serve(args: argparse.Namespace) -> int:
    from ..service.app import create_app
    from ..service.server import bind, refuse_open_address, run, shown_url
    from ..service.store import TokenStore
    from ..workspace import load_workspace

    roots = [load_workspace(w).root for w in args.workspace]
    refuse_open_address(args.host, {str(r): TokenStore.for_workspace(r).active_count() for r in roots})
    if args.max_upload_mb < 1:
        raise InputError("--max-upload-mb must be at least 1", reason="bad_option")
    sock = bind(args.host, args.port)
    app = create_app(roots, host=args.host, port=args.port, open_reads=args.open_reads,
                     cors_origins=args.cors_origin, upload_limit=args.max_upload_mb * 1024 * 1024)
    url = shown_url(args.host, args.port)
    names = ", ".join(app.state.contexts)
    print(f"integrate service: {url}/api/v1  docs: {url}/docs  workspaces: {names}  (Ctrl+C stops)", flush=True)
    if not args.open_reads:
        print("every request needs 'Authorization: Bearer <token>' (integrate serve token create WS ...)", flush=True)
    run(app, sock)
    return 0
