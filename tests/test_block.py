"""Blocking: key transforms against published rules, and no pair sharing a key is ever dropped."""

from __future__ import annotations

import itertools

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from integrate.block import SPLIT_WINDOW, BlockingTooLarge, block, rule_key
from integrate.mapping.spec import BlockingRule

# Soundex codes under the US National Archives rules (NARA, "The Soundex Indexing System";
# REFERENCE_CHECKS §1c, library-verified): H and W do not separate equal codes.
NARA = {"robert": "R163", "rupert": "R163", "rubin": "R150", "ashcraft": "A261", "tymczak": "T522",
        "pfister": "P236", "gutierrez": "G362", "jackson": "J250", "lee": "L000", "kuhne": "K500",
        "ebell": "E140", "kelly": "K400", "lloyd": "L300", "washington": "W252"}


def test_soundex_key_follows_the_national_archives_rules() -> None:
    prepared = pd.DataFrame({"family_name": list(NARA)})
    keys = rule_key(prepared, BlockingRule(name="s", keys=["family_name:soundex"]))
    assert dict(zip(NARA, keys)) == NARA


def _brute_force(frame: pd.DataFrame, rules: list[BlockingRule]) -> set[tuple[int, int]]:
    keys = [rule_key(frame, r) for r in rules]
    found = set()
    for a, b in itertools.combinations(range(len(frame)), 2):
        for key in keys:
            ka, kb = key.iloc[a], key.iloc[b]
            if pd.notna(ka) and pd.notna(kb) and ka == kb:
                found.add((a, b))
    return found


values = st.one_of(st.none(), st.sampled_from(["ann", "anne", "bo", "bob", "cy", "dee"]))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(values, values, st.one_of(st.none(), st.sampled_from(["1980-01-02", "1981-05-06"]))),
                min_size=0, max_size=25))
def test_blocking_keeps_every_pair_that_shares_a_key(rows: list[tuple]) -> None:
    frame = pd.DataFrame(rows, columns=["given", "family", "born"], dtype="string")
    frame["born__y"] = frame["born"].str.slice(0, 4)
    frame["born__d"] = frame["born"].str.slice(8, 10)
    rules = [BlockingRule(name="a", keys=["given"]),
             BlockingRule(name="b", keys=["family:first2", "born:year"]),
             BlockingRule(name="c", keys=["given+family:tokens"])]
    pairs, report = block(frame, rules, max_block_size=10_000)
    got = set(zip(pairs["i"].tolist(), pairs["j"].tolist()))
    assert got == _brute_force(frame, rules)
    assert report.candidate_pairs == len(got)
    assert len(pairs) == len(got)  # united and de-duplicated


def test_sorted_neighbourhood_pairs_records_within_the_window() -> None:
    frame = pd.DataFrame({"name": ["amy", "abe", "bea", "ben", "cal", None]}, dtype="string")
    pairs, _ = block(frame, [BlockingRule(name="sn", keys=["name"], window=2)])
    # key order abe, amy, bea, ben, cal: each record meets the next one
    assert set(zip(pairs["i"], pairs["j"])) == {(0, 1), (0, 2), (2, 3), (3, 4)}


def test_huge_blocks_are_split_by_a_sorted_neighbourhood_with_one_warning_per_rule(
        caplog: pytest.LogCaptureFixture) -> None:
    # 30 records share 'x', over the limit of 20: instead of all 435 pairs (or none), each record is
    # paired with its neighbours in the order of the other fields (sorted neighbourhood,
    # Hernandez & Stolfo 1995), window SPLIT_WINDOW
    names = [f"n{k:02d}" for k in range(30)]
    frame = pd.DataFrame({"city": ["x"] * 30 + ["y", "y"], "name": names[::-1] + ["a", "b"],
                          "town": ["z"] * 25 + ["w"] * 5 + ["v", "v"]}, dtype="string")
    rules = [BlockingRule(name="city", keys=["city"]), BlockingRule(name="town", keys=["town"])]
    pairs, report = block(frame, rules, max_block_size=20, order_columns=["name"])
    found = set(zip(pairs["i"].tolist(), pairs["j"].tolist()))
    assert (30, 31) in found
    window = SPLIT_WINDOW
    expected = {(min(a, b), max(a, b)) for a in range(30) for b in range(30) if 0 < abs(a - b) < window}
    town_w = {(a, b) for a in range(25, 30) for b in range(a + 1, 30)}
    assert found == expected | town_w | {(30, 31)}
    assert report.skipped_blocks == []
    assert [(r, k, top) for r, k, top, _ in report.split_blocks] == [("city", 1, [("x", 30)]), ("town", 1, [("z", 25)])]
    assert caplog.text.count("blocking rule 'city'") == 1
    assert "'x' (30)" in caplog.text


def test_a_rule_over_the_pair_limit_is_refused_naming_its_largest_keys() -> None:
    frame = pd.DataFrame({"city": ["x"] * 40 + ["y"] * 30}, dtype="string")
    with pytest.raises(BlockingTooLarge, match=r"rule 'city'.*'x' \(40\), 'y' \(30\)"):
        block(frame, [BlockingRule(name="city", keys=["city"])], max_rule_pairs=500)
    pairs, _ = block(frame, [BlockingRule(name="city", keys=["city"])], max_rule_pairs=1225)
    assert len(pairs) == 40 * 39 // 2 + 30 * 29 // 2


def test_a_key_of_several_fields_is_their_words_joined() -> None:
    # a missing field counts as empty; 'anna marie' + 'lee' and 'anna' + 'marie lee' give one key
    frame = pd.DataFrame({"given": ["anna marie", "anna", None, None, "bo"],
                          "family": ["lee", "marie lee", "lee", None, None]}, dtype="string")
    keys = rule_key(frame, BlockingRule(name="n", keys=["given+family"]))
    assert keys.tolist() == ["anna marie lee", "anna marie lee", "lee", pd.NA, "bo"]
    pairs, _ = block(frame, [BlockingRule(name="n", keys=["given+family"])])
    assert set(zip(pairs["i"], pairs["j"])) == {(0, 1)}
    both = rule_key(frame, BlockingRule(name="b", keys=["given", "family:first2"]))
    assert both.tolist() == ["anna marie\x1fle", "anna\x1fma", pd.NA, pd.NA, pd.NA]


def test_names_any_order_pairs_a_swap_with_a_nickname() -> None:
    # 'Roberts, James' typed the wrong way round against 'Jimmy Roberts' (Jimmy: a common short
    # form of James): the formal forms of both first words, sorted, are one key
    from integrate.mapping.spec import CanonicalSchema
    from integrate.standardise import standardise

    schema = CanonicalSchema(fields={
        "given_name": {"type": "person_name", "meaning": "Given name of the person."},
        "family_name": {"type": "person_name", "meaning": "Family name of the person."},
    })
    records = pd.DataFrame({"given_name": ["Jimmy", "Roberts", "James", "Rob"],
                            "family_name": ["Roberts", "James", "Robertson", "James"],
                            "_source": "a", "_record_id": ["1", "2", "3", "4"]})
    prepared = standardise(records, schema)
    rule = BlockingRule(name="any_order", keys=["given_name+family_name:roots"])
    assert rule_key(prepared, rule).tolist()[:2] == ["james roberts", "james roberts"]
    pairs, _ = block(prepared, [rule])
    assert set(zip(pairs["i"], pairs["j"])) == {(0, 1)}
