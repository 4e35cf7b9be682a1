"""A progress bar over the pipeline's stages (shown only on a terminal)."""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager


@contextmanager
def stage_progress(stages: Sequence[str]) -> Iterator[Callable[[str], None]]:
    """Yield a callback that moves a bar to the named stage."""
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    bar = Progress(TextColumn("{task.description:<12}"), BarColumn(), TimeElapsedColumn(),
                   disable=not sys.stderr.isatty())
    with bar:
        task = bar.add_task("starting", total=len(stages))

        def progress(stage: str) -> None:
            done = stages.index(stage) if stage in stages else len(stages)
            bar.update(task, description=stage, completed=done)

        yield progress
