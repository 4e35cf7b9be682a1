"""The service end to end: a real ``integrate serve`` process on a free loopback port, hit by the Python client."""

from __future__ import annotations

import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pandas as pd
import pytest

from integrate.client import Client, ServiceError
from integrate.pipeline import STAGES
from integrate.service.store import TokenStore

from .review.conftest import free_port


def _copy(demo_run, dest: Path) -> Path:  # noqa: ANN001 - demo_run is a RunResult
    source = demo_run.output_dir.parent
    for name in ("mappings", "demo_sources", "out", "reports"):
        if (source / name).exists():
            shutil.copytree(source / name, dest / name)
    return dest


class Server:
    def __init__(self, ws: Path, *extra: str) -> None:
        self.ws = ws
        self.port = free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.process = subprocess.Popen([sys.executable, "-m", "integrate", "serve", str(ws), "--port",
                                         str(self.port), *extra], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                        text=True, start_new_session=True)
        line = self.process.stdout.readline()
        assert "integrate service: http://127.0.0.1:" in line, line + self.process.stderr.read()

    def kill(self, sig: int = signal.SIGKILL) -> None:
        if self.process.poll() is None:
            os.killpg(self.process.pid, sig)
            self.process.wait(timeout=60)
        self.process.stdout.close()
        self.process.stderr.close()


@pytest.fixture()
def served(tmp_path: Path, demo_run):  # noqa: ANN001, ANN201
    ws = _copy(demo_run, tmp_path / "ws")
    tokens = TokenStore.for_workspace(ws)
    secrets = {role: str(tokens.create(f"{role}-1", role).secret) for role in ("reader", "reviewer", "admin")}
    server = Server(ws)
    try:
        yield server, secrets
    finally:
        server.kill()


def test_upload_run_follow_look_up_review_rerun(served) -> None:  # noqa: ANN001
    server, tokens = served
    ws = "ws"
    with Client(server.url, tokens["admin"]) as api:
        # upload an export: the webshop's file with one record's e-mail changed
        webshop = server.ws / "demo_sources" / "webshop.csv"
        frame = pd.read_csv(webshop, dtype=str, keep_default_na=False, sep=";")
        upload = server.ws / "upload.csv"
        frame.to_csv(upload, index=False, sep=";")
        sent = api.upload_source(ws, "webshop", upload)
        assert sent["file"] == "demo_sources/webshop.csv" and sent["size"] == upload.stat().st_size
        info = api.workspace(ws)
        assert {s["name"] for s in info["sources"]} == {"webshop", "events", "membership", "rentals"}

        # review a pair first, so the next run applies the decision
        pair = api.next_pair(ws)["item"]
        a, b = pair["records"]
        decided = api.decide(ws, pair["key"], "different", note="checked by phone")
        assert decided["reviewer"] == "admin-1"

        # start a run and follow its progress events to the end
        job = api.start_run(ws)
        assert job["state"] in ("queued", "running")
        with pytest.raises(ServiceError) as second:
            api.start_run(ws)
        assert second.value.status == 409 and second.value.body["job"]["job_id"] == job["job_id"]
        events = list(api.events(ws, job["job_id"]))
        stages = [state["stage"] for _, state in events if state["stage"]]
        assert events[-1][0] == "end" and events[-1][1]["state"] == "succeeded", events[-1]
        # the stream shows the job each time it is polled (every 0.2 s), so a stage quicker than
        # that may not appear: the stages seen come in pipeline order, and the final timings
        # hold every stage
        seen = [s for n, s in enumerate(stages) if s != "done" and (n == 0 or s != stages[n - 1])]
        assert len(seen) >= 2 and seen == sorted(seen, key=STAGES.index), stages
        assert set(events[-1][1]["timings"]) >= set(STAGES)
        assert api.job(ws, job["job_id"])["run_id"] == api.runs(ws)[-1]["run_id"]

        # the decision was applied: the two records are in different entities
        ea = api.record_entity(ws, a["source"], a["record_id"])["entity_id"]
        eb = api.record_entity(ws, b["source"], b["record_id"])["entity_id"]
        assert ea != eb
        story = api.entity(ws, ea)
        assert {(m["source"], m["record_id"]) for m in story["members"]} >= {(a["source"], a["record_id"])}
        assert {p["field"] for p in story["provenance"]} >= {"given_name", "family_name"}
        family = story["merged"]["family_name"]
        assert any(e["entity_id"] == ea for e in api.search(ws, "family_name", family, limit=1000))
        assert all(str(e["family_name"]).lower().startswith(family[:2].lower())
                   for e in api.search(ws, "family_name", family[:2], prefix=True))
        runs = api.runs(ws)
        assert len(runs) == 1 and runs[0]["summary"]["entities"] == runs[0]["entities"]  # the copy's first recorded run
        merged = api.download(ws, "merged")
        assert merged.startswith(b"entity_id,")
        assert len(api.download(ws, "crosswalk", "parquet")) > 1000
        report = httpx.get(f"{server.url}/api/v1/workspaces/{ws}/report",
                           headers={"Authorization": f"Bearer {tokens['reader']}"})
        assert report.status_code == 200 and "<html" in report.text.lower()

        # an incremental run through the service builds on the run just made
        again = api.start_run(ws, incremental=True)
        ended = list(api.events(ws, again["job_id"]))[-1]
        assert ended[0] == "end" and ended[1]["state"] == "succeeded", ended
        latest = httpx.get(f"{server.url}/api/v1/workspaces/{ws}/report",
                           headers={"Authorization": f"Bearer {tokens['reader']}"}).text
        assert f"An incremental run built on run {runs[0]['run_id']}" in latest
        assert api.record_entity(ws, a["source"], a["record_id"])["entity_id"] == ea  # the decision still holds

    # the entity story is what `integrate show` builds
    from integrate.commands.show import entity_story, output_folder

    shown = entity_story(ea, output_folder(server.ws, None))
    assert sorted(m["record_id"] for m in story["members"]) == sorted(shown["members"]["record_id"])
    assert [p["value"] for p in story["provenance"]] == shown["provenance"]["value"].fillna("").tolist() or \
        [p["value"] for p in story["provenance"]] == shown["provenance"]["value"].tolist()


def test_writes_need_the_right_token(served) -> None:  # noqa: ANN001
    server, tokens = served
    base = f"{server.url}/api/v1/workspaces/ws"
    key = {"source_a": "a", "record_id_a": "1", "source_b": "b", "record_id_b": "2", "decision": "same"}
    writes = [("POST", "/runs", None), ("POST", "/review/decisions", key), ("POST", "/review/undo", {}),
              ("PUT", "/mappings/extra.yaml", None), ("PUT", "/sources/webshop/file", None)]
    revoked = TokenStore.for_workspace(server.ws)
    gone = revoked.create("gone", "admin")
    assert revoked.revoke(gone.token_id)
    for method, path, body in writes:
        none = httpx.request(method, base + path, json=body)
        assert none.status_code == 401 and none.json()["error"]["reason"] == "no_token", path
        reader = httpx.request(method, base + path, json=body, headers={"Authorization": f"Bearer {tokens['reader']}"})
        assert reader.status_code == 403, path
        old = httpx.request(method, base + path, json=body, headers={"Authorization": f"Bearer {gone.secret}"})
        assert old.status_code == 401 and old.json()["error"]["reason"] == "bad_token", path
    reviewer = {"Authorization": f"Bearer {tokens['reviewer']}"}
    assert httpx.post(base + "/runs", headers=reviewer).status_code == 403  # runs need an admin
    assert httpx.get(base + "/runs").status_code == 401  # reads need a token (no --open-reads)
    assert httpx.get(base + "/runs", headers=reviewer).status_code == 200
    missing = httpx.get(f"{server.url}/api/v1/nothing-here")
    assert missing.status_code == 404 and missing.headers["content-type"] == "application/json"
    assert httpx.get(base + "/runs", headers={**reviewer, "Host": "evil.example:80"}).status_code == 421


@pytest.mark.parametrize("path", ["../escape.yaml", "..%2Fescape.yaml", "%2Ftmp%2Fescape.yaml", "link.yaml",
                                  "sub%2F..%2F..%2Fescape.yaml"])
def test_upload_paths_outside_the_workspace_write_nothing(served, path: str) -> None:  # noqa: ANN001
    server, tokens = served
    outside = server.ws.parent / "outside"
    outside.mkdir(exist_ok=True)
    (server.ws / "mappings" / "link.yaml").symlink_to(outside / "escape.yaml")
    before = sorted(p.name for p in server.ws.parent.rglob("*"))
    response = httpx.put(f"{server.url}/api/v1/workspaces/ws/mappings/{path}", content=b"source: x\n",
                         headers={"Authorization": f"Bearer {tokens['admin']}"})
    assert response.status_code in (400, 404, 422), response.text
    assert response.headers["content-type"] == "application/json"
    assert sorted(p.name for p in server.ws.parent.rglob("*")) == before
    assert not (outside / "escape.yaml").exists()


def test_a_bad_mapping_upload_is_refused_with_where_and_why(served) -> None:  # noqa: ANN001
    server, tokens = served
    original = (server.ws / "mappings" / "webshop.yaml").read_text()
    broken = original.replace("source: webshop", "source: webshop\nthreshold_typo: [1, 2", 1)
    with Client(server.url, tokens["admin"]) as api:
        with pytest.raises(ServiceError) as refused:
            api.upload_mapping("ws", "webshop.yaml", broken)
    assert refused.value.status == 422
    errors = refused.value.body["errors"]
    assert errors and errors[0]["file"] == "mappings/webshop.yaml" and errors[0]["line"]
    assert (server.ws / "mappings" / "webshop.yaml").read_text() == original  # nothing changed
    assert not [p for p in (server.ws / "mappings").iterdir() if p.name.startswith(".")]
    with Client(server.url, tokens["admin"]) as api:
        assert api.upload_mapping("ws", "webshop.yaml", original)["size"] == len(original.encode())


def test_killed_during_a_run_the_job_fails_and_the_outputs_stay(tmp_path: Path, demo_run) -> None:  # noqa: ANN001
    ws = _copy(demo_run, tmp_path / "ws")
    admin = str(TokenStore.for_workspace(ws).create("ops", "admin").secret)
    before = {p.name: p.read_bytes() for p in (ws / "out").iterdir() if p.is_file()}
    server = Server(ws)
    try:
        with Client(server.url, admin) as api:
            job = api.start_run("ws")
            deadline = time.monotonic() + 120
            while api.job("ws", job["job_id"])["stage"] not in ("block", "compare", "score", "cluster"):
                assert time.monotonic() < deadline, api.job("ws", job["job_id"])
                time.sleep(0.1)
        server.kill(signal.SIGKILL)
        time.sleep(1.0)  # the worker dies with the server
        assert not re.search(r"integrate\.service\.worker .*" + re.escape(str(ws)),
                             subprocess.run(["ps", "-eo", "args"], capture_output=True, text=True).stdout)
    finally:
        server.kill()
    assert {p.name: p.read_bytes() for p in (ws / "out").iterdir() if p.is_file()} == before
    again = Server(ws)
    try:
        with Client(again.url, admin) as api:
            old = api.job("ws", job["job_id"])
            assert old["state"] == "failed" and "server stopped" in old["error"]
            done = api.run("ws")
            assert done["state"] == "succeeded", done
    finally:
        again.kill()


def test_non_loopback_address_needs_tokens(tmp_path: Path, demo_run) -> None:  # noqa: ANN001
    ws = _copy(demo_run, tmp_path / "ws")
    refused = subprocess.run([sys.executable, "-m", "integrate", "serve", str(ws), "--host", "0.0.0.0", "--port",
                              str(free_port())], capture_output=True, text=True, timeout=120)
    assert refused.returncode == 2 and "no tokens" in refused.stderr and "Traceback" not in refused.stderr
    bad_port = subprocess.run([sys.executable, "-m", "integrate", "serve", str(ws), "--port", "99999"],
                              capture_output=True, text=True, timeout=120)
    assert bad_port.returncode == 2 and "not a TCP port" in bad_port.stderr


def test_a_failed_run_keeps_the_outputs_and_says_why_and_cancel_stops(served) -> None:  # noqa: ANN001
    server, tokens = served
    before = {p.name: p.read_bytes() for p in (server.ws / "out").iterdir() if p.is_file()}
    events = server.ws / "demo_sources" / "rentals.jsonl"
    good = events.read_bytes()
    with Client(server.url, tokens["admin"]) as api:
        bad = server.ws / "bad.jsonl"
        bad.write_bytes(b'{"not": "closed"\n')
        api.upload_source("ws", "rentals", bad)
        failed = api.run("ws")
        assert failed["state"] == "failed" and failed["error"].startswith("error: ")
        assert "rentals.jsonl" in failed["error"]  # the message `integrate run` prints, naming the file
        assert {p.name: p.read_bytes() for p in (server.ws / "out").iterdir() if p.is_file()} == before
        events.write_bytes(good)
        job = api.start_run("ws")
        cancelled = api.cancel("ws", job["job_id"])
        assert cancelled["cancel_requested"] or cancelled["state"] == "cancelled"
        final = list(api.events("ws", job["job_id"]))[-1][1]
        assert final["state"] == "cancelled", final
        assert {p.name: p.read_bytes() for p in (server.ws / "out").iterdir() if p.is_file()} == before
        assert [j["state"] for j in api._call("GET", "/workspaces/ws/jobs")["jobs"]][:2] == ["cancelled", "failed"]
    docs = httpx.get(f"{server.url}/docs")
    assert docs.status_code == 200 and "/openapi.json" in docs.text
    assert not re.search(r"(src|href)=['\"]https?://", docs.text)  # nothing from a CDN
    assert "script-src 'self'" in docs.headers["content-security-policy"]


def test_token_commands(tmp_path: Path, demo_run) -> None:  # noqa: ANN001
    ws = _copy(demo_run, tmp_path / "ws")
    made = subprocess.run([sys.executable, "-m", "integrate", "serve", "token", "create", str(ws), "--name", "ana",
                           "--role", "reviewer"], capture_output=True, text=True, timeout=120)
    assert made.returncode == 0 and made.stdout.startswith("itk_")
    secret = made.stdout.strip()
    store = TokenStore.for_workspace(ws)
    assert store.verify(secret).role == "reviewer"
    assert secret not in (ws / ".integrate" / "state.sqlite").read_bytes().decode("latin-1")  # stored hashed only
    listed = subprocess.run([sys.executable, "-m", "integrate", "serve", "token", "list", str(ws)],
                            capture_output=True, text=True, timeout=120)
    assert "ana" in listed.stdout and "active" in listed.stdout
    revoked = subprocess.run([sys.executable, "-m", "integrate", "serve", "token", "revoke", str(ws), "1"],
                             capture_output=True, text=True, timeout=120)
    assert revoked.returncode == 0
    listed = subprocess.run([sys.executable, "-m", "integrate", "serve", "token", "list", str(ws)],
                            capture_output=True, text=True, timeout=120)
    assert "revoked 20" in listed.stdout
    again = subprocess.run([sys.executable, "-m", "integrate", "serve", "token", "revoke", str(ws), "1"],
                           capture_output=True, text=True, timeout=120)
    assert again.returncode == 2 and "no active token" in again.stderr


def test_a_look_up_asked_again_is_the_same_answer_with_the_same_guards(served) -> None:  # noqa: ANN001
    """The second look-up of an entity or a record is answered from the bytes the route made the first time
    (``service.answer_cache``): same body and headers, and still refused without a token, with a revoked
    token, and for another Host."""
    server, tokens = served
    crosswalk = pd.read_csv(server.ws / "out" / "crosswalk.csv", dtype=str)
    row = crosswalk.iloc[len(crosswalk) // 2]
    base = f"{server.url}/api/v1/workspaces/ws"
    store = TokenStore.for_workspace(server.ws)
    brief = store.create("brief", "reader")
    auth = {"Authorization": f"Bearer {brief.secret}"}
    for path in (f"/entities/{row['entity_id']}", f"/records/{row['source']}/{row['record_id']}"):
        first, again = httpx.get(base + path, headers=auth), httpx.get(base + path, headers=auth)
        assert first.status_code == again.status_code == 200
        assert first.content == again.content
        drop = {"date", "content-length"}
        assert {k: v for k, v in first.headers.items() if k not in drop} == {
            k: v for k, v in again.headers.items() if k not in drop}
        assert again.headers["x-content-type-options"] == "nosniff"
        assert again.json()["entity_id"] == row["entity_id"]
        refused = httpx.get(base + path)
        assert refused.status_code == 401 and refused.json()["error"]["reason"] == "no_token"
        assert httpx.get(base + path, headers={**auth, "Host": "evil.example:80"}).status_code == 421
    assert httpx.get(base + "/entities/E-NOT-THERE", headers=auth).status_code == 404
    assert store.revoke(brief.token_id)
    path = f"/entities/{row['entity_id']}"
    deadline = time.monotonic() + 10  # a revoked token stops working within auth.REMEMBER (2 s)
    while httpx.get(base + path, headers=auth).status_code == 200 and time.monotonic() < deadline:
        time.sleep(0.2)
    gone = httpx.get(base + path, headers=auth)
    assert gone.status_code == 401 and gone.json()["error"]["reason"] == "bad_token"
