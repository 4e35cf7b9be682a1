"""The Wilson score interval and the audit sample behind the precision of automatic links."""

from __future__ import annotations

import pandas as pd
import pytest

from integrate.review.quality import audit_precision, draw_audit_sample, wilson_interval
from integrate.review.store import DecisionStore, NewDecision

# Newcombe (1998), Stat. Med. 17:857-872, Table I, method 3 (Wilson score), 95 %; four decimals.
NEWCOMBE_TABLE_I = [
    (81, 263, 0.2553, 0.3662),
    (15, 148, 0.0624, 0.1605),
    (0, 20, 0.0, 0.1611),
    (1, 29, 0.0061, 0.1718),
]


@pytest.mark.parametrize(("successes", "n", "low", "high"), NEWCOMBE_TABLE_I)
def test_wilson_matches_newcombe_table_i(successes: int, n: int, low: float, high: float) -> None:
    got_low, got_high = wilson_interval(successes, n)
    assert round(got_low, 4) == low
    assert round(got_high, 4) == high


@pytest.mark.parametrize(("successes", "n", "low", "high"), [
    # Wilson formula values for reviewed samples, as computed by scipy (statsmodels agrees, REFERENCE_CHECKS §7)
    # (REFERENCE_CHECKS §7: 45/50 -> 0.786398-0.956524; 50/50 -> 0.928652-1.0)
    (45, 50, 0.786398, 0.956524),
    (50, 50, 0.928652, 1.0),
])
def test_wilson_for_a_reviewed_sample(successes: int, n: int, low: float, high: float) -> None:
    got_low, got_high = wilson_interval(successes, n)
    assert got_low == pytest.approx(low, abs=5e-7)
    assert got_high == pytest.approx(high, abs=5e-7)


@pytest.mark.parametrize(("successes", "n"), [(81, 263), (15, 148), (0, 20), (1, 29), (45, 50), (7, 7), (3, 1000)])
def test_wilson_agrees_with_scipy(successes: int, n: int) -> None:
    stats = pytest.importorskip("scipy.stats")
    reference = stats.binomtest(successes, n).proportion_ci(confidence_level=0.95, method="wilson")
    low, high = wilson_interval(successes, n)
    assert low == pytest.approx(reference.low, abs=1e-12)
    assert high == pytest.approx(reference.high, abs=1e-12)


def test_wilson_rejects_impossible_counts() -> None:
    with pytest.raises(ValueError, match="at least one"):
        wilson_interval(0, 0)
    with pytest.raises(ValueError, match="outside"):
        wilson_interval(5, 4)


def _links(count: int) -> pd.DataFrame:
    return pd.DataFrame({
        "source_a": ["a"] * count, "record_id_a": [f"{k:03d}" for k in range(count)],
        "source_b": ["b"] * count, "record_id_b": [f"{k:03d}" for k in range(count)],
        "probability": [0.95] * count, "decision": ["link"] * (count - 2) + ["possible link", "non-link"],
    })


def test_audit_sample_is_seeded_and_draws_only_links() -> None:
    pairs = _links(200)
    first = draw_audit_sample(pairs, 30, seed=7)
    again = draw_audit_sample(pairs.sample(frac=1.0, random_state=3), 30, seed=7)  # file order must not matter
    assert first.equals(again)
    assert len(first) == 30 and not first.duplicated().any()
    assert set(first["record_id_a"]) <= set(pairs.loc[pairs["decision"] == "link", "record_id_a"])
    other = draw_audit_sample(pairs, 30, seed=8)
    assert not first.equals(other)
    more = draw_audit_sample(pairs, 30, seed=7, exclude=first)
    assert not set(more["record_id_a"]) & set(first["record_id_a"])


def test_audit_precision_from_decisions(tmp_path) -> None:  # noqa: ANN001
    store = DecisionStore.for_workspace(tmp_path)
    sample = draw_audit_sample(_links(120), 50, seed=1)
    assert store.add_audit_sample(sample, seed=1) == 50
    assert store.add_audit_sample(sample, seed=1) == 0  # drawing the same pairs again adds nothing
    for k, row in enumerate(sample.itertuples(index=False)):
        decision = "different" if k < 5 else "same"
        store.record(NewDecision(source_a=row.source_a, record_id_a=row.record_id_a, source_b=row.source_b,
                                 record_id_b=row.record_id_b, decision=decision, reviewer="ana", origin="audit"))
    estimate = audit_precision(tmp_path)
    assert estimate is not None
    assert (estimate.correct, estimate.checked, estimate.drawn) == (45, 50, 50)
    # Wilson formula, 45 of 50 (REFERENCE_CHECKS §7, statsmodels = scipy)
    assert estimate.low == pytest.approx(0.786398, abs=5e-7)
    assert estimate.high == pytest.approx(0.956524, abs=5e-7)
