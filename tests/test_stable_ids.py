"""Stable entity IDs across runs, the change summary, and independence from row order.

The unit cases use invented record keys; the end-to-end cases run the real pipeline twice on a
copy of the demo workspace, the second time with the web shop's file replaced by a later export.
Expected change counts are computed here from the two crosswalks with plain sets, not by the code
under test.
"""

from __future__ import annotations

import csv
import random
import re
import sqlite3
from collections import defaultdict
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from openpyxl import load_workbook

from integrate import cli, run
from integrate.cluster import entity_id_for
from integrate.ids import ChangeSummary, assign_stable_ids, canonical_order, mint_id
from integrate.outputs.report import CHANGE_LABELS
from integrate.state import STATE_URL_ENV, StateStore

from .conftest import REPO, copy_workspace

TRUTH = REPO / "demo_sources" / "truth" / "crosswalk.csv"


@pytest.fixture(autouse=True)
def _default_state_url(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv(STATE_URL_ENV, raising=False)


def current(rows: list[tuple[str, str]]) -> pd.DataFrame:
    """(record_id, cluster label) rows of one source 's'."""
    return pd.DataFrame({"source": "s", "record_id": [r for r, _ in rows], "cluster": [c for _, c in rows]})


def previous(rows: list[tuple[str, str]]) -> pd.DataFrame:
    return pd.DataFrame({"source": "s", "record_id": [r for r, _ in rows], "entity_id": [e for _, e in rows]})


def test_first_run_ids_come_from_the_smallest_record_key() -> None:
    ids, summary, changes = assign_stable_ids(current([("2", "x"), ("1", "x"), ("3", "y")]), None)
    assert ids.tolist() == [entity_id_for(["s\x1f1"])] * 2 + [entity_id_for(["s\x1f3"])]
    assert (summary.created, summary.ids_minted, summary.previous_run) == (2, 2, None)
    assert changes.empty  # a first run lists nothing: everything is new


def test_split_keeps_the_id_on_the_larger_part() -> None:
    old = previous([("1", "E1"), ("2", "E1"), ("3", "E1")])
    ids, summary, changes = assign_stable_ids(current([("1", "a"), ("2", "a"), ("3", "b")]), old, {"E1"}, 7)
    assert ids.tolist()[:2] == ["E1", "E1"] and ids.iloc[2] not in {"E1"}
    assert (summary.split, summary.split_parts, summary.ids_kept, summary.ids_minted) == (1, 2, 1, 1)
    assert summary.previous_run == 7 and summary.records_moved == 1
    split_row = changes[changes["change"] == "split"].iloc[0]
    assert split_row["entity_id"] == "E1" and set(split_row["related_ids"].split()) == {"E1", ids.iloc[2]}


def test_merge_keeps_the_id_sharing_most_records() -> None:
    old = previous([("1", "E5"), ("2", "E1"), ("3", "E1"), ("4", "E9")])
    ids, summary, changes = assign_stable_ids(current([("1", "m"), ("2", "m"), ("3", "m"), ("4", "k")]), old)
    assert ids.tolist() == ["E1", "E1", "E1", "E9"]
    assert (summary.merged, summary.unchanged, summary.retired, summary.records_moved) == (1, 1, 0, 1)
    merged = changes[changes["change"] == "merged"].iloc[0]
    assert (merged["entity_id"], merged["related_ids"], merged["records_removed"]) == ("E1", "E1 E5", 0)


def test_equal_overlap_goes_to_the_smaller_previous_id() -> None:
    # cluster m shares one record with E2 and one with E1: tie broken by the ID's text order
    old = previous([("1", "E2"), ("2", "E1")])
    ids, _, _ = assign_stable_ids(current([("1", "m"), ("2", "m")]), old)
    assert ids.tolist() == ["E1", "E1"]


def test_an_id_once_issued_is_never_issued_again() -> None:
    # E_first was made from record 1's key; record 1 now stands alone while 2 keeps E_first
    first = mint_id("s\x1f1", set())
    old = previous([("1", first), ("2", first), ("3", first)])
    ids, summary, _ = assign_stable_ids(current([("1", "a"), ("2", "b"), ("3", "b")]), old, {first, "E0"})
    assert ids.tolist()[1:] == [first, first]
    assert ids.iloc[0] != first and ids.iloc[0] == mint_id("s\x1f1", {first, "E0"})


def test_added_removed_and_retired() -> None:
    old = previous([("1", "E1"), ("2", "E1"), ("9", "E9")])
    ids, summary, changes = assign_stable_ids(current([("1", "a"), ("2", "a"), ("3", "a"), ("4", "b")]), old)
    assert ids.tolist()[:3] == ["E1"] * 3
    assert (summary.changed, summary.created, summary.retired) == (1, 1, 1)
    assert (summary.records_added, summary.records_removed) == (2, 1)
    assert changes.set_index("entity_id").loc["E9", "change"] == "retired"
    assert changes.set_index("entity_id").loc["E1", ["records_added", "records_removed"]].tolist() == [1, 0]


def test_canonical_order_sorts_numeric_ids_as_numbers() -> None:
    records = pd.DataFrame({"_source": ["b", "a", "a", "a"], "_record_id": ["1", "10", "9", "x"], "v": [1, 2, 3, 4]})
    assert canonical_order(records)["_record_id"].tolist() == ["9", "x", "10", "1"]  # length, then text


@st.composite
def histories(draw: st.DrawFn) -> tuple[pd.DataFrame, pd.DataFrame]:
    n_old = draw(st.integers(1, 12))
    old = previous([(str(k), f"E{draw(st.integers(0, 4))}") for k in range(n_old)])
    keys = draw(st.lists(st.integers(0, 15), min_size=1, max_size=14, unique=True))
    cur = current([(str(k), f"c{draw(st.integers(0, 5))}") for k in keys])
    return cur, old


@settings(max_examples=150, deadline=None)
@given(histories(), st.randoms(use_true_random=False))
def test_ids_are_one_per_cluster_and_ignore_row_order(case: tuple[pd.DataFrame, pd.DataFrame], rnd) -> None:  # noqa: ANN001
    cur, old = case
    ids, summary, _ = assign_stable_ids(cur, old, set(old["entity_id"]))
    # every record gets exactly one ID, the same for its whole cluster, different between clusters
    assert ids.notna().all() and len(ids) == len(cur)
    assert (cur.assign(id=ids).groupby("cluster")["id"].nunique() == 1).all()
    assert cur.assign(id=ids).drop_duplicates("cluster")["id"].is_unique
    kept = set(ids) & set(old["entity_id"])
    assert summary.ids_kept == len(kept) and summary.ids_minted == ids.nunique() - len(kept)
    order = list(range(len(cur)))
    rnd.shuffle(order)
    shuffled = cur.iloc[order]
    again, summary_again, _ = assign_stable_ids(shuffled, old.sample(frac=1, random_state=3), set(old["entity_id"]))
    assert dict(zip(shuffled["record_id"], again)) == dict(zip(cur["record_id"], ids))
    assert summary_again == summary


# --- two runs on the demo ----------------------------------------------------------------------

def _rewrite_webshop(path: Path, decided_keys: set[str]) -> dict[str, list[str]]:
    """A later export of the web shop: 3 accounts closed, 10 with new orders, 2 new e-mails,
    3 new customers and 3 second accounts of existing customers. Returns the IDs per kind."""
    with path.open(encoding="utf-8", newline="") as handle:
        rows = list(csv.DictReader(handle, delimiter=";"))  # semicolons and decimal commas
    fields = list(rows[0])
    usable = [r for r in rows if r["customer_id"] not in decided_keys]
    removed = [r["customer_id"] for r in usable[100:103]]
    spend_changed = [r["customer_id"] for r in usable[200:210]]
    email_changed = [r["customer_id"] for r in usable[300:302]]
    kept = [r for r in rows if r["customer_id"] not in removed]
    for r in kept:
        if r["customer_id"] in spend_changed:
            spend = float(r["lifetime_spend"].replace(".", "").replace(",", ".") or 0)
            r["lifetime_spend"] = f"{spend + 42.50:.2f}".replace(".", ",")
            r["last_order"] = "2026-11-20"
        if r["customer_id"] in email_changed:
            r["email"] = f"new.{r['customer_id'].lower()}@mail.example.com"
    # invented new customers (reserved example domains, no phone)
    new_people = [("Quillon", "Ashgrove"), ("Maribeth", "Tindlewick"), ("Orsolya", "Fenchurch-Vale")]
    added = []
    for k, (given_name, family) in enumerate(new_people):
        cid = f"W9{k:05d}"
        added.append(cid)
        kept.append({**dict.fromkeys(fields, ""), "customer_id": cid, "first_name": given_name, "last_name": family,
                     "email": f"{given_name.lower()}.{family.lower()}@example.org", "lifetime_spend": "12,00",
                     "last_order": "2026-11-15", "marketing_opt_in": "N"})
    for k, source_row in enumerate(usable[400:403]):
        cid = f"W8{k:05d}"
        added.append(cid)
        kept.append({**source_row, "customer_id": cid, "lifetime_spend": "5,00", "last_order": "2026-11-25"})
    with path.open("w", encoding="utf-8", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=fields, lineterminator="\n", delimiter=";")
        writer.writeheader()
        writer.writerows(kept)
    return {"removed": removed, "changed": spend_changed + email_changed, "added": added}


def expected_changes(before: pd.DataFrame, after: pd.DataFrame) -> dict[str, int]:
    """The change summary worked out with plain sets from two crosswalks."""
    old_of = {(s, r): e for s, r, e in zip(before["source"], before["record_id"], before["entity_id"])}
    new_of = {(s, r): e for s, r, e in zip(after["source"], after["record_id"], after["entity_id"])}
    old_members: dict[str, set] = defaultdict(set)
    new_members: dict[str, set] = defaultdict(set)
    for key, entity in old_of.items():
        old_members[entity].add(key)
    for key, entity in new_of.items():
        new_members[entity].add(key)
    came_from = {n: {old_of[k] for k in keys if k in old_of} for n, keys in new_members.items()}
    went_to = {e: {new_of[k] for k in keys if k in new_of} for e, keys in old_members.items()}
    old_sets = {frozenset(keys) for keys in old_members.values()}
    singles = [n for n, src in came_from.items() if len(src) == 1]
    split_parts = sum(1 for n in singles if len(went_to[next(iter(came_from[n]))]) > 1)
    unchanged = sum(1 for keys in new_members.values() if frozenset(keys) in old_sets)
    kept_ids = set(new_members) & set(old_members)
    return {
        "entities": len(new_members),
        "created": sum(1 for src in came_from.values() if not src),
        "merged": sum(1 for src in came_from.values() if len(src) > 1),
        "split": sum(1 for dst in went_to.values() if len(dst) > 1),
        "retired": sum(1 for dst in went_to.values() if not dst),
        "unchanged": unchanged,
        "split_parts": split_parts,
        "changed": len(singles) - split_parts - unchanged,
        "ids_kept": len(kept_ids),
        "ids_minted": len(new_members) - len(kept_ids),
        "records_added": len(set(new_of) - set(old_of)),
        "records_removed": len(set(old_of) - set(new_of)),
        "records_moved": sum(1 for k in set(new_of) & set(old_of) if new_of[k] != old_of[k]),
    }


@dataclass
class TwoRuns:
    root: Path
    first: object
    second: object
    before: pd.DataFrame
    after: pd.DataFrame
    decided: tuple[tuple[str, str], tuple[str, str]]
    edits: dict[str, list[str]]


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory: pytest.TempPathFactory) -> TwoRuns:
    from integrate.review.store import DecisionStore, NewDecision

    root = copy_workspace(tmp_path_factory.mktemp("two_runs"))
    first = run(root)
    before = pd.read_csv(root / "out" / "crosswalk.csv", dtype=str)
    # a cluster holding two true people (a wrong merge); a reviewer keeps one record of each apart
    truth = pd.read_csv(TRUTH, dtype=str)
    joined = before.merge(truth, on=["source", "record_id"], suffixes=("", "_true"))
    people = joined.groupby("entity_id")["entity_id_true"].nunique()
    wrong = sorted(people[people == 2].index)[0]
    members = joined[joined["entity_id"] == wrong].sort_values(["entity_id_true", "source", "record_id"])
    one, other = (members.drop_duplicates("entity_id_true")[["source", "record_id"]].itertuples(index=False))
    DecisionStore.for_workspace(root).record(NewDecision(
        source_a=one.source, record_id_a=one.record_id, source_b=other.source, record_id_b=other.record_id,
        decision="different", reviewer="test"))
    decided_ids = {one.record_id, other.record_id}
    edits = _rewrite_webshop(root / "demo_sources" / "webshop.csv", decided_ids)
    second = run(root)
    after = pd.read_csv(root / "out" / "crosswalk.csv", dtype=str)
    return TwoRuns(root, first, second, before, after, ((one.source, one.record_id), (other.source, other.record_id)),
                   edits)


def test_second_run_change_summary_counts_are_exact(two_runs: TwoRuns) -> None:
    got = two_runs.second.changes
    expected = expected_changes(two_runs.before, two_runs.after)
    assert {k: getattr(got, k) for k in expected} == expected
    assert got.previous_run == two_runs.first.run_id == 1 and two_runs.second.run_id == 2
    # records: exactly the rows the later export added, removed and changed
    assert expected["records_added"] == 6 and expected["records_removed"] == 3
    assert got.records_changed == len(two_runs.edits["changed"]) == 12
    # the later export's new people are new entities
    assert expected["created"] >= 3


def test_wrongly_merged_people_are_kept_apart(two_runs: TwoRuns) -> None:
    (sa, ra), (sb, rb) = two_runs.decided
    before = two_runs.before.set_index(["source", "record_id"])["entity_id"]
    after = two_runs.after.set_index(["source", "record_id"])["entity_id"]
    assert before[(sa, ra)] == before[(sb, rb)]
    assert after[(sa, ra)] != after[(sb, rb)]
    assert two_runs.second.changes.split >= 1
    splits = pd.read_csv(two_runs.root / "out" / "splits.csv", dtype=str)
    assert len(splits) == len(two_runs.second.splits)
    decided = splits[splits["reason"] == "different decision"]
    assert len(decided) == 1
    row = decided.iloc[0]
    assert {(row["source_a"], row["record_id_a"]), (row["source_b"], row["record_id_b"])} == {(sa, ra), (sb, rb)}
    html = two_runs.second.report_path.read_text(encoding="utf-8")
    assert f"{sa}:{ra} / {sb}:{rb}" in html or f"{sb}:{rb} / {sa}:{ra}" in html
    assert "Cuts: 1 for different decisions" in html


def test_ids_of_unchanged_entities_are_kept(two_runs: TwoRuns) -> None:
    old = two_runs.before.groupby("entity_id").apply(lambda g: frozenset(zip(g["source"], g["record_id"])),
                                                     include_groups=False)
    new = two_runs.after.groupby("entity_id").apply(lambda g: frozenset(zip(g["source"], g["record_id"])),
                                                    include_groups=False)
    old_by_members = {members: entity for entity, members in old.items()}
    same = [(entity, old_by_members[members]) for entity, members in new.items() if members in old_by_members]
    assert len(same) > 4000
    assert all(new_id == old_id for new_id, old_id in same)
    # no ID of the first run was given to a different set of records that shares none of them
    for entity in set(new.index) & set(old.index):
        assert new[entity] & old[entity]


def test_state_store_holds_both_runs(two_runs: TwoRuns) -> None:
    store = StateStore.for_workspace(two_runs.root)
    runs = store.runs()
    assert [r.run_id for r in runs] == [1, 2]
    files = [store.files(r.run_id).set_index("path")["sha256"] for r in runs]
    assert files[0]["demo_sources/webshop.csv"] != files[1]["demo_sources/webshop.csv"]
    assert files[0]["demo_sources/rentals.jsonl"] == files[1]["demo_sources/rentals.jsonl"]
    assert files[0]["mappings/canonical.yaml"] == files[1]["mappings/canonical.yaml"]
    stored = store.crosswalk(2)[["source", "record_id", "entity_id"]]
    expected = two_runs.after[["source", "record_id", "entity_id"]].sort_values(["source", "record_id"])
    assert stored.values.tolist() == expected.values.tolist()
    changes = pd.read_csv(two_runs.root / "out" / "changes.csv", dtype={"related_ids": str}, keep_default_na=False)
    assert changes.to_dict("records") == store.changes(2).to_dict("records")
    summary = two_runs.second.changes
    assert (changes["change"] == "created").sum() == summary.created
    assert (changes["change"] == "split").sum() == summary.split


def test_report_and_changes_command_show_the_summary(two_runs: TwoRuns, capsys: pytest.CaptureFixture[str]) -> None:
    summary = two_runs.second.changes.as_dict()
    html = two_runs.second.report_path.read_text(encoding="utf-8")
    assert "Changes since the previous run" in html and "Compared with run 1" in html
    assert cli.main(["changes", str(two_runs.root)]) == 0
    out = capsys.readouterr().out
    for key, label in CHANGE_LABELS.items():
        found = re.search(re.escape(label) + r"\s*│\s*(\d+)", out)
        assert found is not None, label
        assert int(found.group(1)) == summary[key], label
    assert cli.main(["changes", str(two_runs.root), "--run", "9"]) == 2
    assert "run 9 is not in the state store" in capsys.readouterr().err


def test_show_prints_an_entity_and_its_records(two_runs: TwoRuns, capsys: pytest.CaptureFixture[str],
                                               monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("COLUMNS", "200")  # a wide terminal, so no cell wraps
    clusters = pd.read_csv(two_runs.root / "out" / "clusters.csv", dtype=str)
    entity = clusters[clusters["records"].astype(int) == 4].iloc[0]["entity_id"]
    members = two_runs.after[two_runs.after["entity_id"] == entity]
    assert cli.main(["show", entity, str(two_runs.root)]) == 0
    out = capsys.readouterr().out
    assert f"Entity {entity}: 4 records" in out
    for record_id in members["record_id"]:
        assert record_id in out
    assert "of 4 values agree; most trusted of them" in out and "◀" in out
    assert cli.main(["show", "ENOSUCHID", str(two_runs.root)]) == 2
    assert "entity 'ENOSUCHID' is not in the last run's merged table" in capsys.readouterr().err


def test_show_points_from_an_old_id_to_where_its_records_went(workspace: Path,
                                                                capsys: pytest.CaptureFixture[str]) -> None:
    """A constructed merge: a reviewer decides that two records of two one-record entities are the
    same person, so the next run merges the entities and one ID stops being current."""
    from integrate.review.store import DecisionStore, NewDecision

    first = run(workspace)
    crosswalk = first.crosswalk
    alone = crosswalk[crosswalk.groupby("entity_id")["entity_id"].transform("size") == 1]
    a = alone[alone["source"] == "webshop"].iloc[0]
    b = alone[alone["source"] == "rentals"].iloc[0]
    DecisionStore.for_workspace(workspace).record(NewDecision(
        source_a=a["source"], record_id_a=a["record_id"], source_b=b["source"], record_id_b=b["record_id"],
        decision="same", reviewer="test"))
    second = run(workspace)
    now = second.crosswalk.set_index(["source", "record_id"])["entity_id"]
    kept = now[(a["source"], a["record_id"])]
    assert kept == now[(b["source"], b["record_id"])]  # merged
    gone = ({a["entity_id"], b["entity_id"]} - {kept}).pop()
    assert gone not in set(second.crosswalk["entity_id"])  # the IDs are never reused; this one is retired
    assert cli.main(["show", gone, str(workspace)]) == 2
    err = capsys.readouterr().err
    assert "its records are now in:" in err and kept in err


# --- row order -----------------------------------------------------------------------------------

def shuffle_sources(root: Path, seed: int) -> None:
    """Shuffle the data rows of every demo source (headers stay first)."""
    rng = random.Random(seed)
    folder = root / "demo_sources"
    lines = (folder / "rentals.jsonl").read_text(encoding="utf-8").splitlines()
    rng.shuffle(lines)
    (folder / "rentals.jsonl").write_text("\n".join(lines) + "\n", encoding="utf-8")
    header, *body = (folder / "webshop.csv").read_text(encoding="utf-8").splitlines()
    rng.shuffle(body)
    (folder / "webshop.csv").write_text("\n".join([header, *body]) + "\n", encoding="utf-8")
    book = load_workbook(folder / "membership.xlsx")
    sheet = book["Members"]
    rows = [[cell.value for cell in row] for row in sheet.iter_rows(min_row=2)]
    rng.shuffle(rows)
    for r, row in enumerate(rows, start=2):
        for c, value in enumerate(row, start=1):
            sheet.cell(r, c).value = value
    book.save(folder / "membership.xlsx")
    # SQLite returns an INTEGER PRIMARY KEY table in key order: copy the rows, shuffled, into a
    # table without one, and point the mapping at it
    with sqlite3.connect(folder / "events.sqlite") as con:
        rows = con.execute("SELECT * FROM signups").fetchall()
        rng.shuffle(rows)
        con.execute("CREATE TABLE shuffled AS SELECT * FROM signups WHERE 0")
        con.executemany(f"INSERT INTO shuffled VALUES ({','.join('?' * len(rows[0]))})", rows)
    mapping = root / "mappings" / "events.yaml"
    mapping.write_text(mapping.read_text(encoding="utf-8").replace("table: signups", "table: shuffled"),
                       encoding="utf-8")


def test_shuffled_sources_give_the_same_entities_ids_and_outputs(demo_run, tmp_path: Path) -> None:  # noqa: ANN001
    root = copy_workspace(tmp_path / "shuffled")
    shuffle_sources(root, seed=11)
    assert (root / "demo_sources" / "webshop.csv").read_bytes() != (REPO / "demo_sources" / "webshop.csv").read_bytes()
    shuffled = run(root)
    for name in ("crosswalk.csv", "merged.csv", "provenance.csv", "clusters.csv"):
        assert (shuffled.output_dir / name).read_bytes() == (demo_run.output_dir / name).read_bytes(), name
    pd.testing.assert_frame_equal(pd.read_parquet(shuffled.output_dir / "pairs.parquet"),
                                  pd.read_parquet(demo_run.output_dir / "pairs.parquet"))
    assert isinstance(shuffled.changes, ChangeSummary) and shuffled.changes.previous_run is None
