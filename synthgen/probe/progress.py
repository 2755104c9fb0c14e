"""A progress bar on stderr with images per second, for ``synthgen probe``."""

from __future__ import annotations

import time
from contextlib import contextmanager

__all__ = ["stderr_bar"]


@contextmanager
def stderr_bar(label: str, quiet: bool = False):
    """Yield a ``progress(done, total)`` callback drawing a rich bar on stderr (None when ``quiet``).

    The rate counts only images done since the bar appeared (a resumed run's
    journaled images do not inflate it).
    """
    if quiet:
        yield None
        return
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

    bar = Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(), TextColumn("{task.fields[rate]}"),
                   TimeRemainingColumn(), console=Console(stderr=True), transient=True)
    state: dict = {}

    def progress(done: int, total: int) -> None:
        now = time.perf_counter()
        if "task" not in state:
            state.update(task=bar.add_task(label, total=total, rate=""), start=now, first=done)
            bar.start()
        elapsed = now - state["start"]
        rate = f"{(done - state['first']) / elapsed:.1f} images/s" if elapsed > 0 and done > state["first"] else ""
        bar.update(state["task"], completed=done, total=total, rate=rate)
        if done >= total:  # one live display at a time: the next stage's bar may start now
            bar.stop()

    try:
        yield progress
    finally:
        if bar.live.is_started:
            bar.stop()
