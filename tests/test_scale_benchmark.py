"""Smoke test of benchmarks/scale.py at its smallest size (figures printed, no timing asserted)."""
from __future__ import annotations

import importlib.util
import re
import subprocess
import sys
from pathlib import Path

import pytest

SCRIPT = Path(__file__).resolve().parents[1] / "benchmarks" / "scale.py"


def load_benchmark():
    spec = importlib.util.spec_from_file_location("scale_benchmark", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_growth_exponent_of_a_power_law() -> None:
    # y = 3 x^1.5 exactly: the log-log slope is 1.5 (definition of a power law, common practice)
    exponent = load_benchmark().exponent
    xs = [1e4, 1e5, 3e5, 1e6]
    assert exponent(xs, [3 * x ** 1.5 for x in xs]) == pytest.approx(1.5)
    assert exponent(xs, [7.0 * x for x in xs]) == pytest.approx(1.0)
    assert exponent([10.0], [1.0]) is None


def test_smallest_size_runs_end_to_end(tmp_path: Path) -> None:
    completed = subprocess.run([sys.executable, str(SCRIPT), "--people", "10000", "--work", str(tmp_path)],
                               capture_output=True, text=True, timeout=600, check=True)
    line = next(x for x in completed.stdout.splitlines() if x.startswith("10,000 people:"))
    records = int(re.search(r"records ([\d,]+)", line).group(1).replace(",", ""))
    assert 17_000 < records < 20_000  # about 1.8 records per person
    assert float(re.search(r"pairwise F1 ([\d.]+)", line).group(1)) > 0.85
    assert float(re.search(r"B-cubed F1 ([\d.]+)", line).group(1)) > 0.9
    stages = completed.stdout.split("per stage", 1)[1]
    for stage in ("read", "block", "compare", "score", "cluster", "write"):
        assert f" {stage} " in stages
