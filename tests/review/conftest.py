"""Review fixtures: a workspace with a finished run, and the review app served by a real uvicorn."""

from __future__ import annotations

import shutil
import socket
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest

from integrate.review.queue import POSSIBLE


@pytest.fixture()
def reviewed_ws(tmp_path: Path, demo_run) -> Path:  # noqa: ANN001 - demo_run is a RunResult
    """A private copy of the demo workspace together with the outputs of its (session-wide) run."""
    source = demo_run.output_dir.parent
    dest = tmp_path / "ws"
    for name in ("mappings", "demo_sources", "out"):
        shutil.copytree(source / name, dest / name)
    return dest


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@contextmanager
def serving(app, port: int) -> Iterator[str]:  # noqa: ANN001 - a FastAPI app
    """An app on a real uvicorn server in a thread, on 127.0.0.1:port; yields the base URL."""
    import uvicorn

    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        if time.monotonic() > deadline or not thread.is_alive():
            raise RuntimeError("the server did not start")
        time.sleep(0.05)
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=10)


@contextmanager
def running_server(workspace: Path, *, reviewer: str = "ana", kind: str = POSSIBLE) -> Iterator[str]:
    """The review page (``integrate review``'s app) on a real server; yields the page's address with its token."""
    from integrate.review.app import create_app, page_url

    port = free_port()
    app = create_app(workspace, reviewer=reviewer, kind=kind, port=port)
    with serving(app, port) as base:
        yield page_url(app, base)


@contextmanager
def review_service(workspace: Path, reviewers: list[str]) -> Iterator[tuple[str, dict[str, str]]]:
    """The service on a real server with a reviewer token per name; yields the workspace's review API URL and
    the tokens."""
    from integrate.service.app import create_app
    from integrate.service.store import TokenStore

    tokens = TokenStore.for_workspace(workspace)
    secrets = {name: str(tokens.create(name, "reviewer").secret) for name in reviewers}
    port = free_port()
    app = create_app([workspace], port=port)
    name = next(iter(app.state.contexts))
    with serving(app, port) as base:
        yield f"{base}/api/v1/workspaces/{name}/review", secrets
