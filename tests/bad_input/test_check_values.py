"""`check` on columns holding values it cannot read: findings, never a traceback."""

from __future__ import annotations

from pathlib import Path

from integrate.mapping.checks import check_workspace
from integrate.mapping.findings import EXIT_WARNINGS
from integrate.mapping.redundancy import redundant_columns


def test_one_unreadable_amount_is_a_finding_not_a_type_error(workspace: Path) -> None:
    """Reproducer: one demo webshop amount replaced by 'n/a' (TypeError in the redundancy check)."""
    data = workspace / "demo_sources" / "webshop.csv"
    lines = data.read_text(encoding="utf-8").split("\n")
    header = lines[0].split(";")  # the shop writes semicolon-separated files
    spend = header.index("lifetime_spend")
    cells = lines[1].split(";")
    cells[spend] = "n/a"
    lines[1] = ";".join(cells)
    data.write_text("\n".join(lines), encoding="utf-8")
    report = check_workspace(workspace, use_last_run=False)
    assert report.exit_code() == EXIT_WARNINGS
    unread = [f for f in report.findings if f.source == "webshop" and f.column == "lifetime_spend"
              and "cannot be read" in f.message]
    assert len(unread) == 1 and unread[0].line == 2, [str(f) for f in report.findings]


def test_redundancy_with_gaps_and_non_numbers() -> None:
    import pandas as pd

    cm = [f"{170 + i}" for i in range(40)]
    inches = [f"{(170 + i) / 2.54:.2f}" for i in range(40)]
    cm[3], inches[7] = "n/a", None  # one word, one gap: still a numeric column (>= 95 % numbers)
    raw = pd.DataFrame({"cm": pd.array(cm, dtype="string"), "inches": pd.array(inches, dtype="string")})
    found = redundant_columns(raw)
    assert [(p.first, p.second, p.kind) for p in found] == [("cm", "inches", "fixed_ratio")]
