"""Missing values before and after merging: hand-worked cases, and the demo run against a plain recount."""

from __future__ import annotations

from collections import defaultdict

import pandas as pd

from integrate.outputs.missing import missing_values


def test_hand_worked_case_with_blanks_a_sum_and_an_entity_one_source_lacks() -> None:
    # E1: shop + club, E2: club only, E3: shop only, E4: hall only
    records = pd.DataFrame({
        "_source": ["shop", "club", "club", "shop", "hall"], "_record_id": ["s1", "c1", "c2", "s2", "h1"],
        "email": ["a@example.org", "  ", "b@example.org", None, "d@example.org"],  # blank text is missing
        "fees": [None, 5.0, 7.0, None, 2.0],
    })
    crosswalk = pd.DataFrame({"source": ["shop", "club", "club", "shop", "hall"],
                              "record_id": ["s1", "c1", "c2", "s2", "h1"],
                              "entity_id": ["E1", "E1", "E2", "E3", "E4"]})
    merged = pd.DataFrame({"entity_id": ["E1", "E2", "E3", "E4"],
                           "email": ["a@example.org", "b@example.org", None, "d@example.org"],
                           "fees": [5.0, 7.0, None, 2.0]})
    provenance = pd.DataFrame({
        "entity_id": ["E1", "E2", "E3", "E4", "E1", "E2", "E3", "E4"],
        "field": ["email"] * 4 + ["fees"] * 4,
        "source": ["shop", "club", "", "hall", "", "", "", ""],  # sums carry no single source
    })
    table = missing_values(records, crosswalk, merged, provenance, ["email", "fees"]).set_index("field")
    # email: shop holds E1 only, club holds E2 only (its E1 record is blank), hall E4: ties go to the
    # first name in order, club; 3 of 4 entities lack it there; merged lacks only E3
    email = table.loc["email"]
    assert (email["best_source"], email["missing_best_source"], email["missing_merged"]) == ("club", 0.75, 0.25)
    assert email["gaps_filled"] == 2  # E1 (from shop) and E4 (from hall)
    assert (email["filled_from_shop"], email["filled_from_hall"], email["filled_from_club"]) == (1, 1, 0)
    # fees: club holds E1 and E2; the gap E4 is filled by hall, found through the records (a sum)
    fees = table.loc["fees"]
    assert (fees["best_source"], fees["missing_best_source"], fees["missing_merged"]) == ("club", 0.5, 0.25)
    assert (fees["gaps_filled"], fees["filled_from_hall"], fees["filled_from_shop"]) == (1, 1, 0)
    assert (email["filled_by_rule"], fees["filled_by_rule"]) == (0, 0)


def test_a_value_no_source_held_counts_as_filled_by_the_rule() -> None:
    """A sum of nothing written as zero (empty_sum: zero) fills a gap with no source behind it."""
    records = pd.DataFrame({"_source": ["shop", "club"], "_record_id": ["1", "2"], "fees": [4.0, None]})
    crosswalk = pd.DataFrame({"source": ["shop", "club"], "record_id": ["1", "2"], "entity_id": ["E1", "E2"]})
    merged = pd.DataFrame({"entity_id": ["E1", "E2"], "fees": [4.0, 0.0]})
    provenance = pd.DataFrame({"entity_id": ["E1", "E2"], "field": ["fees", "fees"], "source": ["", ""]})
    row = missing_values(records, crosswalk, merged, provenance, ["fees"]).iloc[0]
    assert (row["best_source"], row["missing_best_source"], row["missing_merged"]) == ("shop", 0.5, 0.0)
    assert (row["gaps_filled"], row["filled_by_rule"], row["filled_from_shop"], row["filled_from_club"]) == (
        1, 1, 0, 0)


def test_demo_run_figures_match_a_plain_recount(demo_run) -> None:  # noqa: ANN001 - a RunResult
    table = pd.read_csv(demo_run.output_dir / "missing.csv").set_index("field")
    merged = demo_run.merged.set_index("entity_id")
    # one row per canonical field (the merged table's own extra columns, such as its record counts, are not fields)
    assert list(table.index) == [c for c in demo_run.merged.columns
                                 if c in demo_run.records.columns and not c.startswith("_")]
    entity = {(s, r): e for s, r, e in demo_run.crosswalk[["source", "record_id", "entity_id"]].itertuples(index=False)}
    n = len(merged)
    for field in ["email", "phone", "birth_date", "postcode"]:
        # an independent count, one record at a time
        holders: dict[str, set[str]] = defaultdict(set)
        for source, record_id, value in demo_run.records[["_source", "_record_id", field]].itertuples(index=False):
            if not pd.isna(value) and str(value).strip():
                holders[source].add(entity[(source, str(record_id))])
        best = max(sorted(holders), key=lambda s: len(holders[s]))
        row = table.loc[field]
        assert row["best_source"] == best
        assert abs(row["missing_best_source"] - (1 - len(holders[best]) / n)) < 1e-6
        filled = {e for e, v in merged[field].items() if not pd.isna(v) and str(v).strip()}
        assert abs(row["missing_merged"] - (1 - len(filled) / n)) < 1e-6
        assert row["gaps_filled"] == len(filled - holders[best])
        assert sum(row[f"filled_from_{s}"] for s in demo_run.source_counts) + row["filled_by_rule"] == row[
            "gaps_filled"]
    report = demo_run.report_path.read_text(encoding="utf-8")
    assert "Missing values before and after merging" in report and "missing.csv" in report
