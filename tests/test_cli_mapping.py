"""Mapping problems through the real command line (`integrate check`, `run`, `suggest`, `schema`).

Each error names the file, the line (mapping file) or row (data file) and the column. Exit codes of
`check`: 0 clean, 1 warnings only, 2 errors. The workspace here is small and invented (one club
export of 30 rows) so that each command runs in about a second.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent

CLUB_YAML = """\
source: club
read: {format: csv, path: data/club.csv}
record_id: id
as_of: 2026-10-31
trust: 2
columns:
  id: ignore
  first: given_name
  last: family_name
  dob:
    field: birth_date
    format: "%d/%m/%Y"
  height_in:
    field: height_cm
    unit: in
  fee:
    field: annual_fee_gbp
    currency_column: currency
    priced_on: paid_on
  currency: ignore
  paid_on: ignore
"""


def club_rows(n: int = 30) -> list[str]:
    """Invented members: day-first birth dates with days above 12 (unambiguous), heights in inches."""
    rows = ["id,first,last,dob,height_in,fee,currency,paid_on"]
    for i in range(n):
        day, month = 13 + i % 15, 1 + i % 12
        currency = "EUR" if i % 3 == 0 else "GBP"
        rows.append(f"C{i:03d},Given{i},Family{i % 7},{day:02d}/{month:02d}/19{60 + i % 30},{62 + i % 12}.5,"
                    f"{40 + i % 5}.00,{currency},2026-10-{1 + i % 28:02d}")
    return rows


@pytest.fixture()
def club(tmp_path: Path) -> Path:
    root = tmp_path / "club_ws"
    (root / "mappings").mkdir(parents=True)
    (root / "data").mkdir()
    canonical = (REPO / "mappings" / "canonical.yaml").read_text(encoding="utf-8")
    canonical = canonical.replace("rates: demo_sources/rates.csv", "rates: data/rates.csv")
    (root / "mappings" / "canonical.yaml").write_text(canonical, encoding="utf-8")
    (root / "data" / "rates.csv").write_text((REPO / "demo_sources" / "rates.csv").read_text(encoding="utf-8"))
    (root / "mappings" / "club.yaml").write_text(CLUB_YAML, encoding="utf-8")
    (root / "data" / "club.csv").write_text("\n".join(club_rows()) + "\n", encoding="utf-8")
    return root


def cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "integrate", *args], capture_output=True, text=True, timeout=300)


def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text, old
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def line_of(path: Path, needle: str) -> int:
    """1-based line of the first line containing ``needle`` (the position an error should name)."""
    return next(i for i, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1) if needle in line)


def assert_no_traceback(proc: subprocess.CompletedProcess[str]) -> None:
    assert "Traceback" not in proc.stdout + proc.stderr, proc.stderr


def test_check_clean_workspace_exits_0(club: Path) -> None:
    # canonical fields the club does not feed are warnings; feed them from a second tiny source... or
    # simply drop them from this workspace's schema: only fields the club feeds remain
    canonical = club / "mappings" / "canonical.yaml"
    text = canonical.read_text(encoding="utf-8")
    for name in ("email", "phone", "street", "postcode", "weight_kg", "join_date", "lifetime_spend_gbp",
                 "deposits_gbp", "event_fees_gbp"):
        text = re.sub(rf"\n  {name}:\n(?:    .*\n)+", "\n", text)
    text = re.sub(r"\nblocking:\n(?:  .*\n)+", "\n", text)
    canonical.write_text(text, encoding="utf-8")
    proc = cli("check", str(club))
    assert_no_traceback(proc)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "0 errors, 0 warnings" in proc.stdout


def test_check_warnings_only_exits_1(club: Path) -> None:
    proc = cli("check", str(club))
    assert proc.returncode == 1, proc.stdout + proc.stderr
    # fields no column feeds: named, with the canonical file's line of the field
    canonical = club / "mappings" / "canonical.yaml"
    assert f"mappings/canonical.yaml:{line_of(canonical, '  email:')}:3: no source column feeds" in proc.stdout


def test_unmapped_column_is_a_warning_naming_it(club: Path) -> None:
    edit(club / "mappings" / "club.yaml", "  paid_on: ignore\n", "")
    edit(club / "mappings" / "club.yaml", "    priced_on: paid_on\n", "")
    proc = cli("check", str(club))
    assert proc.returncode == 1
    assert re.search(r"warning: mappings/club\.yaml:\d+:\d+: columns of data/club\.csv not mentioned in the "
                     r"mapping: 'paid_on'", proc.stdout), proc.stdout


def test_misspelt_canonical_field_names_line_column_and_hint(club: Path) -> None:
    mapping = club / "mappings" / "club.yaml"
    edit(mapping, "first: given_name", "first: given_nmae")
    for command in ("check", "run"):
        proc = cli(command, str(club))
        assert_no_traceback(proc)
        assert proc.returncode == 2
        out = proc.stdout + proc.stderr
        assert f"mappings/club.yaml:{line_of(mapping, 'first:')}:3: column 'first' feeds unknown canonical field " \
               "'given_nmae'" in out, out
        assert "did you mean 'given_name'?" in out


def test_misspelt_key_names_line_and_suggests(club: Path) -> None:
    mapping = club / "mappings" / "club.yaml"
    edit(mapping, "    unit: in", "    unti: in")
    proc = cli("check", str(club))
    assert proc.returncode == 2
    assert re.search(rf"mappings/club\.yaml:{line_of(mapping, 'unti:')}:5: .*unti", proc.stdout), proc.stdout
    assert "did you mean 'unit'?" in proc.stdout


def test_unknown_and_incompatible_units(club: Path) -> None:
    mapping = club / "mappings" / "club.yaml"
    edit(mapping, "    unit: in", "    unit: inchez")
    proc = cli("check", str(club))
    assert proc.returncode == 2
    assert f"mappings/club.yaml:{line_of(mapping, 'height_in:')}:3: column 'height_in': unknown unit 'inchez'" \
        in proc.stdout, proc.stdout
    edit(mapping, "    unit: inchez", "    unit: lb")
    proc = cli("check", str(club))
    assert proc.returncode == 2
    assert f"mappings/club.yaml:{line_of(mapping, 'height_in:')}:3: column 'height_in': cannot convert 'lb' " \
           "([mass]) to 'cm' ([length])" in proc.stdout, proc.stdout


def test_unknown_currency_code(club: Path) -> None:
    mapping = club / "mappings" / "club.yaml"
    edit(mapping, "    currency_column: currency", "    currency: EURO")
    edit(mapping, "  currency: ignore\n", "  currency: ignore\n")
    proc = cli("check", str(club))
    assert proc.returncode == 2
    assert f"mappings/club.yaml:{line_of(mapping, '  fee:')}:3: column 'fee': 'EURO' is not an ISO 4217" \
        in proc.stdout, proc.stdout


def test_unknown_currency_in_a_row_names_file_row_column(club: Path) -> None:
    data = club / "data" / "club.csv"
    edit(data, ",EUR,", ",EUX,")  # first EUR row is C000, on line 2
    proc = cli("check", str(club))
    assert proc.returncode == 2
    assert ("data/club.csv:2 column 'fee': currency column 'currency': 'EUX' is not an ISO 4217 currency code "
            "(1 rows: 2)") in proc.stdout, \
        proc.stdout


def test_missing_mapped_column(club: Path) -> None:
    mapping = club / "mappings" / "club.yaml"
    edit(club / "data" / "club.csv", "height_in", "height_inches")
    proc = cli("check", str(club))
    assert proc.returncode == 2
    assert f"mappings/club.yaml:{line_of(mapping, 'height_in:')}:3: mapped column 'height_in' is not in " \
           "data/club.csv" in proc.stdout, proc.stdout
    assert "height_inches" in proc.stdout  # the hint lists the columns that exist


def _break_dates(club: Path, lines_at: tuple[int, ...]) -> None:
    data = club / "data" / "club.csv"
    lines = data.read_text().splitlines()
    for at in lines_at:
        fields = lines[at - 1].split(",")
        fields[3] = "31/02/1970"
        lines[at - 1] = ",".join(fields)
    data.write_text("\n".join(lines) + "\n")


def test_bad_date_cells_are_warnings_with_rows(club: Path) -> None:
    _break_dates(club, (4, 9))  # file lines 4 and 9: 2 of 30 values, allowed by a 10% limit
    edit(club / "mappings" / "club.yaml", "trust: 2\n", "trust: 2\nmax_unreadable: 0.1\n")
    proc = cli("check", str(club))
    assert proc.returncode == 1, proc.stdout
    assert "warning: data/club.csv:4 column 'dob': 2 value(s) cannot be read and will be left empty " \
           "(rows 4, 9)" in proc.stdout, proc.stdout


def test_too_many_unreadable_values_are_an_error_in_check_and_run(club: Path) -> None:
    _break_dates(club, (4, 9))  # 2 of 30 = 6.7%, above the default 5%
    proc = cli("check", str(club))
    assert_no_traceback(proc)
    assert proc.returncode == 2, proc.stdout
    assert "column 'dob': 2 of 30 values (7%) cannot be read" in proc.stdout, proc.stdout
    assert "'31/02/1970'" in proc.stdout
    run = cli("run", str(club))
    assert_no_traceback(run)
    assert run.returncode == 2 and "2 of 30 values" in run.stdout + run.stderr
    assert not (club / "out").exists()


def test_ambiguous_dates_without_format_list_their_rows(club: Path) -> None:
    mapping = club / "mappings" / "club.yaml"
    edit(mapping, '    format: "%d/%m/%Y"\n', "")
    data = club / "data" / "club.csv"
    lines = data.read_text().splitlines()
    for at in range(2, 10):  # eight rows whose day and month could be swapped
        fields = lines[at - 1].split(",")
        fields[3] = f"0{at}/1{at % 3}/1970"
        lines[at - 1] = ",".join(fields)
    data.write_text("\n".join(lines) + "\n")
    proc = cli("check", str(club))
    assert proc.returncode == 2
    out = proc.stdout
    assert "data/club.csv:2 column 'dob': '02/12/1970' could be 2 December or 12 February" in out, out
    assert "(8 rows: 2, 3, 4, 5, 6 and 3 more)" in out, out


def test_two_digit_year_needs_a_pivot(club: Path) -> None:
    mapping = club / "mappings" / "club.yaml"
    edit(mapping, '    format: "%d/%m/%Y"', '    format: "%d/%m/%y"')
    proc = cli("check", str(club))
    assert proc.returncode == 2
    assert f"mappings/club.yaml:{line_of(mapping, '  dob:')}:3: column 'dob': date format '%d/%m/%y' has a " \
           "two-digit year" in proc.stdout, proc.stdout
    edit(mapping, '    format: "%d/%m/%y"', '    format: "%d/%m/%y"\n    pivot: 30')
    data = club / "data" / "club.csv"
    data.write_text(re.sub(r"/19(\d\d),", r"/\1,", data.read_text()))
    proc = cli("check", str(club))
    assert proc.returncode == 1, proc.stdout  # read now; only warnings remain


def test_unmapped_value_lists_values_and_counts(club: Path) -> None:
    canonical = club / "mappings" / "canonical.yaml"
    edit(canonical, "\n# Records sharing", "\n  member_kind:\n    type: category\n    meaning: Kind of membership.\n"
         "    compare: false\n\n# Records sharing")
    mapping = club / "mappings" / "club.yaml"
    edit(mapping, "  currency: ignore", "  currency:\n    field: member_kind\n    values: {GBP: home}\n"
         "  currency_copy: ignore")
    edit(mapping, "    currency_column: currency", "    currency: GBP")
    edit(mapping, "  currency_copy: ignore", "")
    for command in ("check", "run"):
        proc = cli(command, str(club))
        assert_no_traceback(proc)
        assert proc.returncode == 2
        out = proc.stdout + proc.stderr
        assert "data/club.csv:2 column 'currency': values not in the value map: 'EUR' (10)" in out, out


def test_missing_rate_lists_dates(club: Path) -> None:
    rates = club / "data" / "rates.csv"
    rates.write_text("\n".join(ln for ln in rates.read_text().splitlines() if not ln.startswith("2026-")) + "\n")
    proc = cli("check", str(club))
    assert proc.returncode == 2
    assert re.search(r"data/club\.csv:2 column 'fee': 'EUR' has no rate for EUR->GBP .* on 2026-10-01", proc.stdout), \
        proc.stdout


def test_mislabelled_heights_caught_through_the_cli(workspace: Path) -> None:
    edit(workspace / "mappings" / "rentals.yaml", "    unit: in\n", "    unit: cm\n")
    proc = cli("check", str(workspace), "--no-linked")
    assert proc.returncode == 1
    found = [ln for ln in proc.stdout.splitlines() if "distribution" in ln or "other sources'" in ln]
    assert found and "rentals" in found[0] and "1/2.54" in found[0], proc.stdout
    assert "inches (in) declared as centimetres (cm)" in found[0]


def test_suggest_never_overwrites_without_force(club: Path) -> None:
    export = club / "data" / "club.csv"
    first = cli("suggest", str(export), "--workspace", str(club), "--name", "club")
    assert first.returncode == 2
    assert "mappings/club.yaml: mapping file already exists" in first.stderr
    assert (club / "mappings" / "club.yaml").read_text() == CLUB_YAML
    forced = cli("suggest", str(export), "--workspace", str(club), "--name", "club", "--force")
    assert forced.returncode == 0, forced.stderr
    assert (club / "mappings" / "club.yaml").read_text() != CLUB_YAML
