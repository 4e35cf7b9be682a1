"""``suggest`` on code columns and money words: small invented CSV exports written into a temporary folder.

A category field with a known code set (gender: F / M / X) takes a column only when its header
says so or its values map onto the codes; a money word in the header with amount-like values
proposes the money field, and a measure never becomes money.
"""

from __future__ import annotations

import csv
import datetime as dt
from pathlib import Path

import pytest

from integrate.mapping.load import load_source_mapping
from integrate.mapping.scaffold import init_workspace
from integrate.mapping.spec import ColumnMap
from integrate.mapping.suggest import ColumnSuggestion, suggest_mapping
from integrate.workspace import load_workspace

ROWS = 40
# Invented names (no real people).
GIVEN = ["Ailsa", "Bram", "Corin", "Delphine", "Eamon", "Fenella", "Gideon", "Hesper", "Ivo", "Jessamy", "Kit",
         "Linnea", "Marek", "Nuala"]
FAMILY = ["Ashgrove", "Brackenridge", "Coldwater", "Dunmere", "Eskdale", "Fallowfield", "Greyling", "Hollins",
          "Inchbrook", "Juniper", "Kestle", "Larchmont", "Merrow", "Nettlebed"]
# Invented event titles of an invented running club.
EVENTS = ["Ridge Run 10k", "Autumn Trail Half Marathon", "Creek Clean-Up Day", "Lantern Walk", "Hill Sprint Series",
          "Winter Relay", "Moorland 5k", "Family Fun Run", "Night Trail 8k", "Spring Duathlon"]
# A schema with a money field and no body measures: a weight column has no field of its own to go to.
MONEY_ONLY = """\
base_currency: EUR
fields:
  given_name: {type: person_name, meaning: The given name the person uses.}
  amount_paid: {type: money, meaning: "Payments made by the person, in the base currency."}
blocking:
  - name: same_given
    keys: [given_name]
"""


def _write_export(path: Path, columns: dict[str, list[str]]) -> Path:
    """A CSV export: a unique record ID, then ``columns`` (each cycled to ROWS rows)."""
    with path.open("w", newline="", encoding="utf-8") as handle:
        out = csv.writer(handle)
        out.writerow(["ref", *columns])
        for i in range(ROWS):
            out.writerow([f"R{i:03d}", *(values[i % len(values)] for values in columns.values())])
    return path


@pytest.fixture
def fresh(tmp_path: Path) -> Path:
    """A workspace as ``integrate init`` writes it (its money field is ``amount_paid``)."""
    root = tmp_path / "ws"
    init_workspace(root, currency="GBP")
    return root


def _draft(root: Path, columns: dict[str, list[str]], name: str = "export") -> dict[str, ColumnSuggestion]:
    export = _write_export(root / f"{name}.csv", columns)
    drafted = suggest_mapping(export, workspace=root, name=name, today=dt.date(2026, 10, 31))
    return {s.column: s for s in drafted.columns}


def _written(root: Path, name: str = "export") -> dict[str, ColumnMap]:
    """The column entries of the drafted file, as the mapping loader reads them."""
    ws = load_workspace(root)
    return load_source_mapping(root / "mappings" / f"{name}.yaml", ws.canonical).column_maps()


def test_yes_no_flag_is_not_gender_even_under_a_gender_like_header(fresh: Path) -> None:
    drafted = _draft(fresh, {"marketing_opt_in": ["Y", "N", "N"], "gender_confirmed": ["yes", "no"]})
    for column in ("marketing_opt_in", "gender_confirmed"):
        assert drafted[column].role == "ignore", (column, drafted[column].field)
    todo = " ".join(drafted["gender_confirmed"].todos)
    assert "gender" in todo and "yes/no flag" in todo  # names the closest field and why it was not taken
    assert _written(fresh)["marketing_opt_in"].ignore


def test_free_text_event_titles_are_not_gender(fresh: Path) -> None:
    drafted = _draft(fresh, {"first_name": GIVEN, "surname": FAMILY, "event_name": EVENTS, "event_title": EVENTS[:6]})
    assert drafted["event_name"].field != "gender" and drafted["event_title"].field != "gender"
    assert drafted["event_name"].role == "ignore" and drafted["event_title"].role == "ignore"


@pytest.mark.parametrize("titles", [["Mr", "Ms", "Dr", "Mrs"], ["Mr", "Mrs", "Ms", "Miss"]])
def test_title_column_stays_ignored_with_a_hint(fresh: Path, titles: list[str]) -> None:
    drafted = _draft(fresh, {"Title": titles})
    title = drafted["Title"]
    assert title.role == "ignore" and "gender" not in {s.field for s in drafted.values()}
    todo = " ".join(title.todos)
    assert "title is not a gender record" in todo and "value-mapped" in todo


def test_sex_column_with_m_and_f_is_gender_with_a_value_map(fresh: Path) -> None:
    drafted = _draft(fresh, {"Sex": ["M", "F", "F"]})
    assert drafted["Sex"].field == "gender"
    written = _written(fresh)["Sex"]
    assert written.field == "gender" and written.values == {"M": "M", "F": "F"}


def test_geschlecht_with_numbers_1_and_2_is_gender(fresh: Path) -> None:
    drafted = _draft(fresh, {"Geschlecht": ["1", "2", "2", "1"]})
    assert drafted["Geschlecht"].field == "gender"
    # ISO/IEC 5218 (codes for the representation of human sexes): 1 = male, 2 = female
    assert _written(fresh)["Geschlecht"].values == {"1": "M", "2": "F"}


def test_number_codes_need_a_header_that_says_gender(fresh: Path) -> None:
    drafted = _draft(fresh, {"Team": ["1", "2", "2", "1"]})
    assert drafted["Team"].role == "ignore"


@pytest.mark.parametrize(("header", "values", "expected"), [
    ("Gruppe", ["Herr", "Frau", "Frau"], {"Frau": "F", "Herr": "M"}),
    ("tipo", ["Mujer", "Hombre"], {"Mujer": "F", "Hombre": "M"}),
    ("kind", ["Male", "Female", "Female"], {"Female": "F", "Male": "M"}),
])
def test_values_alone_can_say_gender(fresh: Path, header: str, values: list[str], expected: dict[str, str]) -> None:
    drafted = _draft(fresh, {header: values})
    assert drafted[header].field == "gender"
    assert drafted[header].options["values"] == expected


def test_a_rare_stray_value_is_mapped_to_null_with_a_todo(fresh: Path) -> None:
    values = ["F", "M"] * 19 + ["F", "Mm"]  # one row in 40 (2.5%) holds no known code
    drafted = _draft(fresh, {"sexo_cliente": values})
    assert drafted["sexo_cliente"].options["values"] == {"F": "F", "M": "M", "Mm": None}
    assert any("'Mm'" in t for t in drafted["sexo_cliente"].todos)


def test_a_code_column_nothing_maps_is_not_gender(fresh: Path) -> None:
    drafted = _draft(fresh, {"Level": ["Beginner", "Improver", "Advanced"], "size": ["S", "M", "L", "XL"]})
    assert drafted["Level"].role == "ignore" and drafted["size"].role == "ignore"


def test_total_spent_with_decimal_amounts_is_the_money_field(fresh: Path) -> None:
    amounts = ["83.60", "5.00", "3032.70", "11.03", "182.90", "47.25", "250.00", "19.99"]
    drafted = _draft(fresh, {"Total spent": amounts})
    spent = drafted["Total spent"]
    assert spent.field == "amount_paid" and spent.confidence >= 0.5
    written = _written(fresh)["Total spent"]
    assert written.field == "amount_paid" and written.currency == "GBP"  # the base currency, with a TODO
    assert any("currency not known" in t for t in spent.todos)


@pytest.mark.parametrize("header", ["lifetime_spend", "Jahresbeitrag", "importe_pagado", "Balance"])
def test_other_money_words_propose_the_money_field(fresh: Path, header: str) -> None:
    drafted = _draft(fresh, {header: ["12.50", "40.00", "7.25", "118.40"]})
    assert drafted[header].field == "amount_paid"


def test_a_total_of_counts_is_not_money(fresh: Path) -> None:
    drafted = _draft(fresh, {"Total visits": ["3", "12", "7", "1", "25"]})  # whole numbers: no cents
    assert drafted["Total visits"].role == "ignore"


def test_weight_is_never_money(tmp_path: Path) -> None:
    root = tmp_path / "ws"
    (root / "mappings").mkdir(parents=True)
    (root / "mappings" / "canonical.yaml").write_text(MONEY_ONLY, encoding="utf-8")
    weights = ["72.50", "81.20", "64.00", "95.75"]
    drafted = _draft(root, {"Weight (kg)": weights, "Total weight": weights, "Fee paid": ["40.00", "55.00"]})
    for column in ("Weight (kg)", "Total weight"):
        assert drafted[column].field != "amount_paid", column
        assert "amount_paid" not in {name for name, _ in drafted[column].alternatives}
    assert drafted["Fee paid"].field == "amount_paid"  # the money field is there to take


def test_weight_goes_to_the_weight_field_in_a_fresh_workspace(fresh: Path) -> None:
    drafted = _draft(fresh, {"Weight (kg)": ["72.50", "81.20", "64.00", "95.75"], "Total spent": ["12.00", "9.50"]})
    assert drafted["Weight (kg)"].field == "weight_kg" and drafted["Total spent"].field == "amount_paid"


def test_category_fields_without_a_code_set_need_their_header(tmp_path: Path) -> None:
    root = tmp_path / "ws"
    (root / "mappings").mkdir(parents=True)
    categories = ("  title: {type: category, meaning: The title the person is addressed by.}\n"
                  "  status: {type: category, meaning: Whether the membership is active or lapsed.}\n")
    (root / "mappings" / "canonical.yaml").write_text(MONEY_ONLY.replace("blocking:", categories + "blocking:"),
                                                      encoding="utf-8")
    level = _draft(root, {"Level": ["Beginner", "Improver", "Advanced"]}, name="levels")["Level"]
    assert level.role == "ignore"  # both fields are free, but nothing says a level is a title or a status
    drafted = _draft(root, {"Title": ["Mr", "Ms", "Dr"], "Status": ["active", "lapsed"]})
    assert drafted["Title"].field == "title" and "values" not in drafted["Title"].options  # no F / M / X map
    assert drafted["Status"].field == "status"


# Invented streets and postcodes (UK-style shapes in the invented TC area).
STREETS = ["4 Mill Lane", "12, Fen Row", "9 Heron Close", "31 Alder Way", "7, Quarry Road", "15 Osier Walk"]


def test_an_address_cell_gets_the_layout_that_reads_its_values(fresh: Path) -> None:
    # 'street, postcode' keeps the comma some clerks type after the house number; 'auto' would take
    # '12' for the street and 'Fen Row' for the town
    cells = [f"{street}, TC{1 + k % 8} {k % 9}AB" for k, street in enumerate(STREETS * 2)]
    drafted = _draft(fresh, {"first_name": GIVEN, "surname": FAMILY, "Address": cells})
    assert drafted["Address"].role == "address"
    assert drafted["Address"].options["address_format"] == "street, postcode"
    assert drafted["Address"].options["address_fields"] == {"street": "street", "postcode": "postcode"}
    written = _written(fresh)["Address"]
    assert written.address_format == "street, postcode"
    with_town = [f"{street}, Tallow, TC{1 + k % 8} {k % 9}AB" for k, street in enumerate(STREETS * 2)]
    drafted = _draft(fresh, {"first_name": GIVEN, "surname": FAMILY, "Address": with_town}, name="towns")
    assert drafted["Address"].options["address_format"] == "street, town, postcode"


def test_a_currency_column_with_blanks_gets_a_fallback_currency(fresh: Path) -> None:
    drafted = _draft(fresh, {"deposit_amount": ["25.00", "40.00", "12.50"], "deposit_currency": ["EUR", "", "USD"],
                             "paid_on": ["2026-01-05", "2026-02-10", "2026-03-15"]})
    s = drafted["deposit_amount"]
    assert s.field == "amount_paid" and s.options["currency_column"] == "deposit_currency"
    assert s.options["currency"] == "GBP" and any("blank" in t for t in s.todos)
    assert s.options["priced_on"] == "paid_on"


def test_an_amount_of_unknown_currency_keeps_its_pricing_date_ready(fresh: Path) -> None:
    drafted = _draft(fresh, {"total_spent": ["83,60", "182,90", "2.109,19"], "last_order": ["2026-01-05", "2026-02-10",
                                                                                             "2026-03-15"]})
    s = drafted["total_spent"]
    assert s.field == "amount_paid" and s.options["number_format"] == "1.234,56"
    assert any("currency not known" in t for t in s.todos) and s.options["priced_on"] == "last_order"


def test_iso_dates_are_drafted_as_iso_without_a_question(fresh: Path) -> None:
    drafted = _draft(fresh, {"first_name": GIVEN, "date_of_birth": ["1980-04-01", "1975-12-30", "2001-06-09"]})
    s = drafted["date_of_birth"]
    assert s.field == "birth_date" and s.options["format"] == "iso"
    assert not any("alike" in t for t in s.todos)  # other layouts read ISO dates too; that is no ambiguity
