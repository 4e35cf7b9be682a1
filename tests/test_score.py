"""Fellegi–Sunter scoring: weights from the definition, EM recovering known m/u."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from integrate.score import MATCH, estimate


def test_agreement_and_disagreement_weights_follow_the_definition() -> None:
    # w_a = log2(m/u), w_d = log2((1-m)/(1-u)) (Fellegi & Sunter 1969; base 2 after Newcombe et al.
    # 1959). m = 0.9, u = 0.01 -> 6.491853 / -3.307429 (REFERENCE_CHECKS §6, computed from definition)
    from integrate.score import FieldModel

    fm = FieldModel("x", "category", m=[0.1, 0.9], u=[0.99, 0.01], u_random=[0.99, 0.01])
    w_d, w_a = fm.weights
    assert math.isclose(w_a, 6.491853, abs_tol=1e-6)
    assert math.isclose(w_d, -3.307429, abs_tol=1e-6)


def _synthetic(n: int, share: float, m: dict[str, list[float]], u: dict[str, list[float]], seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    is_match = rng.random(n) < share
    columns = {}
    for field in m:
        levels = len(m[field])
        from_m = rng.choice(levels, size=n, p=m[field])
        from_u = rng.choice(levels, size=n, p=u[field])
        columns[field] = np.where(is_match, from_m, from_u).astype(np.int8)
    return pd.DataFrame(columns)


def test_em_recovers_known_m_and_u_within_two_hundredths() -> None:
    """Pairs drawn from chosen m/u (conditional independence holds by construction)."""
    m = {"id_a": [0.05, 0.10, 0.85], "id_b": [0.10, 0.20, 0.70], "kind": [0.08, 0.92],
         "code": [0.15, 0.85]}
    u = {"id_a": [0.90, 0.08, 0.02], "id_b": [0.85, 0.10, 0.05], "kind": [0.60, 0.40],
         "code": [0.95, 0.05]}
    types = {"id_a": "identifier", "id_b": "identifier", "kind": "category", "code": "category"}
    grades = _synthetic(200_000, 0.15, m, u, seed=7)
    # starting u: a deliberately rough guess, not the true values
    start = {f: np.full(len(v), 1.0 / len(v)) for f, v in u.items()}
    model = estimate(grades, types, start)
    assert abs(model.prior - 0.15) < 0.02
    for field in m:
        assert np.allclose(model.fields[field].m, m[field], atol=0.02), (field, model.fields[field].m)
        assert np.allclose(model.fields[field].u, u[field], atol=0.02), (field, model.fields[field].u)
    assert model.converged
    assert set(model.class_shares) == {MATCH, "unrelated"}


def test_pattern_codes_number_distinct_rows_in_order_of_first_appearance() -> None:
    # reference: numpy's distinct rows (np.unique along axis 0)
    from integrate.score import pattern_codes

    rows = np.random.default_rng(7).integers(-1, 4, size=(2000, 5))
    codes = pattern_codes(rows)
    unique, inverse = np.unique(rows, axis=0, return_inverse=True)
    assert codes.max() + 1 == len(unique)
    # equal rows share a code and different rows do not
    assert (pd.crosstab(codes, inverse.reshape(-1)).to_numpy() > 0).sum(axis=1).tolist() == [1] * len(unique)
    first_seen = pd.unique(inverse.reshape(-1))
    assert codes[[int(np.flatnonzero(inverse.reshape(-1) == k)[0]) for k in first_seen]].tolist() == list(
        range(len(unique)))


def test_pattern_codes_of_wide_rows_past_an_int64_mixed_radix_number() -> None:
    # 30 columns of 31 levels: 31**30 does not fit an int64, so the codes are compressed on the
    # way; reference again numpy's distinct rows, numbered by first appearance
    from integrate.score import column_pattern_codes

    rng = np.random.default_rng(11)
    base = rng.integers(-1, 30, size=(300, 30)).astype(np.int8)
    rows = base[rng.integers(0, len(base), size=3000)]  # repeated rows
    codes = column_pattern_codes(list(rows.T), len(rows))
    _, first, inverse = np.unique(rows, axis=0, return_index=True, return_inverse=True)
    order = np.argsort(first)  # distinct rows in order of first appearance
    number = np.empty(len(order), np.int64)
    number[order] = np.arange(len(order))
    assert codes.tolist() == number[inverse.reshape(-1)].tolist()


def test_decisions_follow_the_thresholds_from_link_down() -> None:
    from integrate.mapping.spec import Thresholds
    from integrate.score import LINK, NON_LINK, POSSIBLE, decisions

    out = decisions(np.array([0.05, 0.2, 0.5, 0.8, 0.99, np.nan]), Thresholds(link=0.8, review=0.2))
    assert out.tolist() == [NON_LINK, POSSIBLE, POSSIBLE, LINK, LINK, NON_LINK]


def test_relatives_may_share_a_birth_date_but_learn_nothing_else_about_it() -> None:
    # The relatives' class keeps personal fields at the random-pair profile, except that a fixed
    # share of relatives' pairs are twins (TWIN_SHARE; a birth in 60 is a twin birth, common
    # practice). A same-household pair with one birth date and another first name then weighs
    # far less than it would under the random profile, while the share stays fixed under EM.
    from integrate.compare import GRADE_NAMES
    from integrate.score import RELATED, TWIN_SHARE, _initial_classes

    types = {"given_name+family_name": "name_pair", "birth_date": "date", "phone": "phone"}
    u_random = {f: np.full(len(GRADE_NAMES[t]), 1.0 / len(GRADE_NAMES[t])) for f, t in types.items()}
    u_random["birth_date"] = np.array([0.9, 0.09, 0.005, 0.004, 0.0005, 0.0005])
    theta, _, free = _initial_classes(types, u_random)
    related = theta[RELATED]["birth_date"]
    assert math.isclose(related[-1], TWIN_SHARE) and math.isclose(related.sum(), 1.0)
    # the other grades keep the random pairs' proportions
    rest = u_random["birth_date"][:-1]
    assert np.allclose(related[:-1] / related[:-1].sum(), rest / rest.sum())
    assert "birth_date" not in free[RELATED]


def test_a_rare_name_weighs_more_than_a_common_one_exact_or_close() -> None:
    # Value-frequency adjustment log2(Σp² / p_v), from u(v) = u_exact * p_v / Σp² (Winkler's
    # frequency-based matching weights, from memory; worked by hand here). Family names of ten
    # records: smith x6, jones x2, quill x1, quil x1 -> p = .6, .2, .1, .1 and Σp² = 0.42.
    # A close or equivalent pair weighs by the commoner of its two values ('quill' / 'quil': 0.1).
    from integrate.score import frequency_adjustments

    prepared = pd.DataFrame({"family_name": ["smith"] * 6 + ["jones"] * 2 + ["quill", "quil"]})
    i, j = np.array([0, 6, 8, 0, 0]), np.array([1, 7, 9, 6, 8])
    # grades of person_name: 4 exact, 2 close, 0 different
    grades = pd.DataFrame({"family_name": [4, 4, 2, 0, 2]})
    adjust = frequency_adjustments(prepared, grades, {"family_name": "person_name"}, i, j)["family_name"]
    expected = [math.log2(0.42 / 0.6), math.log2(0.42 / 0.2), math.log2(0.42 / 0.1), 0.0,
                math.log2(0.42 / 0.6)]  # the last: 'smith' close to 'quil' weighs as common 'smith'
    assert np.allclose(adjust, expected, atol=1e-9)
    assert adjust[2] > adjust[1] > 0 > adjust[0]


def test_a_full_name_weighs_by_both_parts_and_by_itself() -> None:
    # Eight records: james smith x4, james quill x1, anna smith x1, anna quill x2. Given names
    # (and family names) split 5:3, Σp² = 0.53125; full names 4:1:1:2 of 8, Σp² = 0.34375. With
    # both names exact the pair's adjustment is the mean of the fields' sum and the full name's
    # own log2(Σp² / p_v) (worked by hand from the definition), kept under the joint key.
    from integrate.score import frequency_adjustments

    given = ["james"] * 5 + ["anna"] * 3
    family = ["smith"] * 4 + ["quill", "smith", "quill", "quill"]
    prepared = pd.DataFrame({"given_name": given, "family_name": family})
    i, j = np.array([0, 6, 0]), np.array([1, 7, 4])
    grades = pd.DataFrame({"given_name": [4, 4, 4], "family_name": [4, 4, 0]})
    types = {"given_name": "person_name", "family_name": "person_name"}
    out = frequency_adjustments(prepared, grades, types, i, j)
    sep = 0.53125
    common = 0.5 * (2 * math.log2(sep / 0.625) + math.log2(0.34375 / 0.5))
    rare = 0.5 * (2 * math.log2(sep / 0.375) + math.log2(0.34375 / 0.25))
    assert np.allclose(out["given_name+family_name"], [common, rare, 0.0])
    # only the given name agrees in the last pair: its own adjustment stands alone
    assert np.allclose(out["given_name"], [0.0, 0.0, math.log2(sep / 0.625)])
    assert np.allclose(out["family_name"], 0.0)


def test_relatives_name_profile_is_held_fixed_where_namesakes_dominate() -> None:
    # Candidate pairs from name blocking on a large input are mostly strangers who share a family
    # name. Were the relatives' joint name profile learned, EM could turn the class into a copy of
    # those strangers (seen on 30,000 generated people: family-name agreement in the class fell
    # to 0.006) and the households would fall to the match class. The profile is a stated prior:
    # first names as random pairs', family names shared by RELATIVES_SHARE_FAMILY.
    from integrate.compare import GRADE_NAMES, NAME_BUCKETS
    from integrate.score import RELATED, RELATIVES_SHARE_FAMILY, _initial_classes

    size = len(NAME_BUCKETS)
    differs, agrees = NAME_BUCKETS.index("differs"), NAME_BUCKETS.index("agrees")
    types = {"given_name+family_name": "name_pair", "birth_date": "date", "phone": "phone"}
    levels = {f: len(GRADE_NAMES[t]) for f, t in types.items()}
    rng = np.random.default_rng(3)
    n = 100_000
    kind = rng.choice(3, size=n, p=[0.05, 0.05, 0.90])  # match, household, namesake
    names = np.where(kind == 0, agrees * size + agrees,
                     np.where(rng.random(n) < 0.9, differs * size + agrees, differs * size + differs))
    birth = np.where(kind == 0, levels["birth_date"] - 1, 0)
    phone = np.where(kind == 0, 3, np.where(kind == 1, 3, 0))
    grades = pd.DataFrame({"given_name+family_name": names, "birth_date": birth, "phone": phone}).astype(np.int8)
    u_random = {f: np.full(k, 0.02 / (k - 1)) for f, k in levels.items()}
    for f in u_random:
        u_random[f][0] = 0.98
    u_random["given_name+family_name"] = np.full(levels["given_name+family_name"], 0.05 / 23)
    u_random["given_name+family_name"][differs * size + differs] = 0.95
    start, _, free = _initial_classes(types, u_random)
    model = estimate(grades, types, u_random)
    profile = model._theta[RELATED]["given_name+family_name"]
    assert "given_name+family_name" not in free[RELATED]
    assert np.array_equal(profile, start[RELATED]["given_name+family_name"])
    joint = np.append(profile, 0.0).reshape(size, size)
    # (up to the "both missing" cell, which is no grade: a pair with both names blank is missing)
    assert joint[:, agrees].sum() == pytest.approx(RELATIVES_SHARE_FAMILY, abs=1e-3)
    # first names of relatives compare as random pairs' first names do
    random_first = np.append(u_random["given_name+family_name"], 0.0).reshape(size, size).sum(axis=1)
    assert np.allclose(joint.sum(axis=1), random_first / random_first.sum(), atol=1e-3)
    # and the household pairs (another first name, shared phone) stay non-matches
    household = grades[kind == 1].to_numpy(np.int64)[:1]
    assert model.pattern_weight(household, list(types))[0] < 0


def test_a_rare_family_name_counts_against_strangers_not_against_relatives() -> None:
    # u(v) = u * 2^-rarity for an agreement on a rare value (value-frequency weighting), applied
    # per non-match class: relatives share their family name however rare it is, so their class
    # keeps its likelihood. Expected values computed from the mixture's definition:
    # w = log2(f_M / (s_R f_R + s_U f_U 2^-r)), shares normalised over the non-match classes.
    from integrate.score import RELATED, UNRELATED, FieldModel, ScoreModel

    theta = {MATCH: {"x": np.array([0.1, 0.9])}, RELATED: {"x": np.array([0.2, 0.8])},
             UNRELATED: {"x": np.array([0.99, 0.01])}}
    shares = {MATCH: 0.01, RELATED: 0.02, UNRELATED: 0.97}
    model = ScoreModel({"x": FieldModel("x", "category", [0.1, 0.9], [0.9, 0.1], [0.99, 0.01])}, 0.01, 1, True,
                       shares, _theta=theta)
    grades = np.array([[1]])
    r = np.array([4.0])
    s_r, s_u = 0.02 / 0.99, 0.97 / 0.99
    plain = model.pattern_weight(grades, ["x"])
    assert plain[0] == pytest.approx(math.log2(0.9 / (s_r * 0.8 + s_u * 0.01)))
    strangers_only = model.pattern_weight(grades, ["x"], r, r)
    assert strangers_only[0] == pytest.approx(math.log2(0.9 / (s_r * 0.8 + s_u * 0.01 * 2 ** -4)))
    every_class = model.pattern_weight(grades, ["x"], r)
    assert every_class[0] == pytest.approx(math.log2(0.9 / ((s_r * 0.8 + s_u * 0.01) * 2 ** -4)))
    assert plain[0] < strangers_only[0] < every_class[0]


def test_the_plausibility_check_reads_both_names_agreeing_for_the_joint_name_field() -> None:
    # The joint field's last level is "first missing, second agrees", not exact agreement; the
    # check read it and warned on well-fitted models (m=0.000, u=0.000).
    from integrate.compare import GRADE_NAMES
    from integrate.score import NAME_PAIR, FieldModel, ScoreModel, _exact_level, _plausibility

    assert GRADE_NAMES[NAME_PAIR][_exact_level(NAME_PAIR)] == "first agrees, second agrees"
    assert GRADE_NAMES["date"][_exact_level("date")] == "exact"
    levels = len(GRADE_NAMES[NAME_PAIR])
    m, u = np.full(levels, 0.001), np.full(levels, 0.01)
    m[_exact_level(NAME_PAIR)], u[_exact_level(NAME_PAIR)] = 0.8, 0.001
    model = ScoreModel({"n": FieldModel("n", NAME_PAIR, list(m / m.sum()), list(u / u.sum()), list(u / u.sum()))},
                       0.01, 10, True, {MATCH: 0.01, "unrelated": 0.99})
    assert _plausibility(model) == []
    model.fields["n"].m, model.fields["n"].u = list(u / u.sum()), list(m / m.sum())
    assert len(_plausibility(model)) == 1


def test_the_match_share_is_held_to_a_few_matches_per_record() -> None:
    """With ``records`` given, EM's match share times all pairs stays at most MAX_MATCHES_PER_RECORD x
    records (an M-step under that bound), the other shares keep their proportions, and the model warns
    when the bound holds it; a bound that does not bind changes nothing."""
    from integrate.score import MAX_MATCHES_PER_RECORD

    m = {"id_a": [0.05, 0.10, 0.85], "kind": [0.08, 0.92], "code": [0.15, 0.85]}
    u = {"id_a": [0.90, 0.08, 0.02], "kind": [0.60, 0.40], "code": [0.95, 0.05]}
    types = {"id_a": "identifier", "kind": "category", "code": "category"}
    grades = _synthetic(100_000, 0.15, m, u, seed=11)  # 15,000 matching pairs
    start = {f: np.full(len(v), 1.0 / len(v)) for f, v in u.items()}
    free = estimate(grades, types, start)
    loose = estimate(grades, types, start, records=1_000_000)  # bound far above 15,000 matches
    assert loose.prior == free.prior and not any("bound" in w for w in loose.warnings)
    records = 2_500  # the bound: 2 x 2,500 = 5,000 matches, a third of the 15,000 drawn
    held = estimate(grades, types, start, records=records)
    limit = MAX_MATCHES_PER_RECORD * records / len(grades)
    assert free.prior > 2 * limit
    assert held.prior <= limit * (1 + 1e-9) and held.prior == pytest.approx(limit, rel=1e-6)
    assert sum(held.class_shares.values()) == pytest.approx(1.0)
    assert any("held at its bound" in w for w in held.warnings)


def test_each_evidence_stratum_has_its_own_share_of_matches() -> None:
    """Pairs that can compare every field and pairs missing one field (a sparse record, a source
    without it) are matches at different rates; EM recovers each stratum's share, and the prior
    weight of a pair is its stratum's."""
    from integrate.compare import MISSING
    from integrate.score import evidence_strata

    m = {"id_a": [0.05, 0.10, 0.85], "kind": [0.08, 0.92], "code": [0.15, 0.85]}
    u = {"id_a": [0.90, 0.08, 0.02], "kind": [0.60, 0.40], "code": [0.95, 0.05]}
    types = {"id_a": "identifier", "kind": "category", "code": "category"}
    full = _synthetic(100_000, 0.30, m, u, seed=3)
    sparse = _synthetic(100_000, 0.05, m, u, seed=4).assign(code=np.int8(MISSING))
    grades = pd.concat([full, sparse], ignore_index=True)
    start = {f: np.full(len(v), 1.0 / len(v)) for f, v in u.items()}
    model = estimate(grades, types, start)
    keys = evidence_strata(grades.to_numpy(np.int64))
    assert set(model.strata) == set(np.unique(keys).tolist()) and len(model.strata) == 2
    assert model.strata[int(keys[0])] == pytest.approx(0.30, abs=0.02)
    assert model.strata[int(keys[-1])] == pytest.approx(0.05, abs=0.02)
    assert model.prior == pytest.approx(0.175, abs=0.02)  # the overall share
    prior = model.prior_weights(grades.to_numpy(np.int64)[[0, -1]])
    assert prior == pytest.approx(np.log2([model.strata[int(k)] / (1 - model.strata[int(k)]) for k in keys[[0, -1]]]))


def test_background_pairs_never_count_as_matches() -> None:
    """A random background pair stands for many pairs blocking did not propose. Counted as a possible
    match, a handful that happen to agree stood for thousands of matches; a match blocking did not
    propose can never be linked, so the background is held out of the match class."""
    m = {"id_a": [0.05, 0.10, 0.85], "id_b": [0.10, 0.20, 0.70], "kind": [0.08, 0.92], "code": [0.15, 0.85]}
    u = {"id_a": [0.90, 0.08, 0.02], "id_b": [0.85, 0.10, 0.05], "kind": [0.60, 0.40], "code": [0.95, 0.05]}
    types = {"id_a": "identifier", "id_b": "identifier", "kind": "category", "code": "category"}
    candidates = _synthetic(20_000, 0.20, m, u, seed=5)  # about 4,000 matches
    strangers = _synthetic(2_000, 0.0, m, u, seed=6)
    lookalikes = _synthetic(100, 1.0, m, u, seed=8)  # agree like matches: 100 x 20 = 2,000 pairs
    start = {f: np.full(len(v), 1.0 / len(v)) for f, v in u.items()}
    implied = []
    for background in (strangers, pd.concat([strangers, lookalikes], ignore_index=True)):
        model = estimate(candidates, types, start, background, 20.0)
        implied.append(model.prior * (len(candidates) + 20.0 * len(background)))
    assert implied[0] == pytest.approx(4_000, rel=0.1)
    # measured 3,635 -> 3,228; counted as possible matches (the code before), 4,171 -> 6,187
    assert implied[1] < implied[0] + 500  # not the lookalikes' 2,000 more


def test_sampled_pairs_that_blocking_proposed_are_found_in_either_order() -> None:
    from integrate.score import candidate_mask

    sample = pd.DataFrame({"i": [0, 1, 2, 5], "j": [3, 4, 7, 6]})
    pairs = pd.DataFrame({"i": [3, 2, 9], "j": [0, 7, 10]})  # (3, 0) is (0, 3) the other way round
    assert candidate_mask(sample, pairs).tolist() == [True, False, True, False]
    assert candidate_mask(sample, pairs.iloc[:0]).tolist() == [False] * 4


def test_relatives_and_neighbours_are_years_apart_as_often_as_random_pairs() -> None:
    """Whether two records are dated years apart is a property of the records, not of whether two
    people are relatives: in those classes the split between "different" and "different, records
    years apart" stays the random pairs' (learned, it let a class gather strangers whose records are
    years apart on every contact field at 100,000 generated people)."""
    from integrate.score import _apart_as_random

    counts = np.array([10.0, 90.0, 5.0, 40.0])  # different, years apart, one edit, exact
    random_profile = np.array([0.6, 0.3, 0.05, 0.05])
    out = _apart_as_random(counts, random_profile, 1)
    assert out[0] + out[1] == pytest.approx(100.0) and out[1] / out[0] == pytest.approx(0.3 / 0.6)
    assert out[2:].tolist() == [5.0, 40.0] and out.sum() == pytest.approx(counts.sum())
