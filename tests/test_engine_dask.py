"""The Dask engine: a real two-worker LocalCluster gives the local engine's outputs, byte for byte."""

from __future__ import annotations

import sys
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest

from integrate.cli import main
from integrate.engine import EngineError, open_engine

from .conftest import copy_workspace

SAME_FILES = ("crosswalk.csv", "merged.csv", "provenance.csv", "crosswalk.parquet", "merged.parquet",
              "provenance.parquet", "pairs.parquet", "clusters.csv")


@pytest.fixture(scope="module")
def scheduler() -> Iterator[str]:
    """A LocalCluster of two single-threaded worker processes, shut down after the module."""
    from distributed import LocalCluster

    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None)
    try:
        yield cluster.scheduler_address
    finally:
        cluster.close(timeout=60)


def test_dask_engine_writes_the_local_engines_outputs_byte_for_byte(demo_run, scheduler: str,
                                                                    tmp_path: Path) -> None:
    from integrate import run

    root = copy_workspace(tmp_path / "ws")  # its own state store: no earlier run to take IDs from
    result = run(root, engine="dask", scheduler=scheduler)
    for name in SAME_FILES:
        local, distributed = demo_run.output_dir / name, result.output_dir / name
        assert local.read_bytes() == distributed.read_bytes(), name
    # the blocking report is put together from the per-rule tasks; it must say what block() says
    assert result.blocking == demo_run.blocking
    assert result.model.iterations == demo_run.model.iterations
    assert len(pd.read_csv(result.output_dir / "crosswalk.csv")) == sum(result.source_counts.values())


def test_partitions_laid_end_to_end_are_the_local_pairs(scheduler: str) -> None:
    """More partitions than the demo needs (one per 500 records): the same pairs in the same order."""
    from integrate.block import block
    from integrate.engine.dask import DaskEngine
    from integrate.engine.local import LocalEngine
    from integrate.mapping.spec import BlockingRule, CanonicalSchema

    prepared = pd.DataFrame({"email": [f"p{k % 700}@example.org" for k in range(3000)],
                             "family": [f"F{k % 41}" for k in range(3000)]})
    rules = [BlockingRule(name="email", keys=["email"]), BlockingRule(name="family", keys=["family"])]
    expected, report = block(prepared, rules, order_columns=["email", "family"])
    canonical = CanonicalSchema.model_validate({"fields": {
        "email": {"type": "email", "meaning": "the member's e-mail address"},
        "family": {"type": "text", "meaning": "a short text shared by many records"}}})
    with DaskEngine(scheduler, records_per_partition=500) as engine:
        scored, blocking, _ = engine.block_compare_score(prepared, canonical, rules, group_codes=None,
                                                         order_columns=["email", "family"])
    local, local_blocking, _ = LocalEngine().block_compare_score(prepared, canonical, rules, group_codes=None,
                                                                 order_columns=["email", "family"])
    pd.testing.assert_frame_equal(scored[["i", "j", "rules"]], expected)
    pd.testing.assert_frame_equal(scored, local)
    assert blocking == report == local_blocking
    assert blocking.split_blocks  # 'family' blocks of about 73 records were split


def test_missing_dask_is_one_sentence_with_the_install_command(monkeypatch: pytest.MonkeyPatch,
                                                              workspace: Path, capsys: pytest.CaptureFixture) -> None:
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    with pytest.raises(EngineError, match=r'pip install -e "\.\[dask\]"'):
        with open_engine("dask"):
            pass
    assert main(["run", str(workspace), "--engine", "dask"]) == 3  # not an input error: a missing package
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err and 'pip install -e ".[dask]"' in err


def test_scheduler_without_dask_engine_is_refused() -> None:
    with pytest.raises(EngineError, match="--scheduler"):
        with open_engine("local", "tcp://127.0.0.1:8786"):
            pass
