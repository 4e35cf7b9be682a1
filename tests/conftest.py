"""Shared fixtures: a private copy of the demo workspace, run once per session."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent


def copy_workspace(dest: Path) -> Path:
    """Copy the demo workspace (mapping files and demo sources) into ``dest``."""
    shutil.copytree(REPO / "mappings", dest / "mappings")
    shutil.copytree(REPO / "demo_sources", dest / "demo_sources",
                    ignore=shutil.ignore_patterns("__pycache__", "generate.py"))
    return dest


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory: pytest.TempPathFactory):  # noqa: ANN201 - returns RunResult
    from integrate import run

    root = copy_workspace(tmp_path_factory.mktemp("demo"))
    return run(root)


@pytest.fixture()
def workspace(tmp_path: Path) -> Path:
    """A fresh, writable copy of the demo workspace for tests that break it."""
    return copy_workspace(tmp_path / "ws")


# -- a throw-away PostgreSQL server for the state-store tests ------------------------------------
# Started once per test session from the Debian package's binaries (initdb + pg_ctl in a temporary
# folder, loopback port, trust authentication); each test gets a database of its own. Without the
# binaries the PostgreSQL cases are skipped, unless INTEGRATE_REQUIRE_POSTGRES=1 (CI) fails them.

import contextlib  # noqa: E402
import glob  # noqa: E402
import os  # noqa: E402
import socket  # noqa: E402
import subprocess  # noqa: E402
import tempfile  # noqa: E402
import uuid  # noqa: E402
from collections.abc import Iterator  # noqa: E402

REQUIRE_POSTGRES = os.environ.get("INTEGRATE_REQUIRE_POSTGRES", "") == "1"


def _postgres_bindir() -> Path | None:
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(Path(p).parts[-3]))
    if found:
        return Path(found[-1]).parent
    initdb = shutil.which("initdb")
    return Path(initdb).parent if initdb else None


def _no_postgres(why: str) -> None:
    if REQUIRE_POSTGRES:
        pytest.fail(f"PostgreSQL is required here (INTEGRATE_REQUIRE_POSTGRES=1) but {why}")
    pytest.skip(f"no PostgreSQL server for the tests: {why}")


@pytest.fixture(scope="session")
def postgres_server() -> Iterator[str]:
    """A running throw-away cluster; yields its base URL (``postgresql+psycopg://postgres@127.0.0.1:PORT``)."""
    bindir = _postgres_bindir()
    if bindir is None:
        _no_postgres("initdb was not found (Debian package 'postgresql')")
    as_user: list[str] = []
    if os.geteuid() == 0:  # the server refuses to run as root: run it as the package's own user
        if subprocess.run(["id", "-u", "postgres"], capture_output=True).returncode != 0:
            _no_postgres("running as root and there is no 'postgres' user to run the server")
        # in /tmp itself: a TMPDIR inside a root-only folder would be out of the server's reach
        base = Path(tempfile.mkdtemp(prefix="integrate-pg-", dir="/tmp"))
        shutil.chown(base, "postgres", "postgres")
        as_user = ["runuser", "-u", "postgres", "--"]
    else:
        base = Path(tempfile.mkdtemp(prefix="integrate-pg-"))
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = int(s.getsockname()[1])
    data, log = base / "data", base / "server.log"
    try:
        subprocess.run([*as_user, str(bindir / "initdb"), "-D", str(data), "-A", "trust", "-U", "postgres",
                        "-E", "UTF8", "--locale=C", "--no-sync"], check=True, capture_output=True)
        options = (f"-c listen_addresses=127.0.0.1 -p {port} -k {base} -c fsync=off -c synchronous_commit=off "
                   "-c full_page_writes=off -c max_connections=200")
        subprocess.run([*as_user, str(bindir / "pg_ctl"), "-D", str(data), "-o", options, "-l", str(log),
                        "-w", "-t", "60", "start"], check=True, capture_output=True)
    except subprocess.CalledProcessError as exc:
        shutil.rmtree(base, ignore_errors=True)
        _no_postgres(f"the throw-away cluster did not start: {exc.stderr.decode(errors='replace')[-500:]}")
    try:
        yield f"postgresql+psycopg://postgres@127.0.0.1:{port}"
    finally:
        subprocess.run([*as_user, str(bindir / "pg_ctl"), "-D", str(data), "-m", "immediate", "-w", "stop"],
                       capture_output=True)
        shutil.rmtree(base, ignore_errors=True)


@contextlib.contextmanager
def fresh_postgres_database(server: str) -> Iterator[str]:
    """A new, empty database on the test server; yields its URL, drops it afterwards."""
    from sqlalchemy import create_engine, text

    from integrate import state

    name = f"t_{uuid.uuid4().hex[:16]}"
    admin = create_engine(f"{server}/postgres", isolation_level="AUTOCOMMIT")
    try:
        with admin.connect() as conn:
            conn.execute(text(f'CREATE DATABASE "{name}"'))
        url = f"{server}/{name}"
        yield url
        engine = state._ENGINES.pop(url, None)
        if engine is not None:
            engine.dispose()
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE "{name}" WITH (FORCE)'))
    finally:
        admin.dispose()


@pytest.fixture()
def postgres_url(postgres_server: str) -> Iterator[str]:
    """The URL of a fresh database on the test server."""
    with fresh_postgres_database(postgres_server) as url:
        yield url


@pytest.fixture(params=["sqlite", "postgresql"])
def state_backend(request: pytest.FixtureRequest, monkeypatch: pytest.MonkeyPatch) -> Iterator[str]:
    """Runs a test once on the default SQLite file and once with INTEGRATE_STATE_URL on a fresh
    PostgreSQL database; yields the back end's name."""
    from integrate.state import STATE_URL_ENV

    if request.param == "sqlite":
        monkeypatch.delenv(STATE_URL_ENV, raising=False)
        yield "sqlite"
        return
    with fresh_postgres_database(request.getfixturevalue("postgres_server")) as url:
        monkeypatch.setenv(STATE_URL_ENV, url)
        yield "postgresql"
