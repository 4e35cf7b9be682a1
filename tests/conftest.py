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
