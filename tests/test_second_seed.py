"""Matching on a workspace the model was never tuned on: the generator's scenario with another seed.

The demo workspace (seed 20261202) is the one changes are looked at on; seed 7 is kept apart so a
change tuned to the demo shows here. This is a regression check on invented data, not a reference:
the external checks are the FEBRL sets (tests/test_febrl.py).
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd

from integrate import evaluate, run
from integrate.evaluate import scores_by_source_kind

REPO = Path(__file__).resolve().parent.parent


def test_a_second_seed_scores_like_the_demo(tmp_path: Path) -> None:
    out = tmp_path / "seed7"
    subprocess.run([sys.executable, str(REPO / "demo_sources" / "generate.py"), "--people", "5000",
                    "--seed", "7", "--out", str(out)], check=True, capture_output=True, timeout=300)
    result = run(out)
    crosswalk = pd.read_csv(result.output_dir / "crosswalk.csv", dtype=str)
    truth = pd.read_csv(out / "demo_sources" / "truth" / "crosswalk.csv", dtype=str)
    scores = evaluate(crosswalk, truth)
    # Before the relatives' name profile was held fixed, EM turned the relatives' class into
    # strangers here and households were merged: pairwise precision 0.637, F1 0.767 (demo: 0.996,
    # 0.983). Measured after (with identical records grouped too): precision 0.964, F1 0.964. On the
    # harder demo scenario (twins, borrowed contact details, sparse records) and with background
    # pairs kept out of the match class: precision 0.990, F1 0.965, B-cubed F1 0.984, within one
    # source precision 0.983 (0.980, 0.960, 0.982, 0.959 before).
    assert scores.pairwise.precision >= 0.98, scores
    assert scores.pairwise.f1 >= 0.955, scores
    assert scores.bcubed.f1 >= 0.975, scores
    assert scores_by_source_kind(crosswalk, truth)["within one source"].precision >= 0.97
