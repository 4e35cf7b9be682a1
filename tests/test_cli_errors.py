"""Bad input through the real command line: a clear one-paragraph error, exit code 2, no traceback."""

from __future__ import annotations

import hashlib
import re
import subprocess
import sys
from pathlib import Path

import pytest


def run_cli(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "integrate", *args], capture_output=True, text=True,
                          cwd=cwd, timeout=600)


def assert_clean_error(proc: subprocess.CompletedProcess[str], *needles: str) -> str:
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    for needle in needles:
        assert needle in proc.stderr, (needle, proc.stderr)
    return proc.stderr


def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text, old
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def test_help_lists_commands() -> None:
    proc = run_cli("--help")
    assert proc.returncode == 0
    assert "run" in proc.stdout and "evaluate" in proc.stdout


def test_not_a_workspace(tmp_path: Path) -> None:
    assert_clean_error(run_cli("run", str(tmp_path)), "mappings/canonical.yaml", "hint")


def test_missing_source_file(workspace: Path) -> None:
    edit(workspace / "mappings" / "webshop.yaml", "demo_sources/webshop.csv", "demo_sources/webshop-2026.csv")
    assert_clean_error(run_cli("run", str(workspace)), "demo_sources/webshop-2026.csv", "hint")


def test_unreadable_file_names_the_line(workspace: Path) -> None:
    data = workspace / "demo_sources" / "webshop.csv"
    lines = data.read_bytes().split(b"\n")
    lines[5] = lines[5].replace(b";", b";\xe9", 1)  # a Latin-1 byte in a UTF-8 file, on line 6
    data.write_bytes(b"\n".join(lines))
    err = assert_clean_error(run_cli("run", str(workspace)), "webshop.csv")
    assert re.search(r"webshop\.csv:6\b", err), err
    assert "encoding" in err


def test_missing_mapped_column(workspace: Path) -> None:
    data = workspace / "demo_sources" / "webshop.csv"
    edit(data, "ship_postcode", "shipping_postcode")
    err = assert_clean_error(run_cli("run", str(workspace)), "mappings/webshop.yaml", "ship_postcode")
    # file:line:column of the column's entry in the mapping file
    assert re.search(r"mappings/webshop\.yaml:\d+:\d+", err), err
    assert "shipping_postcode" in err  # the hint lists the columns that do exist


def test_unknown_unit(workspace: Path) -> None:
    edit(workspace / "mappings" / "rentals.yaml", "unit: in\n", "unit: inchez\n")
    err = assert_clean_error(run_cli("run", str(workspace)), "mappings/rentals.yaml", "inchez", "height_in")
    assert re.search(r"mappings/rentals\.yaml:\d+:\d+", err), err


def test_missing_rate_lists_rows(workspace: Path) -> None:
    rates = workspace / "demo_sources" / "rates.csv"
    kept = [ln for ln in rates.read_text().splitlines() if not ln.startswith("2026-")]
    rates.write_text("\n".join(kept) + "\n")
    err = assert_clean_error(run_cli("run", str(workspace)), "demo_sources/webshop.csv", "lifetime_spend")
    assert "missing_rate" in err or "no rate" in err.lower(), err
    assert re.search(r"webshop\.csv:\d+", err), err


def _digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir()) if p.is_file()}


@pytest.mark.parametrize("breakage", ["unknown unit"])
def test_failed_run_leaves_previous_outputs_intact(workspace: Path, breakage: str) -> None:
    assert run_cli("run", str(workspace)).returncode == 0
    before = _digest(workspace / "out")
    assert "merged.csv" in before
    edit(workspace / "mappings" / "rentals.yaml", "unit: lb\n", "unit: stones-ish\n")
    assert_clean_error(run_cli("run", str(workspace)), "stones-ish")
    assert _digest(workspace / "out") == before
