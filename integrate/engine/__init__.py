"""Where blocking, comparison and scoring run: in this process (``local``, the default) or on a
dask.distributed cluster (``dask``). Both produce the same pairs, model and scores.

``open_engine(name, scheduler)`` is a context manager yielding an object with
``block_compare_score(prepared, canonical, rules, ...)``; the Dask engine's cluster is shut down
when the context ends (a cluster given by ``scheduler`` is only disconnected from).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Protocol

import numpy as np
import pandas as pd

from ..block import BlockingReport
from ..errors import IntegrateError
from ..mapping.spec import BlockingRule, CanonicalSchema
from ..score import ScoreModel

ENGINES = ("local", "dask")


class Engine(Protocol):
    def block_compare_score(self, prepared: pd.DataFrame, canonical: CanonicalSchema, rules: list[BlockingRule], *,
                            group_codes: np.ndarray | None, order_columns: list[str], progress: object,
                            estimator: object) -> tuple[pd.DataFrame, BlockingReport, ScoreModel]: ...


class EngineError(IntegrateError):
    """The chosen engine cannot run (not installed, or its cluster cannot be reached)."""


@contextmanager
def open_engine(name: str = "local", scheduler: str | None = None) -> Iterator[Engine]:
    """The engine called ``name``; ``scheduler`` (Dask only) is the address of a running cluster's
    scheduler, e.g. ``tcp://10.0.0.5:8786`` (default: a LocalCluster started here)."""
    if name == "local":
        if scheduler:
            raise EngineError("--scheduler is only used with --engine dask")
        from .local import LocalEngine

        yield LocalEngine()
        return
    if name != "dask":
        raise EngineError(f"unknown engine '{name}' (choose one of: {', '.join(ENGINES)})")
    try:
        import dask  # noqa: F401
        import distributed  # noqa: F401
    except ImportError:
        raise EngineError('the Dask engine needs dask and distributed: pip install -e ".[dask]"') from None
    from .dask import DaskEngine

    with DaskEngine(scheduler) as engine:
        yield engine
