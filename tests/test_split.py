"""Split by entity: no entity in two parts, each part's share within one entity's weight, reproducible."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from integrate import cli
from integrate.split import SplitError, assign_parts, entity_strata, parse_fractions, split_outputs


def _check_parts(weights: pd.Series, parts: pd.Series, fractions: list[float], names: list[str]) -> None:
    total = weights.sum()
    got = weights.groupby(parts).sum().reindex(names, fill_value=0)
    for name, share in zip(names, fractions):
        # the guarantee: a part misses its share of the total by at most one entity's weight
        assert abs(got[name] - share * total) <= weights.max() + 1e-9, (name, got[name], share * total)


@settings(max_examples=60, deadline=None)
@given(sizes=st.lists(st.integers(1, 25), min_size=1, max_size=300),
       raw=st.lists(st.floats(0.05, 1.0), min_size=2, max_size=5), seed=st.integers(0, 2**31))
def test_every_part_holds_its_share_within_one_entity(sizes: list[int], raw: list[float], seed: int) -> None:
    fractions = [r / sum(raw) for r in raw]
    weights = pd.Series(sizes, index=[f"E{k:04d}" for k in range(len(sizes))])
    parts = assign_parts(weights, fractions=fractions, seed=seed)
    names = [f"part_{k}" for k in range(1, len(fractions) + 1)] if len(fractions) > 3 else (
        ["train", "test"] if len(fractions) == 2 else ["train", "validation", "test"])
    assert parts.index.equals(weights.sort_index().index) and parts.isin(names).all()
    _check_parts(weights, parts, fractions, names)


@settings(max_examples=30, deadline=None)
@given(sizes=st.lists(st.integers(1, 10), min_size=5, max_size=200), seed=st.integers(0, 1000))
def test_the_same_seed_gives_the_same_parts_whatever_the_row_order(sizes: list[int], seed: int) -> None:
    weights = pd.Series(sizes, index=[f"E{k:04d}" for k in range(len(sizes))])
    shuffled = weights.sample(frac=1.0, random_state=seed)
    a = assign_parts(weights, folds=3, seed=seed)
    b = assign_parts(shuffled, folds=3, seed=seed)
    assert a.equals(b)


def test_stratified_parts_hold_the_shares_within_each_stratum() -> None:
    rng = np.random.default_rng(7)
    ids = [f"E{k:04d}" for k in range(2000)]
    weights = pd.Series(rng.integers(1, 6, size=2000), index=ids)
    strata = pd.Series(rng.choice(["north", "south", "east"], size=2000, p=[0.6, 0.3, 0.1]), index=ids)
    strata.iloc[:40] = None  # entities without a value form a stratum of their own
    fractions = [0.7, 0.15, 0.15]
    parts = assign_parts(weights, fractions=fractions, seed=11, strata=strata)
    for _, members in strata.fillna("(missing)").groupby(strata.fillna("(missing)")):
        _check_parts(weights[members.index], parts[members.index], fractions, ["train", "validation", "test"])


def test_the_majority_value_is_an_entitys_stratum_from_the_crosswalk() -> None:
    crosswalk = pd.DataFrame({"entity_id": ["E1", "E1", "E1", "E2"], "source": ["shop", "club", "shop", None]})
    assert entity_strata(crosswalk, "source").to_dict() == {"E1": "shop", "E2": "(missing)"}


@pytest.mark.parametrize("text, message", [("0.7,0.2", "add up to 0.9"), ("1", "at least two"),
                                           ("0.5,x", "not a list of numbers"), ("1.2,-0.2", "positive")])
def test_unusable_fractions_are_refused(text: str, message: str) -> None:
    with pytest.raises(SplitError, match=message):
        parse_fractions(text)


def _outputs(folder: Path) -> tuple[pd.DataFrame, pd.DataFrame]:
    """A small run's outputs: 60 entities of 1-6 records each, in the files a run writes."""
    rng = np.random.default_rng(3)
    sizes = rng.integers(1, 7, size=60)
    entity = np.repeat([f"E{k:03d}" for k in range(60)], sizes)
    crosswalk = pd.DataFrame({"source": rng.choice(["shop", "club"], size=len(entity)),
                              "record_id": [str(k) for k in range(len(entity))], "entity_id": entity,
                              "link_strength": 1.0})
    merged = pd.DataFrame({"entity_id": [f"E{k:03d}" for k in range(60)],
                           "region": rng.choice(["north", "south"], size=60)})
    folder.mkdir(parents=True)
    for name, frame in (("crosswalk", crosswalk), ("merged", merged)):
        frame.to_csv(folder / f"{name}.csv", index=False)
        frame.to_parquet(folder / f"{name}.parquet", index=False)
    return crosswalk, merged


def test_the_command_writes_split_copies_and_leaves_the_outputs_alone(tmp_path: Path,
                                                                      capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "out"
    crosswalk, merged = _outputs(out)
    before = (out / "crosswalk.csv").read_bytes()
    assert cli.main(["split", str(tmp_path), "--out", str(out), "--by-entity", "--fractions", "0.7,0.15,0.15",
                     "--seed", "5"]) == 0
    printed = capsys.readouterr().out
    assert "train" in printed and "validation" in printed and "crosswalk_split.csv" in printed
    assert (out / "crosswalk.csv").read_bytes() == before
    split = pd.read_csv(out / "crosswalk_split.csv", dtype=str)
    assert split["entity_id"].tolist() == crosswalk["entity_id"].tolist()
    assert (split.groupby("entity_id")["split"].nunique() == 1).all()  # no entity spans two parts
    sizes = crosswalk["entity_id"].value_counts()
    counts = split["split"].value_counts()
    for name, share in (("train", 0.7), ("validation", 0.15), ("test", 0.15)):
        assert abs(counts[name] - share * len(split)) <= sizes.max()
    merged_split = pd.read_parquet(out / "merged_split.parquet")
    by_entity = split.drop_duplicates("entity_id").set_index("entity_id")["split"]
    assert dict(zip(merged_split["entity_id"], merged_split["split"])) == by_entity.to_dict()


def test_folds_of_merged_rows_stratified(tmp_path: Path) -> None:
    out = tmp_path / "out"
    _, merged = _outputs(out)
    result = split_outputs(out, folds=4, seed=2, unit="rows", stratify="region", dest=tmp_path / "folds")
    assert sorted(result.merged["fold"].unique()) == ["fold_1", "fold_2", "fold_3", "fold_4"]
    for _, rows in result.merged.groupby("region"):
        counts = rows["fold"].value_counts().reindex(["fold_1", "fold_2", "fold_3", "fold_4"], fill_value=0)
        assert (abs(counts - len(rows) / 4) <= 1).all()  # each merged row weighs one
    assert (tmp_path / "folds" / "merged_split.csv").is_file() and not (out / "merged_split.csv").exists()


def test_bad_settings_exit_2_without_a_traceback(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "out"
    _outputs(out)
    assert cli.main(["split", str(tmp_path), "--out", str(out), "--fractions", "0.5,0.4"]) == 2
    assert "add up to 0.9" in capsys.readouterr().err
    assert cli.main(["split", str(tmp_path), "--out", str(out), "--folds", "3", "--stratify", "nowhere"]) == 2
    assert "no column 'nowhere'" in capsys.readouterr().err
    assert cli.main(["split", str(tmp_path), "--out", str(tmp_path / "empty"), "--folds", "3"]) == 2
    assert "no crosswalk.parquet" in capsys.readouterr().err
    assert not (out / "crosswalk_split.csv").exists()
