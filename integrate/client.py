"""A Python client for ``integrate serve`` (httpx).

Example (against a running server; the token from ``integrate serve token create``):

    from integrate.client import Client

    with Client("http://127.0.0.1:8000", token) as api:
        job = api.run("demo", wait=True)            # start a run and follow it to the end
        entity = api.record_entity("demo", "webshop", "W00017")
        story = api.entity("demo", entity["entity_id"])  # merged row, members, provenance
        pair = api.next_pair("demo")["item"]
        api.decide("demo", pair["key"], "same")
        # a suspicious cluster as a whole: one decision on all its records
        # api.decide_cluster("demo", cluster_id, "split")   # or "keep together"

Every error response raises ``ServiceError`` with the status and the server's JSON error.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx


class ServiceError(Exception):
    def __init__(self, status: int, body: Any) -> None:
        self.status = status
        self.body = body
        error = body.get("error", {}) if isinstance(body, dict) else {}
        super().__init__(f"HTTP {status}: {error.get('message', body)}")


class Client:
    def __init__(self, url: str, token: str | None = None, *, timeout: float = 60.0) -> None:
        headers = {"Authorization": f"Bearer {token}"} if token else {}
        self.http = httpx.Client(base_url=url.rstrip("/") + "/api/v1", headers=headers, timeout=timeout)

    def __enter__(self) -> Client:
        return self

    def __exit__(self, *_: object) -> None:
        self.close()

    def close(self) -> None:
        self.http.close()

    def _call(self, method: str, path: str, **kwargs: Any) -> Any:
        response = self.http.request(method, path, **kwargs)
        if response.status_code >= 400:
            try:
                body = response.json()
            except ValueError:
                body = response.text
            raise ServiceError(response.status_code, body)
        if response.headers.get("content-type", "").startswith("application/json"):
            return response.json()
        return response.content

    # -- workspaces and uploads ------------------------------------------------------------------
    def me(self) -> dict[str, Any]:
        return self._call("GET", "/me")

    def workspaces(self) -> list[dict[str, Any]]:
        return self._call("GET", "/workspaces")

    def workspace(self, ws: str) -> dict[str, Any]:
        return self._call("GET", f"/workspaces/{ws}")

    def upload_source(self, ws: str, source: str, path: str | Path) -> dict[str, Any]:
        with open(path, "rb") as handle:
            return self._call("PUT", f"/workspaces/{ws}/sources/{source}/file",
                              files={"file": (Path(path).name, handle)})

    def upload_mapping(self, ws: str, name: str, text: str | bytes) -> dict[str, Any]:
        data = text.encode("utf-8") if isinstance(text, str) else text
        return self._call("PUT", f"/workspaces/{ws}/mappings/{name}", content=data,
                          headers={"Content-Type": "application/octet-stream"})

    # -- runs ------------------------------------------------------------------------------------
    def start_run(self, ws: str, *, incremental: bool = False, refit: bool = False) -> dict[str, Any]:
        """Start a run (``incremental``: build on the last run, see ``integrate run --incremental``)."""
        params = {k: "true" for k, v in (("incremental", incremental), ("refit", refit)) if v}
        return self._call("POST", f"/workspaces/{ws}/runs", params=params)

    def job(self, ws: str, job_id: str) -> dict[str, Any]:
        return self._call("GET", f"/workspaces/{ws}/jobs/{job_id}")

    def cancel(self, ws: str, job_id: str) -> dict[str, Any]:
        return self._call("POST", f"/workspaces/{ws}/jobs/{job_id}/cancel")

    def events(self, ws: str, job_id: str) -> Iterator[tuple[str, dict[str, Any]]]:
        """The job's server-sent events as (event, job) until the stream ends."""
        with self.http.stream("GET", f"/workspaces/{ws}/jobs/{job_id}/events", timeout=None) as response:
            if response.status_code >= 400:
                response.read()
                raise ServiceError(response.status_code, response.json())
            event = "message"
            for line in response.iter_lines():
                if line.startswith("event: "):
                    event = line[7:]
                elif line.startswith("data: "):
                    yield event, json.loads(line[6:])

    def run(self, ws: str, *, wait: bool = True) -> dict[str, Any]:
        """Start a run; with ``wait`` follow its events and return the finished job."""
        job = self.start_run(ws)
        if not wait:
            return job
        for event, state in self.events(ws, job["job_id"]):
            job = state
            if event == "end":
                break
        return job

    def runs(self, ws: str) -> list[dict[str, Any]]:
        return self._call("GET", f"/workspaces/{ws}/runs")["runs"]

    # -- results ---------------------------------------------------------------------------------
    def entity(self, ws: str, entity_id: str) -> dict[str, Any]:
        return self._call("GET", f"/workspaces/{ws}/entities/{entity_id}")

    def record_entity(self, ws: str, source: str, record_id: str) -> dict[str, Any]:
        return self._call("GET", f"/workspaces/{ws}/records/{source}/{record_id}")

    def search(self, ws: str, field: str, value: str, *, prefix: bool = False, limit: int = 50) -> list[dict]:
        params = {"field": field, "value": value, "match": "prefix" if prefix else "exact", "limit": limit}
        return self._call("GET", f"/workspaces/{ws}/entities", params=params)["entities"]

    def download(self, ws: str, table: str, fmt: str = "csv", run: int | None = None) -> bytes:
        params: dict[str, Any] = {"format": fmt}
        if run is not None:
            params["run"] = run
        return self._call("GET", f"/workspaces/{ws}/outputs/{table}", params=params)

    # -- review ----------------------------------------------------------------------------------
    def queue(self, ws: str, **params: Any) -> dict[str, Any]:
        return self._call("GET", f"/workspaces/{ws}/review/queue", params=params)

    def next_pair(self, ws: str, *, queue: str = "possible", hold: bool = True, **filters: Any) -> dict[str, Any]:
        """The next pair to review; ``hold`` keeps it from other reviewers for a while (a POST)."""
        if hold:
            return self._call("POST", f"/workspaces/{ws}/review/next", json={"queue": queue, **filters})
        return self._call("GET", f"/workspaces/{ws}/review/next", params={"queue": queue, **filters})

    def pair(self, ws: str, key: dict[str, str]) -> dict[str, Any]:
        return self._call("GET", f"/workspaces/{ws}/review/pair", params=key)

    def decide(self, ws: str, key: dict[str, str], decision: str, note: str | None = None) -> dict[str, Any]:
        return self._call("POST", f"/workspaces/{ws}/review/decisions",
                          json={**key, "decision": decision, "note": note})["decision"]

    def undo(self, ws: str, decision_id: int | None = None) -> dict[str, Any]:
        return self._call("POST", f"/workspaces/{ws}/review/undo", json={"decision_id": decision_id})

    def decisions(self, ws: str) -> list[dict[str, Any]]:
        return self._call("GET", f"/workspaces/{ws}/review/decisions")["decisions"]

    def cluster(self, ws: str, cluster_id: str) -> dict[str, Any]:
        """A suspicious cluster as a whole: records side by side, its pairs, the proposed split."""
        return self._call("GET", f"/workspaces/{ws}/review/clusters/{cluster_id}")

    def decide_cluster(self, ws: str, cluster_id: str, choice: str, *, part_a: list[tuple[str, str]] | None = None,
                       note: str | None = None) -> dict[str, Any]:
        """One decision on a whole cluster: ``choice`` 'keep together' or 'split' (as proposed, or with
        ``part_a`` as (source, record ID) pairs); returns the stored cluster decision."""
        body: dict[str, Any] = {"choice": choice, "note": note}
        if part_a is not None:
            body["part_a"] = [{"source": s, "record_id": r} for s, r in part_a]
        return self._call("POST", f"/workspaces/{ws}/review/clusters/{cluster_id}/decision",
                          json=body)["cluster_decision"]

    def undo_cluster(self, ws: str, cluster_decision_id: int | None = None) -> dict[str, Any]:
        """Undo a cluster decision (by default your most recent) with every pairwise decision it stored."""
        return self._call("POST", f"/workspaces/{ws}/review/clusters/undo",
                          json={"cluster_decision_id": cluster_decision_id})
