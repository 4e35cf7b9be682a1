"""`integrate init DIR` through the real command line: the scaffold loads, drafts point at its schemas."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from integrate.mapping.load import load_canonical
from integrate.mapping.schema_export import SCHEMA_FILES


def cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "integrate", *args], capture_output=True, text=True, timeout=300)


def test_init_scaffolds_a_workspace_that_suggest_and_check_use(tmp_path: Path) -> None:
    root = tmp_path / "ws"
    proc = cli("init", str(root), "--currency", "gbp")
    assert proc.returncode == 0, proc.stderr
    canonical = load_canonical(root / "mappings" / "canonical.yaml", "canonical.yaml")
    assert canonical.base_currency == "GBP"
    types = {name: f.type for name, f in canonical.fields.items()}
    assert {"person_name", "date", "email", "phone", "postcode", "quantity", "money", "category"} <= set(types.values())
    assert all(f.meaning for f in canonical.fields.values()) and canonical.blocking
    for name in SCHEMA_FILES.values():
        assert (root / "schemas" / name).is_file()
    assert [p.name for p in (root / "mappings").iterdir()] == ["canonical.yaml"]
    # a first export, drafted and checked against the scaffold
    export = tmp_path / "club.csv"
    export.write_text("member_no,First name,Surname,E-mail,Date of birth\n"
                      + "".join(f"M{i},Given{i},Family{i},p{i}@example.org,{10 + i}/04/1980\n" for i in range(12)),
                      encoding="utf-8")
    drafted = cli("suggest", str(export), "--workspace", str(root))
    assert drafted.returncode == 0, drafted.stdout + drafted.stderr
    text = (root / "mappings" / "club.yaml").read_text(encoding="utf-8")
    assert text.startswith("# yaml-language-server: $schema=../schemas/source.schema.json")
    checked = cli("check", str(root))
    assert "Traceback" not in checked.stdout + checked.stderr
    assert checked.returncode in (0, 1), checked.stdout  # warnings (fields no column feeds), no errors
    # a second init does not overwrite
    again = cli("init", str(root))
    assert again.returncode == 2 and "already" in again.stdout + again.stderr
