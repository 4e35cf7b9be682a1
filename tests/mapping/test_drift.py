"""Drift between two months of an export: the findings of ``check`` and the edits of ``suggest --update``.

The fixture (conftest.py) is invented co-op data. Month 2 renames a column, adds a status
code, moves heights from inches to centimetres and prices fees in EUR.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from pathlib import Path

import pandas as pd
import pytest

from integrate.errors import InputError
from integrate.history_store import previous_profile, record_inputs
from integrate.mapping.checks import check_workspace
from integrate.mapping.drift import name_similarity, profile_similarity, source_drift, workspace_rates
from integrate.mapping.findings import Finding
from integrate.mapping.snapshot import snapshot_column
from integrate.mapping.update import propose_update
from integrate.sources import read_source
from integrate.state import NewRun, StateStore
from integrate.workspace import load_workspace

DRIFT_CODES = {"column_vanished", "column_new", "codes_not_in_value_map", "unit_switched", "currency_switched",
               "date_order_changed", "empty_share_jump", "identifier_not_unique"}


def _line_of(text: str, start: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), start=1) if line.lstrip().startswith(start))


def _drift(report_findings: list[Finding]) -> dict[str, list[Finding]]:
    out: dict[str, list[Finding]] = {}
    for f in report_findings:
        if f.code in DRIFT_CODES:
            out.setdefault(f.code, []).append(f)
    return out


# ---------------------------------------------------------------- the two-month story

def test_each_drift_case_is_found_at_its_mapping_entry(drift_story) -> None:  # noqa: ANN001 - fixture
    found = _drift(drift_story.check_before.findings)
    text = drift_story.mapping_before
    vanished = found["column_vanished"][0]
    assert vanished.level == "error" and vanished.file == "mappings/members.yaml"
    assert vanished.line == _line_of(text, "surname:")
    assert "renamed to 'last_name'" in vanished.message and "confidence" in vanished.message
    codes = found["codes_not_in_value_map"][0]
    assert codes.level == "error" and "'P' (6)" in codes.message and codes.line == _line_of(text, "status:")
    unit = found["unit_switched"][0]
    # 1 in = 2.54 cm exactly (NIST SP 811, App. B.8)
    assert "2.54" in unit.message and unit.hint == "set 'unit: cm'" and unit.line == _line_of(text, "height:")
    money = found["currency_switched"][0]
    # the fixture's invented rate: 1 EUR = 0.85 GBP, so EUR numbers are 1/0.85 = 1.1765 times GBP ones
    assert "1.1765" in money.message and money.hint == "set 'currency: EUR'" and money.line == _line_of(text, "fee:")
    assert "column_new" not in found  # the new column is explained by the rename


def test_dry_run_prints_the_diff_and_writes_nothing(drift_story) -> None:  # noqa: ANN001
    out = drift_story.dry_run_output
    assert drift_story.mapping_after_dry_run == drift_story.mapping_before
    assert out.startswith("--- mappings/members.yaml (now)\n+++ mappings/members.yaml (proposed)\n")
    for line in ("-  surname: family_name", "+  last_name: family_name", "-    unit: in", "+    unit: cm",
                 "-    currency: GBP", "+    currency: EUR", "+      P: P"):
        assert any(o.startswith(line) for o in out.splitlines()), line
    assert "dry run: mappings/members.yaml not changed" in out


def test_update_keeps_comments_and_layout_and_changes_only_the_drifted_lines(drift_story) -> None:  # noqa: ANN001
    before, after = drift_story.mapping_before.splitlines(), drift_story.mapping_after.splitlines()
    assert len(after) == len(before) + 1  # one new value-map line
    changed = [(b, a) for b, a in zip(before, after) if b != a]
    assert [b.split(":")[0].strip() for b, _ in changed] == ["surname", "unit", "currency"]
    assert "# Members desk export (monthly). Keep the comments: people read this file." in after
    assert "      A: active   # paid up" in after  # untouched lines keep their own spacing
    assert "read: {format: csv, path: members.csv}" in after  # flow style kept
    assert "the desk's spelling of the family name; was 'surname'" in drift_story.mapping_after
    assert "P: P        # TODO: new code" in drift_story.mapping_after
    assert "updated mappings/members.yaml (3 edit(s) compared with run 1; 1 TODO(s) left for you)" \
        in drift_story.update_output


def test_updated_mapping_clears_the_drift_and_month2_matches_month1(drift_story) -> None:  # noqa: ANN001
    assert not _drift(drift_story.check_after.findings)
    assert drift_story.check_after.exit_code() == 0
    one, two = drift_story.month1, drift_story.month2
    key = ["source", "record_id"]
    a = one.crosswalk[key + ["entity_id"]].sort_values(key).reset_index(drop=True)
    b = two.crosswalk[key + ["entity_id"]].sort_values(key).reset_index(drop=True)
    pd.testing.assert_frame_equal(a, b)  # same records, same entities, same stable IDs
    merged = one.merged.merge(two.merged, on="entity_id", suffixes=("_1", "_2"))
    assert len(merged) == len(one.merged) == len(two.merged)
    assert (merged["height_cm_1"] - merged["height_cm_2"]).abs().max() < 1e-6
    assert (merged["fee_gbp_1"] - merged["fee_gbp_2"]).abs().max() < 0.005  # to the penny after EUR -> GBP
    assert (merged["family_name_1"] == merged["family_name_2"]).all()


def test_run_report_shows_the_mapping_change_and_its_effect(drift_story) -> None:  # noqa: ANN001
    report = Path(drift_story.month2.report_path).read_text()
    assert "Mapping files since run 1" in report and "mappings/members.yaml</code>: changed" in report
    assert "+    unit: cm" in report
    assert "6 of 135 records are read differently" in report  # the six members now coded 'P'
    assert f"and {_p_entities(drift_story)} entities changed" in report


# ---------------------------------------------------------------- one finding kind at a time

@pytest.fixture()
def remembered(two_months):  # noqa: ANN001, ANN201 - month 1's profile stored without a full run
    root = two_months.root
    ws = load_workspace(root)
    store = StateStore.for_workspace(root)
    crosswalk = pd.DataFrame(columns=["source", "record_id", "entity_id"])
    run_id = store.record_run(NewRun(started_at="2026-10-31T12:00:00Z", crosswalk=crosswalk,
                                     mapping_hashes=ws.mapping_hashes()))
    record_inputs(ws, run_id, ws.mapping_hashes())
    return root


def _edit_members(root: Path, change) -> None:  # noqa: ANN001 - a frame -> frame function
    frame = pd.read_csv(root / "members.csv", dtype=str, keep_default_na=False)
    change(frame).to_csv(root / "members.csv", index=False)


def _findings(root: Path) -> dict[str, list[Finding]]:
    return _drift(check_workspace(root, use_last_run=False).findings)


def test_same_export_twice_finds_no_drift(remembered: Path) -> None:
    assert previous_profile(remembered, "members", None) is not None
    assert not _findings(remembered)  # the only stored profile is of this very file: nothing to compare


def test_day_and_month_swapped_is_found_and_the_format_proposed(remembered: Path) -> None:
    def swap(frame: pd.DataFrame) -> pd.DataFrame:
        parts = frame["born"].str.split("/", expand=True)
        return frame.assign(born=parts[1] + "/" + parts[0] + "/" + parts[2])

    _edit_members(remembered, swap)
    found = _findings(remembered)["date_order_changed"][0]
    assert found.level == "error" and "'%m/%d/%Y'" in found.message and "other way round" in found.message
    update = propose_update(remembered, "members", today=dt.date(2026, 11, 30))
    assert '    format: "%m/%d/%Y"' in update.new_text and "was '%d/%m/%Y' until 2026-11-30" in update.new_text


def test_empty_share_jump_is_a_warning(remembered: Path) -> None:
    _edit_members(remembered, lambda f: f.assign(email=f["email"].where(f.index % 2 == 0, "")))
    found = _findings(remembered)["empty_share_jump"][0]
    assert found.level == "warning" and "'email' is empty in 50% of rows, against 0% last month" in found.message


def test_record_id_that_stopped_being_unique_is_an_error(remembered: Path) -> None:
    _edit_members(remembered, lambda f: f.assign(member_id=f["member_id"].where(f.index != 5, "M000")))
    found = _findings(remembered)["identifier_not_unique"][0]
    assert found.level == "error" and "2 rows share a value" in found.message and "'M000'" in found.message


def test_respelled_code_keeps_its_meaning(remembered: Path) -> None:
    _edit_members(remembered, lambda f: f.assign(status=f["status"].replace("L", "X")))
    update = propose_update(remembered, "members")
    assert "      X: lapsed" in update.new_text
    assert [p.kind for p in update.applied] == ["add_code"] and update.applied[0].confidence >= 0.85


def test_rare_new_code_is_a_warning_below_the_threshold(remembered: Path) -> None:
    _edit_members(remembered, lambda f: f.assign(status=f["status"].where(f.index != 3, "Z")))
    found = _findings(remembered)["codes_not_in_value_map"][0]
    assert found.level == "error"  # 1 of 90 rows is 1.1 %, above the 1 % threshold
    big = pd.concat([pd.read_csv(remembered / "members.csv", dtype=str)] * 2, ignore_index=True)
    big["member_id"] = [f"N{i:04d}" for i in range(len(big))]
    big.loc[big.index != 3, "status"] = big.loc[big.index != 3, "status"].replace("Z", "A")
    big.to_csv(remembered / "members.csv", index=False)
    found = _findings(remembered)["codes_not_in_value_map"][0]
    assert found.level == "warning" and "'Z' (1)" in found.message  # 1 of 180 rows: 0.6 %


def test_millimetres_and_a_prefix_slip(remembered: Path) -> None:
    # 1 in = 25.4 mm exactly (NIST SP 811, App. B.8)
    _edit_members(remembered, lambda f: f.assign(height=(f["height"].astype(float) * 25.4).round(1).astype(str)))
    found = _findings(remembered)["unit_switched"][0]
    assert found.hint == "set 'unit: mm'" and "25.4" in found.message


def test_month_to_month_noise_is_not_a_factor(remembered: Path) -> None:
    import random

    rng = random.Random(3)
    _edit_members(remembered, lambda f: f.assign(height=[f"{rng.gauss(67, 3.5):.1f}" for _ in range(len(f))]))
    assert "unit_switched" not in _findings(remembered)


def test_unrelated_new_column_is_not_taken_for_a_rename(remembered: Path) -> None:
    def change(frame: pd.DataFrame) -> pd.DataFrame:
        return frame.drop(columns=["surname"]).assign(locker=[f"K{i % 7}" for i in range(len(frame))])

    _edit_members(remembered, change)
    found = _findings(remembered)
    assert "no new column resembles it" in found["column_vanished"][0].message
    assert found["column_new"][0].level == "warning" and "'locker'" in found["column_new"][0].message
    update = propose_update(remembered, "members")
    assert "  locker: ignore  # TODO: new in the export" in update.new_text
    assert "  surname: family_name" in update.new_text  # nothing to rename it to: left for the user


def test_update_without_an_earlier_profile_says_so(two_months) -> None:  # noqa: ANN001
    with pytest.raises(InputError) as caught:
        propose_update(two_months.root, "members")
    assert caught.value.reason == "no_previous_profile" and caught.value.file == "mappings/members.yaml"


def test_similarity_measures() -> None:
    assert name_similarity("surname", "last_name", "family_name") > name_similarity("surname", "locker")
    a = snapshot_column(pd.Series(["Smith", "Jones", "Smith", "Brown"], name="a"))
    b = snapshot_column(pd.Series(["Smith", "Jones", "Brown", "Brown"], name="b"))
    c = snapshot_column(pd.Series(["12.5", "13.0", "", "14.5"], name="c"))
    assert profile_similarity(a, b) > 0.8 > profile_similarity(a, c)
    assert math.isclose(profile_similarity(a, a), 1.0)


def test_source_drift_reads_rates_from_the_workspace(remembered: Path) -> None:
    ws = load_workspace(remembered)
    rates = workspace_rates(ws)
    assert rates is not None
    entry = ws.sources[0]
    raw = read_source(entry.mapping.read, ws.root, name=entry.mapping.source)
    assert source_drift(ws, entry, raw, rates) is None  # the same file as the stored profile


# ---------------------------------------------------------------- traceable mapping files

def _cli(*argv: str) -> tuple[int, str]:
    import contextlib
    import io

    from integrate.cli import main

    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(list(argv))
    return code, out.getvalue()


def _p_entities(story) -> int:  # noqa: ANN001 - the entities holding the six members now coded 'P'
    crosswalk = story.month2.crosswalk
    p_ids = {f"M{i:03d}" for i in range(0, 90, 15)}
    return crosswalk[(crosswalk["source"] == "members") & crosswalk["record_id"].isin(p_ids)]["entity_id"].nunique()


def test_history_lists_each_version_with_its_runs(drift_story) -> None:  # noqa: ANN001
    code, out = _cli("mappings", "history", "--workspace", str(drift_story.root))
    lines = out.splitlines()
    assert code == 0 and lines[0] == "mappings/canonical.yaml" and "version 1" in lines[1] and "runs 1, 2" in lines[1]
    members = lines.index("mappings/members.yaml")
    assert "version 1" in lines[members + 1] and " run 1 " in lines[members + 1]
    assert "version 2" in lines[members + 2] and " run 2 " in lines[members + 2]
    code, only = _cli("mappings", "history", "members", "--workspace", str(drift_story.root))
    assert only.splitlines() == lines[members:members + 3]


def test_diff_between_runs_shows_the_edits_and_the_entities_they_changed(drift_story) -> None:  # noqa: ANN001
    code, out = _cli("mappings", "diff", "1", "2", "--workspace", str(drift_story.root))
    assert code == 0 and "--- mappings/members.yaml (run 1)\n+++ mappings/members.yaml (run 2)\n" in out
    assert "canonical.yaml" not in out  # unchanged files are not listed
    # six members now carry status 'P': read differently; heights and fees read back the same as last month
    assert (f"run 1 -> run 2: {_p_entities(drift_story)} entities changed; 6 of 135 records read differently, "
            "0 added, 0 removed") in out
    code, same = _cli("mappings", "diff", "2", "2", "--workspace", str(drift_story.root))
    assert "mapping files are the same in runs 2 and 2" in same and "0 entities changed" in same


def test_diff_with_an_unknown_run_is_a_clear_error(drift_story, capsys) -> None:  # noqa: ANN001
    code, _ = _cli("mappings", "diff", "1", "9", "--workspace", str(drift_story.root))
    assert code == 2 and "no run 9 in the state store (hint: stored runs: 1, 2" in capsys.readouterr().err


def test_renamed_record_id_column_follows_in_record_id(remembered: Path) -> None:
    _edit_members(remembered, lambda f: f.rename(columns={"member_id": "member_no"}))
    update = propose_update(remembered, "members")
    assert [(p.kind, p.column, p.value) for p in update.applied] == [("rename", "member_id", "member_no")]
    assert "record_id: member_no\n" in update.new_text and "  member_no: ignore" in update.new_text
    assert "record_id: member_id" not in update.new_text


def test_a_rerun_on_the_same_export_reuses_its_profile_with_todays_declarations(remembered: Path) -> None:
    mapping = remembered / "mappings" / "members.yaml"
    mapping.write_text(mapping.read_text().replace("    unit: in ", "    unit: cm "))
    ws = load_workspace(remembered)
    store = StateStore.for_workspace(remembered)
    crosswalk = pd.DataFrame(columns=["source", "record_id", "entity_id"])
    run_id = store.record_run(NewRun(started_at="2026-11-01T12:00:00Z", crosswalk=crosswalk))
    record_inputs(ws, run_id, ws.mapping_hashes())
    from integrate.history_store import source_profile_table, state_engine

    with state_engine(remembered).connect() as conn:
        stored = [r for r in conn.execute(source_profile_table.select().where(
            source_profile_table.c.source == "members")).mappings()]
    first, second = (json.loads(r["profile"]) for r in sorted(stored, key=lambda r: r["run_id"]))
    assert first["height"]["declared"]["unit"] == "in" and second["height"]["declared"]["unit"] == "cm"
    assert first["height"]["quantiles"] == second["height"]["quantiles"]
    assert first["member_id"]["kind"] == "" and first["surname"]["kind"] == "name"  # ignored: counts only


def test_a_run_reads_each_source_once_and_stores_the_profile_of_what_it_read(tmp_path: Path, monkeypatch) -> None:  # noqa: ANN001
    """The profiles for drift checks come from the frames the run read, not from a second read."""
    import integrate
    import integrate.history_store as history_store
    import integrate.pipeline as pipeline
    from integrate.history_store import source_profile_table, state_engine
    from integrate.mapping.snapshot import snapshot_source
    from integrate.sources import read_source

    from ..conftest import copy_workspace

    root = copy_workspace(tmp_path / "ws")
    reads: list[str] = []

    def counted(spec, folder, name=None):  # noqa: ANN001, ANN202 - read_source's own arguments
        reads.append(name)
        return read_source(spec, folder, name=name)

    monkeypatch.setattr(pipeline, "read_source", counted)
    monkeypatch.setattr(history_store, "read_source", counted)
    result = integrate.run(root)
    assert sorted(reads) == ["events", "membership", "rentals", "webshop"]  # once each
    with state_engine(root).connect() as conn:
        stored = {r["source"]: json.loads(r["profile"]) for r in conn.execute(
            source_profile_table.select().where(source_profile_table.c.run_id == result.run_id)).mappings()}
    ws = load_workspace(root)
    entry = next(e for e in ws.sources if e.mapping.source == "webshop")
    again = json.loads(json.dumps(snapshot_source(read_source(entry.mapping.read, root, name="webshop"),
                                                  entry.mapping), sort_keys=True))
    assert set(stored) == {"events", "membership", "rentals", "webshop"} and stored["webshop"] == again
