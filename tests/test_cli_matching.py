"""The matching commands through the real command line on a copy of the demo workspace."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pandas as pd

from .conftest import REPO


def run_cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "integrate", *args], capture_output=True, text=True, timeout=600,
                          env={"COLUMNS": "200", "PATH": "/usr/bin:/bin"})


def test_blocking_report_with_truth(workspace: Path) -> None:
    proc = run_cli("blocking", str(workspace), "--truth", str(REPO / "demo_sources/truth/crosswalk.csv"))
    assert proc.returncode == 0, proc.stderr
    assert "same_email" in proc.stdout and "reduction ratio" in proc.stdout
    completeness = float(re.search(r"pairs completeness (\d\.\d+)", proc.stdout).group(1))
    assert completeness >= 0.98


def test_explain_a_true_pair(workspace: Path) -> None:
    truth = pd.read_csv(REPO / "demo_sources/truth/crosswalk.csv", dtype=str)
    first = truth[truth["entity_id"].isin(truth["entity_id"].value_counts()[lambda s: s >= 2].index)]
    person = first[first["entity_id"] == first["entity_id"].iloc[0]].head(2)
    a, b = (f"{s}:{r}" for s, r in zip(person["source"], person["record_id"]))
    proc = run_cli("explain", a, b, str(workspace))
    assert proc.returncode == 0, proc.stderr
    for field in ("given_name", "family_name", "birth_date", "match probability", "total weight"):
        assert field in proc.stdout


def test_explain_unknown_record_is_a_clear_error(workspace: Path) -> None:
    proc = run_cli("explain", "webshop:NOPE", "membership:M-000634", str(workspace))
    assert proc.returncode == 2
    assert "no record 'NOPE' in source 'webshop'" in proc.stderr and "Traceback" not in proc.stderr


def test_a_second_run_prints_what_changed(workspace: Path) -> None:
    assert run_cli("run", str(workspace)).returncode == 0
    again = run_cli("run", str(workspace))
    assert again.returncode == 0, again.stderr
    line = next(ln for ln in again.stdout.splitlines() if ln.startswith("since run 1:"))
    entities = int(re.search(r"-> (\d+) entities", again.stdout).group(1))
    assert f"{entities} entities unchanged, 0 created, 0 merged, 0 split" in line


def test_a_reader_that_goes_away_gets_no_traceback(workspace: Path) -> None:
    # 'integrate blocking ... | head -1' : the pipe closes before the report is written
    proc = subprocess.Popen([sys.executable, "-m", "integrate", "blocking", str(workspace)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env={"PATH": "/usr/bin:/bin"})
    proc.stdout.close()
    _, err = proc.communicate(timeout=600)
    assert proc.returncode == 141
    assert "Traceback" not in err and "BrokenPipeError" not in err
