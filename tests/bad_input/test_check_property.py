"""`check` over columns of random mixed values never raises; money levels alone are not a finding."""

from __future__ import annotations

import random
import shutil
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from integrate.mapping.checks import check_workspace

CANONICAL = """\
base_currency: GBP
rates: rates.csv
fields:
  given_name: {type: person_name, meaning: The given name the person uses.}
  email: {type: email, meaning: The person's e-mail address.}
  born: {type: date, meaning: Date of birth.}
  height_cm: {type: quantity, unit: cm, range: [100, 230], meaning: Standing height in centimetres.}
  fee_gbp: {type: money, meaning: "Fee paid, in the base currency."}
"""
MAPPING = """\
source: {name}
read: {{format: csv, path: {name}.csv}}
record_id: id
as_of: 2026-01-02
columns:
  id: ignore
  given: given_name
  email: email
  born: {{field: birth_date_x, format: iso}}
  height: {{field: height_cm, unit: cm}}
  fee: {{field: fee_gbp, currency: {currency}}}
  other: ignore
""".replace("birth_date_x", "born")
RATES = "date,from,to,rate\n2026-01-01,EUR,GBP,0.85\n"  # invented rate for the test

# cells of every kind an export holds: numbers in several writings, words, blanks, dates, symbols
CELL = st.one_of(
    st.integers(-10**12, 10**12).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.sampled_from(["", " ", "n/a", "NA", "null", "-", "?", "1,5", "1.234,56", "£12", "12 EUR", "1e400", "0x1F",
                     "2026-13-45", "1987-03-04", "04/03/1987", "=1+2", "<b>", "TRUE", "∞", "١٢٣"]),
    st.text(alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00\r\n\",")
            , max_size=12),
)


def _write(root: Path, columns: dict[str, list[str]], currency: str) -> None:
    (root / "mappings").mkdir(parents=True, exist_ok=True)
    (root / "mappings" / "canonical.yaml").write_text(CANONICAL, encoding="utf-8")
    (root / "rates.csv").write_text(RATES, encoding="utf-8")
    (root / "mappings" / "desk.yaml").write_text(MAPPING.format(name="desk", currency=currency), encoding="utf-8")
    names = ["id", *columns]
    rows = [",".join([f"R{i}", *(f'"{columns[c][i]}"' for c in columns)]) for i in range(len(columns["given"]))]
    (root / "desk.csv").write_text("\n".join([",".join(names), *rows]) + "\n", encoding="utf-8")


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(12, 40).flatmap(lambda n: st.fixed_dictionaries(
    {c: st.lists(CELL, min_size=n, max_size=n) for c in ("given", "email", "born", "height", "fee", "other")})),
       st.sampled_from(["GBP", "EUR"]), st.integers(0, 2**32 - 1))
def test_check_never_raises_on_mixed_columns(columns: dict[str, list[str]], currency: str, seed: int) -> None:
    """Mostly numeric columns with a few words crashed `check` (TypeError in the redundancy check)."""
    rng = random.Random(seed)
    for name in ("height", "fee", "other"):  # mostly numbers, as the reproducer: a few non-numbers mixed in
        if rng.random() < 0.7:
            columns[name] = [f"{rng.uniform(1, 300):.2f}" if rng.random() < 0.9 else v for v in columns[name]]
    folder = Path(tempfile.mkdtemp())
    try:
        _write(folder, columns, currency)
        report = check_workspace(folder, use_last_run=False)
        assert report.exit_code() in (0, 1, 2)
        assert sum(report.records.values()) <= len(columns["given"])
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def _two_desks(root: Path, scale: float) -> None:
    (root / "mappings").mkdir(parents=True)
    (root / "mappings" / "canonical.yaml").write_text(CANONICAL, encoding="utf-8")
    (root / "rates.csv").write_text(RATES, encoding="utf-8")
    rng = random.Random(7)
    for name, factor in (("harbour", 1.0), ("lakeside", scale)):
        (root / "mappings" / f"{name}.yaml").write_text(MAPPING.format(name=name, currency="GBP"), encoding="utf-8")
        lines = ["id,given,email,born,height,fee,other"]
        for i in range(120):
            lines.append(f"{name[0]}{i},Given{i},g{i}@post.example.org,1980-01-0{1 + i % 9},{rng.gauss(170, 8):.1f},"
                         f"{rng.choice([40, 55, 70, 90]) * factor * rng.uniform(0.9, 1.1):.2f},x")
        (root / f"{name}.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")


def test_money_at_another_level_is_not_a_finding(tmp_path: Path) -> None:
    """One desk charges about 3.3 times another: no unit or currency factor, so nothing to warn about."""
    _two_desks(tmp_path, 3.3)
    report = check_workspace(tmp_path, use_last_run=False)
    assert not [f for f in report.findings if f.code.startswith("distribution")], [str(f) for f in report.findings]


def test_money_off_by_the_minor_unit_factor_is_a_finding(tmp_path: Path) -> None:
    """Amounts in pence read as pounds (x100): a known factor, so it is named."""
    _two_desks(tmp_path, 100.0)
    report = check_workspace(tmp_path, use_last_run=False)
    found = [f for f in report.findings if f.code == "distribution_factor"]
    assert [f.source for f in found] == ["lakeside"] and "minor units" in found[0].message, \
        [str(f) for f in report.findings]
