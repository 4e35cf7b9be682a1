"""End to end on the demo workspace: real files in, real outputs out, checked against the truth."""

from __future__ import annotations

from html import escape as html_escape

import pandas as pd

from integrate.evaluate import evaluate, scores_by_source_kind
from integrate.outputs.report import CAUTIONS

from .conftest import REPO

TRUTH = REPO / "demo_sources" / "truth"


def test_every_record_lands_in_exactly_one_entity(demo_run) -> None:
    crosswalk = pd.read_csv(demo_run.output_dir / "crosswalk.csv", dtype=str)
    truth = pd.read_csv(TRUTH / "crosswalk.csv", dtype=str)
    assert len(crosswalk) == len(truth) == sum(demo_run.source_counts.values())
    assert not crosswalk.duplicated(["source", "record_id"]).any()
    keys = set(zip(crosswalk["source"], crosswalk["record_id"]))
    assert keys == set(zip(truth["source"], truth["record_id"]))


def test_pairwise_f1_against_the_demo_truth(demo_run) -> None:
    crosswalk = pd.read_csv(demo_run.output_dir / "crosswalk.csv", dtype=str)
    truth = pd.read_csv(TRUTH / "crosswalk.csv", dtype=str)
    result = evaluate(crosswalk, truth)
    # Floors on the demo (twins, relatives who give one another's contact details, sparse records),
    # at the default link threshold. Measured: pairwise precision 0.994, recall 0.949, F1 0.971;
    # B-cubed F1 0.986. (Before EM kept background pairs out of the match class: precision 0.976,
    # F1 0.969.) Most pairs still missed share only a name and are left as possible links.
    assert result.pairwise.precision >= 0.99, result
    assert result.pairwise.f1 >= 0.965, result
    assert result.bcubed.f1 >= 0.98, result


def test_pairs_within_one_source_are_rarely_wrongly_merged(demo_run) -> None:
    """Two records of one export that are two people (a household, twins) are the costliest error."""
    crosswalk = pd.read_csv(demo_run.output_dir / "crosswalk.csv", dtype=str)
    truth = pd.read_csv(TRUTH / "crosswalk.csv", dtype=str)
    within = scores_by_source_kind(crosswalk, truth)["within one source"]
    # measured 0.990 (0.944 before EM kept background pairs out of the match class)
    assert within.precision >= 0.98, within


def test_merged_heights_match_the_truth(demo_run) -> None:
    """At least 95% of entities with a height are within 0.5 cm of the true height."""
    crosswalk = pd.read_csv(demo_run.output_dir / "crosswalk.csv", dtype=str)
    truth_cw = pd.read_csv(TRUTH / "crosswalk.csv", dtype=str)
    entities = pd.read_csv(TRUTH / "entities.csv", dtype={"entity_id": str})
    merged = pd.read_csv(demo_run.output_dir / "merged.csv", dtype={"entity_id": str})
    joined = crosswalk.merge(truth_cw, on=["source", "record_id"], suffixes=("", "_true"))
    # each merged entity stands for the true person most of its records belong to
    majority = joined.groupby("entity_id")["entity_id_true"].agg(lambda s: s.value_counts().index[0])
    compared = merged.set_index("entity_id")[["height_cm"]].join(majority).merge(
        entities[["entity_id", "height_cm"]], left_on="entity_id_true", right_on="entity_id",
        suffixes=("", "_true"))
    with_height = compared.dropna(subset=["height_cm", "height_cm_true"])
    assert len(with_height) > 1000
    close = (with_height["height_cm"] - with_height["height_cm_true"]).abs() <= 0.5
    assert close.mean() >= 0.95, close.mean()


def test_unit_slips_never_win(demo_run) -> None:
    """Heights typed in the wrong unit are converted from it (fix_unit_slips) and named; none is out of range."""
    merged = pd.read_csv(demo_run.output_dir / "merged.csv")
    assert merged["height_cm"].dropna().between(100, 230).all()
    records = pd.read_parquet(demo_run.output_dir / "records.parquet")
    fixed = records[records["_unit_fixes"].notna()]
    # the demo's slips: inches typed into membership's cm column, centimetres into rentals' inches column
    assert set(fixed["_source"]) == {"membership", "rentals"} and len(fixed) >= 3
    assert fixed["height_cm"].between(100, 230).all()
    assert fixed["_unit_fixes"].str.startswith("height_cm: read as ").all()


def test_outputs_and_report_are_written(demo_run) -> None:
    out = demo_run.output_dir
    for name in ("merged.csv", "merged.parquet", "crosswalk.csv", "provenance.csv", "provenance.parquet",
                 "pairs.parquet", "failures.csv"):
        assert (out / name).stat().st_size > 0, name
    pairs = pd.read_parquet(out / "pairs.parquet")
    assert {"source_a", "record_id_a", "source_b", "record_id_b", "weight", "probability", "decision"} <= set(
        pairs.columns)
    assert set(pairs["decision"]) <= {"link", "possible link", "non-link"}
    prov = pd.read_parquet(out / "provenance.parquet")
    assert list(prov.columns[:9]) == ["entity_id", "field", "value", "source", "record_id", "rule",
                                      "candidates", "conflict", "alternatives"]
    html = demo_run.report_path.read_text(encoding="utf-8")
    for caution in CAUTIONS:
        assert html_escape(caution) in html
    assert "<svg" in html and "<script" not in html
    for source in ("membership", "webshop", "rentals", "events"):
        assert source in html


def test_money_sums_are_exact_in_minor_units(demo_run) -> None:
    """Event fees (GBP, summed per person) equal the truth to the penny for correctly merged people."""
    crosswalk = pd.read_csv(demo_run.output_dir / "crosswalk.csv", dtype=str)
    truth_cw = pd.read_csv(TRUTH / "crosswalk.csv", dtype=str)
    entities = pd.read_csv(TRUTH / "entities.csv", dtype={"entity_id": str})
    merged = pd.read_csv(demo_run.output_dir / "merged.csv", dtype={"entity_id": str})
    joined = crosswalk.merge(truth_cw, on=["source", "record_id"], suffixes=("", "_true"))
    # entities whose records are exactly one true person's records
    exact = joined.groupby("entity_id")["entity_id_true"].nunique() == 1
    sizes_pred = joined.groupby("entity_id").size()
    sizes_true = truth_cw.groupby("entity_id").size()
    one_to_one = joined.groupby("entity_id")["entity_id_true"].first()[exact]
    one_to_one = one_to_one[sizes_pred[one_to_one.index].to_numpy() == sizes_true[one_to_one.to_numpy()].to_numpy()]
    check = merged.set_index("entity_id").loc[one_to_one.index, ["event_fees_gbp", "deposits_gbp"]]
    expected = entities.set_index("entity_id").loc[one_to_one.to_numpy(), ["event_fees_gbp", "deposits_gbp"]]
    for column in ("event_fees_gbp", "deposits_gbp"):
        got = check[column].to_numpy()
        want = expected[column].to_numpy()
        both = ~pd.isna(got) & ~pd.isna(want)
        assert both.sum() > 100
        assert (abs(got[both] - want[both]) < 0.005).mean() == 1.0, column


def test_report_measures_itself_against_the_truth(demo_run) -> None:
    """The demo schema names its truth file: the run judges itself, hard non-matches included."""
    quality = demo_run.quality
    assert quality is not None and quality.truth_file == "demo_sources/truth/crosswalk.csv"
    assert quality.evaluation.pairwise.f1 >= 0.965
    hard = quality.hard_negatives.set_index("kind")
    assert len(hard) == 3 and (hard["candidate pairs"] > 100).all()
    share = hard["wrongly merged"] / hard["candidate pairs"]
    twins = share[share.index.str.startswith("twins")]
    # relatives and namesakes: measured 0 of 1,823 and 11 of 767 wrongly merged
    assert (share.drop(twins.index) <= 0.02).all(), hard
    # twins: measured 11 of 112 (56 before), most of them twins who share a first given name; the
    # goal of at most 0.5 % is not reached
    assert (twins <= 0.15).all(), hard
    html = demo_run.report_path.read_text(encoding="utf-8")
    assert "Hard non-matches" in html and "Borderline pairs" in html
    # near-certain pairs a cut separated (goal: none): measured 4, each where a wrong link of its own
    # near-certain strength joined a third record that the cut had to keep apart
    assert demo_run.near_certain_cut <= 8
    assert f"ended in two entities: {demo_run.near_certain_cut:,}" in html
