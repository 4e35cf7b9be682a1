"""`check` findings through the API: mislabelled units and currencies, redundant columns, meanings, factors."""

from __future__ import annotations

import math
import random
from pathlib import Path

import pandas as pd
import pytest

from integrate.mapping.checks import check_workspace
from integrate.mapping.factors import format_factor, money_explanations, unit_explanations
from integrate.mapping.findings import EXIT_ERRORS, EXIT_WARNINGS
from integrate.mapping.meanings import field_meanings
from integrate.mapping.money import RatesTable
from integrate.mapping.redundancy import redundant_columns
from integrate.workspace import load_workspace

CANONICAL = """\
base_currency: GBP
rates: rates.csv
fields:
  given_name: {type: person_name, meaning: The given name the person uses.}
  height_cm: {type: quantity, unit: cm, range: [100, 230], meaning: Standing height in centimetres.}
  fee_gbp: {type: money, meaning: "Fee paid for one course, in the base currency."}
"""
# invented rates for the test (one pair, one rate)
RATES = "date,from,to,rate\n2026-01-01,EUR,GBP,0.85\n"


def _source_yaml(name: str, height: str, fee: str) -> str:
    return (f"source: {name}\nread: {{format: csv, path: {name}.csv}}\nrecord_id: id\nas_of: 2026-01-02\n"
            f"columns:\n  id: ignore\n  given: given_name\n  height: {height}\n  fee: {fee}\n")


def _tiny_workspace(root: Path, sources: dict[str, tuple[str, str, list[float], list[float]]]) -> Path:
    """A workspace of invented sources: name -> (height entry, fee entry, heights, fees)."""
    (root / "mappings").mkdir(parents=True)
    (root / "mappings" / "canonical.yaml").write_text(CANONICAL)
    (root / "rates.csv").write_text(RATES)
    for name, (height, fee, heights, fees) in sources.items():
        (root / "mappings" / f"{name}.yaml").write_text(_source_yaml(name, height, fee))
        lines = ["id,given,height,fee"] + [f"{name[0]}{i},Given{i},{h:.1f},{f:.2f}"
                                            for i, (h, f) in enumerate(zip(heights, fees))]
        (root / f"{name}.csv").write_text("\n".join(lines) + "\n")
    return root


def _sample(seed: int, n: int = 200) -> tuple[list[float], list[float]]:
    rng = random.Random(seed)
    return [rng.gauss(170, 9) for _ in range(n)], [rng.choice([40.0, 55.0, 70.0, 90.0]) * rng.uniform(0.9, 1.1)
                                                    for _ in range(n)]


def test_mislabelled_inches_are_caught_and_the_factor_named(workspace: Path) -> None:
    """The demo with the rentals desk's heights (inches) declared as centimetres."""
    mapping = workspace / "mappings" / "rentals.yaml"
    mapping.write_text(mapping.read_text().replace("    unit: in\n", "    unit: cm\n"))
    truth = pd.read_csv(workspace / "demo_sources" / "truth" / "crosswalk.csv", dtype=str)
    report = check_workspace(workspace, crosswalk=truth)
    assert report.exit_code() == EXIT_WARNINGS
    by_code = {f.code: f for f in report.findings}
    spread = by_code["distribution_factor"]
    # 1 in = 2.54 cm exactly (NIST SP 811, App. B.8): inch numbers read as cm are 1/2.54 of the truth
    assert spread.source == "rentals" and "1/2.54" in spread.message
    assert "inches (in) declared as centimetres (cm)" in spread.message
    assert spread.file == "mappings/rentals.yaml" and spread.line is not None
    linked = by_code["linked_factor"]
    assert "2.54" in linked.message and "source 'rentals' looks mislabelled" in linked.message
    assert by_code["name_contradicts_unit"].column is not None  # the header says inches too


def test_demo_has_no_distribution_warnings(workspace: Path) -> None:
    faults = pd.read_csv(workspace / "demo_sources" / "truth" / "record_faults.csv", dtype=str).fillna("")
    planted = faults[faults["faults"].str.contains("height_in_")].groupby("source").size().to_dict()
    report = check_workspace(workspace, use_last_run=False)
    # the demo mappings fix the generator's single unit slips (fix_unit_slips): a clean check
    assert report.codes() == set() and report.exit_code() == 0
    assert sum(report.records.values()) == 9180
    # without the option, one out-of-range finding per planted height slip, as the generator's truth lists them
    for name in ("membership", "rentals"):
        path = workspace / "mappings" / f"{name}.yaml"
        path.write_text(path.read_text().replace("    fix_unit_slips: true\n", ""))
    report = check_workspace(workspace, use_last_run=False)
    assert report.codes() == {"out_of_range"}
    assert report.exit_code() == EXIT_WARNINGS
    counted = {f.source: int(f.message.split(" ", 1)[0]) for f in report.findings}
    assert counted == planted == {"membership": 3, "rentals": 2}
    hints = {f.source: f.hint for f in report.findings}
    assert "multiplied by 2.54: inches (in) declared as centimetres (cm)" in str(hints["membership"])
    assert "divided by 2.54: centimetres (cm) declared as inches (in)" in str(hints["rentals"])


def test_wrong_currency_is_named(tmp_path: Path) -> None:
    heights, fees = _sample(1)
    heights_b, fees_b = _sample(2)
    euro_fees = [f / 0.85 for f in fees_b]  # the same kind of fees, written in EUR, declared as GBP
    root = _tiny_workspace(tmp_path, {
        "harbour": ("{field: height_cm, unit: cm}", "{field: fee_gbp, currency: GBP}", heights, fees),
        "lakeside": ("{field: height_cm, unit: cm}", "{field: fee_gbp, currency: GBP}", heights_b, euro_fees),
    })
    report = check_workspace(root)
    found = [f for f in report.findings if f.code == "distribution_factor"]
    assert [f.source for f in found] == ["lakeside"], [str(f) for f in report.findings]
    assert "amounts in EUR declared as GBP" in found[0].message
    assert format_factor(1 / 0.85) in found[0].message  # 1.1765, the rate in the table


def test_pounds_declared_as_kilograms_factor() -> None:
    # 1 lb = 0.45359237 kg exactly (NIST SP 811, App. B.8), so lb numbers read as kg are 2.2046 x too big
    found = {e.cause: e.factor for e in unit_explanations("kg", "kg")}
    assert math.isclose(found["pounds (lb) declared as kilograms (kg)"], 1 / 0.45359237, rel_tol=1e-12)
    # 1 st = 14 lb = 6.35029318 kg exactly (same source; stone defined as 14 lb)
    assert math.isclose(found["stone (st) declared as kilograms (kg)"], 1 / 6.35029318, rel_tol=1e-12)
    # a prefix slip: grams declared as kilograms is a factor of 1000 (SI prefix kilo = 10^3)
    assert math.isclose(found["grams (g) declared as kilograms (kg)"], 1000.0, rel_tol=1e-12)


def test_money_explanations_use_the_rates_table() -> None:
    quotes = pd.DataFrame({"date": pd.to_datetime(["2026-01-01", "2026-01-02"]), "from": ["USD", "USD"],
                           "to": ["GBP", "GBP"], "rate": [pd.NA, pd.NA], "line": [2, 3]})
    from decimal import Decimal

    quotes["rate"] = [Decimal("0.78"), Decimal("0.80")]
    found = {e.cause: e.factor for e in money_explanations("GBP", "GBP", RatesTable(quotes))}
    assert math.isclose(found["amounts in USD declared as GBP"], 1 / 0.79)  # median of the two rates
    assert found["amounts in minor units (e.g. cents or pence) read as whole units"] == 100.0


def test_redundant_columns_reported(tmp_path: Path) -> None:
    heights, fees = _sample(3, 50)
    root = _tiny_workspace(tmp_path, {"harbour": ("{field: height_cm, unit: cm}", "{field: fee_gbp, currency: GBP}",
                                                  heights, fees)})
    data = root / "harbour.csv"
    lines = data.read_text().splitlines()
    lines[0] += ",height_inches,level,level_code"
    for i in range(1, len(lines)):
        level = ["beginner", "improver", "advanced"][i % 3]
        lines[i] += f",{heights[i - 1] / 2.54:.2f},{level},{level[0].upper()}"
    data.write_text("\n".join(lines) + "\n")
    mapping = root / "mappings" / "harbour.yaml"
    mapping.write_text(mapping.read_text() + "  height_inches: ignore\n  level: ignore\n  level_code: ignore\n")
    report = check_workspace(root)
    redundant = {(f.code, f.level) for f in report.findings if f.code.startswith("redundant")}
    assert redundant == {("redundant_fixed_ratio", "note"), ("redundant_same_categories", "note")}
    pairs = redundant_columns(pd.read_csv(data, dtype="string"))
    assert any(p.first == "height" and p.second == "height_inches" and "2.54" in p.detail for p in pairs)


def test_independent_columns_are_not_redundant() -> None:
    rng = random.Random(5)
    frame = pd.DataFrame({"a": [str(rng.randint(1, 100)) for _ in range(200)],
                          "b": [str(rng.randint(1, 100)) for _ in range(200)],
                          "c": [rng.choice("xyz") for _ in range(200)], "d": [rng.choice("pq") for _ in range(200)]})
    assert redundant_columns(frame) == []


def test_meanings_table_lists_columns_and_notes() -> None:
    ws = load_workspace(Path(__file__).resolve().parents[2])
    table = field_meanings(ws.canonical, [e.mapping for e in ws.sources])
    postcode = table[table["field"] == "postcode"].set_index("source")
    assert postcode.loc["webshop", "column"] == "ship_postcode"
    assert postcode.loc["webshop", "note"].startswith("Shipping postcode")
    height = table[table["field"] == "height_cm"].set_index("source")
    assert height.loc["rentals", "how"] == "unit in"
    assert set(table["field"]) == set(ws.canonical.fields)  # every field has at least one row


@pytest.mark.parametrize("broken, code", [("given: given_name", "unknown_field"), ("height: {", "bad_yaml")])
def test_broken_mapping_is_an_error_and_others_still_checked(tmp_path: Path, broken: str, code: str) -> None:
    heights, fees = _sample(4, 30)
    root = _tiny_workspace(tmp_path, {
        "harbour": ("{field: height_cm, unit: cm}", "{field: fee_gbp, currency: GBP}", heights, fees),
        "lakeside": ("{field: height_cm, unit: cm}", "{field: fee_gbp, currency: GBP}", heights, fees),
    })
    mapping = root / "mappings" / "lakeside.yaml"
    replacement = "given: given_nam" if code == "unknown_field" else "height: ["
    mapping.write_text(mapping.read_text().replace(broken, replacement, 1))
    report = check_workspace(root)
    assert report.exit_code() == EXIT_ERRORS
    errors = report.of_level("error")
    assert errors[0].code == code and errors[0].file == "mappings/lakeside.yaml" and errors[0].line
    assert report.records == {"harbour": 30}  # the valid source was still read
