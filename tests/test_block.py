"""Blocking: key transforms against published rules, and no pair sharing a key is ever dropped."""

from __future__ import annotations

import itertools

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from integrate.block import block, rule_key
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


def test_huge_blocks_are_skipped_with_a_warning(caplog: pytest.LogCaptureFixture) -> None:
    frame = pd.DataFrame({"city": ["x"] * 30 + ["y", "y"]}, dtype="string")
    pairs, report = block(frame, [BlockingRule(name="city", keys=["city"])], max_block_size=20)
    assert set(zip(pairs["i"], pairs["j"])) == {(30, 31)}
    assert report.skipped_blocks == [("city", "x", 30)]
    assert "'x' is shared by 30 records" in caplog.text


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
