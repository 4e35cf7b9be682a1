"""Starting the service: bind first (clear errors), then run uvicorn on the bound socket."""

from __future__ import annotations

import errno
import socket
from pathlib import Path
from typing import Any

from ..errors import InputError
from .security import is_loopback


def bind(host: str, port: int) -> socket.socket:
    """A listening socket on host:port, or an InputError saying why not (before any URL is printed)."""
    if not 1 <= port <= 65535:
        raise InputError(f"port {port} is not a TCP port", value=port, reason="bad_port",
                         hint="use a number from 1 to 65535 (e.g. 8765)")
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    # accepted connections inherit this: a response's head and body are not held back waiting for an ACK
    sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    try:
        sock.bind((host.strip("[]"), port))
        sock.listen(128)
    except OSError as exc:
        sock.close()
        if exc.errno == errno.EADDRINUSE:
            raise InputError(f"port {port} on {host} is already in use", value=port, reason="port_in_use",
                             hint="another server is running there: stop it, or pass --port with a free port") from None
        raise InputError(f"cannot listen on {host}:{port}: {exc.strerror}", value=f"{host}:{port}",
                         reason="cannot_bind", hint="check --host and --port") from None
    sock.set_inheritable(True)
    return sock


def shown_url(host: str, port: int) -> str:
    shown = f"[{host}]" if ":" in host and not host.startswith("[") else host
    return f"http://{shown}:{port}"


def refuse_open_address(host: str, token_counts: dict[str, int]) -> None:
    """Another address than loopback only when every workspace has a token (authentication on)."""
    if is_loopback(host):
        return
    missing = [name for name, n in token_counts.items() if n == 0]
    if missing:
        raise InputError(f"refusing to listen on {host} with no tokens in: {', '.join(missing)}",
                         value=host, reason="no_tokens",
                         hint="create tokens first (integrate serve token create WS --name NAME --role ROLE), "
                              "or listen on 127.0.0.1")


def run(app: Any, sock: socket.socket) -> None:
    import sys

    import uvicorn

    # The event loop rarely waits when many clients are served, so a thread the loop hands work to (the
    # decision writer, loading a new output set) gets the interpreter lock only when the loop is forced
    # to give it up: every 5 ms by default, a wait paid per hand-off. 1 ms cut the decisions' p95 under
    # 50 clients from 184 to 140 ms (benchmarks/service_load.py).
    sys.setswitchinterval(0.001)
    config = uvicorn.Config(app, log_level="warning", access_log=False, timeout_graceful_shutdown=5)
    uvicorn.Server(config).run(sockets=[sock])


def roots(paths: list[str]) -> list[Path]:
    return [Path(p) for p in paths]
