"""After ``run --out DIR``, the commands that read a run's outputs read DIR's (the last run's)."""

from __future__ import annotations

from pathlib import Path

import integrate
from integrate.cli import main
from integrate.mapping.checks import check_workspace
from integrate.review.queue import load_review_data

from .conftest import copy_workspace


def test_evaluate_check_and_review_read_the_last_runs_folder(tmp_path: Path, capsys) -> None:  # noqa: ANN001
    root = copy_workspace(tmp_path / "ws")
    elsewhere = tmp_path / "elsewhere"
    result = integrate.run(root, output_dir=elsewhere)
    assert not (root / "out").exists()
    assert result.run_dir is not None and result.run_dir.parent.parent == elsewhere

    assert main(["evaluate", str(root), "--truth", str(root / "demo_sources" / "truth" / "crosswalk.csv")]) == 0
    assert "pairwise" in capsys.readouterr().out

    report = check_workspace(root)
    assert report.linked_from is not None and "elsewhere" in report.linked_from

    data = load_review_data(root)
    assert len(data.pairs) == len(result.pairs)
