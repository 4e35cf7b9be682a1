"""The demo-data generator is deterministic and its ground truth is complete."""
from __future__ import annotations

import hashlib
import json
import sqlite3
import subprocess
import sys
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

DEMO = Path(__file__).resolve().parents[1] / "demo_sources"
OUTPUTS = (
    "membership.xlsx",
    "webshop.csv",
    "rentals.jsonl",
    "events.sqlite",
    "rates.csv",
    "truth/crosswalk.csv",
    "truth/entities.csv",
    "truth/record_faults.csv",
)


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo")
    subprocess.run([sys.executable, str(DEMO / "generate.py"), "--out", str(out)],
                   check=True, capture_output=True, timeout=120)
    return out


def test_generator_reproduces_committed_files(regenerated: Path) -> None:
    produced = sorted(p.relative_to(regenerated).as_posix()
                      for p in regenerated.rglob("*") if p.is_file())
    assert produced == sorted(OUTPUTS)
    for name in OUTPUTS:
        assert sha256(regenerated / name) == sha256(DEMO / name), name


def source_record_ids() -> dict[str, list[str]]:
    workbook = openpyxl.load_workbook(DEMO / "membership.xlsx", read_only=True)
    rows = workbook["Members"].iter_rows(values_only=True)
    header = next(rows)
    member_col = header.index("Member No")
    membership = [row[member_col] for row in rows]
    workbook.close()

    webshop = pd.read_csv(DEMO / "webshop.csv", dtype=str, keep_default_na=False, sep=";")
    with open(DEMO / "rentals.jsonl", encoding="utf-8") as handle:
        rentals = [json.loads(line)["rental_ref"] for line in handle if line.strip()]
    connection = sqlite3.connect(DEMO / "events.sqlite")
    try:
        events = [str(row[0]) for row in
                  connection.execute("SELECT signup_id FROM signups ORDER BY signup_id")]
    finally:
        connection.close()
    return {"membership": membership, "webshop": webshop["customer_id"].tolist(),
            "rentals": rentals, "events": events}


def test_crosswalk_covers_every_record_exactly_once() -> None:
    crosswalk = pd.read_csv(DEMO / "truth" / "crosswalk.csv", dtype=str,
                            keep_default_na=False)
    assert list(crosswalk.columns) == ["source", "record_id", "entity_id", "twins"]
    assert not crosswalk.duplicated(["source", "record_id"]).any()
    ids = source_record_ids()
    assert set(crosswalk["source"]) == set(ids)
    for source, record_ids in ids.items():
        assert len(record_ids) == len(set(record_ids)), f"{source}: duplicate record ids"
        in_crosswalk = crosswalk.loc[crosswalk["source"] == source, "record_id"]
        assert sorted(in_crosswalk) == sorted(record_ids), source

    entities = pd.read_csv(DEMO / "truth" / "entities.csv", dtype=str,
                           keep_default_na=False)
    assert entities["entity_id"].is_unique
    assert set(crosswalk["entity_id"]) <= set(entities["entity_id"])


def make_workspace(out: Path, people: int, seed: int | None = None) -> Path:
    command = [sys.executable, str(DEMO / "generate.py"), "--people", str(people), "--out", str(out)]
    if seed is not None:
        command += ["--seed", str(seed)]
    subprocess.run(command, check=True, capture_output=True, timeout=300)
    return out


def test_big_workspace_is_deterministic_per_seed_and_complete(tmp_path: Path) -> None:
    first = make_workspace(tmp_path / "a", 400)
    again = make_workspace(tmp_path / "b", 400)
    other = make_workspace(tmp_path / "c", 400, seed=7)
    names = ["demo_sources/" + n for n in OUTPUTS] + ["mappings/canonical.yaml"]
    for name in names:
        assert sha256(first / name) == sha256(again / name), name
    assert sha256(first / "demo_sources/webshop.csv") != sha256(other / "demo_sources/webshop.csv")

    crosswalk = pd.read_csv(first / "demo_sources/truth/crosswalk.csv", dtype=str, keep_default_na=False)
    assert not crosswalk.duplicated(["source", "record_id"]).any()
    assert crosswalk["entity_id"].nunique() == 400  # everyone appears in at least one department
    workbook = openpyxl.load_workbook(first / "demo_sources/membership.xlsx", read_only=True)
    rows = list(workbook["Members"].iter_rows(values_only=True))
    workbook.close()
    assert rows[0][:2] == ("Member No", "Name")
    members = crosswalk.loc[crosswalk["source"] == "membership", "record_id"]
    assert sorted(r[0] for r in rows[1:]) == sorted(members)
    faults = pd.read_csv(first / "demo_sources/truth/record_faults.csv", dtype=str, keep_default_na=False)
    kinds = {f for text in faults["faults"] for f in text.split(";") if f}
    # the same kinds of damage as the committed demo
    assert {"typo_given", "nickname", "swapped_names", "within_source_duplicate"} <= kinds
