"""Values that used to be lost without a word: each is now kept, or counted in failures.csv."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
from openpyxl import Workbook, load_workbook
from tiny import HEADER, make_workspace, people_rows, run_cli, write_csv

from integrate.mapping.checks import check_workspace
from integrate.mapping.spec import ReadSpec
from integrate.sources import read_source
from integrate.sources.frame import read_failures
from integrate.standardise import check_emails, is_email


def test_nul_byte_inside_a_csv_value_is_kept(tmp_path: Path) -> None:
    """Reproducer: 'Iv\\x00an' was read as 'Iv', 'ivan.\\x00tran53@...' as 'ivan.' (exit 0, no failure)."""
    data = b'id,name,email\n1,Iv\x00an,ivan.\x00tran53@post.example.org\n2,"Bo\x00b",b@x.org\n'
    (tmp_path / "p.csv").write_bytes(data)
    frame = read_source(ReadSpec(format="csv", path="p.csv"), tmp_path, name="crm")
    assert frame["name"].tolist() == ["Iv\x00an", "Bo\x00b"]
    assert frame["email"].tolist() == ["ivan.\x00tran53@post.example.org", "b@x.org"]
    assert frame["_row"].tolist() == [2, 3]


def test_nul_byte_in_a_utf16_file_is_kept(tmp_path: Path) -> None:
    (tmp_path / "p.csv").write_bytes("id,name\n1,Iv\x00an\n".encode("utf-16"))
    frame = read_source(ReadSpec(format="csv", path="p.csv", encoding="utf-16"), tmp_path, name="crm")
    assert frame["name"].tolist() == ["Iv\x00an"]


def test_nul_in_an_email_is_a_failure_in_a_run(tmp_path: Path) -> None:
    root = make_workspace(tmp_path)
    rows = people_rows()
    rows[0][1] = "Iv\x00an"
    rows[1][3] = "ivan.\x00tran53@post.example.org"
    write_csv(root / "desk.csv", rows)
    proc = run_cli("run", str(root))
    assert proc.returncode == 0, proc.stderr
    failures = pd.read_csv(root / "out" / "failures.csv", dtype=str)
    assert failures[["row", "column", "reason"]].values.tolist() == [["3", "email", "bad_email"]]
    records = pd.read_parquet(root / "out" / "records.parquet")
    assert "Iv\x00an" in set(records["given_name"].dropna())  # kept, as the file has it


def _formula_book(path: Path) -> None:
    book = Workbook()
    sheet = book.active
    sheet.append(["id", "given", "family", "fee"])
    sheet.append(["M1", "Ana", "Marsh", 20])
    sheet.append(["M2", "Bram", "Reed", "=D2*2"])  # openpyxl writes the formula, no cached result
    sheet.append(["M3", "=UPPER(\"cleo\")", "Alder", 30])
    book.save(path)


def test_formula_cells_without_a_stored_result_are_failures_naming_the_cell(tmp_path: Path) -> None:
    """Reproducer: formula cells written by a script were read as empty, with no failure."""
    _formula_book(tmp_path / "hr.xlsx")
    assert load_workbook(tmp_path / "hr.xlsx", data_only=True).active["D3"].value is None  # no stored value
    frame = read_source(ReadSpec(format="excel", path="hr.xlsx"), tmp_path, name="hr")
    assert frame["fee"].isna().tolist() == [False, True, False]
    lost = read_failures(frame)
    assert [(f.row, f.column, f.reason) for f in lost] == [(3, "fee", "formula_without_value"),
                                                            (4, "given", "formula_without_value")]
    assert "cell D3" in lost[0].message and "=D2*2" in lost[0].message
    assert "cell B4" in lost[1].message


def test_formula_failures_reach_check_and_failures_csv(tmp_path: Path) -> None:
    root = make_workspace(tmp_path, read="{format: excel, path: desk.xlsx}")
    book = Workbook()
    sheet = book.active
    sheet.append(HEADER)
    for i, row in enumerate(people_rows()):
        if i == 5:
            row[5] = "=10+10.5"
        sheet.append(row)
    book.save(root / "desk.xlsx")
    report = check_workspace(root)
    found = [f for f in report.findings if f.code == "formula_without_value"]
    assert len(found) == 1 and found[0].line == 7 and found[0].column == "fee", [str(f) for f in report.findings]
    assert "cell F7" in found[0].message
    proc = run_cli("run", str(root))
    assert proc.returncode == 0, proc.stderr
    failures = pd.read_csv(root / "out" / "failures.csv", dtype=str)
    assert failures[["row", "column", "reason"]].values.tolist() == [["7", "fee", "formula_without_value"]]


def test_stored_formula_results_are_read() -> None:
    """A workbook saved by a spreadsheet keeps each formula's result: no failure then."""
    import io

    book = Workbook()
    book.active.append(["id", "n"])
    book.active.append(["1", "=1+1"])
    data = io.BytesIO()
    book.save(data)
    # put a cached result into the sheet XML, as a spreadsheet does on saving
    import zipfile

    src = zipfile.ZipFile(io.BytesIO(data.getvalue()))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as dst:
        for item in src.infolist():
            body = src.read(item)
            if item.filename.endswith("sheet1.xml"):
                body = body.replace(b"<f>1+1</f><v></v>", b"<f>1+1</f><v>2</v>").replace(b"<f>1+1</f>",
                                                                                       b"<f>1+1</f><v>2</v>", 1)
            dst.writestr(item, body)
    import tempfile

    with tempfile.TemporaryDirectory() as folder:
        Path(folder, "b.xlsx").write_bytes(out.getvalue())
        frame = read_source(ReadSpec(format="excel", path="b.xlsx"), Path(folder), name="b")
    assert frame["n"].tolist() == ["2"] and read_failures(frame) == []


def test_email_type_refuses_non_addresses() -> None:
    """Reproducer: '=1+2' and '<script>...</script>' were accepted as e-mail addresses."""
    values = pd.Series(["ana.marsh@post.example.org", "=1+2", "<script>alert(1)</script>", None, "Zoë@exämple.de"])
    kept, failures = check_emails(values)
    assert kept.isna().tolist() == [False, True, True, True, False]
    assert failures["index"].tolist() == [1, 2] and set(failures["reason"]) == {"bad_email"}
    # RFC 5322 section 3.4.1 allows these characters in a dot-atom local part; RFC 5321 section 4.1.2 needs
    # a domain after '@'; consecutive dots are not a dot-atom
    assert is_email("o'neil+tag@example.co.uk") and is_email("a!#$%&*/=?^_`{|}~-@example.org")
    assert not any(is_email(t) for t in ("a@b", "a..b@example.org", ".a@example.org", "a b@example.org",
                                         "a@-example.org", "@example.org", "a@example.org."))


def test_bad_emails_are_failures_in_a_run(tmp_path: Path) -> None:
    root = make_workspace(tmp_path)
    rows = people_rows(60)  # 2 of 60 unreadable: under the 5 % a run allows before it stops
    rows[2][3] = "=1+2"
    rows[3][3] = "<script>alert(1)</script>"
    write_csv(root / "desk.csv", rows)
    proc = run_cli("run", str(root))
    assert proc.returncode == 0, proc.stderr
    assert "2 values could not be read" in proc.stdout
    failures = pd.read_csv(root / "out" / "failures.csv", dtype=str)
    # the written failures table quotes the formula-like value (outputs.cells: OWASP CSV-injection guidance)
    assert failures[["row", "value", "reason"]].values.tolist() == [
        ["4", "'=1+2", "bad_email"], ["5", "<script>alert(1)</script>", "bad_email"]]


def test_a_row_with_more_fields_than_the_header_is_refused_with_its_line(tmp_path: Path) -> None:
    """Found by ``benchmarks/fuzz.py --cases 2000 --seed 23``: when the first record had one field too
    many (a stray delimiter), pandas dropped the extra value with only a ParserWarning."""
    import pytest

    from integrate.errors import SourceError

    (tmp_path / "p.csv").write_text('id,name\n1,"Ana\nMarsh",EXTRA\n2,Bram\n', encoding="utf-8")
    with pytest.raises(SourceError) as caught:
        read_source(ReadSpec(format="csv", path="p.csv"), tmp_path, name="crm")
    assert caught.value.reason == "bad_csv" and caught.value.line == 2  # the record starts on line 2
    assert "3 fields where the header has 2" in str(caught.value)
    (tmp_path / "q.csv").write_text("id;name\n1;Ana;x\n", encoding="utf-8")
    with pytest.raises(SourceError, match="3 fields"):
        read_source(ReadSpec(format="csv", path="q.csv", delimiter=";"), tmp_path, name="crm")
