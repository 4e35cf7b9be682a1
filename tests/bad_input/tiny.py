"""A tiny invented workspace (one or two sources, a few fields) for bad-input tests."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

CANONICAL = """\
base_currency: GBP
fields:
  given_name: {type: person_name, meaning: The given name the person uses.}
  family_name: {type: person_name, meaning: The person's family name.}
  email: {type: email, meaning: The person's e-mail address.}
  birth_date: {type: date, meaning: Date of birth.}
  fee_gbp: {type: money, meaning: "Fee paid, in the base currency."}
"""

# invented people of the demo's scenario (Tallow Creek), enough rows for every check to run
GIVEN = ["Ana", "Bram", "Cleo", "Dara", "Elin", "Finn", "Gwen", "Hugo", "Ines", "Jory", "Kit", "Lior"]
FAMILY = ["Marsh", "Reed", "Alder", "Fenwick", "Brook", "Holt"]


def people_rows(count: int = 24) -> list[list[str]]:
    rows = []
    for i in range(count):
        given, family = GIVEN[i % len(GIVEN)], FAMILY[i % len(FAMILY)]
        rows.append([f"T{i:03d}", given, family, f"{given.lower()}.{family.lower()}{i}@post.example.org",
                     f"19{60 + i % 30}-0{1 + i % 9}-1{i % 9}", f"{20 + i % 7}.50"])
    return rows


HEADER = ["id", "given", "family", "email", "born", "fee"]

SOURCE_MAPPING = """\
source: {name}
read: {read}
record_id: id
as_of: 2026-01-02
columns:
  id: ignore
  given: given_name
  family: family_name
  email: email
  born: {{field: birth_date, format: iso}}
  fee: {{field: fee_gbp, currency: GBP}}
"""


def make_workspace(root: Path, name: str = "desk", read: str | None = None, canonical: str = CANONICAL) -> Path:
    """Mapping files for one source ``name`` (its data file is the caller's to write)."""
    (root / "mappings").mkdir(parents=True, exist_ok=True)
    (root / "mappings" / "canonical.yaml").write_text(canonical, encoding="utf-8")
    read = read or f"{{format: csv, path: {name}.csv}}"
    (root / "mappings" / f"{name}.yaml").write_text(SOURCE_MAPPING.format(name=name, read=read), encoding="utf-8")
    return root


def write_csv(path: Path, rows: list[list[str]], header: list[str] = HEADER) -> None:
    path.write_text("\n".join(",".join(r) for r in [header, *rows]) + "\n", encoding="utf-8")


def run_cli(*args: str, cwd: Path | None = None, timeout: float = 300) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "integrate", *args], capture_output=True, text=True,
                          cwd=cwd, timeout=timeout)


def assert_clean_error(proc: subprocess.CompletedProcess[str], *needles: str) -> str:
    """Exit 2, no traceback, one 'error:' message holding every needle."""
    assert proc.returncode == 2, (proc.returncode, proc.stderr[-3000:])
    assert "Traceback" not in proc.stderr, proc.stderr[-3000:]
    assert proc.stderr.count("error:") == 1, proc.stderr[-3000:]
    for needle in needles:
        assert needle in proc.stderr, (needle, proc.stderr[-3000:])
    return proc.stderr


def assert_check_error(proc: subprocess.CompletedProcess[str], *needles: str) -> str:
    """``check`` lists its findings on stdout: exit 2, no traceback, an 'error:' line holding every needle."""
    assert proc.returncode == 2, (proc.returncode, proc.stdout[-3000:], proc.stderr[-3000:])
    assert "Traceback" not in proc.stderr + proc.stdout, proc.stderr[-3000:]
    errors = [line for line in proc.stdout.splitlines() if line.startswith("error:")]
    assert any(all(n in line for n in needles) for line in errors), (needles, errors[:5])
    return "\n".join(errors)
