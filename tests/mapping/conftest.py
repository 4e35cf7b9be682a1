"""Two months of invented exports from the Tallow Creek co-op, for the drift and mapping-history tests.

Month 1: the members desk exports ``surname``, heights in inches and fees in GBP, status codes
A / L. Month 2 holds the same people, but the desk renamed ``surname`` to ``last_name``, moved
heights to centimetres, priced fees in EUR and started a new status code 'P' on a few rows.
The web shop's export is the same both months.
"""

from __future__ import annotations

import contextlib
import io
import random
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

GIVEN = ["Ada", "Bram", "Cleo", "Dara", "Elin", "Finn", "Greta", "Hugo", "Ines", "Jonah", "Kira", "Lior",
         "Mara", "Nils", "Odile", "Pavel", "Quinn", "Rhea", "Soren", "Tamsin", "Ulla", "Vito", "Wren", "Yara"]
FAMILY = ["Ashdown", "Birchall", "Culvey", "Dunmore", "Elsworth", "Fenwright", "Gorrin", "Hollis", "Ivesby",
          "Jarrow", "Kettering", "Lowden", "Marlow", "Nettleby", "Orrin", "Pellow", "Quarrie", "Rusk",
          "Stainby", "Tolland", "Upwell", "Varley", "Wickham", "Yardley"]
EUR_IN_GBP = 0.85  # invented rate for the fixture: 1 EUR = 0.85 GBP

CANONICAL = """\
# Canonical schema of the two-month fixture (invented co-op data)
base_currency: GBP
rates: rates.csv
fields:
  given_name: {type: person_name, meaning: The given name the person uses.}
  family_name: {type: person_name, meaning: The person's family name (surname).}
  birth_date: {type: date, meaning: Date of birth of the person., resolve: most_complete}
  email: {type: email, meaning: The person's e-mail address for co-op mail.}
  height_cm: {type: quantity, unit: cm, range: [100, 230], meaning: Standing height in centimetres., resolve: trust}
  fee_gbp: {type: money, meaning: "Annual membership fee, in the base currency."}
  status: {type: category, meaning: Whether the membership is active or lapsed.}
blocking:
  - name: same_email
    keys: [email]
  - name: same_birth_date
    keys: [birth_date]
  - name: family_sound_birth_year
    keys: [family_name:soundex, birth_date:year]
"""

MEMBERS = """\
# Members desk export (monthly). Keep the comments: people read this file.
source: members
read: {format: csv, path: members.csv}
record_id: member_id
as_of: 2026-10-31
trust: 1
columns:
  member_id: ignore
  given: given_name
  surname: family_name   # the desk's spelling of the family name
  born:
    field: birth_date
    format: "%d/%m/%Y"
  email: email
  height:
    field: height_cm
    unit: in     # the desk measures in inches
  fee:
    field: fee_gbp
    currency: GBP
  status:
    field: status
    values:
      A: active   # paid up
      L: lapsed
"""

SHOP = """\
source: shop
read: {format: csv, path: shop.csv}
record_id: order_ref
as_of: 2026-10-31
trust: 2
columns:
  order_ref: ignore
  first: given_name
  last: family_name
  mail: email
  dob:
    field: birth_date
    format: iso
"""


@dataclass
class Person:
    given: str
    family: str
    born: tuple[int, int, int]  # year, month, day
    email: str
    height_in: float
    fee_gbp: float
    status: str


def people(n: int = 90, seed: int = 7) -> list[Person]:
    rng = random.Random(seed)
    out = []
    for i in range(n):
        given, family = GIVEN[i % len(GIVEN)], FAMILY[(i * 7 + i // len(GIVEN)) % len(FAMILY)]
        born = (rng.randint(1950, 2004), rng.randint(1, 12), rng.randint(1, 28))
        out.append(Person(given, family, born, f"{given.lower()}.{family.lower()}{i}@mail.example",
                          round(rng.gauss(67, 3.5), 1), rng.choice([40.0, 55.0, 70.0, 90.0]),
                          rng.choice("AAAL")))
    return out


@dataclass
class TwoMonths:
    root: Path
    month2: dict[str, str]  # file name -> text of the second month's export

    def use_month2(self) -> None:
        for name, text in self.month2.items():
            (self.root / name).write_text(text)


def _members_csv(persons: list[Person], month: int) -> str:
    family = "surname" if month == 1 else "last_name"
    lines = [f"member_id,given,{family},born,email,height,fee,status"]
    for i, p in enumerate(persons):
        y, m, d = p.born
        height = f"{p.height_in:.1f}" if month == 1 else f"{p.height_in * 2.54:.3f}"  # 1 in = 2.54 cm (NIST SP 811)
        fee = f"{p.fee_gbp:.2f}" if month == 1 else f"{p.fee_gbp / EUR_IN_GBP:.2f}"
        status = p.status if month == 1 or i % 15 else "P"
        lines.append(f"M{i:03d},{p.given},{p.family},{d:02d}/{m:02d}/{y},{p.email},{height},{fee},{status}")
    return "\n".join(lines) + "\n"


def _shop_csv(persons: list[Person]) -> str:
    lines = ["order_ref,first,last,mail,dob"]
    for i, p in enumerate(persons[::2]):
        y, m, d = p.born
        lines.append(f"S{i:03d},{p.given},{p.family},{p.email},{y}-{m:02d}-{d:02d}")
    return "\n".join(lines) + "\n"


def build_two_months(root: Path) -> TwoMonths:
    """A workspace holding month 1's exports; ``month2`` holds the next month's."""
    persons = people()
    (root / "mappings").mkdir(parents=True)
    (root / "mappings" / "canonical.yaml").write_text(CANONICAL)
    (root / "mappings" / "members.yaml").write_text(MEMBERS)
    (root / "mappings" / "shop.yaml").write_text(SHOP)
    # invented rates for the fixture
    (root / "rates.csv").write_text(f"date,from,to,rate\n2026-09-01,EUR,GBP,{EUR_IN_GBP}\n"
                                    f"2026-10-30,EUR,GBP,{EUR_IN_GBP}\n")
    (root / "members.csv").write_text(_members_csv(persons, 1))
    (root / "shop.csv").write_text(_shop_csv(persons))
    return TwoMonths(root, {"members.csv": _members_csv(persons, 2)})


@pytest.fixture()
def two_months(tmp_path: Path) -> TwoMonths:
    return build_two_months(tmp_path / "ws")


@dataclass
class DriftStory:
    """Month 1 run, month 2 checked, the mapping updated by ``suggest --update``, month 2 run."""

    root: Path
    month1: Any  # RunResult
    check_before: Any  # CheckReport on month 2 with month 1's mapping
    mapping_before: str
    dry_run_output: str
    mapping_after_dry_run: str
    update_output: str
    mapping_after: str
    check_after: Any
    month2: Any  # RunResult


@pytest.fixture(scope="module")
def drift_story(tmp_path_factory: pytest.TempPathFactory) -> DriftStory:
    from integrate import run
    from integrate.cli import main
    from integrate.mapping.checks import check_workspace

    months = build_two_months(tmp_path_factory.mktemp("story") / "ws")
    root, mapping = months.root, months.root / "mappings" / "members.yaml"
    month1 = run(root)
    months.use_month2()
    check_before = check_workspace(root, use_last_run=False)
    before = mapping.read_text()

    def cli(*argv: str) -> str:
        out = io.StringIO()
        with contextlib.redirect_stdout(out):
            assert main(list(argv)) == 0
        return out.getvalue()

    dry = cli("suggest", "--update", "members", "--workspace", str(root), "--dry-run")
    after_dry = mapping.read_text()
    update = cli("suggest", "--update", "members", "--workspace", str(root))
    return DriftStory(root, month1, check_before, before, dry, after_dry, update, mapping.read_text(),
                      check_workspace(root, use_last_run=False), run(root))
