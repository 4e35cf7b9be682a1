"""Comparison grades against published string-comparator values."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from rapidfuzz.distance import OSA, JaroWinkler

from integrate.compare import GRADE_NAMES, JW_CLOSE, JW_FAIR, compare, pair_scores
from integrate.mapping.spec import CanonicalSchema

# Jaro–Winkler (p = 0.1) values from Winkler (1990) and Winkler (1994) Table 2.1, as listed in
# REFERENCE_CHECKS §1a (library-verified; 3 decimals).
WINKLER = [
    ("MARTHA", "MARHTA", 0.961),
    ("DWAYNE", "DUANE", 0.840),
    ("DIXON", "DICKSONX", 0.813),
    ("SHACKLEFORD", "SHACKELFORD", 0.982),
    ("DUNNINGHAM", "CUNNIGHAM", 0.896),
    ("NICHLESON", "NICHULSON", 0.956),
    ("JONES", "JOHNSON", 0.832),
    ("MASSEY", "MASSIE", 0.933),
    ("ABROMS", "ABRAMS", 0.922),
    ("JULIES", "JULIUS", 0.933),
    ("TANYA", "TONYA", 0.880),
    ("SEAN", "SUSAN", 0.805),
    ("JON", "JOHN", 0.933),
]


@pytest.mark.parametrize(("a", "b", "expected"), WINKLER)
def test_jaro_winkler_matches_published_values(a: str, b: str, expected: float) -> None:
    got = pair_scores(pd.Series([a]), pd.Series([b]), JaroWinkler.normalized_similarity)[0]
    assert abs(got - expected) < 5e-4


def _schema() -> CanonicalSchema:
    return CanonicalSchema(fields={
        "given_name": {"type": "person_name", "meaning": "Given name of the person."},
        "family_name": {"type": "person_name", "meaning": "Family name of the person."},
        "birth_date": {"type": "date", "meaning": "Date of birth of the person."},
    })


def _grades(left: dict[str, object], right: dict[str, object]) -> dict[str, int]:
    from integrate.standardise import standardise

    records = pd.DataFrame([left, right]).assign(_source="a", _record_id=["1", "2"])
    prepared = standardise(records, _schema())
    grades = compare(prepared, pd.DataFrame({"i": [0], "j": [1]}), _schema())
    return {k: int(v) for k, v in grades.iloc[0].items()}


def test_name_grades_follow_the_winkler_examples() -> None:
    # MARTHA/MARHTA 0.961 >= JW_CLOSE: close; DWAYNE/DUANE 0.840 between JW_FAIR and JW_CLOSE: fairly close
    assert JW_FAIR <= 0.840 < JW_CLOSE <= 0.961
    g = _grades({"given_name": "Martha", "family_name": "Dwayne", "birth_date": "1980-01-02"},
                {"given_name": "Marhta", "family_name": "Duane", "birth_date": "1980-01-02"})
    assert g == {"given_name": 2, "family_name": 1, "birth_date": 5}


def test_nicknames_swaps_and_partial_dates() -> None:
    # Robert/Bob: the given-name equivalents table (common practice); names written the wrong way
    # round count as equivalent; a year-only date agrees at its own grade.
    g = _grades({"given_name": "Bob", "family_name": "Smith", "birth_date": "1980"},
                {"given_name": "Robert", "family_name": "Smith", "birth_date": "1980-03-04"})
    assert g == {"given_name": 3, "family_name": 4, "birth_date": 2}
    g = _grades({"given_name": "Smith", "family_name": "Anna", "birth_date": "1980-04-03"},
                {"given_name": "Anna", "family_name": "Smith", "birth_date": "1980-03-04"})
    assert g == {"given_name": 3, "family_name": 3, "birth_date": 4}
    g = _grades({"given_name": "Zoë", "family_name": "Ní Bhriain", "birth_date": None},
                {"given_name": "ZOE", "family_name": "ni bhriain", "birth_date": "1980-03-04"})
    assert g == {"given_name": 4, "family_name": 4, "birth_date": -1}


def test_multi_part_family_names() -> None:
    # A family name written in full in one record and in part in another is close, not
    # equivalent: 'Jones' is part of 'Smith-Jones' and of many another name (common practice:
    # partial agreement is weaker evidence than full agreement). Given names keep 'Anna Marie' /
    # 'Anna' as equivalent (a second given name left out).
    g = _grades({"given_name": "Anna Marie", "family_name": "Smith-Jones", "birth_date": None},
                {"given_name": "Anna", "family_name": "Jones", "birth_date": None})
    assert g["given_name"] == 3 and g["family_name"] == 2
    g = _grades({"given_name": "Anna", "family_name": "Smith-Jones", "birth_date": None},
                {"given_name": "Anna", "family_name": "Smith", "birth_date": None})
    assert g["family_name"] == 2
    g = _grades({"given_name": "Anna", "family_name": "Smith-Jones", "birth_date": None},
                {"given_name": "Anna", "family_name": "Smith Jones", "birth_date": None})
    assert g["family_name"] == 4


def test_swapped_names_with_a_nickname_or_typo() -> None:
    # 'Clark, Kate' typed the wrong way round against 'Katherine Clark' (Kate: a common short form)
    g = _grades({"given_name": "Clark", "family_name": "Kate", "birth_date": None},
                {"given_name": "Katherine", "family_name": "Clark", "birth_date": None})
    assert g["given_name"] == 3 and g["family_name"] == 3
    g = _grades({"given_name": "Benntt", "family_name": "Henry", "birth_date": None},
                {"given_name": "Henry", "family_name": "Bennett", "birth_date": None})
    assert g["given_name"] == 3 and g["family_name"] == 3
    # one crossing exact, the other only fairly alike (JONES / JENS): perhaps a swap with a typo,
    # perhaps two people; close on both, not equivalent
    assert JW_FAIR <= JaroWinkler.normalized_similarity("jones", "jens") < JW_CLOSE
    g = _grades({"given_name": "Quinn", "family_name": "Jones", "birth_date": None},
                {"given_name": "Jens", "family_name": "Quinn", "birth_date": None})
    assert g["given_name"] == 2 and g["family_name"] == 2


def test_titles_and_suffixes_go_to_a_field_of_their_own() -> None:
    from integrate.standardise import standardise

    records = pd.DataFrame({"given_name": ["Dr. Anna", "anna"], "family_name": ["Lee Jr", "LEE"],
                            "birth_date": [None, None], "_source": "a", "_record_id": ["1", "2"]})
    prepared = standardise(records, _schema())
    assert prepared["given_name"].tolist() == ["anna", "anna"]
    assert prepared["family_name"].tolist() == ["lee", "lee"]
    assert prepared["given_name__affixes"].tolist()[0] == "dr"
    assert prepared["family_name__affixes"].tolist()[0] == "jr"
    assert prepared["given_name__affixes"].isna().tolist()[1]


words = st.lists(st.sampled_from(["van", "der", "berg", "smith", "jones", "anne", "ann", "o"]), min_size=1, max_size=3)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(words, words), min_size=1, max_size=20))
def test_words_within_agrees_with_token_set_ratio(rows: list[tuple[list[str], list[str]]]) -> None:
    # reference: rapidfuzz's token_set_ratio reaches 100 exactly when one value's words are all
    # among the other's
    from rapidfuzz import fuzz

    from integrate.compare import Coded

    left = [" ".join(a) for a, _ in rows]
    right = [" ".join(b) for _, b in rows]
    coded = Coded(pd.Series(left + right))
    n = len(rows)
    got = coded.words_within(np.arange(n), np.arange(n, 2 * n))
    assert got.tolist() == [fuzz.token_set_ratio(a, b) == 100 for a, b in zip(left, right)]


def test_a_slip_in_a_short_name_or_in_the_first_of_several_given_names_is_close() -> None:
    # One keystroke (optimal string alignment distance 1, rapidfuzz as the reference library) in a
    # short name, where Jaro–Winkler's scale is coarse: KM / KIM, AAV / AVA (a transposition).
    assert OSA.distance("km", "kim") == 1 and OSA.distance("aav", "ava") == 1
    g = _grades({"given_name": "Km", "family_name": "Aav", "birth_date": None},
                {"given_name": "Kim", "family_name": "Ava", "birth_date": None})
    assert g["given_name"] == 2 and g["family_name"] == 2
    # a typo in the first of two given names compares by first words
    g = _grades({"given_name": "Bejamin", "family_name": "Taylor", "birth_date": None},
                {"given_name": "Benjamin Rowan", "family_name": "Taylor", "birth_date": None})
    assert g["given_name"] == 2
    # two keystrokes apart and far by Jaro–Winkler stays different: ANN / IAN
    assert OSA.distance("ann", "ian") == 2 and JaroWinkler.normalized_similarity("ann", "ian") < JW_FAIR
    g = _grades({"given_name": "Ann", "family_name": "Lee", "birth_date": None},
                {"given_name": "Ian", "family_name": "Lee", "birth_date": None})
    assert g["given_name"] == 0


@pytest.mark.parametrize(("a", "b", "grade"), [
    ("ingrid.taylor@example.org", "ingrid.tayolr@example.org", "one edit apart"),  # letters transposed: a slip
    ("anna@example.com", "anna@exmaple.com", "one edit apart"),  # a slip in the domain
    ("l.flores2@example.com", "l.flores7@example.com", "different"),  # another number: another account
    ("ingrid.taylor@example.org", "ingrid_taylor@example.org", "different"),  # another separator
    ("garethsmith@example.org", "gareth.smith@example.org", "different"),
    ("smitho@example.com", "smithm@example.com", "different"),  # another initial at the end
    ("c.hunt@example.com", "a.hunt@example.com", "different"),  # another initial before a separator
    ("ingrid.taylor@example.org", "ingrid.taylor@example.org", "exact"),
])
def test_email_addresses_one_edit_apart_only_for_a_slip(a: str, b: str, grade: str) -> None:
    # Our rule: local parts are built from names, so namesakes' addresses often differ by one
    # edit in a digit, a separator or an initial; only other one-edit differences count as slips.
    schema = CanonicalSchema(fields={"email": {"type": "email", "meaning": "Contact e-mail address."}})
    got = compare(pd.DataFrame({"email": [a, b]}), pd.DataFrame({"i": [0], "j": [1]}), schema)["email"].iloc[0]
    assert GRADE_NAMES["email"][got] == grade


def test_letters_without_a_decomposition_fold_too() -> None:
    # Unicode NFKD leaves Ł, Ø, Æ whole (they have no decomposition in the Unicode Character
    # Database); folding them as l, o, ae is common practice in Latin-to-ASCII transliteration.
    import unicodedata

    from integrate.text_normalise import fold_accents

    assert unicodedata.decomposition("Ł") == "" and unicodedata.decomposition("ø") == ""
    assert fold_accents("Łukasik") == "Lukasik" and fold_accents("Bjørn Æbelø") == "Bjorn AEbelo"
    g = _grades({"given_name": "Małgorzata", "family_name": "Łukasik", "birth_date": None},
                {"given_name": "Malgorzata", "family_name": "Lukasik", "birth_date": None})
    assert g["given_name"] == 4 and g["family_name"] == 4


def test_the_joint_name_grade_keeps_fairly_close_apart_from_close() -> None:
    # Winkler's MARTHA/MARHTA (close) and DWAYNE/DUANE (fairly close) land in different buckets of
    # the joint grade the model sees, so a typo and two similar names get weights of their own.
    from integrate.compare import GRADE_NAMES, MISSING, NAME_PAIR, name_pair_grades

    g = _grades({"given_name": "Martha", "family_name": "Dwayne", "birth_date": None},
                {"given_name": "Marhta", "family_name": "Duane", "birth_date": None})
    joint = name_pair_grades(np.array([g["given_name"], g["family_name"], 4, 0, MISSING]),
                             np.array([4, 4, g["family_name"], MISSING, MISSING]))
    names = [GRADE_NAMES[NAME_PAIR][k] if k >= 0 else "missing" for k in joint.tolist()]
    assert names == ["first close, second agrees", "first fairly close, second agrees",
                     "first agrees, second fairly close", "first differs, second missing", "missing"]
    assert len(set(GRADE_NAMES[NAME_PAIR])) == len(GRADE_NAMES[NAME_PAIR]) == 24


def _given_name_grades(given: list[str], i: list[int], j: list[int]) -> list[int]:
    """Given-name grades of pairs (i, j) among records of one family name, whole set standardised
    together (how common each spelling is matters)."""
    from integrate.standardise import standardise

    records = pd.DataFrame({"given_name": given, "family_name": "Quill", "birth_date": None,
                            "_source": "a", "_record_id": [str(k) for k in range(len(given))]})
    prepared = standardise(records, _schema())
    return compare(prepared, pd.DataFrame({"i": i, "j": j}), _schema())["given_name"].tolist()


def test_two_spellings_in_common_use_are_two_names_not_a_slip() -> None:
    # 'Mark' and 'Marek' (one keystroke apart) are each held by three records: two names, fairly
    # close; 'Marrk' on one record is a slip of 'Mark', close. 'John' / 'Jack' (a diminutive in
    # the table, and a common name of its own) both common: close; 'Johnny' on one record stays
    # equivalent to 'John'. (Common practice: a slip is rare, a name in use recurs.)
    given = ["Mark"] * 3 + ["Marek"] * 3 + ["Marrk"] + ["John"] * 3 + ["Jack"] * 3 + ["Johnny"]
    grades = _given_name_grades(given, [0, 0, 7, 7], [3, 6, 10, 13])
    assert grades == [1, 2, 2, 3]  # fairly close, close, close, equivalent


def test_contact_details_that_differ_between_records_years_apart_have_a_grade_of_their_own() -> None:
    # People move and change numbers (common practice): a postcode or phone that differs between
    # records dated two years or more apart is graded apart from one that differs between records
    # of about the same time, or whose dates are unknown.
    from integrate.standardise import standardise

    schema = CanonicalSchema(fields={"postcode": {"type": "postcode", "meaning": "Postal code."},
                                     "phone": {"type": "phone", "meaning": "Phone number.", "region": "GB"}})
    records = pd.DataFrame({"postcode": ["TK1 1AA", "TK2 2BB", "TK3 3CC", "TK1 1AA"],
                            "phone": ["01134960001", "01614960777", "02079460555", "01134960001"],
                            "_source": "a", "_record_id": ["1", "2", "3", "4"],
                            "_record_date": ["2015-03-01", "2024-06-30", "2015-09-01", None]})
    prepared = standardise(records, schema)
    grades = compare(prepared, pd.DataFrame({"i": [0, 0, 1, 0], "j": [1, 2, 3, 3]}), schema)
    names = [[GRADE_NAMES[t][g] for g in grades[f]] for f, t in (("postcode", "postcode"), ("phone", "phone"))]
    apart = "different, records years apart"
    assert names[0] == [apart, "different", "different", "exact"]
    assert names[1] == names[0]


def test_a_slip_on_a_short_form_is_close() -> None:
    # 'ndy' is one keystroke from 'andy', a short form of Andrew in the packaged table (common
    # practice), and 'peggr' one from 'peggy' (Margaret): close. 'Jan' held by three records is
    # a name in use, not a slip of 'dan', so it stays different from 'Daniel'.
    given = ["ndy", "Andrew", "Peggr", "Margaret", "Jan", "Jan", "Jan", "Daniel"]
    grades = _given_name_grades(given, [0, 2, 4, 0], [1, 3, 7, 3])
    assert [GRADE_NAMES["person_name"][g] for g in grades] == ["close", "close", "different", "different"]


def test_comparing_in_chunks_gives_the_grades_of_one_pass() -> None:
    # each pair's grades depend on that pair alone, so chunk boundaries change nothing
    from pathlib import Path

    from integrate.block import block, default_rules
    from integrate.compare import chunk_size, compare, compare_in_chunks
    from integrate.pipeline import read_and_map
    from integrate.standardise import standardise
    from integrate.workspace import load_workspace

    ws = load_workspace(Path(__file__).resolve().parents[1])
    records, _ = read_and_map(ws)
    records = records.reset_index(drop=True).iloc[:3000].reset_index(drop=True)
    prepared = standardise(records, ws.canonical, {e.mapping.source: e.mapping.region for e in ws.sources})
    pairs, _ = block(prepared, list(ws.canonical.blocking) or default_rules(ws.canonical))
    seen: list[tuple[int, int]] = []
    chunked = compare_in_chunks(prepared, pairs, ws.canonical, size=997,
                                count=lambda done, total, unit: seen.append((done, total)))
    pd.testing.assert_frame_equal(chunked, compare(prepared, pairs, ws.canonical))
    assert seen[-1] == (len(pairs), len(pairs)) and len(seen) == -(-len(pairs) // 997)
    assert chunk_size(10**9, available=8 * 10**9) == 8 * 10**9 // 8 // 600
    assert chunk_size(50, available=10**12) == 50


def test_the_same_first_name_with_another_middle_name_is_not_the_same_name() -> None:
    # 'Ryan Robert' / 'Ryan Frederick' is what twins or a parent and child sharing a first name
    # look like: fairly close. A dropped middle name stays equivalent, and a slip in the middle
    # name is close (Jaro–Winkler from rapidfuzz, the reference library, at or above JW_CLOSE).
    other = _grades({"given_name": "Ryan Robert", "family_name": "Patel", "birth_date": None},
                    {"given_name": "Ryan Frederick", "family_name": "Patel", "birth_date": None})
    dropped = _grades({"given_name": "Anna", "family_name": "Patel", "birth_date": None},
                      {"given_name": "Anna Marie", "family_name": "Patel", "birth_date": None})
    assert JaroWinkler.normalized_similarity("mary ann", "mary anne") >= JW_CLOSE
    slip = _grades({"given_name": "Mary Ann", "family_name": "Patel", "birth_date": None},
                   {"given_name": "Mary Anne", "family_name": "Patel", "birth_date": None})
    assert (other["given_name"], dropped["given_name"], slip["given_name"]) == (1, 3, 2)
