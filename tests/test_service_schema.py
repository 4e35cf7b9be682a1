"""Property-based tests of every endpoint against the service's OpenAPI document (schemathesis, a
general-purpose API testing library): generated requests, valid and not, against a real server; no
response is a server error and every response matches the document. Bounded: a few examples per
operation, so the whole file takes well under a few minutes."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from hypothesis import HealthCheck, settings

schemathesis = pytest.importorskip("schemathesis")
from schemathesis.checks import not_a_server_error  # noqa: E402
from schemathesis.specs.openapi.checks import (  # noqa: E402
    content_type_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from integrate.commands.serve import openapi_document  # noqa: E402

from .review.conftest import free_port, serving  # noqa: E402

schema = schemathesis.openapi.from_dict(openapi_document())
CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance, response_schema_conformance]


@pytest.fixture(scope="module")
def live(tmp_path_factory: pytest.TempPathFactory, demo_run):  # noqa: ANN001, ANN201
    from integrate.service.app import create_app
    from integrate.service.store import TokenStore

    source = demo_run.output_dir.parent
    ws = tmp_path_factory.mktemp("schema") / "ws"
    for name in ("mappings", "demo_sources", "out", "reports"):
        if (source / name).exists():
            shutil.copytree(source / name, ws / name)
    token = str(TokenStore.for_workspace(ws).create("prop", "admin").secret)
    port = free_port()
    app = create_app([Path(ws)], port=port)
    with serving(app, port) as base:
        yield base, token
    for ctx in app.state.contexts.values():
        ctx.jobs.stop_all()


@schema.parametrize()
@settings(max_examples=6, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
def test_every_endpoint_matches_the_document(case, live) -> None:  # noqa: ANN001
    base, token = live
    if "{ws}" in case.path and case.path_parameters is not None and case.path_parameters.get("ws") != "ws":
        case.path_parameters["ws"] = "ws"  # mostly aim at the served workspace, so routes get past 404
    response = case.call(base_url=base, headers={"Authorization": f"Bearer {token}"}, timeout=60)
    case.validate_response(response, checks=CHECKS)
