"""A run's progress: the stage bar on a terminal, and the test hooks at the run's stages."""

from __future__ import annotations

import os
import sys

from .. import interrupts


class Progress:
    """A bar of the run's stages on a terminal (stderr); nothing under cron or with --quiet."""

    STAGES = ("load inputs", "screen", "write tables", "render sheets", "render ranking", "publish")

    def __init__(self, enabled: bool):
        self.bar = None
        if enabled and sys.stderr.isatty():
            from rich.console import Console
            from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

            self.bar = Progress(
                TextColumn("{task.description}"),
                BarColumn(),
                TextColumn("{task.completed}/{task.total}"),
                TimeElapsedColumn(),
                console=Console(stderr=True),
                transient=True,
            )
            self.bar.start()
            self.task = self.bar.add_task("ddscreen", total=len(self.STAGES))

    def stage(self, name: str) -> None:
        if self.bar is not None:
            done = self.STAGES.index(name) if name in self.STAGES else 0
            self.bar.update(self.task, completed=done, description=f"ddscreen: {name}")

    def close(self) -> None:
        if self.bar is not None:
            self.bar.stop()
            self.bar = None


def stage(name: str) -> None:
    """Test hooks: DDSCREEN_KILL_AT=<stage> makes the process kill itself at that stage;
    DDSCREEN_PAUSE_AT=<stage>:<seconds> makes it wait there (``interrupts.pause_point``).

    Stages: after_load, after_screen, after_sheets, before_publish (results recorded, folder
    not yet renamed), after_publish (renamed, not yet marked ok), after_record (marked ok,
    latest and pruning not yet done).
    """
    interrupts.pause_point(name)
    if os.environ.get("DDSCREEN_KILL_AT") == name:
        import signal

        os.kill(os.getpid(), signal.SIGKILL)
