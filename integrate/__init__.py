"""integrate: merge several department exports about the same people into one deduplicated table.

The public API:

- ``run(workspace)``: the whole run on a workspace of mapping files (same as ``integrate run``).
- ``deduplicate(df, fields)`` / ``link(left, right, fields)``: matching for DataFrames.
- ``evaluate(crosswalk, truth)``: precision, recall and F1 against known truth.
- ``load_workspace``, ``IntegrateError``, ``InputError``.
"""

from .errors import InputError, InputErrors, IntegrateError
from .evaluate import evaluate
from .frames import deduplicate, link
from .pipeline import RunResult, run_pipeline
from .workspace import load_workspace

run = run_pipeline

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
