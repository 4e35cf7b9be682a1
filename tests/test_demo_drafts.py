"""A fresh ``integrate init`` and ``suggest`` on the demo's four exports, against the demo's own mappings.

The demo's hand-written mapping files (``mappings/*.yaml``) are what a person wrote for these
exports; each drafted column is scored against them, translated to the scaffold's field names
(the scaffold has one money field, ``amount_paid``, where the demo keeps four). The drafts, with
only the facts no file holds filled in (each export's date and trust rank, where the rates table
is, and the web shop's currency, which its data dictionary gives), are then run and the result is
scored against the demo's truth.
"""

from __future__ import annotations

import datetime as dt
import shutil
from pathlib import Path

import pandas as pd
import pytest
from ruamel.yaml import YAML

import integrate
from integrate.evaluate import evaluate
from integrate.mapping.load import load_canonical, load_source_mapping
from integrate.mapping.scaffold import init_workspace
from integrate.mapping.suggest import suggest_mapping

REPO = Path(__file__).resolve().parents[1]
EXPORTS = ("membership.xlsx", "webshop.csv", "rentals.jsonl", "events.sqlite")
# the demo's fields under the scaffold's names (fields the scaffold lacks map to 'ignore')
SCAFFOLD_NAME = {"lifetime_spend_gbp": "amount_paid", "deposits_gbp": "amount_paid",
                 "event_fees_gbp": "amount_paid", "annual_fee_gbp": "amount_paid", "join_date": "ignore"}
OPTIONS = ("unit", "format", "number_format", "currency", "currency_column", "priced_on", "address_format")


def _wanted(entry, record_id: str, column: str) -> str:  # noqa: ANN001 - a ColumnMap or its short form
    if column == record_id:
        return "record_id"
    if isinstance(entry, str):
        return SCAFFOLD_NAME.get(entry, entry)
    if entry.ignore:
        return "ignore"
    if entry.name_format:
        return "names"
    if entry.address_format:
        return "address"
    return SCAFFOLD_NAME.get(entry.field, entry.field)


def _drafted(s) -> str:  # noqa: ANN001 - a ColumnSuggestion
    return str(s.field) if s.role == "field" else s.role


@pytest.fixture(scope="module")
def drafts(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict]:
    root = tmp_path_factory.mktemp("fresh")
    init_workspace(root, currency="GBP")
    shutil.copytree(REPO / "demo_sources", root / "demo_sources")
    out = {}
    for name in EXPORTS:
        draft = suggest_mapping(root / "demo_sources" / name, workspace=root, today=dt.date(2026, 10, 31))
        out[draft.source] = draft
    return root, out


def test_drafted_columns_agree_with_the_demo_mappings(drafts) -> None:  # noqa: ANN001
    root, drafted = drafts
    canonical = load_canonical(REPO / "mappings" / "canonical.yaml", "canonical.yaml")
    right = total = options_right = options_total = 0
    wrong = []
    for source, draft in drafted.items():
        mapping = load_source_mapping(REPO / "mappings" / f"{source}.yaml", canonical)
        columns = {s.column: s for s in draft.columns}
        assert set(columns) == set(mapping.columns), source
        for column, entry in mapping.columns.items():
            want, got = _wanted(entry, mapping.record_id, column), _drafted(columns[column])
            total += 1
            right += want == got
            if want != got:
                wrong.append(f"{source}:{column} {got} (want {want})")
                continue
            for option in OPTIONS:
                hand = getattr(entry, option, None) if not isinstance(entry, str) else None
                if hand is None or (option == "address_format" and hand == "auto"):
                    continue
                options_total += 1
                options_right += str(columns[column].options.get(option)) == str(hand)
                if str(columns[column].options.get(option)) != str(hand):
                    wrong.append(f"{source}:{column} {option}={columns[column].options.get(option)} (want {hand})")
    print(f"demo drafts: {right} of {total} columns right, {options_right} of {options_total} options; "
          f"differences: {wrong}")
    assert right / total >= 0.9 and options_right / options_total >= 0.9, wrong


def test_the_drafts_run_with_only_the_facts_no_file_holds_filled_in(drafts) -> None:  # noqa: ANN001
    root, drafted = drafts
    yaml = YAML()
    hand = {source: yaml.load((REPO / "mappings" / f"{source}.yaml").read_text(encoding="utf-8"))
            for source in drafted}
    edits = 0
    for source, draft in drafted.items():  # when each export was taken and how far to trust it
        path = root / "mappings" / f"{source}.yaml"
        text = yaml.load(path.read_text(encoding="utf-8"))
        text["as_of"], text["trust"] = hand[source]["as_of"], hand[source]["trust"]
        edits += 2
        for s in draft.columns:  # a currency the export does not name comes from its data dictionary
            wanted = hand[source]["columns"][s.column]
            if any("currency not known" in t for t in s.todos) and wanted["currency"] != s.options["currency"]:
                text["columns"][s.column]["currency"] = wanted["currency"]
                edits += 1
        with path.open("w", encoding="utf-8") as handle:
            yaml.dump(text, handle)
    canonical = root / "mappings" / "canonical.yaml"  # and where the exchange rates are
    canonical.write_text(canonical.read_text(encoding="utf-8").replace(
        "# rates: data/rates.csv", "rates: demo_sources/rates.csv"), encoding="utf-8")
    edits += 1
    result = integrate.run(root)
    truth = pd.read_csv(root / "demo_sources" / "truth" / "crosswalk.csv", dtype=str)
    scores = evaluate(result.crosswalk, truth)
    print(f"drafted demo run after {edits} edits: pairwise precision {scores.pairwise.precision:.4f} recall "
          f"{scores.pairwise.recall:.4f} F1 {scores.pairwise.f1:.4f}; failures {len(result.failures)}")
    assert edits <= 10
    assert scores.pairwise.f1 >= 0.95 and len(result.failures) < 0.01 * len(result.crosswalk)
