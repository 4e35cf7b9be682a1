"""The review API over HTTP: a real uvicorn server, real httpx clients, the real SQLite store."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import httpx
import pandas as pd

from integrate.review.store import KEY_COLUMNS, load_decisions

from .conftest import free_port, running_server


def _key(item: dict) -> dict:
    return dict(item["key"])


def test_two_reviewers_at_once_lose_nothing_and_see_conflicts(reviewed_ws: Path) -> None:
    with running_server(reviewed_ws) as url:
        # each reviewer works through the queue at the same time; claims keep them on different pairs
        results: dict[str, list[tuple[int, dict]]] = {"ana": [], "bo": []}
        shown: dict[str, list[str]] = {"ana": [], "bo": []}

        def review(name: str, decision: str) -> None:
            with httpx.Client(base_url=url, timeout=30) as client:
                for _ in range(12):
                    item = client.get("/api/next", params={"reviewer": name}).json()["item"]
                    shown[name].append(item["id"])
                    response = client.post("/api/decisions", json={**_key(item), "decision": decision,
                                                                   "reviewer": name})
                    results[name].append((response.status_code, response.json()))

        threads = [threading.Thread(target=review, args=("ana", "same")),
                   threading.Thread(target=review, args=("bo", "different"))]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        assert not set(shown["ana"]) & set(shown["bo"]), "two reviewers were handed the same pair"
        assert all(status == 201 for r in results.values() for status, _ in r)

        # now both decide the same five pairs at the same moment: one wins each, the other is told
        with httpx.Client(base_url=url, timeout=30) as client:
            queue = [client.get("/api/next", params={"reviewer": f"x{k}"}).json()["item"] for k in range(5)]
        barrier = threading.Barrier(2)
        race: dict[str, list[httpx.Response]] = {"ana": [], "bo": []}

        def decide_all(name: str, decision: str) -> None:
            with httpx.Client(base_url=url, timeout=30) as client:
                barrier.wait()
                for item in queue:
                    race[name].append(client.post("/api/decisions", json={
                        **_key(item), "decision": decision, "reviewer": name, "note": f"by {name}"}))

        threads = [threading.Thread(target=decide_all, args=("ana", "same")),
                   threading.Thread(target=decide_all, args=("bo", "different"))]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        for k in range(5):
            codes = sorted([race["ana"][k].status_code, race["bo"][k].status_code])
            assert codes == [201, 409]
            loser = race["ana"][k] if race["ana"][k].status_code == 409 else race["bo"][k]
            winner = race["bo"][k] if loser is race["ana"][k] else race["ana"][k]
            existing = loser.json()["existing"]
            assert existing["reviewer"] == winner.json()["decision"]["reviewer"]
            assert existing["note"] == f"by {existing['reviewer']}"

        listed = httpx.get(f"{url}/api/decisions").json()["decisions"]
    stored = load_decisions(reviewed_ws)
    assert len(stored) == len(listed) == 12 + 12 + 5
    assert not stored.duplicated(KEY_COLUMNS).any()
    assert (stored["reviewer"] == "ana").sum() >= 12 and (stored["reviewer"] == "bo").sum() >= 12


def test_a_decision_keeps_the_scores_shown(reviewed_ws: Path) -> None:
    pairs = pd.read_parquet(reviewed_ws / "out" / "pairs.parquet")
    with running_server(reviewed_ws) as url, httpx.Client(base_url=url) as client:
        item = client.get("/api/next", params={"reviewer": "ana"}).json()["item"]
        response = client.post("/api/decisions", json={**_key(item), "decision": "same", "reviewer": "ana",
                                                       "note": "same e-mail, same birth date"})
        assert response.status_code == 201
        row = response.json()["decision"]
    key = item["key"]
    forward = (pairs["source_a"] == key["source_a"]) & (pairs["record_id_a"] == key["record_id_a"]) & (
        pairs["source_b"] == key["source_b"]) & (pairs["record_id_b"] == key["record_id_b"])
    backward = (pairs["source_a"] == key["source_b"]) & (pairs["record_id_a"] == key["record_id_b"]) & (
        pairs["source_b"] == key["source_a"]) & (pairs["record_id_b"] == key["record_id_a"])
    source_row = pairs[forward | backward].iloc[0]
    assert row["probability"] == source_row["probability"]
    assert row["run_decision"] == "possible link"
    assert row["note"] == "same e-mail, same birth date"


def test_undo_and_filters(reviewed_ws: Path) -> None:
    with running_server(reviewed_ws) as url, httpx.Client(base_url=url) as client:
        first = client.get("/api/next", params={"reviewer": "ana"}).json()
        item, before = first["item"], first["progress"]
        made = client.post("/api/decisions", json={**_key(item), "decision": "different", "reviewer": "ana"})
        after = client.get("/api/next", params={"reviewer": "ana"}).json()
        assert after["progress"]["decided"] == before["decided"] + 1
        assert after["item"]["id"] != item["id"]
        assert client.post("/api/undo", json={"decision_id": made.json()["decision"]["id"],
                                              "reviewer": "bo"}).status_code == 409
        undone = client.post("/api/undo", json={"decision_id": made.json()["decision"]["id"], "reviewer": "ana"})
        assert undone.status_code == 200 and undone.json()["item"]["id"] == item["id"]
        assert client.post("/api/undo", json={"reviewer": "ana"}).status_code == 404

        by_source = client.get("/api/next", params={"reviewer": "ana", "source": "events"}).json()
        assert "events" in {by_source["item"]["key"]["source_a"], by_source["item"]["key"]["source_b"]}
        assert by_source["progress"]["total"] < before["total"]
        by_field = client.get("/api/next", params={"reviewer": "ana", "field": "birth_date"}).json()
        birth = next(f for f in by_field["item"]["fields"] if f["name"] == "birth_date")
        assert birth["a"] and birth["b"] and birth["a"] != birth["b"]

        assert client.get("/api/item", params={"id": "only-one-part"}).json()["error"]["reason"] == "bad_item_id"
        page = client.get("/")
        assert page.status_code == 200 and "script-src 'self'" in page.headers["content-security-policy"]
        for asset in ("/static/review.js", "/static/review.css"):
            text = client.get(asset).text
            assert "http://" not in text and "https://" not in text  # nothing is fetched from elsewhere
        assert client.get("/static/../app.py").status_code == 404


def _wait_for(url: str, seconds: float = 60) -> None:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        try:
            if httpx.get(f"{url}/api/session", timeout=2).status_code == 200:
                return
        except httpx.TransportError:
            time.sleep(0.2)
    raise AssertionError(f"review server at {url} did not start")


def _start(ws: Path, port: int) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "integrate", "review", str(ws), "--port", str(port),
                             "--reviewer", "ana"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            start_new_session=True)


def test_decisions_survive_killing_the_server(reviewed_ws: Path) -> None:
    port = free_port()
    url = f"http://127.0.0.1:{port}"
    server = _start(reviewed_ws, port)
    try:
        _wait_for(url)
        made = []
        with httpx.Client(base_url=url, timeout=30) as client:
            for decision in ("same", "different", "same", "defer", "different"):
                item = client.get("/api/next", params={"reviewer": "ana"}).json()["item"]
                response = client.post("/api/decisions", json={**_key(item), "decision": decision, "reviewer": "ana"})
                assert response.status_code == 201
                made.append(response.json()["decision"])
    finally:
        os.killpg(server.pid, signal.SIGKILL)  # no clean shutdown: the process dies mid-review
        server.wait(timeout=30)
    stored = load_decisions(reviewed_ws)
    assert sorted(stored["decision"]) == sorted(d["decision"] for d in made)
    port = free_port()
    url = f"http://127.0.0.1:{port}"
    again = _start(reviewed_ws, port)
    try:
        _wait_for(url)
        progress = httpx.get(f"{url}/api/next", params={"reviewer": "ana"}).json()["progress"]
        assert (progress["decided"], progress["deferred"]) == (4, 1)
    finally:
        os.killpg(again.pid, signal.SIGTERM)
        again.wait(timeout=30)
    assert b"review page: http://127.0.0.1:" in again.stdout.read()
    again.stdout.close()
    again.stderr.close()
    server.stdout.close()
    server.stderr.close()
