"""Incremental runs: next month's exports against the last run (integrate/incremental.py).

The reference is the tool's own full run on the same final inputs with the model held fixed:
the issue's definition of a correct incremental run. The month of changes is made on the demo
exports (invented data): 5% of records added, 2% changed, 1% removed.
"""

from __future__ import annotations

import json
import random
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from integrate import run
from integrate.compare import compare
from integrate.incremental import model_from_json, model_to_json
from integrate.mapping.spec import CanonicalSchema
from integrate.pipeline import read_and_map
from integrate.workspace import load_workspace

from .conftest import copy_workspace

WEB, RENTALS = "demo_sources/webshop.csv", "demo_sources/rentals.jsonl"


def _lines(path: Path) -> list[str]:
    return path.read_text(encoding="utf-8").splitlines(keepends=True)


def _change_web(line: str) -> str:
    cells = line.rstrip("\n").split(";")
    cells[3] = "new." + cells[3] if cells[3] else "moved@example.net"  # a new e-mail address
    return ";".join(cells) + "\n"


def _change_rental(line: str) -> str:
    row = json.loads(line)
    first = row["name"]["first"] or "Sam"
    row["name"]["first"] = first[:1] + first[2:3] + first[1:2] + first[3:] if len(first) > 3 else first + "e"
    row["contact"]["phone"] = "07700 900" + row["rental_ref"][-3:]  # a new phone (a reserved drama range)
    return json.dumps(row) + "\n"


def _two_months(root: Path, seed: int = 5) -> tuple[dict[str, list[str]], dict[str, list[str]], dict[str, int]]:
    """The base and the next month's web shop and rental exports (lines), and the counts."""
    web, rentals = _lines(root / WEB), _lines(root / RENTALS)
    rows = [(WEB, k) for k in range(1, len(web))] + [(RENTALS, k) for k in range(len(rentals))]
    total = len(read_and_map(load_workspace(root))[0])  # records in all four exports
    rng = random.Random(seed)
    rng.shuffle(rows)
    added_n, changed_n, removed_n = round(0.05 * total), round(0.02 * total), round(0.01 * total)
    added = set(rows[:added_n])
    changed = set(rows[added_n:added_n + changed_n])
    removed = set(rows[added_n + changed_n:added_n + changed_n + removed_n])
    files = {WEB: web, RENTALS: rentals}
    change = {WEB: _change_web, RENTALS: _change_rental}
    base: dict[str, list[str]] = {}
    final: dict[str, list[str]] = {}
    for name, lines in files.items():
        base[name] = [line for k, line in enumerate(lines) if (name, k) not in added]
        final[name] = [change[name](line) if (name, k) in changed else line
                       for k, line in enumerate(lines) if (name, k) not in removed]
    return base, final, {"added": added_n, "changed": changed_n, "removed": removed_n}


def _write(root: Path, files: dict[str, list[str]]) -> None:
    for name, lines in files.items():
        (root / name).write_text("".join(lines), encoding="utf-8")


@pytest.fixture(scope="module")
def months(tmp_path_factory: pytest.TempPathFactory):  # noqa: ANN201
    """Two workspaces that ran the base month in full; then the next month, once incrementally
    and once in full with the first run's model held fixed."""
    out = {}
    for kind in ("incremental", "full"):
        root = copy_workspace(tmp_path_factory.mktemp(kind))
        base, final, counts = _two_months(root)
        _write(root, base)
        first = run(root)
        _write(root, final)
        if kind == "incremental":
            second = run(root, incremental=True)
        else:
            second = run(root, model=first.model)
        out[kind] = (first, second, counts)
    return out


def test_an_incremental_run_gives_the_crosswalk_of_a_full_run_with_the_model_held_fixed(months) -> None:
    first_i, inc, counts = months["incremental"]
    first_f, full, _ = months["full"]
    pd.testing.assert_frame_equal(first_i.crosswalk, first_f.crosswalk)  # the same start
    # the same records in the same entities under the same IDs, with the same link strengths
    pd.testing.assert_frame_equal(inc.crosswalk, full.crosswalk)
    # every candidate pair with the same grades and probability
    pd.testing.assert_frame_equal(inc.pairs, full.pairs)
    pd.testing.assert_frame_equal(inc.merged, full.merged)
    pd.testing.assert_frame_equal(inc.provenance, full.provenance)
    assert inc.merged.attrs == full.merged.attrs
    assert 0 < inc.incremental.entities_resolved < 0.3 * len(inc.merged)
    assert inc.changes.as_dict() == full.changes.as_dict()
    # the month's changes were seen as such, and most pairs were not compared again
    summary = inc.incremental
    assert summary is not None and summary.model == "kept"
    # the exports that did not change were not read again: their mapped records came from the last run
    assert sorted(summary.sources_not_read) == ["events", "membership"]
    pd.testing.assert_frame_equal(inc.failures.astype(str), full.failures.astype(str))
    assert inc.unmapped == full.unmapped and inc.source_counts == full.source_counts
    assert (summary.new, summary.changed, summary.removed) == (counts["added"], counts["changed"], counts["removed"])
    assert summary.pairs_reused + summary.pairs_compared == len(inc.pairs)
    assert summary.pairs_compared < 0.25 * len(inc.pairs)
    assert summary.stored_pairs_dropped > 0  # changed and removed records' pairs were not reused
    assert inc.changes.records_added == counts["added"] and inc.changes.records_removed == counts["removed"]


def test_an_incremental_run_standardises_only_new_and_changed_records(months) -> None:
    _, inc, counts = months["incremental"]
    _, full, _ = months["full"]
    assert inc.incremental.unchanged == len(inc.records) - counts["added"] - counts["changed"]
    # stored standard values of the unchanged records equal freshly made ones
    pd.testing.assert_frame_equal(inc.records, full.records)


def test_stored_grades_are_the_grades_a_fresh_comparison_gives(months) -> None:
    """The reused grades are checked pair by pair against comparing again from scratch."""
    _, inc, _ = months["incremental"]
    ws = load_workspace(inc.run_dir.parent.parent.parent)
    from integrate.identical import find_identical
    from integrate.standardise import standardise

    regions = {e.mapping.source: e.mapping.region for e in ws.sources}
    prepared = standardise(inc.records, ws.canonical, regions)
    compared = [n for n, f in ws.canonical.fields.items() if f.is_compared()]
    same = find_identical(inc.records, prepared, compared)
    reps = prepared.iloc[same.positions].reset_index(drop=True)
    matched_as = np.full(len(prepared), -1)
    matched_as[same.positions] = np.arange(len(same.positions))
    pairs = pd.read_parquet(inc.run_dir / ".carry" / "grades.parquet")
    fresh = compare(reps, pd.DataFrame({"i": matched_as[pairs["i"]], "j": matched_as[pairs["j"]]}), ws.canonical)
    for field in fresh.columns:
        assert (fresh[field].to_numpy() == pairs["g_" + field].to_numpy()).all(), field


def test_a_second_incremental_run_with_nothing_new_compares_nothing(months, tmp_path: Path) -> None:
    _, inc, _ = months["incremental"]
    root = tmp_path / "again"
    shutil.copytree(inc.run_dir.parent.parent.parent, root, symlinks=True)
    # the copy's state store names the original's run folders; a fresh pair of runs here instead
    for leftover in ("out", "reports"):
        shutil.rmtree(root / leftover, ignore_errors=True)
    for db in root.glob("*.sqlite*"):
        db.unlink()
    first = run(root)
    again = run(root, incremental=True)
    assert again.incremental.pairs_compared == 0 and again.incremental.new == 0
    pd.testing.assert_frame_equal(again.crosswalk, first.crosswalk)
    pd.testing.assert_frame_equal(again.merged, first.merged)


def test_a_changed_schema_makes_an_incremental_run_a_full_one(workspace: Path) -> None:
    run(workspace)
    schema = workspace / "mappings" / "canonical.yaml"
    schema.write_text(schema.read_text(encoding="utf-8") + "\n# a comment changes the file\n", encoding="utf-8")
    again = run(workspace, incremental=True)
    assert again.incremental is None
    assert any("schema or phone regions changed" in w for w in again.warnings)


def test_the_model_survives_its_json_form(demo_run) -> None:
    model = demo_run.model
    back = model_from_json(model_to_json(model))
    for name, fm in model.fields.items():
        assert back.fields[name].weights == pytest.approx(fm.weights)
    assert back.prior == model.prior and back.class_shares == model.class_shares
    patterns = np.array([[0] * len(model.fields), [len(f.m) - 1 for f in model.fields.values()]])
    names = list(model.fields)
    np.testing.assert_allclose(back.pattern_weight(patterns, names), model.pattern_weight(patterns, names))


def test_a_stored_grade_is_not_reused_once_a_name_becomes_a_name_in_use() -> None:
    """'mark' / 'marek' is a close spelling while 'marek' is held by two records, and two names
    in use (fairly close) once a third holds it (compare.py's rule); the stored grade is stale."""
    from integrate.incremental import Carried, carry_tables, plan, prepared_for, reuse_for
    from integrate.score import ScoreModel
    from integrate.standardise import standardise

    schema = CanonicalSchema(fields={"given": {"type": "person_name", "meaning": "Given name."},
                                     "family": {"type": "person_name", "meaning": "Family name."}})

    def records(names: list[str]) -> pd.DataFrame:
        return pd.DataFrame({"_source": "s", "_record_id": [str(k) for k in range(len(names))],
                             "given": names, "family": [f"fam{k}" for k in range(len(names))]})

    before = records(["mark"] * 10 + ["marek"] * 2)
    prepared = standardise(before, schema)
    pairs = pd.DataFrame({"i": [0], "j": [10]})
    grades = compare(prepared, pairs, schema)
    assert grades["given"].tolist() == [2]  # close: 'marek' is not yet a name in use
    stored = carry_tables(before, prepared, pairs.assign(g_given=grades["given"], g_family=grades["family"]),
                          None, schema)
    carried = Carried(1, stored["prepared"][0], stored["grades"][0], ScoreModel({}, 0.5, 0, True))
    for extra, reusable in (("anna", True), ("marek", False)):
        after = records(before["given"].tolist() + [extra])
        the_plan = plan(after, schema, carried)
        assert the_plan.new == 1 and the_plan.unchanged == 12
        now = prepared_for(after, schema, None, carried, the_plan)
        pd.testing.assert_frame_equal(now, standardise(after, schema))
        reuse = reuse_for(carried, the_plan, now, np.arange(len(after)), schema)
        found, _ = reuse.split(np.array([0]), np.array([10]))
        assert bool(found[0]) is reusable, extra
        fresh = compare(now, pairs, schema)["given"].tolist()
        assert fresh == ([2] if reusable else [1])
