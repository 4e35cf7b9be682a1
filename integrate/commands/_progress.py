"""Progress bars over the pipeline's stages and inside the long ones (shown only on a terminal)."""

from __future__ import annotations

import sys
from collections.abc import Iterator, Sequence
from contextlib import contextmanager


class StageProgress:
    """Callable with a stage name (moves the stage bar); ``count(done, total, unit)`` moves a second
    bar inside the current stage (records or candidate pairs) with an estimate of the time left."""

    def __init__(self, bar, stages: Sequence[str]) -> None:
        self.bar = bar
        self.stages = list(stages)
        self.task = bar.add_task("starting", total=len(stages), unit="stages")
        self.inner = None

    def __call__(self, stage: str) -> None:
        done = self.stages.index(stage) if stage in self.stages else len(self.stages)
        self.bar.update(self.task, description=stage, completed=done)
        if self.inner is not None:
            self.bar.remove_task(self.inner)
            self.inner = None

    def count(self, done: int, total: int, unit: str) -> None:
        if self.inner is None:
            self.inner = self.bar.add_task(f"  {unit}", total=max(total, 1), unit=unit)
        self.bar.update(self.inner, completed=done, total=max(total, 1))


@contextmanager
def stage_progress(stages: Sequence[str]) -> Iterator[StageProgress]:
    """Yield a StageProgress drawn on stderr."""
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TextColumn,
        TimeElapsedColumn,
        TimeRemainingColumn,
    )

    bar = Progress(TextColumn("{task.description:<12}"), BarColumn(), MofNCompleteColumn(),
                   TextColumn("{task.fields[unit]}"), TimeElapsedColumn(), TimeRemainingColumn(),
                   disable=not sys.stderr.isatty())
    with bar:
        yield StageProgress(bar, stages)
