"""The review routes of the service over HTTP: a real uvicorn server, real httpx clients, the real SQLite store."""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import httpx
import pandas as pd

from integrate.review.store import KEY_COLUMNS, load_decisions

from .conftest import free_port, review_service, running_server


def _key(item: dict) -> dict:
    return dict(item["key"])


def _client(url: str, token: str) -> httpx.Client:
    return httpx.Client(base_url=url, timeout=30, headers={"Authorization": f"Bearer {token}"})


def test_two_reviewers_at_once_lose_nothing_and_see_conflicts(reviewed_ws: Path) -> None:
    names = ["ana", "bo"] + [f"x{k}" for k in range(5)]
    with review_service(reviewed_ws, names) as (url, tokens):
        # each reviewer works through the queue at the same time; held pairs keep them on different pairs
        results: dict[str, list[tuple[int, dict]]] = {"ana": [], "bo": []}
        shown: dict[str, list[str]] = {"ana": [], "bo": []}

        def review(name: str, decision: str) -> None:
            with _client(url, tokens[name]) as client:
                for _ in range(12):
                    item = client.post("/next", json={}).json()["item"]
                    shown[name].append(item["id"])
                    response = client.post("/decisions", json={**_key(item), "decision": decision})
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
        queue = []
        for k in range(5):
            with _client(url, tokens[f"x{k}"]) as client:
                queue.append(client.post("/next", json={}).json()["item"])
        barrier = threading.Barrier(2)
        race: dict[str, list[httpx.Response]] = {"ana": [], "bo": []}

        def decide_all(name: str, decision: str) -> None:
            with _client(url, tokens[name]) as client:
                barrier.wait()
                for item in queue:
                    race[name].append(client.post("/decisions", json={
                        **_key(item), "decision": decision, "note": f"by {name}"}))

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

        with _client(url, tokens["ana"]) as client:
            listed = client.get("/decisions").json()["decisions"]
    stored = load_decisions(reviewed_ws)
    assert len(stored) == len(listed) == 12 + 12 + 5
    assert not stored.duplicated(KEY_COLUMNS).any()
    assert (stored["reviewer"] == "ana").sum() >= 12 and (stored["reviewer"] == "bo").sum() >= 12


def test_four_reviewers_on_overlapping_pairs_lose_and_duplicate_nothing(reviewed_ws: Path) -> None:
    """Four reviewers post decisions on the same 40 pairs for a bounded time (threads, loopback only)."""
    names = ["r0", "r1", "r2", "r3"]
    with review_service(reviewed_ws, names) as (url, tokens):
        with _client(url, tokens["r0"]) as client:
            items = client.get("/queue", params={"limit": 40}).json()["items"]
        keys = [{c: it[c] for c in KEY_COLUMNS} for it in items]
        acknowledged: dict[str, list[dict]] = {n: [] for n in names}
        conflicts: dict[str, list[dict]] = {n: [] for n in names}
        other: list[tuple[str, int, str]] = []
        # bounded: 8 s of contention by default; INTEGRATE_REVIEWERS_SECONDS=30 for the longer
        # measurement in docs/RELIABILITY.md
        seconds = float(os.environ.get("INTEGRATE_REVIEWERS_SECONDS", "8"))
        began = time.monotonic()
        deadline = began + seconds
        barrier = threading.Barrier(len(names))

        def reviewer(index: int) -> None:
            name = names[index]
            with _client(url, tokens[name]) as client:
                barrier.wait()
                step = 0
                while time.monotonic() < deadline and step < 200 * seconds:
                    key = keys[(step * (index + 1) + index) % len(keys)]  # each walks the pairs in its own order
                    decision = ("same", "different", "defer")[(step + index) % 3]
                    response = client.post("/decisions", json={**key, "decision": decision})
                    if response.status_code == 201:
                        acknowledged[name].append(response.json()["decision"])
                    elif response.status_code == 409:
                        conflicts[name].append(response.json()["existing"])
                    else:
                        other.append((name, response.status_code, response.text[:200]))
                    step += 1

        threads = [threading.Thread(target=reviewer, args=(i,)) for i in range(len(names))]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
    assert other == []
    stored = load_decisions(reviewed_ws)
    assert not stored.duplicated(KEY_COLUMNS).any()  # 0 duplicated
    # 0 lost: the last acknowledged write on each pair is what stands (writes on one pair are serialised)
    last: dict[tuple, dict] = {}
    for rows in acknowledged.values():
        for row in rows:
            k = tuple(row[c] for c in KEY_COLUMNS)
            if k not in last or (row["revision"], row["decided_at"]) > (last[k]["revision"], last[k]["decided_at"]):
                last[k] = row
    standing = {tuple(r[c] for c in KEY_COLUMNS): r for r in stored.to_dict("records")}
    assert set(last) == set(standing)
    for k, row in last.items():
        assert (standing[k]["decision"], standing[k]["reviewer"]) == (row["decision"], row["reviewer"])
    # every conflict names another reviewer's firm decision
    for name, rows in conflicts.items():
        assert all(r["reviewer"] != name and r["decision"] in ("same", "different") for r in rows)
    assert sum(len(r) for r in conflicts.values()) > 0 and sum(len(r) for r in acknowledged.values()) > 0
    print(f"4 reviewers, {time.monotonic() - began:.1f} s, {len(keys)} shared pairs: "
          f"{sum(len(r) for r in acknowledged.values())} decisions acknowledged, "
          f"{sum(len(r) for r in conflicts.values())} answered 409, {len(stored)} stored, 0 lost, 0 duplicated")


def test_a_decision_keeps_the_scores_shown(reviewed_ws: Path) -> None:
    pairs = pd.read_parquet(reviewed_ws / "out" / "pairs.parquet")
    with review_service(reviewed_ws, ["ana"]) as (url, tokens), _client(url, tokens["ana"]) as client:
        item = client.post("/next", json={}).json()["item"]
        response = client.post("/decisions", json={**_key(item), "decision": "same",
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
    assert row["reviewer"] == "ana"  # the token's holder, whatever a client might claim


def test_undo_is_per_reviewer_and_filters_work(reviewed_ws: Path) -> None:
    with review_service(reviewed_ws, ["ana", "bo"]) as (url, tokens), _client(url, tokens["ana"]) as client, \
            _client(url, tokens["bo"]) as bo:
        first = client.post("/next", json={}).json()
        item, before = first["item"], first["progress"]
        made = client.post("/decisions", json={**_key(item), "decision": "different"})
        after = client.post("/next", json={}).json()
        assert after["progress"]["decided"] == before["decided"] + 1
        assert after["item"]["id"] != item["id"]
        assert bo.post("/undo", json={"decision_id": made.json()["decision"]["id"]}).status_code == 409
        undone = client.post("/undo", json={"decision_id": made.json()["decision"]["id"]})
        assert undone.status_code == 200 and undone.json()["item"]["id"] == item["id"]
        assert client.post("/undo", json={}).status_code == 404

        by_source = client.post("/next", json={"source": "events"}).json()
        assert "events" in {by_source["item"]["key"]["source_a"], by_source["item"]["key"]["source_b"]}
        assert by_source["progress"]["total"] < before["total"]
        by_field = client.post("/next", json={"field": "birth_date"}).json()
        birth = next(f for f in by_field["item"]["fields"] if f["name"] == "birth_date")
        assert birth["a"] and birth["b"] and birth["a"] != birth["b"]
        assert client.post("/next", json={"source": "nowhere"}).status_code == 422  # an unknown name is an error

        pair = client.get("/pair", params=_key(item)).json()
        assert pair["id"] == item["id"] and all(r["entity_id"] for r in pair["records"])
        assert client.get("/pair", params={**_key(item), "record_id_a": "no-such"}).json()["error"]["reason"] \
            == "unknown_pair"


def test_looking_at_the_next_pair_writes_nothing(reviewed_ws: Path) -> None:
    """GET .../next is read only: it holds no pair (state changes only in POST)."""
    from integrate.review.store import DecisionStore, claim_table

    store = DecisionStore.for_workspace(reviewed_ws)
    with review_service(reviewed_ws, ["ana", "bo"]) as (url, tokens), _client(url, tokens["ana"]) as ana, \
            _client(url, tokens["bo"]) as bo:
        peek = ana.get("/next").json()["item"]
        with store.engine.connect() as conn:
            assert conn.execute(claim_table.select()).all() == []
        assert bo.get("/next").json()["item"]["id"] == peek["id"]  # nobody holds it
        held = ana.post("/next", json={}).json()["item"]
        assert bo.post("/next", json={}).json()["item"]["id"] != held["id"]  # now ana holds it


def test_the_page_and_its_guards(reviewed_ws: Path) -> None:
    with running_server(reviewed_ws) as page_url:
        base = page_url.split("/review/")[0]
        api = base + "/api/v1/workspaces/ws/review"
        token = page_url.split("#token=")[1]
        page = httpx.get(page_url.split("#")[0])
        assert page.status_code == 200 and "script-src 'self'" in page.headers["content-security-policy"]
        assert not re.search(r"<script(?![^>]*\bsrc=)", page.text)  # no inline script ...
        assert not re.search(r"\son[a-z]+\s*=", page.text)  # ... and no inline event handlers
        for asset in ("/static/review.js", "/static/review.css"):
            text = httpx.get(base + asset).text
            assert "http://" not in text and "https://" not in text  # nothing is fetched from elsewhere
        assert httpx.get(base + "/static/../app.py").status_code == 404
        auth = {"Authorization": f"Bearer {token}"}
        # DNS rebinding: another host name is refused, reads and writes alike
        assert httpx.get(api + "/decisions", headers={**auth, "Host": "attacker.example"}).status_code == 421
        # a write with a foreign Origin is refused; a form post (not JSON) is refused too
        item = httpx.get(api + "/next", headers=auth).json()["item"]
        foreign = httpx.post(api + "/decisions", json={**_key(item), "decision": "same"},
                             headers={**auth, "Origin": "http://attacker.example"})
        assert foreign.status_code == 403 and foreign.json()["error"]["reason"] == "foreign_origin"
        form = httpx.post(api + "/decisions", data={**_key(item), "decision": "same"}, headers=auth)
        assert form.status_code == 422
        # no token, a wrong token: refused
        assert httpx.post(api + "/decisions", json={**_key(item), "decision": "same"}).status_code == 401
        assert httpx.get(api + "/decisions", headers={"Authorization": "Bearer nope"}).status_code == 401
        # a body over the limit is refused before it is read
        big = httpx.post(api + "/decisions", content=b"{" + b" " * (2 * 1024 * 1024) + b"}",
                         headers={**auth, "Content-Type": "application/json"})
        assert big.status_code == 413
        ok = httpx.post(api + "/decisions", json={**_key(item), "decision": "same"}, headers=auth)
        assert ok.status_code == 201 and ok.json()["decision"]["reviewer"] == "ana"
    assert len(load_decisions(reviewed_ws)) == 1


def _start(ws: Path, port: int) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "integrate", "review", str(ws), "--port", str(port),
                             "--reviewer", "ana"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            start_new_session=True, text=True)


def _page_address(server: subprocess.Popen) -> str:
    line = server.stdout.readline()  # the server prints its address once it is listening
    found = re.search(r"(http://\S+)", line)
    assert found, line + server.stderr.read()
    return found.group(1)


def test_decisions_acknowledged_survive_killing_the_server(reviewed_ws: Path) -> None:
    """SIGKILL while decisions are being posted: every decision acknowledged with 201 is in the store."""
    server = _start(reviewed_ws, free_port())
    made: list[dict] = []
    try:
        address = _page_address(server)
        api = address.split("/review/")[0] + "/api/v1/workspaces/ws/review"
        headers = {"Authorization": "Bearer " + address.split("#token=")[1]}
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            try:
                if httpx.get(api + "/session", headers=headers, timeout=2).status_code == 200:
                    break
            except httpx.TransportError:
                time.sleep(0.2)
        stop = threading.Event()

        def post() -> None:
            with httpx.Client(base_url=api, headers=headers, timeout=10) as client:
                while not stop.is_set() and len(made) < 300:
                    try:
                        item = client.post("/next", json={}).json()["item"]
                        response = client.post("/decisions", json={**_key(item), "decision": "different"})
                    except (httpx.TransportError, ValueError):
                        return  # the server is gone
                    if response.status_code == 201:
                        made.append(response.json()["decision"])

        poster = threading.Thread(target=post)
        poster.start()
        while len(made) < 15 and poster.is_alive():
            time.sleep(0.02)
        os.killpg(server.pid, signal.SIGKILL)  # no clean shutdown: the process dies mid-review
        server.wait(timeout=30)
        stop.set()
        poster.join(timeout=30)
    finally:
        if server.poll() is None:
            os.killpg(server.pid, signal.SIGKILL)
            server.wait(timeout=30)
        server.stdout.close()
        server.stderr.close()
    assert len(made) >= 15
    stored = load_decisions(reviewed_ws)
    acknowledged = {tuple(d[c] for c in KEY_COLUMNS) for d in made}
    kept = {tuple(r) for r in stored[KEY_COLUMNS].itertuples(index=False)}
    assert acknowledged <= kept, f"{len(acknowledged - kept)} acknowledged decisions lost"


def test_review_port_errors_are_clear(reviewed_ws: Path) -> None:
    bad = subprocess.run([sys.executable, "-m", "integrate", "review", str(reviewed_ws), "--port", "99999"],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and "not a TCP port" in bad.stderr and "Traceback" not in bad.stderr
    import socket

    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen(1)
        port = taken.getsockname()[1]
        busy = subprocess.run([sys.executable, "-m", "integrate", "review", str(reviewed_ws), "--port", str(port)],
                              capture_output=True, text=True, timeout=120)
    assert busy.returncode == 2 and "already in use" in busy.stderr and "Traceback" not in busy.stderr
    assert "http://" not in busy.stdout  # no address is printed that does not work
