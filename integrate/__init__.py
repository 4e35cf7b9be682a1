"""integrate: merge several department exports about the same people into one deduplicated table.

The public API:

- ``run(workspace)``: the whole run on a workspace of mapping files (same as ``integrate run``).
- ``deduplicate(df, fields)`` / ``link(left, right, fields)``: matching for DataFrames.
- ``evaluate(crosswalk, truth)``: precision, recall and F1 against known truth.
- ``load_workspace``, ``IntegrateError``, ``InputError``.
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

from .errors import InputError, InputErrors, IntegrateError

# ``evaluate`` is both a submodule and a function: imported lazily, the first ``import integrate.evaluate``
# anywhere would bind the package attribute to the submodule, so the function is bound here, once.
from .evaluate import evaluate

if TYPE_CHECKING:
    from .frames import deduplicate, link
    from .pipeline import RunResult, run_pipeline
    from .workspace import load_workspace

    run = run_pipeline

# Each name is imported when first used, so a notebook that only matches DataFrames does not pay
# for the workspace pipeline's imports (the state store's database layer, the report, the sources).
_LAZY = {"deduplicate": ("frames", "deduplicate"),
         "link": ("frames", "link"), "RunResult": ("pipeline", "RunResult"),
         "run_pipeline": ("pipeline", "run_pipeline"), "run": ("pipeline", "run_pipeline"),
         "load_workspace": ("workspace", "load_workspace")}


def __getattr__(name: str) -> Any:
    if name not in _LAZY:
        raise AttributeError(f"module 'integrate' has no attribute '{name}'")
    module, attribute = _LAZY[name]
    value = getattr(import_module(f".{module}", __name__), attribute)
    globals()[name] = value
    return value

__all__ = [
    "run",
    "run_pipeline",
    "RunResult",
    "deduplicate",
    "link",
    "evaluate",
    "load_workspace",
    "IntegrateError",
    "InputError",
    "InputErrors",
]
__version__ = "0.1.0"
